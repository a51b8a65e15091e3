"""Density-matrix engine: distributions against independent qiskit.quantum_info evolutions."""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pytest
from helpers.toy import compile_toy, toy_circuit, toy_device

from noiselab.common.errors import InputError
from noiselab.emulate.engine import BasisDistributions, emulate_bases, emulate_circuit_bases

DEVICES = Path(__file__).resolve().parents[1] / "configs" / "devices"


# ---- helpers written for the tests (independent of the package's estimators) ----------------


def parity_signs(label: str) -> np.ndarray:
    """(-1)^(number of 1 bits on the non-identity qubits of label), per outcome index."""
    n = len(label)
    mask = sum(1 << q for q in range(n) if label[n - 1 - q] != "I")
    idx = np.arange(2**n)
    bits = np.array([bin(int(m) & mask).count("1") % 2 for m in idx])
    return 1.0 - 2.0 * bits


def measurement_basis(label: str) -> str:
    return label.replace("I", "Z")


def energy_from(dist: BasisDistributions, op: object, *, ideal: bool = False) -> float:
    """<H> from distributions measured in the full-basis of every term (I measured in Z)."""
    total = 0.0
    for pauli, coeff in zip(op.paulis, op.coeffs, strict=True):  # type: ignore[attr-defined]
        label = pauli.to_label()
        if set(label) == {"I"}:
            total += coeff.real
            continue
        row = dist.row(measurement_basis(label), ideal=ideal)
        total += coeff.real * float(row @ parity_signs(label))
    return total


def term_bases(op: object) -> list[str]:
    return sorted({measurement_basis(p.to_label()) for p in op.paulis})  # type: ignore[attr-defined]


@pytest.fixture(scope="module")
def h2() -> dict:
    """H2 / STO-3G / JW, UCCSD at its noiseless optimum (4 qubits)."""
    from noiselab.chem.ansatz import uccsd_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem
    from noiselab.chem.optimize import optimize_noiseless

    spec = MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7408")
    qp = encode(compute_problem(spec), "jordan_wigner")
    circ = uccsd_circuit(qp)
    from qiskit.quantum_info import Statevector

    opt = optimize_noiseless(qp, circ)
    bound = circ.assign_parameters(opt.parameters)
    # source: qiskit.quantum_info.Statevector expectation of the noiseless circuit
    e0 = Statevector(bound).expectation_value(qp.hamiltonian).real
    return {"qp": qp, "bound": bound, "opt": opt, "e0": e0}


# ---- kernel exactness on a hand-built noise model -------------------------------------------


def test_noiseless_basis_layer_matches_density_matrix_probabilities() -> None:
    """With a noiseless basis layer, each row is the Z distribution of U_basis rho U_basis^dag."""
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import DensityMatrix

    from noiselab.emulate.engine import simulate_density_matrix

    dev = toy_device(4)
    qc = compile_toy(toy_circuit(4), dev)
    l2c = [2, 0, 3, 1]  # a non-trivial routing permutation
    bases = ["".join(p) for p in itertools.product("IXYZ", repeat=4)]
    out = emulate_circuit_bases(
        qc, dev.noise_model, bases, layer=dev.layer, logical_to_circuit=l2c, basis_noise=False
    )
    rho = DensityMatrix(simulate_density_matrix(qc, dev.noise_model))
    for i, b in enumerate(bases):
        rot = QuantumCircuit(4)
        for l in range(4):
            letter = b[3 - l]
            if letter == "X":
                rot.h(l2c[l])
            elif letter == "Y":
                rot.sdg(l2c[l])
                rot.h(l2c[l])
        # source: qiskit.quantum_info.DensityMatrix.probabilities (qargs[0] is the lowest bit)
        expect = rho.evolve(rot).probabilities(qargs=l2c)
        np.testing.assert_allclose(out.probs_ideal[i], expect, atol=1e-12)
    assert out.engine_calls == 1
    np.testing.assert_allclose(out.probs_ideal.sum(axis=1), 1.0, atol=1e-13)
    assert (out.probs_ideal >= 0).all()


