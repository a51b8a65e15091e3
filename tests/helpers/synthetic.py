"""Synthetic measurement data through the BasisDistributions contract (tests, examples).

Distributions are computed directly with ``qiskit.quantum_info``: rotate a DensityMatrix into each
basis and read its diagonal; readout error is the tensor product of per-qubit assignment matrices
(optionally a full 2**n matrix for correlated errors).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from qiskit.quantum_info import DensityMatrix, Statevector

from noiselab.mitigate.variants import CircuitVariant


@dataclass(frozen=True)
class SyntheticDistributions:
    """Same fields as ``noiselab.emulate.engine.BasisDistributions`` (exact method)."""

    bases: tuple[str, ...]
    probs_ideal: np.ndarray
    probs: np.ndarray
    num_qubits: int
    engine_seconds: float = 0.0
    engine_calls: int = 1
    method: str = "synthetic"


def rotation_circuit(basis: str) -> QuantumCircuit:
    """Rotation after which a Z measurement of qubit q measures the basis letter of q."""
    n = len(basis)
    qc = QuantumCircuit(n)
    for q in range(n):
        ch = basis[n - 1 - q]
        if ch == "X":
            qc.h(q)
        elif ch == "Y":
            qc.sdg(q)
            qc.h(q)
    return qc


def basis_distributions(rho: DensityMatrix, bases: Sequence[str]) -> np.ndarray:
    """(n_bases, 2**n) outcome distributions of ``rho`` measured in each basis."""
    return np.array([rho.evolve(rotation_circuit(b)).probabilities() for b in bases])


def full_readout_matrix(mats: Sequence[np.ndarray]) -> np.ndarray:
    """A_{n-1} x ... x A_0 (mats[q] acts on qubit q)."""
    out = np.ones((1, 1))
    for a in mats:
        out = np.kron(np.asarray(a, dtype=float), out)
    return out


def assignment_matrix(flip_0to1: float, flip_1to0: float) -> np.ndarray:
    """[[1 - P(1|0), P(0|1)], [P(1|0), 1 - P(0|1)]] (columns: prepared state)."""
    return np.array([[1 - flip_0to1, flip_1to0], [flip_0to1, 1 - flip_1to0]])


def depolarized(state: Statevector | DensityMatrix, p: float) -> DensityMatrix:
    """(1 - p) rho + p I / d."""
    rho = DensityMatrix(state)
    d = rho.dim
    return DensityMatrix((1 - p) * rho.data + p * np.eye(d) / d)


def make_synthetic_runner(
    state_of: Callable[[CircuitVariant], DensityMatrix],
    bases: Sequence[str],
    readout: np.ndarray | None = None,
) -> Callable[[CircuitVariant], SyntheticDistributions]:
    """Runner whose state for a variant is ``state_of(variant)``; ``readout``: full 2**n matrix."""
    memo: dict[CircuitVariant, SyntheticDistributions] = {}

    def runner(variant: CircuitVariant) -> SyntheticDistributions:
        if variant not in memo:
            rho = state_of(variant)
            ideal = basis_distributions(rho, bases)
            probs = ideal if readout is None else ideal @ np.asarray(readout).T
            memo[variant] = SyntheticDistributions(tuple(bases), ideal, probs, rho.num_qubits)
        return memo[variant]

    return runner


def make_synthetic_calibrator(readout: np.ndarray | None, num_qubits: int):
    """Calibrator returning column j of the readout matrix for prepared state j (exact)."""
    a = np.eye(2**num_qubits) if readout is None else np.asarray(readout, dtype=float)

    def calibrator(variant: CircuitVariant, states: tuple[int, ...]) -> np.ndarray:
        return np.array([a[:, s] for s in states])

    return calibrator
