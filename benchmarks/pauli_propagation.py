"""Pauli propagation: agreement with the density matrix and time against qubit count.

Not a test (timings depend on the machine). Run from the repository root:

    python benchmarks/pauli_propagation.py            # 8-12 qubits vs density matrix; 20-40
    python benchmarks/pauli_propagation.py --quick    # 8 qubits, 20 qubits with 2 groups
    python benchmarks/pauli_propagation.py --agreement-only --qubits 8 10 12   # part 1 only
    python benchmarks/pauli_propagation.py --study-groups 16   # part 3 on 16 groups
    python benchmarks/pauli_propagation.py --scaling-only      # part 2 only: 20, 30, 40 qubits

Part 1 (hchain-8, -10, -12 on bench-line-14, optimized layered circuit): the grouped energy of
the density-matrix engine under the explicitly twirled device noise (no idle pass) against
Pauli propagation of the same noise at truncation thresholds 1e-3, 1e-4, 1e-5: the true error
against the rigorous bound (sum of dropped |c|), against the truncation-error estimate with
its standard error (noiselab.emulate.pauli_truncation: seeded Monte Carlo of the dropped terms)
and against the reported limit |estimate| + 3 standard errors, and the time of each; the error
must stay inside the bound, within 3 standard errors of the estimate and inside the limit, which
should not be loose by more than 10x. Figure: threshold against error and time
(benchmarks/results/pauli-threshold-<date>.png).
Part 2 (linear H chains H10, H15 (charge +1), H20, Jordan-Wigner, STO-3G, 1.8 Angstrom; a
two-layer layered circuit with seeded small random angles on the invented 44-qubit line
bench-line-44): time, peak strings, peak resident memory and truncation bound of the full noisy
energy at 20, 30 and 40 qubits (twirled device noise, idle relaxation included, basis layers and
readout), one child process per size. The chemistry takes the integrals-only path
(``integrals_problem``: ``compute_problem(spec, exact=False)``, the (RO)HF and integrals without
the FCI, which is refused at 30+ qubits), checked against compute_problem + encode on H4
(``check_integrals_path``: equal spectra); the plan is the pauli method's (sorted insertion,
no dense weights). ``--scaling-only`` runs part 2 at thresholds 1e-4 and 1e-5 and writes
benchmarks/results/pauli-scaling-<date>.json.
Part 3: the same 20-qubit chain through the study-level path of ``assess --method
pauli_propagation`` (raw and readout recipes, allocation, target rule, truncation bound) with a
plan that builds no dense weights. Writes benchmarks/results/pauli-<date>.json.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from noiselab.emulate.pauli_propagation import Truncation  # noqa: E402
from noiselab.emulate.pauli_truncation import Sampling, truncation_limit  # noqa: E402

THRESHOLDS = (1e-5, 1e-4, 1e-3)


def _groups(plan):
    return [(g.basis, list(zip(g.labels, np.real(g.coeffs), strict=True))) for g in plan.groups]


def _twirled_model(profile, patch):
    from qiskit.quantum_info import Kraus
    from qiskit_aer.noise import NoiseModel, QuantumError

    from noiselab.device.noise import channel_from_noise, noise_spec
    from noiselab.emulate.pauli_propagation import pauli_matrix

    spec = noise_spec(profile, patch, idle_relaxation=False)
    model = NoiseModel(basis_gates=list(spec.native_gates))
    for rule in spec.gates:
        err = channel_from_noise(profile, rule.noise)
        if err.ideal():
            continue
        k = len(rule.qubits)
        kraus = Kraus(err.to_quantumchannel()).data
        ops = [
            pauli_matrix(i, k) @ a @ pauli_matrix(i, k) / 2**k for i in range(4**k) for a in kraus
        ]
        model.add_quantum_error(QuantumError(Kraus(ops)), rule.gate, list(rule.qubits))
    return model


def agreement(qubits: int) -> dict:
    from noiselab.device.noise import readout_matrices
    from noiselab.emulate.device_inputs import layer_spec_for
    from noiselab.emulate.engine import emulate_circuit_bases
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.mitigate.plan import build_plan
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    study = load_study(HERE / "studies" / f"hchain-{qubits}.yaml")
    ctx = build_context(study)
    c, profile = ctx.compiled, study.profile
    model = _twirled_model(profile, c.patch)
    plan = build_plan(ctx.qubit_problem.hamiltonian)
    mats = readout_matrices(profile, c.patch)
    readout = [mats[q] for q in c.logical_to_circuit]
    layer = layer_spec_for(profile, c.circuit.num_qubits)
    t = time.perf_counter()
    dist = emulate_circuit_bases(
        c.circuit,
        model,
        plan.bases,
        layer=layer,
        logical_to_circuit=list(c.logical_to_circuit),
        readout_matrices=readout,
        method="density_matrix",
    )
    dm_s = time.perf_counter() - t
    dm_energy = plan.constant + sum(
        float(dist.probs[i] @ g.weights) for i, g in enumerate(plan.groups)
    )
    rows = []
    for thr in THRESHOLDS:
        common = (c.circuit, model, _groups(plan), c.logical_to_circuit, layer, readout)
        t = time.perf_counter()
        plain = pauli_energy(*common, Truncation(min_abs_coeff=thr), constant_ha=plan.constant)
        plain_s = time.perf_counter() - t
        t = time.perf_counter()
        got = pauli_energy(
            *common,
            Truncation(min_abs_coeff=thr),
            constant_ha=plan.constant,
            sampling=Sampling(seed=study.seed),
        )
        est_s = time.perf_counter() - t
        true = dm_energy - got.energy_ha  # what the estimate estimates (signed)
        est, std = got.truncation_estimate_ha, got.truncation_std_ha
        limit = truncation_limit(est, std)
        rows.append(
            {
                "threshold": thr,
                "seconds": plain_s,
                "seconds_with_estimate": est_s,
                "error_mha": abs(dm_energy - plain.energy_ha) * 1e3,
                "bound_mha": plain.truncation_bound_ha * 1e3,
                "within_bound": abs(dm_energy - plain.energy_ha) <= plain.truncation_bound_ha,
                "looseness": plain.truncation_bound_ha
                / max(abs(dm_energy - plain.energy_ha), 1e-15),
                "peak_strings": plain.peak_strings,
                "signed_error_mha": true * 1e3,
                "estimate_mha": est * 1e3,
                "estimate_std_mha": std * 1e3,
                "estimate_residual_bound_mha": got.estimate_residual_ha * 1e3,
                "within_3_std": abs(true - est) <= 3 * std,
                "estimate_over_error": abs(est) / max(abs(true), 1e-15),
                "limit_mha": limit * 1e3,
                "within_limit": abs(true) <= limit,
                "limit_looseness": limit / max(abs(true), 1e-15),
            }
        )
        r = rows[-1]
        print(
            f"  {qubits} qubits, threshold {thr:g}: error {r['error_mha']:.3g} mHa, bound "
            f"{r['bound_mha']:.3g} mHa ({plain_s:.2f} s); with estimate: error "
            f"{r['signed_error_mha']:+.3g} mHa, estimate {r['estimate_mha']:+.3g} +- "
            f"{r['estimate_std_mha']:.2g} mHa, limit {r['limit_mha']:.3g} mHa "
            f"({r['limit_looseness']:.2g}x the error; {est_s:.2f} s); density matrix {dm_s:.2f} s, "
            f"peak {plain.peak_strings} strings",
            flush=True,
        )
    return {
        "qubits": qubits,
        "two_qubit_gates": c.two_qubit_count,
        "density_matrix_s": dm_s,
        "groups": plan.n_groups,
        "rows": rows,
    }


def _chain_spec(atoms: int):
    """Linear H chain, STO-3G, 1.8 Angstrom spacing; odd electron counts made even by charge +1."""
    from noiselab.chem.molecule import molecule_from_mapping

    geometry = "; ".join(f"H 0 0 {1.8 * i:.2f}" for i in range(atoms))
    return molecule_from_mapping({"geometry": geometry, "basis": "sto-3g", "charge": atoms % 2})


def integrals_problem(spec):
    """``compute_problem(spec, exact=False)``: the (RO)HF and active-space integrals without the
    FCI energy (NaN), for sizes where FCI is refused; ``check_integrals_path`` checks it against
    ``compute_problem`` on small chains."""
    from noiselab.chem.molecule import compute_problem

    return compute_problem(spec, exact=False)


def check_integrals_path(atoms: int = 4, atol: float = 1e-10) -> float:
    """Largest difference (Ha) between the spectra of the integrals-only qubit Hamiltonian and
    of ``encode(compute_problem(...))`` on an H chain (Jordan-Wigner); raises above ``atol``.
    Spectra, not coefficients: two Hartree-Fock runs may return orbitals of other signs (or,
    all orbitals being active, another rotation of them), which changes the Pauli coefficients
    but not the operator's eigenvalues."""
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem

    spec = _chain_spec(atoms)
    ref = encode(compute_problem(spec), "jordan_wigner")
    got = encode(integrals_problem(spec), "jordan_wigner")
    spectra = [np.linalg.eigvalsh(q.hamiltonian.to_matrix()) for q in (ref, got)]
    worst = float(np.max(np.abs(spectra[0] - spectra[1])))
    if worst > atol or ref.hf_bitstring != got.hf_bitstring:
        raise AssertionError(
            f"integrals-only path differs from compute_problem on H{atoms}: {worst:.3g} Ha"
        )
    return worst