def test_energy_equals_trace_rho_h(h2: dict) -> None:
    """Noise-free basis layer, readout off: energy from distributions = Tr(rho H) (1e-10)."""
    from qiskit.quantum_info import DensityMatrix

    from noiselab.device.compile import compile_to_device
    from noiselab.device.noise import build_noise_model
    from noiselab.device.profile import load_profile
    from noiselab.emulate.engine import simulate_density_matrix

    prof = load_profile(DEVICES / "rustbucket-6.yaml")
    comp = compile_to_device(h2["bound"], prof, layout=[5, 4, 3, 2])
    H = h2["qp"].hamiltonian
    out = emulate_bases(comp, prof, term_bases(H), basis_noise=False, readout=False)
    rho = DensityMatrix(simulate_density_matrix(comp.circuit, build_noise_model(prof, comp.patch)))
    # source: qiskit.quantum_info.DensityMatrix.expectation_value on the logical qubits' positions
    exact = rho.expectation_value(H, qargs=list(comp.logical_to_circuit)).real
    assert abs(energy_from(out, H) - exact) < 1e-10
    np.testing.assert_array_equal(out.probs, out.probs_ideal)


# ---- the independent cross-check -------------------------------------------------------------


def _reference_distributions(comp: object, prof: object, bases: list[str]) -> dict[str, np.ndarray]:
    """qiskit.quantum_info.DensityMatrix stepped instruction by instruction: gate unitary, then the
    device's gate channel (as a SuperOp); delays as thermal relaxation over their duration; then
    the basis layer written by hand (X: rz(pi/2) sx rz(pi/2); Y: sx [then rz, irrelevant before a
    Z measurement]; idle qubits relax over the sx time when any qubit changes basis)."""
    from qiskit.circuit.library import RZGate, SXGate
    from qiskit.quantum_info import DensityMatrix, Operator, SuperOp
    from qiskit_aer.noise import thermal_relaxation_error

    from noiselab.device.noise import gate_channel

    circ = comp.circuit  # type: ignore[attr-defined]
    patch = comp.patch  # type: ignore[attr-defined]
    k = circ.num_qubits

    def relax(rho: DensityMatrix, c: int, t_s: float) -> DensityMatrix:
        qp = prof.qubit(patch[c])  # type: ignore[attr-defined]
        if t_s <= 0 or qp.t1_us is None:
            return rho
        t1, t2 = qp.t1_us * 1e-6, qp.t2_us * 1e-6
        # source: Nielsen & Chuang sec. 8.3 (qiskit-aer's thermal_relaxation_error implements it)
        chan = SuperOp(thermal_relaxation_error(t1, min(t2, 2 * t1), t_s).to_quantumchannel())
        return rho.evolve(chan, qargs=[c])

    def gate(rho: DensityMatrix, op: object, qs: list[int]) -> DensityMatrix:
        rho = rho.evolve(Operator(op), qargs=qs)
        if op.name != "rz":  # type: ignore[attr-defined]
            phys = tuple(patch[q] for q in qs)
            chan = gate_channel(prof, op.name, phys).to_quantumchannel()  # type: ignore[attr-defined]
            rho = rho.evolve(SuperOp(chan), qargs=qs)
        return rho

    rho = DensityMatrix.from_label("0" * k)
    for inst in circ.data:
        qs = [circ.find_bit(q).index for q in inst.qubits]
        name = inst.operation.name
        if name == "barrier":
            continue
        if name == "delay":
            unit = inst.operation.unit
            scale = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}[unit]
            rho = relax(rho, qs[0], float(inst.operation.duration) * scale)
            continue
        rho = gate(rho, inst.operation, qs)
    l2c = list(comp.logical_to_circuit)  # type: ignore[attr-defined]
    n = len(l2c)
    sx_s = prof.durations.single_qubit_ns * 1e-9  # type: ignore[attr-defined]
    out = {}
    for b in bases:
        r = rho
        changes = any(ch in "XY" for ch in b)
        for l in range(n):
            c, letter = l2c[l], b[n - 1 - l]
            if letter == "X":
                for op in (RZGate(np.pi / 2), SXGate(), RZGate(np.pi / 2)):
                    r = gate(r, op, [c])
            elif letter == "Y":
                r = gate(r, SXGate(), [c])
            elif changes:
                r = relax(r, c, sx_s)
        out[b] = r.probabilities(qargs=l2c)
    return out


