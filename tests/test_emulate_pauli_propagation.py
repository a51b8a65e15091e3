"""Pauli propagation against outside references: qiskit.quantum_info statevectors and density
matrices, closed forms of Pauli fidelities, and its own truncation bound."""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.quantum_info import DensityMatrix, Kraus, Operator, SparsePauliOp, Statevector
from qiskit_aer.noise import depolarizing_error, thermal_relaxation_error

from noiselab.device.aer_adapter import gate_error, instruction_error, run_noise_passes
from noiselab.emulate.device_inputs import noise_model_for
from noiselab.emulate.pauli_circuit import circuit_program
from noiselab.emulate.pauli_propagation import (
    PauliDiagonal,
    Rotation,
    Truncation,
    apply_rotation,
    gate_rotations,
    pauli_matrix,
    propagate,
    terms_from_labels,
    twirled_fidelities,
)
from tests.helpers.twirl import explicit_twirl, twirled_study_reference

ROOT = Path(__file__).resolve().parents[1]


def _terms(op: SparsePauliOp):
    return terms_from_labels([p.to_label() for p in op.paulis], np.real(op.coeffs))


def _random_circuit(n: int, depth: int, rng: np.random.Generator) -> QuantumCircuit:
    qc = QuantumCircuit(n)
    for _ in range(depth):
        for q in range(n):
            name = rng.choice(["rz", "sx", "x", "h", "s", "ry", "rx", "sdg", "sxdg", "y", "z"])
            if name in ("rz", "ry", "rx"):
                getattr(qc, name)(float(rng.uniform(-np.pi, np.pi)), q)
            else:
                getattr(qc, name)(q)
        a, b = rng.choice(n, size=2, replace=False)
        two = rng.choice(["cz", "cx", "rzz"])
        if two == "rzz":
            qc.rzz(float(rng.uniform(-np.pi, np.pi)), int(a), int(b))
        else:
            getattr(qc, two)(int(a), int(b))
    return qc


def _noiseless_program(qc: QuantumCircuit):
    program = []
    for inst in qc.data:
        qubits = [qc.find_bit(b).index for b in inst.qubits]
        program += gate_rotations(inst.operation.name, inst.operation.params, qubits)
    return program


def _random_observable(n: int, k: int, rng: np.random.Generator) -> SparsePauliOp:
    labels = ["".join(rng.choice(list("IXYZ"), size=n)) for _ in range(k)]
    return SparsePauliOp(labels, rng.normal(size=k)).simplify()


def test_each_gate_is_its_unitary_up_to_phase() -> None:
    # source: qiskit.quantum_info.Operator of qiskit's own gates; U^dagger P U must equal the
    # rotations' Heisenberg image for every Pauli on the gate's qubits
    cases = [
        ("rz", [0.37], 1),
        ("rx", [-1.1], 1),
        ("ry", [2.2], 1),
        ("sx", [], 1),
        ("sxdg", [], 1),
        ("x", [], 1),
        ("y", [], 1),
        ("z", [], 1),
        ("s", [], 1),
        ("sdg", [], 1),
        ("h", [], 1),
        ("cz", [], 2),
        ("cx", [], 2),
        ("rzz", [0.8], 2),
    ]
    for name, params, k in cases:
        qc = QuantumCircuit(k)
        getattr(qc, name)(*params, *range(k))
        u = Operator(qc).data
        for label in itertools.product("IXYZ", repeat=k):
            label = "".join(label)
            exact = SparsePauliOp.from_operator(u.conj().T @ SparsePauliOp(label).to_matrix() @ u)
            # value on every computational basis state and on a random state is enough: compare
            # the full operator through expectation values on random states
            rng = np.random.default_rng(7)
            for _ in range(3):
                psi = rng.normal(size=2**k) + 1j * rng.normal(size=2**k)
                psi /= np.linalg.norm(psi)
                want = np.real(Statevector(psi).expectation_value(exact))
                # propagate the label through the gate, then evaluate on psi
                obs = _terms(SparsePauliOp(label))
                for rot in reversed(gate_rotations(name, params, range(k))):
                    obs = apply_rotation(obs, rot)
                got = sum(
                    c * np.real(Statevector(psi).expectation_value(_string_op(x, z, k)))
                    for x, z, c in zip(obs.x, obs.z, obs.coeff, strict=True)
                )
                assert got == pytest.approx(want, abs=1e-12), (name, label)


def _string_op(x: int, z: int, k: int) -> SparsePauliOp:
    label = "".join(
        {(0, 0): "I", (1, 0): "X", (0, 1): "Z", (1, 1): "Y"}[((int(x) >> q) & 1, (int(z) >> q) & 1)]
        for q in reversed(range(k))
    )
    return SparsePauliOp(label)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_noiseless_propagation_equals_the_statevector(seed: int) -> None:
    # source: qiskit.quantum_info.Statevector expectation values
    rng = np.random.default_rng(seed)
    n = 5
    qc = _random_circuit(n, 6, rng)
    op = _random_observable(n, 12, rng)
    want = float(np.real(Statevector(qc).expectation_value(op)))
    got = propagate(_terms(op), _noiseless_program(qc))
    assert got.value == pytest.approx(want, abs=1e-10)
    assert got.truncation_bound == 0.0