def _status_bytes(key: str) -> int:
    """A /proc/self/status memory line (VmRSS, VmHWM) in bytes; 0 where unavailable."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _reset_peak_rss() -> bool:
    """Reset this process's VmHWM to its current resident size (Linux: clear_refs 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def scaling(atoms: int, max_groups: int | None, threshold: float) -> dict:
    """Time, peak strings and peak resident memory of the noisy energy of an H chain.

    Chemistry by the integrals-only path (no FCI, so 30 and 40 qubits are reachable); the plan
    is the pauli method's (sorted insertion, no dense weights). The peak resident memory of the
    propagation is this process's VmHWM reset just before ``pauli_energy`` (so it includes what
    was resident then: the interpreter, the Hamiltonian and the plan); run it in a child process
    per size (``scaling_in_child``) so the peaks are separate."""
    from noiselab.chem.ansatz import layered_circuit
    from noiselab.chem.encode import encode
    from noiselab.device.compile import compile_to_device
    from noiselab.device.noise import readout_matrices
    from noiselab.device.profile import load_profile
    from noiselab.emulate.device_inputs import layer_spec_for, noise_model_for
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.mitigate.plan import build_plan

    t = time.perf_counter()
    qp = encode(integrals_problem(_chain_spec(atoms)), "jordan_wigner")
    chem_s = time.perf_counter() - t
    n = qp.num_qubits
    circuit = layered_circuit(n, 2, initial_bitstring=list(qp.hf_bitstring))
    rng = np.random.default_rng(1)
    bound = circuit.assign_parameters(rng.normal(scale=0.1, size=circuit.num_parameters))
    profile = load_profile(HERE / "studies" / "bench-line-44.yaml")
    compiled = compile_to_device(bound, profile, layout=list(range(n)))
    model = noise_model_for(profile, compiled.patch)
    t = time.perf_counter()
    plan = build_plan(qp.hamiltonian, dense=False, grouping="sorted_insertion")
    plan_s = time.perf_counter() - t
    groups = _groups(plan)[: max_groups or None]
    mats = readout_matrices(profile, compiled.patch)
    readout = [mats[q] for q in compiled.logical_to_circuit]
    layer = layer_spec_for(profile, compiled.circuit.num_qubits)
    rss_before = _status_bytes("VmRSS")
    reset = _reset_peak_rss()
    t = time.perf_counter()
    got = pauli_energy(
        compiled.circuit,
        model,
        groups,
        compiled.logical_to_circuit,
        layer,
        readout,
        Truncation(min_abs_coeff=threshold),
        constant_ha=plan.constant,
    )
    seconds = time.perf_counter() - t
    peak = _status_bytes("VmHWM")
    print(
        f"  {n} qubits, threshold {threshold:g}: {len(groups)} of {plan.n_groups} groups in "
        f"{seconds:.1f} s (chemistry {chem_s:.1f} s, plan {plan_s:.1f} s), bound "
        f"{got.truncation_bound_ha * 1e3:.3g} mHa, peak {got.peak_strings} strings, "
        f"peak resident {peak / 2**30:.2f} GiB (before {rss_before / 2**30:.2f} GiB), "
        f"{compiled.two_qubit_count} two-qubit gates",
        file=sys.stderr,
        flush=True,
    )
    return {
        "qubits": n,
        "hamiltonian_terms": len(qp.hamiltonian),
        "groups_run": len(groups),
        "groups": plan.n_groups,
        "seconds": seconds,
        "seconds_all_groups_est": seconds * plan.n_groups / len(groups),
        "chemistry_seconds": chem_s,
        "plan_seconds": plan_s,
        "bound_mha": got.truncation_bound_ha * 1e3,
        "threshold": threshold,
        "peak_strings": got.peak_strings,
        "rss_before_propagation_gib": rss_before / 2**30,
        "peak_rss_propagation_gib": peak / 2**30 if reset else None,
        "peak_rss_process_gib": peak / 2**30,
        "two_qubit_gates": compiled.two_qubit_count,
        "hf_energy_ha": qp.hf_energy_ha,
        "energy_ha_groups_run": got.energy_ha,
    }


