"""Monte Carlo wavefunction trajectories: pure-state kernel exactness, agreement with the density
matrix within the trajectory error bar, a 16-qubit run past the memory guard."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from helpers.toy import compile_toy, toy_circuit, toy_device
from qiskit import QuantumCircuit
from qiskit.circuit.library import SXGate
from qiskit.quantum_info import DensityMatrix, Kraus
from qiskit_aer.noise import NoiseModel, amplitude_damping_error
from qiskit_aer.noise.passes import LocalNoisePass

from noiselab.device.aer_adapter import add_noise_pass
from noiselab.emulate.channels import EffectCache
from noiselab.emulate.contract import dm_distributions, effect_rotation, sv_batch_mean_distributions
from noiselab.emulate.engine import basis_tables, emulate_bases, emulate_circuit_bases
from noiselab.emulate.memory import MEMORY_LIMIT_ENV
from noiselab.emulate.trajectory import trajectory_distributions, unravelled_circuit

DEVICES = Path(__file__).resolve().parents[1] / "configs" / "devices"


def _z_chain_and_x(n: int) -> list[tuple[float, str]]:
    """A transverse-field Ising chain, sum_i Z_i Z_{i+1} + 0.7 sum_i X_i (textbook model)."""
    terms = []
    for q in range(n - 1):
        lab = ["I"] * n
        lab[n - 1 - q] = lab[n - 2 - q] = "Z"
        terms.append((1.0, "".join(lab)))
    for q in range(n):
        lab = ["I"] * n
        lab[n - 1 - q] = "X"
        terms.append((0.7, "".join(lab)))
    return terms


def _energy(probs: np.ndarray, bases: list[str], terms: list[tuple[float, str]]) -> float:
    n = len(terms[0][1])
    idx = np.arange(2**n)
    total = 0.0
    for c, lab in terms:
        mask = sum(1 << q for q in range(n) if lab[n - 1 - q] != "I")
        signs = 1.0 - 2.0 * np.array([bin(int(m) & mask).count("1") % 2 for m in idx])
        total += c * float(probs[bases.index(lab.replace("I", "Z"))] @ signs)
    return total


def test_pure_state_kernel_equals_density_kernel() -> None:
    """Eigen-rotation + classical matrix on psi = effect contraction on |psi><psi| (exact)."""
    dev = toy_device(4)
    qubits = [3, 0, 2]  # circuit qubit 1 is not measured
    rng = np.random.default_rng(4)
    bases = ["".join(rng.choice(list("IXYZ"), 3)) for _ in range(12)]
    effects, keys = basis_tables(bases, qubits, EffectCache(dev.noise_model, 4, dev.layer))
    rotations = [[effect_rotation(e) for e in row] for row in effects]
    psis = rng.normal(size=(3, 16)) + 1j * rng.normal(size=(3, 16))
    psis /= np.linalg.norm(psis, axis=1, keepdims=True)
    rho = sum(np.outer(p, p.conj()) for p in psis) / 3
    np.testing.assert_allclose(
        sv_batch_mean_distributions(psis, qubits, rotations, keys),
        dm_distributions(rho, qubits, effects, keys),
        atol=1e-12,
    )


def test_trajectories_agree_with_density_matrix_on_six_qubits() -> None:
    from noiselab.chem.ansatz import layered_circuit, random_parameters
    from noiselab.device.compile import compile_to_device
    from noiselab.device.profile import load_profile, scale_profile

    prof = scale_profile(load_profile(DEVICES / "rustbucket-6.yaml"), 0.5)
    circ = layered_circuit(6, 2, entangler="cx")
    circ = circ.assign_parameters(random_parameters(circ, seed=2, scale=1.0))
    comp = compile_to_device(circ, prof)
    terms = _z_chain_and_x(6)
    bases = sorted({lab.replace("I", "Z") for _, lab in terms})
    exact = emulate_bases(comp, prof, bases, method="density_matrix")
    traj = emulate_bases(
        comp, prof, bases, method="trajectory", num_trajectories=240, num_batches=12, seed=5
    )
    assert traj.method == "trajectory" and traj.engine_calls == 12
    assert traj.trajectory_batches.shape == (12, len(bases), 64)
    for ideal in (True, False):
        p_exact = exact.probs_ideal if ideal else exact.probs
        p_traj = traj.probs_ideal if ideal else traj.probs
        e_exact = _energy(p_exact, bases, terms)
        e_traj = _energy(p_traj, bases, terms)
        std = traj.trajectory_std(lambda p: _energy(p, bases, terms), ideal=ideal)
        assert 0.0 < std < 0.2
        # common practice: an unbiased Monte Carlo mean lies within 3 standard errors
        print(f"\ntrajectory {e_traj:.4f} +- {std:.4f}, density matrix {e_exact:.4f}")
        assert abs(e_traj - e_exact) < 3 * std, (e_traj, e_exact, std)
    np.testing.assert_allclose(traj.probs.sum(axis=1), 1.0, atol=1e-12)


def test_sixteen_qubits_past_the_guard(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(MEMORY_LIMIT_ENV, str(2 * 2**30))
    dev = toy_device(16)
    qc = compile_toy(toy_circuit(16, layers=1), dev)
    bases = ["Z" * 16, "XY" * 8]
    out = emulate_circuit_bases(
        qc,
        dev.noise_model,
        bases,
        layer=dev.layer,
        readout_matrices=dev.readout,
        num_trajectories=24,
        num_batches=4,
        seed=1,
    )
    assert out.method == "trajectory"
    assert "16 qubits" in out.notice and "trajectories" in out.notice
    assert out.probs.shape == (2, 2**16)
    np.testing.assert_allclose(out.probs.sum(axis=1), 1.0, atol=1e-12)
    idx = np.arange(2**16)
    z0z1 = 1.0 - 2.0 * (((idx >> 0) ^ (idx >> 1)) & 1)
    std = out.trajectory_std(lambda p: float(p[0] @ z0z1))
    assert np.isfinite(std) and std > 0


def test_auto_uses_density_matrix_when_it_fits() -> None:
    dev = toy_device(3)
    qc = compile_toy(toy_circuit(3), dev)
    out = emulate_circuit_bases(qc, dev.noise_model, ["ZZZ", "XXX"], layer=dev.layer)
    assert out.method == "density_matrix" and out.notice is None and out.is_exact
    assert out.trajectory_std(lambda p: float(p[0, 0])) == 0.0


def test_trajectory_batch_options_are_checked() -> None:
    from noiselab.common.errors import InputError

    dev = toy_device(2)
    qc = compile_toy(toy_circuit(2), dev)
    with pytest.raises(InputError, match="at least 2 batches"):
        emulate_circuit_bases(
            qc,
            dev.noise_model,
            ["ZZ"],
            layer=dev.layer,
            method="trajectory",
            num_trajectories=10,
            num_batches=1,
        )


def test_gate_triggered_noise_pass_is_applied_without_delays() -> None:
    """A noise pass on a gate (not a delay) is written into a circuit that has no delays.

    The pass adds amplitude damping (probability 0.3) after every sx; the trajectory average must
    equal the channel applied to the density matrix by qiskit.quantum_info.
    """
    # source: qiskit.quantum_info (DensityMatrix evolved by the Kraus channel), independent of aer
    damp = amplitude_damping_error(0.3)
    nm = NoiseModel(basis_gates=["rz", "sx", "x", "cx"])
    add_noise_pass(nm, LocalNoisePass(lambda op, qubits: damp, op_types=SXGate, method="append"))
    qc = QuantumCircuit(1)
    qc.sx(0)
    qc.sx(0)  # sx.sx = x: |1> before damping
    noisy = unravelled_circuit(qc, nm)
    assert sum(inst.operation.name == "kraus" for inst in noisy.data) == 2

    rho = DensityMatrix.from_label("0")
    for _ in range(2):
        rho = rho.evolve(SXGate()).evolve(Kraus(damp.to_quantumchannel()))
    p1 = float(np.real(rho.data[1, 1]))
    z = [np.diag([1.0, 0.0]).astype(complex), np.diag([0.0, 1.0]).astype(complex)]
    out = trajectory_distributions(
        qc, nm, [0], [[np.array(z)]], [["Z"]], num_trajectories=4000, num_batches=4, seed=7
    )
    mean = out.mean(axis=0)[0]
    se = out[:, 0, 1].std(ddof=1) / 2.0
    assert abs(mean[1] - p1) < 5 * se + 1e-3
    assert p1 < 0.9  # the pass changed the outcome: without it P(1) would be 1