def test_pauli_matrix_convention_is_hermitian_y() -> None:
    # source: textbook Pauli matrices (Nielsen and Chuang eq. 2.29-2.31); index x + 2 z
    assert np.allclose(pauli_matrix(1, 1), [[0, 1], [1, 0]])
    assert np.allclose(pauli_matrix(2, 1), [[1, 0], [0, -1]])
    assert np.allclose(pauli_matrix(3, 1), [[0, -1j], [1j, 0]])
    # qubit 0 is the least significant tensor factor (qiskit's order): X on qubit 0 of 2
    assert np.allclose(pauli_matrix(1, 2), SparsePauliOp("IX").to_matrix())


def test_twirled_fidelities_closed_forms() -> None:
    # source: Nielsen and Chuang sec. 8.3.4: the depolarizing channel (1-p) rho + p I/2 scales
    # X, Y, Z by 1 - p; sec. 8.3.5-8.3.6 with T1/T2: X and Y decay as exp(-t/T2), Z as
    # exp(-t/T1) once the non-unital part is twirled away
    p = 0.03
    kraus = Kraus(depolarizing_error(p, 1).to_quantumchannel()).data
    f = twirled_fidelities(kraus, 1)
    assert f == pytest.approx([1.0, 1 - p, 1 - p, 1 - p], abs=1e-12)
    t1, t2, t = 50e-6, 30e-6, 2e-6
    kraus = Kraus(thermal_relaxation_error(t1, t2, t).to_quantumchannel()).data
    f = twirled_fidelities(kraus, 1)
    e2, e1 = np.exp(-t / t2), np.exp(-t / t1)
    assert f == pytest.approx([1.0, e2, e1, e2], abs=1e-12)  # I, X, Z, Y (index x + 2 z)


def test_twirled_device_noise_equals_density_matrix_of_the_twirled_channels() -> None:
    # outside reference: qiskit.quantum_info.DensityMatrix evolved through the compiled circuit,
    # every gate's device channel and every idle relaxation replaced by its explicit Pauli twirl
    # (Wallman and Emerson 2016); noiselab's fidelity tables are not used on that side
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    study = load_study(ROOT / "configs" / "studies" / "h2-equilibrium.yaml")
    ctx = build_context(study)
    compiled = ctx.compiled
    nm = noise_model_for(study.profile, compiled.patch)
    qc = run_noise_passes(compiled.circuit, nm)
    n = qc.num_qubits
    rho = DensityMatrix.from_label("0" * n)
    for inst in qc.data:
        op = inst.operation
        qubits = [qc.find_bit(b).index for b in inst.qubits]
        if op.name in ("delay", "barrier"):
            continue
        if op.name == "quantum_channel":
            k = Kraus(instruction_error(op).to_quantumchannel())
            rho = rho.evolve(explicit_twirl(k.data, len(qubits)), qubits)
            continue
        rho = rho.evolve(Operator(op), qubits)
        err = gate_error(nm, op.name, tuple(qubits))
        if err is not None:
            k = Kraus(err.to_quantumchannel())
            rho = rho.evolve(explicit_twirl(k.data, len(qubits)), qubits)
    # the Hamiltonian on the circuit's qubits (logical l sits at circuit position l2c[l])
    h = ctx.qubit_problem.hamiltonian
    labels = []
    for p in h.paulis:
        logical = p.to_label()[::-1]
        chars = ["I"] * n
        for lq, ch in enumerate(logical):
            chars[compiled.logical_to_circuit[lq]] = ch
        labels.append("".join(reversed(chars)))
    op = SparsePauliOp(labels, np.real(h.coeffs))
    want = float(np.real(rho.expectation_value(op)))
    got = propagate(_terms(op), circuit_program(compiled.circuit, nm))
    assert got.value == pytest.approx(want, abs=1e-10)
    # and the noise is not nothing: the twirled value is off the noiseless one
    assert abs(want - ctx.optimum.energy_ha) > 1e-3


def test_truncation_error_is_within_the_reported_bound() -> None:
    # the bound is a sum of dropped |c| (module docstring); checked against the untruncated
    # propagation of the same noisy circuit
    rng = np.random.default_rng(11)
    n = 6
    qc = _random_circuit(n, 8, rng)
    op = _random_observable(n, 20, rng)
    program = _noiseless_program(qc)
    # a uniform depolarizing channel after every gate on its qubits (Pauli fidelity 1 - p)
    noisy = []
    for inst in program:
        noisy.append(inst)
        if isinstance(inst, Rotation):
            for q in range(n):
                if (inst.x | inst.z) >> q & 1:
                    noisy.append(PauliDiagonal((q,), np.array([1.0, 0.98, 0.98, 0.98])))
    exact = propagate(_terms(op), noisy)
    for threshold in (1e-4, 1e-3, 1e-2):
        cut = propagate(_terms(op), noisy, Truncation(min_abs_coeff=threshold))
        assert abs(cut.value - exact.value) <= cut.truncation_bound + 1e-12
        assert cut.peak_strings <= exact.peak_strings