#: H chains of part 2: 20, 30 and 40 qubits (H15 with charge +1).
SCALING_ATOMS = (10, 15, 20)


def _scaling_groups(atoms: int, requested: int | None) -> int | None:
    """Groups to run: all by default; a subset's ``seconds_all_groups_est`` is linear in the
    groups, an overestimate (the groups' strings merge in the 16 energy sums: H10 at 1e-4, 16
    groups extrapolate to 65 s, all 1554 take 6 s)."""
    return requested or None


def scaling_in_child(
    atoms: int, max_groups: int | None, threshold: float, timeout_s: float
) -> dict:
    """``scaling`` in a child process (OMP_NUM_THREADS=1): separate memory peaks per size; a
    size past ``timeout_s`` or failing is recorded as such."""
    import os
    import subprocess

    env = {**os.environ, "OMP_NUM_THREADS": "1", "PYTHONPATH": str(HERE.parent)}
    cmd = [sys.executable, str(Path(__file__).resolve()), "--scaling-child", str(atoms)]
    cmd += [str(threshold), str(max_groups or 0)]
    load_before = os.getloadavg()
    try:
        done = subprocess.run(  # progress goes to this process's stderr as it comes
            cmd, env=env, stdout=subprocess.PIPE, text=True, check=False, timeout=timeout_s
        )
    except subprocess.TimeoutExpired:
        print(f"  H{atoms}, threshold {threshold:g}: past {timeout_s:.0f} s", flush=True)
        return {"atoms": atoms, "threshold": threshold, "failed": f"past {timeout_s:.0f} s"}
    row: dict = {"atoms": atoms, "threshold": threshold}
    if done.returncode != 0:
        row["failed"] = f"exit {done.returncode}"
    else:
        row.update(json.loads(done.stdout.strip().splitlines()[-1]))
    row["loadavg_before"] = load_before
    row["loadavg_after"] = os.getloadavg()
    return row


