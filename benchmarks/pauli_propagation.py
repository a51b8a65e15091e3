"""Pauli propagation: agreement with the density matrix and time against qubit count.

Not a test (timings depend on the machine). Run from the repository root:

    python benchmarks/pauli_propagation.py            # 8 and 10 qubits vs density matrix; 20
    python benchmarks/pauli_propagation.py --quick    # 8 qubits, 20 qubits with 2 groups

Part 1 (hchain-8, hchain-10 on bench-line-14, optimized layered circuit): the grouped energy of
the density-matrix engine under the explicitly twirled device noise (no idle pass) against
Pauli propagation of the same noise, exact and at truncation thresholds; the error must stay
inside the reported bound, and the bound's looseness (bound / error) is reported.
Part 2 (linear H chains, Jordan-Wigner, STO-3G, 1.8 Angstrom; a two-layer layered circuit with
seeded small random angles on the invented 44-qubit line bench-line-44): time, peak strings and
truncation bound of the full noisy energy at 20 qubits (twirled device noise, idle
relaxation included, basis layers and readout). Writes benchmarks/results/pauli-<date>.json.
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
    for thr in (1e-8, *THRESHOLDS):  # 1e-8: near exact (threshold 0 expands 4**w strings per term)
        t = time.perf_counter()
        got = pauli_energy(
            c.circuit,
            model,
            _groups(plan),
            c.logical_to_circuit,
            layer,
            readout,
            Truncation(min_abs_coeff=thr),
            constant_ha=plan.constant,
        )
        err = abs(got.energy_ha - dm_energy)
        rows.append(
            {
                "threshold": thr,
                "seconds": time.perf_counter() - t,
                "error_mha": err * 1e3,
                "bound_mha": got.truncation_bound_ha * 1e3,
                "within_bound": err <= got.truncation_bound_ha + 1e-10,
                "looseness": (got.truncation_bound_ha / err) if err > 1e-12 else None,
                "peak_strings": got.peak_strings,
            }
        )
        print(
            f"  {qubits} qubits, threshold {thr:g}: error {err * 1e3:.3g} mHa, bound "
            f"{got.truncation_bound_ha * 1e3:.3g} mHa, {rows[-1]['seconds']:.2f} s "
            f"(density matrix {dm_s:.2f} s), peak {got.peak_strings} strings",
            flush=True,
        )
    return {
        "qubits": qubits,
        "two_qubit_gates": c.two_qubit_count,
        "density_matrix_s": dm_s,
        "groups": plan.n_groups,
        "rows": rows,
    }


def scaling(atoms: int, max_groups: int | None, threshold: float) -> dict:
    from noiselab.chem.ansatz import layered_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.device.compile import compile_to_device
    from noiselab.device.noise import readout_matrices
    from noiselab.device.profile import load_profile
    from noiselab.emulate.device_inputs import layer_spec_for, noise_model_for
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.mitigate.plan import build_plan

    geometry = "; ".join(f"H 0 0 {1.8 * i:.2f}" for i in range(atoms))
    charge = atoms % 2
    spec = molecule_from_mapping({"geometry": geometry, "basis": "sto-3g", "charge": charge})
    t = time.perf_counter()
    qp = encode(compute_problem(spec), "jordan_wigner")
    chem_s = time.perf_counter() - t
    n = qp.num_qubits
    circuit = layered_circuit(n, 2, initial_bitstring=list(qp.hf_bitstring))
    rng = np.random.default_rng(1)
    bound = circuit.assign_parameters(rng.normal(scale=0.1, size=circuit.num_parameters))
    profile = load_profile(HERE / "studies" / "bench-line-44.yaml")
    compiled = compile_to_device(bound, profile, layout=list(range(n)))
    model = noise_model_for(profile, compiled.patch)
    plan = build_plan(qp.hamiltonian)
    groups = _groups(plan)[: max_groups or None]
    mats = readout_matrices(profile, compiled.patch)
    readout = [mats[q] for q in compiled.logical_to_circuit]
    layer = layer_spec_for(profile, compiled.circuit.num_qubits)
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
    print(
        f"  {n} qubits: {len(groups)} of {plan.n_groups} groups in {seconds:.1f} s "
        f"(chemistry {chem_s:.1f} s), bound {got.truncation_bound_ha * 1e3:.3g} mHa, "
        f"peak {got.peak_strings} strings, {compiled.two_qubit_count} two-qubit gates",
        flush=True,
    )
    return {
        "qubits": n,
        "groups_run": len(groups),
        "groups": plan.n_groups,
        "seconds": seconds,
        "seconds_all_groups_est": seconds * plan.n_groups / len(groups),
        "bound_mha": got.truncation_bound_ha * 1e3,
        "threshold": threshold,
        "peak_strings": got.peak_strings,
        "two_qubit_gates": compiled.two_qubit_count,
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    out = {
        "date": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "agreement": [],
        "scaling": [],
    }
    print("agreement with the density matrix (twirled noise):")
    for q in (8,) if args.quick else (8, 10):
        out["agreement"].append(agreement(q))
    print("scaling (twirled device noise, truncation 1e-4):")
    for atoms in (
        10,
    ):  # 30+ qubits: compute_problem's FCI is refused there (no integrals-only path yet)
        out["scaling"].append(scaling(atoms, 2 if args.quick else 8, 1e-4))
    path = (
        HERE
        / "results"
        / f"pauli-{dt.date.today().isoformat()}{'-quick' if args.quick else ''}.json"
    )
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"results: {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
