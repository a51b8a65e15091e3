"""Readout assignment error and readout-calibration distributions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from noiselab.common.errors import InputError
from noiselab.emulate.calibration import calibration_distributions, calibration_states
from noiselab.emulate.readout import apply_readout, assignment_matrix

DEVICES = Path(__file__).resolve().parents[1] / "configs" / "devices"


def test_known_state_by_hand() -> None:
    """Prepared |q1 q0> = |1 0>: P(read b1 b0) = P(b1 | 1) P(b0 | 0), written out by hand."""
    e10_q0, e01_q0 = 0.02, 0.05  # P(1|0), P(0|1) of qubit 0
    e10_q1, e01_q1 = 0.03, 0.07
    true = np.zeros(4)
    true[0b10] = 1.0
    out = apply_readout(
        true, [assignment_matrix(e10_q0, e01_q0), assignment_matrix(e10_q1, e01_q1)]
    )
    # common practice / REFERENCES.md readout: independent flips; entry k has bit_q = (k >> q) & 1
    expected = {
        0b00: e01_q1 * (1 - e10_q0),  # q1 read 0 (flip from 1), q0 read 0 (no flip)
        0b01: e01_q1 * e10_q0,
        0b10: (1 - e01_q1) * (1 - e10_q0),
        0b11: (1 - e01_q1) * e10_q0,
    }
    for k, v in expected.items():
        assert out[k] == pytest.approx(v, abs=1e-15)


def test_joint_flip_by_hand() -> None:
    """A joint flip c on pair (0, 1) after perfect per-qubit readout: |00> -> 1-c on 00, c on 11."""
    c = 0.1
    true = np.zeros(8)
    true[0b100] = 1.0  # qubit 2 in 1, qubits 0 and 1 in 0
    ident = np.eye(2)
    out = apply_readout(true, [ident, ident, ident], [(0, 1, c)])
    # from memory (device profile docstring): both bits of the pair flip together with prob c
    assert out[0b100] == pytest.approx(1 - c)
    assert out[0b111] == pytest.approx(c)
    assert out.sum() == pytest.approx(1.0)


def test_tensor_application_equals_kronecker_matrix() -> None:
    rng = np.random.default_rng(5)
    n = 5
    mats = [assignment_matrix(*rng.uniform(0, 0.2, 2)) for _ in range(n)]
    p = rng.dirichlet(np.ones(2**n), size=3)
    # source: REFERENCES.md, multi-qubit map A_{n-1} x ... x A_0 (numpy.kron, qubit 0 last)
    big = np.ones((1, 1))
    for a in mats:
        big = np.kron(a, big)
    np.testing.assert_allclose(apply_readout(p, mats), p @ big.T, atol=1e-14)


def test_crosstalk_equals_device_dense_reference() -> None:
    """Against the device layer's dense transfer matrix (its own implementation)."""
    from noiselab.device.noise import readout_transfer_matrix
    from noiselab.device.profile import load_profile
    from noiselab.emulate.device_inputs import logical_readout

    prof = load_profile(DEVICES / "rustbucket-6.yaml")
    patch = (0, 1, 2, 3, 4, 5)
    mats, terms = logical_readout(prof, patch, list(range(6)))
    assert len(terms) == 3
    p = np.random.default_rng(1).dirichlet(np.ones(64))
    np.testing.assert_allclose(
        apply_readout(p, mats, terms), readout_transfer_matrix(prof, patch) @ p, atol=1e-14
    )


def test_many_qubits_without_dense_matrix() -> None:
    """16 qubits: one-qubit marginals transform as A_q @ marginal (linearity, from memory)."""
    rng = np.random.default_rng(2)
    n = 16
    mats = [assignment_matrix(*rng.uniform(0, 0.1, 2)) for _ in range(n)]
    p = rng.dirichlet(np.ones(2**n))
    out = apply_readout(p, mats)
    x, y = p.reshape((2,) * n), out.reshape((2,) * n)
    for q in (0, 7, 15):
        axis = n - 1 - q
        others = tuple(a for a in range(n) if a != axis)
        np.testing.assert_allclose(y.sum(axis=others), mats[q] @ x.sum(axis=others), atol=1e-12)
    assert out.sum() == pytest.approx(1.0)


def test_bad_readout_input() -> None:
    with pytest.raises(InputError, match="power of 2"):
        apply_readout(np.ones(3) / 3, [np.eye(2)] * 2)
    with pytest.raises(InputError, match="one per qubit"):
        apply_readout(np.ones(4) / 4, [np.eye(2)])
    with pytest.raises(InputError, match="crosstalk pair"):
        apply_readout(np.ones(4) / 4, [np.eye(2)] * 2, [(0, 0, 0.1)])


# ---- calibration -------------------------------------------------------------------------------