def study_slice(atoms: int, max_groups: int | None, threshold: float) -> dict:
    """The study-level path of ``assess --method pauli_propagation`` (noiselab.study.pauli_assess:
    raw and per-qubit readout recipes, shot allocation, target rule, truncation bound) on a linear
    H chain. The noiseless optimizer is bypassed (seeded small angles, as in ``scaling``): at 20
    qubits the study's own optimizer is refused by the memory guard (sparse Hamiltonian of 2**20
    rows), so ``assess`` itself cannot run this study yet. Exact energy: PySCF FCI."""
    import dataclasses
    from types import SimpleNamespace

    from noiselab.chem.ansatz import layered_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile
    from noiselab.mitigate.plan import build_plan
    from noiselab.study.pauli_assess import pauli_recipes
    from noiselab.study.spec import EmulationSettings

    geometry = "; ".join(f"H 0 0 {1.8 * i:.2f}" for i in range(atoms))
    spec = molecule_from_mapping({"geometry": geometry, "basis": "sto-3g", "charge": atoms % 2})
    qp = encode(compute_problem(spec), "jordan_wigner")
    n = qp.num_qubits
    circuit = layered_circuit(n, 2, initial_bitstring=list(qp.hf_bitstring))
    rng = np.random.default_rng(1)
    bound = circuit.assign_parameters(rng.normal(scale=0.1, size=circuit.num_parameters))
    profile = load_profile(HERE / "studies" / "bench-line-44.yaml")
    compiled = compile_to_device(bound, profile, layout=list(range(n)))
    t = time.perf_counter()
    plan = build_plan(qp.hamiltonian, dense=False)
    plan_s = time.perf_counter() - t
    used = dataclasses.replace(plan, groups=plan.groups[: max_groups or None])
    emulation = EmulationSettings(
        method="pauli_propagation", truncation={"min_abs_coeff": threshold}
    )
    study = SimpleNamespace(
        source=f"H{atoms} chain",
        recipes={"raw": (), "readout": ({"pass": "readout", "method": "per_qubit_inverse"},)},
        profile=profile,
        emulation=emulation,
    )
    exp = SimpleNamespace(
        shots=10**8,
        exact_energy_ha=float(qp.exact_energy_ha),
        ansatz_energy_ha=float(qp.exact_energy_ha),
        target_mha=1.6,
        confidence=0.95,
    )
    ctx = SimpleNamespace(study=study, experiment=exp, compiled=compiled, plan=used)
    t = time.perf_counter()
    results = pauli_recipes(ctx)
    seconds = time.perf_counter() - t
    rows = {
        name: {
            "energy_ha": r.energy_ha,
            "bias_mha": r.bias_exact_mha,
            "std_mha": r.std_mha,
            "truncation_bound_mha": r.details["truncation_bound_mha"],
            "truncation_estimate_mha": r.details.get("truncation_estimate_mha"),
            "truncation_estimate_std_mha": r.details.get("truncation_estimate_std_mha"),
        }
        for name, r in results.items()
    }
    print(
        f"  study slice, {n} qubits: {len(used.groups)} of {plan.n_groups} groups, both recipes "
        f"in {seconds:.1f} s (plan {plan_s:.1f} s, no dense weights); "
        + "; ".join(
            f"{k}: bias {v['bias_mha']:+.1f} mHa, bound {v['truncation_bound_mha']:.3g} mHa, "
            f"estimate {v['truncation_estimate_mha']:+.3g} "
            f"+- {v['truncation_estimate_std_mha']:.2g} mHa"
            for k, v in rows.items()
        )
        + (" (partial groups: energies are not the full energy)" if max_groups else ""),
        flush=True,
    )
    return {
        "qubits": n,
        "groups_run": len(used.groups),
        "groups": plan.n_groups,
        "seconds": seconds,
        "seconds_all_groups_est": seconds * plan.n_groups / len(used.groups),
        "plan_seconds": plan_s,
        "threshold": threshold,
        "exact_energy_ha": float(qp.exact_energy_ha),
        "recipes": rows,
    }