def _kron_readout(prof: object, comp: object) -> np.ndarray:
    """Dense readout matrix built here from the REFERENCES.md formula and the profile's joint
    flips: M = prod_pairs ((1-c) I + c F_ab) @ (A_{n-1} x ... x A_0), logical qubit order."""
    l2c = list(comp.logical_to_circuit)  # type: ignore[attr-defined]
    phys = [comp.patch[c] for c in l2c]  # type: ignore[attr-defined]
    m = np.ones((1, 1))
    for q in phys:
        qp = prof.qubit(q)  # type: ignore[attr-defined]
        # source: REFERENCES.md readout (columns are the prepared state)
        a = np.array([[1 - qp.flip_0to1, qp.flip_1to0], [qp.flip_0to1, 1 - qp.flip_1to0]])
        m = np.kron(a, m)
    n = len(phys)
    idx = np.arange(2**n)
    for la, lb in itertools.combinations(range(n), 2):
        c = prof.joint_flip(phys[la], phys[lb])  # type: ignore[attr-defined]
        if c > 0:
            flip = np.zeros((2**n, 2**n))
            flip[idx ^ (1 << la) ^ (1 << lb), idx] = 1.0
            m = ((1 - c) * np.eye(2**n) + c * flip) @ m
    return m


@pytest.mark.parametrize("device", ["rustbucket-6", "tallowtrap-8"])
def test_independent_density_matrix_cross_check(h2: dict, device: str) -> None:
    """All 81 XYZ bases plus term bases, basis-change noise on: emulator = step-by-step
    qiskit.quantum_info evolution to 1e-8; readout on = the same through a Kronecker matrix."""
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile

    prof = load_profile(DEVICES / f"{device}.yaml")
    layout = [1, 2, 3, 0] if device == "rustbucket-6" else None
    comp = compile_to_device(h2["bound"], prof, layout=layout)
    bases = sorted(
        {"".join(p) for p in itertools.product("XYZ", repeat=4)}
        | set(term_bases(h2["qp"].hamiltonian))
        | {"IIII", "XIYI"}
    )
    out = emulate_bases(comp, prof, bases)
    ref = _reference_distributions(comp, prof, bases)
    m = _kron_readout(prof, comp)
    for i, b in enumerate(bases):
        np.testing.assert_allclose(out.probs_ideal[i], ref[b], atol=1e-8, err_msg=b)
        np.testing.assert_allclose(out.probs[i], m @ ref[b], atol=1e-8, err_msg=b)
    # basis-change noise is really there: the noiseless layer differs in an X/Y basis
    quiet = emulate_bases(comp, prof, ["XXYY"], basis_noise=False, readout=False)
    assert np.abs(quiet.probs_ideal[0] - out.row("XXYY", ideal=True)).max() > 1e-6


# ---- one simulation for all bases ------------------------------------------------------------


def test_one_simulator_run_serves_every_basis(monkeypatch: pytest.MonkeyPatch) -> None:
    from qiskit_aer import AerSimulator

    calls = []
    original = AerSimulator.run

    def counting_run(self: AerSimulator, *args: object, **kwargs: object) -> object:
        calls.append(1)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(AerSimulator, "run", counting_run)
    dev = toy_device(5)
    qc = compile_toy(toy_circuit(5), dev)
    bases = ["".join(p) for p in itertools.product("XYZ", repeat=5)]  # 243 bases
    out = emulate_circuit_bases(qc, dev.noise_model, bases, layer=dev.layer)
    assert len(calls) == 1
    assert out.engine_calls == 1
    assert out.probs.shape == (243, 32)


# ---- noise scaling -----------------------------------------------------------------------------


@pytest.mark.parametrize("device", sorted(p.stem for p in DEVICES.glob("*.yaml")))
def test_zero_noise_reproduces_statevector_energy_and_error_grows(h2: dict, device: str) -> None:
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile, scale_profile

    H = h2["qp"].hamiltonian
    e0 = h2["e0"]
    prof = load_profile(DEVICES / f"{device}.yaml")
    comp = compile_to_device(h2["bound"], prof)
    errors = []
    for s in (0.0, 0.3, 1.0, 2.0):
        scaled = scale_profile(prof, s)
        out = emulate_bases(comp, scaled, term_bases(H))
        errors.append(abs(energy_from(out, H) - e0))
    assert errors[0] < 1e-8
    assert all(a < b for a, b in itertools.pairwise(errors)), errors


