"""The truncation-error estimate of Pauli propagation (noiselab.emulate.pauli_truncation)
against the untruncated propagation and against qiskit-aer's density matrix of the same
twirled noise."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from qiskit import QuantumCircuit

from noiselab.emulate.pauli_propagation import (
    PauliDiagonal,
    Rotation,
    Truncation,
    gate_rotations,
    propagate,
    terms_from_labels,
)
from noiselab.emulate.pauli_truncation import Sampling, propagate_estimated
from tests.helpers.twirl import twirled_study_reference

ROOT = Path(__file__).resolve().parents[1]


def _noisy_program(n: int, depth: int, seed: int, angle: float = np.pi) -> list:
    """Random rotations and CZs, each followed by a depolarizing channel on its qubits
    (Pauli fidelity 0.98: textbook depolarizing, common practice, no source)."""
    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(n)
    for _ in range(depth):
        for q in range(n):
            getattr(qc, str(rng.choice(["rx", "ry", "rz"])))(float(rng.uniform(-angle, angle)), q)
        for q in range(int(rng.integers(0, 2)), n - 1, 2):
            qc.cz(q, q + 1)
    program = []
    for inst in qc.data:
        qubits = [qc.find_bit(b).index for b in inst.qubits]
        for rot in gate_rotations(inst.operation.name, inst.operation.params, qubits):
            program.append(rot)
            for q in qubits:
                program.append(PauliDiagonal((q,), np.array([1.0, 0.98, 0.98, 0.98])))
    assert any(isinstance(i, Rotation) for i in program)
    return program


def _observable(n: int, seed: int, small_z: int = 0):
    """12 random strings (normal coefficients; scale 0.1 with ``small_z``), and ``small_z``
    Z-type strings of coefficient 1e-3 (dropped at once by a coarser threshold; near +1 after
    small angles: a truncation error well above the estimate's spread)."""
    rng = np.random.default_rng(seed)
    labels = ["".join(rng.choice(list("IXYZ"), size=n)) for _ in range(12)]
    coeffs = list(rng.normal(scale=0.1 if small_z else 1.0, size=12))
    for _ in range(small_z):
        labels.append("".join(rng.choice(list("IZ"), size=n)))
        coeffs.append(1e-3)
    return terms_from_labels(labels, coeffs)


def test_monte_carlo_part_is_unbiased_and_its_error_bar_matches_its_spread() -> None:
    # reference: the untruncated propagation of the same program (itself equal to qiskit's
    # DensityMatrix, tests/test_emulate_pauli_propagation.py); Horvitz-Thompson estimation
    # (Horvitz and Thompson 1952) is unbiased, so over many seeds the mean estimate equals the
    # true truncation error within its standard error, and the reported per-seed standard error
    # matches the spread of the estimates (loose factor-2 window: 40 seeds, common practice)
    n = 6
    program = _noisy_program(n, 6, seed=3, angle=0.3)
    obs = _observable(n, seed=4, small_z=40)
    exact = propagate(obs, program).value
    rule = Truncation(min_abs_coeff=3e-3)
    estimates, stds = [], []
    for seed in range(40):
        main, est = propagate_estimated(
            obs, program, rule, Sampling(seed=seed, samples=64, keep_factor=1.0, refine=1e-3)
        )
        estimates.append(float(est.estimate[0]))
        stds.append(float(est.std[0]))
        assert est.kept > 0
    true_error = exact - main.value
    assert abs(true_error) <= main.truncation_bound
    spread = float(np.std(estimates, ddof=1))
    sem = spread / np.sqrt(len(estimates))
    assert abs(true_error) > 5 * sem  # the test can see a bias of a third of the error
    assert abs(np.mean(estimates) - true_error) <= 3 * sem
    assert 0.5 < float(np.sqrt(np.mean(np.square(stds)))) / spread < 2.0


def test_the_draws_do_not_depend_on_how_observables_are_grouped() -> None:
    # the random numbers hash (seed, tag, step, string): one observable propagated alone gives
    # the same estimate as inside a joint run with another (what a worker task relies on)
    n = 5
    program = _noisy_program(n, 5, seed=8)
    a, b = _observable(n, seed=1), _observable(n, seed=2)
    b_tagged = type(b)(b.x, b.z, b.coeff, np.ones(len(b), dtype=np.int64))
    joint = type(a).join([a, b_tagged])
    rule, sampling = Truncation(min_abs_coeff=2e-3), Sampling(seed=5, samples=50)
    m_joint, e_joint = propagate_estimated(joint, program, rule, sampling)
    m_b, e_b = propagate_estimated(b_tagged, program, rule, sampling)
    assert m_b.values[1] == pytest.approx(m_joint.values[1], abs=1e-14)
    assert e_b.estimate[1] == pytest.approx(e_joint.estimate[1], abs=1e-14)
    assert e_b.std[1] == pytest.approx(e_joint.std[1], abs=1e-14)
    assert e_b.std[1] > 0


def test_estimate_agrees_with_the_density_matrix_at_8_qubits() -> None:
    # outside reference: qiskit-aer's density matrix (noiselab's engine adds the basis layer and
    # the per-qubit readout) of the explicitly twirled noise (tests/helpers/twirl.py), on the
    # 8-qubit benchmark study; the truncated energy plus the estimate must meet it within 3
    # standard errors, the estimate must be within 10x of the true difference, the rigorous
    # bound must hold (it is far looser), and the reported limit |estimate| + 3 s.e. must hold
    # and be loose by less than 10x
    from noiselab.emulate.pauli_circuit import pauli_energy
    from noiselab.emulate.pauli_truncation import truncation_limit

    ref = twirled_study_reference(ROOT / "benchmarks" / "studies" / "hchain-8.yaml")
    plan = ref.plan
    want = plan.constant + sum(float(ref.probs[i] @ g.weights) for i, g in enumerate(plan.groups))
    for threshold in (1e-3, 1e-4, 1e-5):
        got = pauli_energy(
            ref.circuit,
            ref.model,
            ref.groups,
            ref.logical_to_circuit,
            ref.layer,
            ref.readout,
            Truncation(min_abs_coeff=threshold),
            constant_ha=plan.constant,
            sampling=Sampling(seed=ref.seed),
        )
        true_error = want - got.energy_ha
        est, std = got.truncation_estimate_ha, got.truncation_std_ha
        assert est is not None and std is not None
        assert abs(true_error) > 1e-5  # far above rounding: the truncation matters here
        assert abs(true_error) <= got.truncation_bound_ha
        assert abs(true_error - est) <= 3 * std
        assert 0.1 <= abs(est) / abs(true_error) <= 10.0
        assert std < abs(true_error)
        assert got.truncation_bound_ha > 100 * abs(est)  # why the estimate is needed
        limit = truncation_limit(est, std)
        assert abs(true_error) <= limit <= 10 * abs(true_error)