STUDY_20 = HERE / "studies" / "hchain-20-pauli.yaml"


def grouping_cost(atoms: int) -> dict:
    """Shots sorted-insertion grouping costs against qiskit's colouring on a linear H chain
    (STO-3G, 1.8 Angstrom, Jordan-Wigner): per-group single-shot deviations on the noiseless
    state of a 1-layer layered circuit at seeded small angles (exact, from the statevector);
    with the plan's optimal allocation the variance at N shots is (sum of deviations)**2 / N, so
    their ratio squared is the shot factor. Group counts and grouping time at any size."""
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import Statevector

    from noiselab.chem.ansatz import layered_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.mitigate.plan import build_plan

    geometry = "; ".join(f"H 0 0 {1.8 * i:.2f}" for i in range(atoms))
    spec = molecule_from_mapping({"geometry": geometry, "basis": "sto-3g", "charge": atoms % 2})
    qp = encode(compute_problem(spec), "jordan_wigner")
    n = qp.num_qubits
    row: dict = {"qubits": n}
    plans = {}
    for grouping in ("coloring", "sorted_insertion"):
        t = time.perf_counter()
        plans[grouping] = build_plan(qp.hamiltonian, dense=n <= 14, grouping=grouping)
        row[f"{grouping}_seconds"] = time.perf_counter() - t
        row[f"{grouping}_groups"] = plans[grouping].n_groups
    if n <= 14:
        circuit = layered_circuit(n, 1, initial_bitstring=list(qp.hf_bitstring))
        rng = np.random.default_rng(1)
        state = circuit.assign_parameters(rng.normal(scale=0.1, size=circuit.num_parameters))
        sums = {}
        for grouping, plan in plans.items():
            total = 0.0
            for g in plan.groups:
                rotate = QuantumCircuit(n)
                for q in range(n):
                    letter = g.basis[n - 1 - q]
                    if letter == "Y":
                        rotate.sdg(q)
                    if letter in "XY":
                        rotate.h(q)
                p = Statevector(state.compose(rotate)).probabilities()
                total += float(np.sqrt(max(p @ g.weights**2 - (p @ g.weights) ** 2, 0.0)))
            sums[grouping] = total
        row["shot_factor"] = (sums["sorted_insertion"] / sums["coloring"]) ** 2
    print(
        f"  {n} qubits: colouring {row['coloring_groups']} groups in "
        f"{row['coloring_seconds']:.1f} s, sorted insertion {row['sorted_insertion_groups']} in "
        f"{row['sorted_insertion_seconds']:.1f} s"
        + (f"; shots needed x{row['shot_factor']:.3f}" if "shot_factor" in row else ""),
        flush=True,
    )
    return row