def test_grouped_energy_and_variance_equal_the_density_matrix_engine() -> None:
    # outside reference: qiskit-aer's density-matrix simulation (through noiselab's engine, which
    # adds the basis layer and the per-qubit readout to aer's state) of the same twirled noise;
    # each group's estimator mean and single-shot variance from the exact distributions
    from noiselab.emulate.pauli_circuit import pauli_energy

    ref = twirled_study_reference(ROOT / "configs" / "studies" / "h2-equilibrium.yaml")
    plan = ref.plan
    want_means = [float(ref.probs[i] @ g.weights) for i, g in enumerate(plan.groups)]
    want_vars = [
        float(ref.probs[i] @ g.weights**2) - want_means[i] ** 2 for i, g in enumerate(plan.groups)
    ]
    got = pauli_energy(
        ref.circuit,
        ref.model,
        ref.groups,
        ref.logical_to_circuit,
        ref.layer,
        ref.readout,
        constant_ha=plan.constant,
    )
    assert got.group_energy_ha == pytest.approx(want_means, abs=1e-10)
    assert got.group_variance_ha2 == pytest.approx(want_vars, abs=1e-10)
    assert got.energy_ha == pytest.approx(plan.constant + sum(want_means), abs=1e-10)


@pytest.mark.parametrize("wide", [False, True])
def test_merge_sums_equal_strings_of_each_tag(wide: bool) -> None:
    # reference: a plain dictionary keyed by (tag, x, z); wide strings (40 qubits) cannot share
    # one 64-bit key with their tag and take the other sort
    from noiselab.emulate.pauli_propagation import PauliTerms, merge

    rng = np.random.default_rng(7)
    bits = 40 if wide else 6
    n = 3000
    x = rng.integers(0, 4, n).astype(np.uint64) << np.uint64(bits - 2)
    z = rng.integers(0, 8, n).astype(np.uint64)
    tag = rng.integers(0, 5, n).astype(np.int64)
    coeff = rng.normal(size=n)
    want: dict[tuple[int, int, int], float] = {}
    for t, a, b, c in zip(tag, x, z, coeff, strict=True):
        want[(int(t), int(a), int(b))] = want.get((int(t), int(a), int(b)), 0.0) + float(c)
    got = merge(PauliTerms(x, z, coeff, tag))
    keys = list(zip(got.tag.tolist(), got.x.tolist(), got.z.tolist(), strict=True))
    assert len(keys) == len(set(keys)) == len(want)
    for k, c in zip(keys, got.coeff, strict=True):
        assert c == pytest.approx(want[k], abs=1e-12)
    assert keys == sorted(keys)  # by tag, then x, then z


def test_russian_roulette_truncation_is_unbiased() -> None:
    # reference: the untruncated propagation; a term below the cut survives with probability
    # |c| / cut as sign(c) * cut (Russian roulette, e.g. Kahn 1956 / Spanier and Gelbard 1969,
    # from memory), so the mean over independent draws equals the exact value within its
    # standard error even at a cut that drops most terms
    from noiselab.emulate.pauli_propagation import Truncation, propagate

    rng = np.random.default_rng(3)
    n = 5
    qc = QuantumCircuit(n)
    for _ in range(4):
        for q in range(n):
            qc.ry(float(rng.uniform(-1, 1)), q)
            qc.rz(float(rng.uniform(-1, 1)), q)
        for q in range(n - 1):
            qc.cx(q, q + 1)
    program = circuit_program(qc, None)
    obs = terms_from_labels(["ZZIII", "IXIXI", "YIIIZ"], [0.7, -0.4, 0.3])
    exact = propagate(obs, program).value
    cut = 0.05
    rule = Truncation(min_abs_coeff=cut)
    assert abs(propagate(obs, program, rule).value - exact) > 0.01  # plain dropping is off
    values = []
    for seed in range(300):
        draws = np.random.default_rng(seed)
        got = propagate(obs, program, rule, roulette=lambda step, t, d=draws: d.random(len(t)))
        assert got.truncation_bound == 0.0  # nothing dropped for good, nothing to bound
        values.append(got.value)
    sem = float(np.std(values, ddof=1)) / np.sqrt(len(values))
    assert sem > 0
    assert abs(float(np.mean(values)) - exact) <= 3 * sem


def test_no_measured_group_gives_the_constant() -> None:
    # a Hamiltonian that is only a constant: its energy is that constant (definition)
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.emulate.pauli_truncation import Sampling

    got = pauli_energy(QuantumCircuit(2), None, [], [0, 1], None, None, constant_ha=-1.5,
                       sampling=Sampling(seed=1))  # fmt: skip
    assert got.energy_ha == -1.5 and got.truncation_std_ha == 0.0 and got.group_energy_ha == ()