def test_calibration_without_gate_noise_is_the_assignment_columns() -> None:
    """Perfect X gates and no relaxation: calibration rows are products of A's columns."""
    from noiselab.device.profile import load_profile, scale_profile

    prof = load_profile(DEVICES / "rustbucket-6.yaml")
    quiet = scale_profile(
        prof, 0.0, channels=["relaxation", "single_qubit", "two_qubit", "coherent"]
    )
    patch = (2, 3, 4)
    cal = calibration_distributions(quiet, patch, "full")
    assert cal.probs.shape == (8, 8)
    a = []
    for q in patch:
        qp = prof.qubit(q)
        a.append(assignment_matrix(qp.flip_0to1, qp.flip_1to0))
    for s in range(8):
        # source: REFERENCES.md readout; pair (2, 3) joint flip added by hand (profile docstring)
        col = np.kron(a[2][:, (s >> 2) & 1], np.kron(a[1][:, (s >> 1) & 1], a[0][:, s & 1]))
        c = prof.joint_flip(2, 3)
        idx = np.arange(8)
        expected = (1 - c) * col + c * col[idx ^ 0b011]
        np.testing.assert_allclose(cal.row(s), expected, atol=1e-14)


def test_calibration_prep_noise_against_quantum_info() -> None:
    """All-ones calibration with noisy X: qiskit.quantum_info evolution of |0> through x and the
    device's x channel, then the readout matrices; qubits in 0 for the all-zeros state stay."""
    from qiskit.circuit.library import XGate
    from qiskit.quantum_info import DensityMatrix, Operator, SuperOp

    from noiselab.device.noise import gate_channel
    from noiselab.device.profile import load_profile

    prof = load_profile(DEVICES / "rustbucket-6.yaml")
    patch = (0, 1)
    cal = calibration_distributions(prof, patch, "per_qubit")
    assert cal.states == (0, 3)
    pops = []
    for q in patch:
        rho = DensityMatrix.from_label("0").evolve(Operator(XGate()))
        rho = rho.evolve(SuperOp(gate_channel(prof, "x", (q,)).to_quantumchannel()))
        pops.append(rho.probabilities())
    ideal = np.kron(pops[1], pops[0])
    np.testing.assert_allclose(cal.probs_ideal[1], ideal, atol=1e-12)
    assert cal.probs_ideal[1][3] < 1.0  # the state-preparation error is visible
    np.testing.assert_allclose(cal.probs_ideal[0], [1, 0, 0, 0], atol=1e-12)  # relax to |0>
    a0 = assignment_matrix(prof.qubit(0).flip_0to1, prof.qubit(0).flip_1to0)
    a1 = assignment_matrix(prof.qubit(1).flip_0to1, prof.qubit(1).flip_1to0)
    c = prof.joint_flip(0, 1)
    noisy = np.kron(a1, a0) @ ideal
    expected = (1 - c) * noisy + c * noisy[np.arange(4) ^ 3]
    np.testing.assert_allclose(cal.probs[1], expected, atol=1e-12)


def test_calibration_logical_order_follows_measured() -> None:
    from noiselab.device.profile import load_profile

    prof = load_profile(DEVICES / "tallowtrap-8.yaml")
    patch = (1, 2, 3)
    direct = calibration_distributions(prof, patch, "single")
    swapped = calibration_distributions(prof, patch, "single", measured=[2, 0, 1])
    # logical qubit 0 of `swapped` is position 2: its single-qubit state 1<<0 matches 1<<2 directly
    perm = [2, 0, 1]
    for l in range(3):
        a = swapped.row(1 << l).reshape(2, 2, 2)
        b = direct.row(1 << perm[l]).reshape(2, 2, 2)
        # axes: (bit2, bit1, bit0); logical l <-> position perm[l]
        b_logical = np.transpose(b, [2 - perm[2 - ax] for ax in range(3)])
        np.testing.assert_allclose(a, b_logical, atol=1e-14)


def test_calibration_state_sets() -> None:
    assert calibration_states("single", 3) == (0, 1, 2, 4)
    assert calibration_states(["101", 2], 3) == (5, 2)
    assert len(calibration_states("full", 4)) == 16
    with pytest.raises(InputError, match="at most"):
        calibration_states("full", 11)
    with pytest.raises(InputError, match="allowed"):
        calibration_states("everything", 3)
    with pytest.raises(InputError, match="0/1"):
        calibration_states(["12"], 2)


def test_calibration_rows_are_distributions() -> None:
    from noiselab.device.profile import load_profile

    prof = load_profile(DEVICES / "amberline-10.yaml")
    cal = calibration_distributions(prof, (0, 1, 2, 3), "full")
    np.testing.assert_allclose(cal.probs.sum(axis=1), 1.0, atol=1e-13)
    assert (cal.probs >= 0).all()
    # each prepared state is the most likely outcome of its own row (readout errors < 50 %)
    assert all(int(np.argmax(cal.row(s))) == s for s in cal.states)