def test_h2_noisy_energy_table(h2: dict) -> None:
    """H2 UCCSD at its noiseless optimum on each shipped profile (pytest -s prints the table)."""
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile

    qp = h2["qp"]
    H = qp.hamiltonian
    rows = []
    for path in sorted(DEVICES.glob("*.yaml")):
        prof = load_profile(path)
        comp = compile_to_device(h2["bound"], prof)
        out = emulate_bases(comp, prof, term_bases(H))
        e_gate = energy_from(out, H, ideal=True)
        e_all = energy_from(out, H)
        rows.append((prof.name, comp.two_qubit_count, e_gate, e_all))
        # no state lies below the qubit Hamiltonian's lowest eigenvalue, which for H2 at equilibrium
        # is the FCI energy (variational principle, Rayleigh-Ritz; from memory)
        assert e_gate > qp.exact_energy_ha - 1e-9
        assert e_all > qp.exact_energy_ha - 1e-9
    print(f"\nH2/STO-3G/JW UCCSD at the noiseless optimum; FCI {qp.exact_energy_ha:.6f} Ha")
    print(f"{'device':16s} {'2q':>4s} {'gates+basis mHa':>16s} {'with readout mHa':>17s}")
    for name, n2, eg, ea in rows:
        fe = qp.exact_energy_ha
        print(f"{name:16s} {n2:4d} {(eg - fe) * 1e3:16.2f} {(ea - fe) * 1e3:17.2f}")


# ---- refusals ------------------------------------------------------------------------------


def test_unbound_circuit_is_refused() -> None:
    from qiskit import QuantumCircuit
    from qiskit.circuit import Parameter

    dev = toy_device(2)
    qc = QuantumCircuit(2)
    qc.rz(Parameter("a"), 0)
    with pytest.raises(InputError, match="unbound parameter"):
        emulate_circuit_bases(qc, dev.noise_model, ["ZZ"], layer=dev.layer)


@pytest.mark.parametrize("bases", [["ZZZ"], ["ZA"], []])
def test_bad_bases_are_refused(bases: list[str]) -> None:
    from qiskit import QuantumCircuit

    dev = toy_device(2)
    with pytest.raises(InputError, match="bases"):
        emulate_circuit_bases(QuantumCircuit(2), dev.noise_model, bases, layer=dev.layer)


def test_natives_that_cannot_change_basis_are_refused() -> None:
    from noiselab.emulate.channels import native_basis_change

    with pytest.raises(InputError, match="cannot express"):
        native_basis_change("X", ("rz", "x"))


# ---- noise model reuse -------------------------------------------------------------------------


def test_noise_model_built_once_per_profile_and_patch(
    h2: dict, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A variant's simulation and its calibration share one noise model; a scaled profile or
    another patch gets its own, and the shared one gives the same distributions as a fresh one."""
    import noiselab.device.noise as noise
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile, scale_profile
    from noiselab.emulate import device_inputs
    from noiselab.emulate.calibration import calibration_distributions

    prof = load_profile(DEVICES / "rustbucket-6.yaml")
    comp = compile_to_device(h2["bound"], prof)
    builds: list[tuple] = []
    original = noise.build_noise_model

    def counting(profile: object, patch: object, **kw: object) -> object:
        builds.append((profile, tuple(patch)))  # type: ignore[arg-type]
        return original(profile, patch, **kw)  # type: ignore[arg-type]

    monkeypatch.setattr(device_inputs, "build_noise_model", counting)
    monkeypatch.setattr(device_inputs, "_NOISE_MODELS", {})
    a = emulate_bases(comp, prof, ["ZZZZ", "XXYY"])
    calibration_distributions(prof, comp.patch, "per_qubit", measured=comp.logical_to_circuit)
    b = emulate_bases(comp, load_profile(DEVICES / "rustbucket-6.yaml"), ["ZZZZ", "XXYY"])
    assert len(builds) == 1
    emulate_bases(comp, scale_profile(prof, 2.0, ("two_qubit",)), ["ZZZZ"])
    assert len(builds) == 2
    np.testing.assert_array_equal(a.probs, b.probs)
    fresh = emulate_bases(comp, prof, ["ZZZZ", "XXYY"], noise_model=original(prof, comp.patch))
    # source: the same run with a freshly built qiskit-aer noise model (common practice)
    np.testing.assert_allclose(a.probs, fresh.probs, atol=1e-14)