def assess_end_to_end(study: Path = STUDY_20) -> dict:
    """``assess`` of the 20-qubit study in a child process (OMP_NUM_THREADS=1, no cache): wall
    time, peak resident memory (VmHWM) and the result; the load average before and after is
    recorded (the machine may be shared)."""
    import os
    import subprocess

    code = (
        "import json, os, sys, time\n"
        f"sys.path[:0] = [{str(HERE)!r}, {str(HERE.parent)!r}]\n"
        "from memory_child import peak_rss_bytes\n"
        "from noiselab.study.assess import assess\n"
        "t = time.perf_counter()\n"
        "def hook(what, done, total):\n"
        "    c = sum(os.times()[:2])\n"
        "    print(f'    {time.perf_counter() - t:7.0f} s wall, {c:7.0f} s cpu, load '\n"
        "          f'{os.getloadavg()[0]:.1f}: {what} {done}/{total}', file=sys.stderr,\n"
        "          flush=True)\n"
        f"r = assess({str(study)!r}, cache=False, progress=hook)\n"
        "wall = time.perf_counter() - t\n"
        "print(json.dumps({'wall_s': wall, 'cpu_s': sum(os.times()[:2]), "
        "'maxrss_bytes': peak_rss_bytes(), 'result': r.to_json()}))\n"
    )
    env = {**os.environ, "OMP_NUM_THREADS": "1", "PYTHONPATH": str(HERE.parent)}
    load_before = os.getloadavg()
    done = subprocess.run(  # progress goes to this process's stderr as it comes
        [sys.executable, "-c", code], env=env, stdout=subprocess.PIPE, text=True, check=False
    )
    load_after = os.getloadavg()
    if done.returncode != 0:
        return {"failed": done.returncode}
    out = json.loads(done.stdout.strip().splitlines()[-1])
    res = out["result"]
    rows = {
        name: {
            k: r.get(k)
            for k in (
                "energy",
                "bias_mha",
                "std_mha",
                "truncation_bound_mha",
                "truncation_estimate_mha",
                "truncation_estimate_std_mha",
                "truncation_limit_mha",
            )
        }
        for name, r in res["recipes"].items()
    }
    print(
        f"  assess {study.name}: {out['wall_s']:.0f} s wall, {out['cpu_s']:.0f} s cpu, peak "
        f"{out['maxrss_bytes'] / 2**30:.2f} GiB, method {res.get('emulation_method')}, "
        f"load {load_before[0]:.1f} -> {load_after[0]:.1f}; {json.dumps(rows)}",
        flush=True,
    )
    return {
        "study": study.name,
        "wall_s": out["wall_s"],
        "cpu_s": out["cpu_s"],
        "peak_rss_gib": out["maxrss_bytes"] / 2**30,
        "loadavg_before": load_before,
        "loadavg_after": load_after,
        "cpu_count": os.cpu_count(),
        "result": res,
    }


def threshold_figure(parts: list[dict], path: Path) -> Path:
    """Threshold against |true error|, rigorous bound and limit (|estimate| + 3 standard errors),
    and against seconds (with and without the estimate), one colour per qubit count."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax, bx) = plt.subplots(1, 2, figsize=(11, 5.2))
    for k, part in enumerate(parts):
        col = f"C{k}"
        thr = [r["threshold"] for r in part["rows"]]
        q = part["qubits"]
        ax.plot(
            thr,
            [r["error_mha"] for r in part["rows"]],
            "o-",
            color=col,
            label=f"{q} qubits: |true error|",
        )
        ax.plot(
            thr,
            [r["bound_mha"] for r in part["rows"]],
            "s:",
            color=col,
            label=f"{q} qubits: rigorous bound",
        )
        ax.plot(
            thr,
            [r["limit_mha"] for r in part["rows"]],
            "^--",
            color=col,
            label=f"{q} qubits: limit |estimate| + 3 s.e.",
        )
        bx.plot(thr, [r["seconds"] for r in part["rows"]], "o-", color=col, label=f"{q} qubits")
        bx.plot(
            thr,
            [r["seconds_with_estimate"] for r in part["rows"]],
            "^--",
            color=col,
            label=f"{q} qubits, with estimate",
        )
        bx.axhline(part["density_matrix_s"], color=col, lw=0.8, alpha=0.6)
    for a in (ax, bx):
        a.set_xscale("log")
        a.set_yscale("log")
        a.set_xlabel("truncation threshold min_abs_coeff (Ha)")
        a.grid(True, which="major", alpha=0.3)
    ax.set_ylabel("truncation error of the energy (mHa)")
    ax.set_title("Truncation error against the density matrix (twirled noise)")
    bx.set_ylabel("time (s)")
    bx.set_title("Time (thin lines: density matrix)")
    ax.legend(fontsize=6.5, loc="center left", bbox_to_anchor=(0.0, 0.5))
    bx.legend(fontsize=6.5)
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument(
        "--study-groups",
        type=int,
        default=None,
        help="groups of the 20-qubit study slice (default: all; --quick: 2)",
    )
    ap.add_argument(
        "--assess-only",
        action="store_true",
        help="only part 4: assess of the 20-qubit study end to end (time, memory, result)",
    )
    ap.add_argument(
        "--grouping",
        action="store_true",
        help="only the grouping comparison (sorted insertion against colouring: groups, time, "
        "shots)",
    )
    ap.add_argument("--qubits", type=int, nargs="+", default=None, help="part 1 sizes")
    ap.add_argument("--agreement-only", action="store_true", help="part 1 and its figure only")
    ap.add_argument(
        "--scaling-only",
        action="store_true",
        help="only part 2 (20, 30, 40 qubits, thresholds 1e-4 and 1e-5, one child process per "
        "size); writes results/pauli-scaling-<date>.json",
    )
    ap.add_argument(
        "--scaling-groups",
        type=int,
        default=None,
        help="groups per size in part 2 (default or 0: all; a subset extrapolates the time)",
    )
    ap.add_argument(
        "--scaling-timeout", type=float, default=900.0, help="seconds per size in part 2"
    )
    ap.add_argument("--scaling-child", nargs=3, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.scaling_child:
        atoms, thr, cap = args.scaling_child
        row = scaling(int(atoms), int(cap) or None, float(thr))
        print(json.dumps(row))
        return 0
    if args.scaling_only:
        import os
        import platform

        got = {
            "date": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
            "machine": f"{platform.node()}, {os.cpu_count()} cores, {platform.machine()}",
            "integrals_path_check_ha": check_integrals_path(4),
            "scaling": [],
        }
        path = HERE / "results" / f"pauli-scaling-{dt.date.today().isoformat()}.json"
        print("scaling (integrals-only chemistry, twirled device noise):")
        for thr in (1e-4, 1e-5):
            for atoms in SCALING_ATOMS:
                got["scaling"].append(
                    scaling_in_child(
                        atoms,
                        _scaling_groups(atoms, args.scaling_groups),
                        thr,
                        args.scaling_timeout,
                    )
                )
                path.write_text(json.dumps(got, indent=1) + "\n")  # after each size
        print(f"results: {path}")
        return 0
    if args.grouping:
        print("grouping: sorted insertion against qiskit's colouring:")
        rows = [grouping_cost(a) for a in (4, 5, 6, 10)]
        path = HERE / "results" / f"pauli-grouping-{dt.date.today().isoformat()}.json"
        path.write_text(json.dumps({"grouping": rows}, indent=1) + "\n")
        print(f"results: {path}")
        return 0
    if args.assess_only:
        print("20-qubit study end to end (assess, child process, no cache):")
        got = {"date": dt.datetime.now(dt.UTC).isoformat(timespec="seconds")}
        got["assess_20"] = assess_end_to_end()
        path = HERE / "results" / f"pauli-assess20-{dt.date.today().isoformat()}.json"
        path.write_text(json.dumps(got, indent=1) + "\n")
        print(f"results: {path}")
        return 0
    out = {
        "date": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "agreement": [],
        "scaling": [],
    }
    print("agreement with the density matrix (twirled noise):")
    stamp = f"{dt.date.today().isoformat()}{'-quick' if args.quick else ''}"
    figure = HERE / "results" / f"pauli-threshold-{stamp}.png"
    for q in args.qubits or ((8,) if args.quick else (8, 10, 12)):
        out["agreement"].append(agreement(q))
        threshold_figure(out["agreement"], figure)  # after each size: a long run keeps a figure
        if args.agreement_only:
            path = HERE / "results" / f"pauli-agreement-{stamp}.json"
            path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"figure: {figure}")
    if args.agreement_only:
        print(f"results: {path}")
        return 0
    print("scaling (integrals-only chemistry, twirled device noise, truncation 1e-4):")
    for atoms in (10,) if args.quick else SCALING_ATOMS:
        groups = 2 if args.quick else _scaling_groups(atoms, args.scaling_groups)
        out["scaling"].append(scaling_in_child(atoms, groups, 1e-4, args.scaling_timeout))
    print("20-qubit study slice (assess's pauli_propagation path, truncation 1e-4):")
    slice_groups = args.study_groups or (2 if args.quick else None)
    out["study_slice"] = study_slice(10, slice_groups, 1e-4)
    path = (
        HERE
        / "results"
        / f"pauli-{dt.date.today().isoformat()}{'-quick' if args.quick else ''}.json"
    )
    if not args.quick:
        print("20-qubit study end to end (assess, child process, no cache):")
        out["assess_20"] = assess_end_to_end()
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"results: {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
