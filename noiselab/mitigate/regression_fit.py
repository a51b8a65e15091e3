"""The numerics of Clifford data regression (``passes/clifford_regression.py``): noiseless
values of a compiled circuit (statevector), the least-squares fit with its gradient, and the
fit's mean and spread under shot noise (deterministic quadrature). Energies in Ha.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from qiskit import QuantumCircuit
from qiskit.quantum_info import Statevector
from scipy.special import ndtri
from scipy.stats import qmc

#: Points (a power of 2) and seed of the quadrature over the training shots' noise.
QUADRATURE_POINTS = 2048
QUADRATURE_SEED = 20211


def _bare(compiled: Any) -> Statevector:
    """Noiseless state of a compiled circuit (delays and barriers dropped)."""
    circuit = compiled.circuit
    bare = QuantumCircuit(circuit.num_qubits)
    for inst in circuit.data:
        if inst.operation.name not in ("delay", "barrier"):
            bare.append(inst.operation, [circuit.find_bit(q).index for q in inst.qubits])
    return Statevector(bare)


def exact_energy_ha(compiled: Any, hamiltonian: Any) -> float:
    """Noiseless <H> (Ha) of a compiled circuit, the logical Hamiltonian placed on the circuit
    qubits of ``compiled.logical_to_circuit``."""
    op = hamiltonian.apply_layout(list(compiled.logical_to_circuit), compiled.circuit.num_qubits)
    return float(np.real(_bare(compiled).expectation_value(op)))


def noiseless_distributions(compiled: Any, bases: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Noiseless outcome distributions over the logical qubits (logical qubit q is bit q) in each
    basis (qiskit's label order; X measured after H, Y after S^dag then H)."""
    state = _bare(compiled)
    width = compiled.circuit.num_qubits
    l2c = list(compiled.logical_to_circuit)
    out = {}
    for basis in bases:
        rot = QuantumCircuit(width)
        for q, letter in enumerate(reversed(basis)):
            if letter == "Y":
                rot.sdg(l2c[q])
            if letter in "XY":
                rot.h(l2c[q])
        out[basis] = np.asarray(state.evolve(rot).probabilities(qargs=l2c), dtype=float)
    return out


def fit_and_gradient(
    x: np.ndarray, y: np.ndarray, target: np.ndarray, anchor: float | None = None
) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
    """Least squares y ~ b + x @ a, evaluated at ``target``; with ``anchor`` c the line is held
    through (c, ..., c): y - c ~ (x - c) @ a, i.e. b = c (1 - sum a).

    ``x``: (m, L) noisy training energies, ``y``: (m,) exact ones, ``target``: (L,). Returns
    (fitted value f, coefficients (b, a...), df/dx (m, L), df/dtarget (L,)). With design
    X = [1, x] (or x - c), beta = (X^T X)^-1 X^T y and phi = [1, target] (or target - c):
    f = phi . beta, df/dX_ij = g_j r_i - (X g)_i beta_j with g = (X^T X)^-1 phi and
    r = y - X beta.
    """
    m = x.shape[0]
    if anchor is None:
        design = np.hstack([np.ones((m, 1)), x])
        phi = np.concatenate([[1.0], target])
        rhs, offset = y, 0.0
    else:
        design, phi, rhs, offset = x - anchor, target - anchor, y - anchor, anchor
    gram = design.T @ design
    beta = np.linalg.solve(gram, design.T @ rhs)
    g = np.linalg.solve(gram, phi)
    resid = rhs - design @ beta
    grad = np.outer(resid, g) - np.outer(design @ g, beta)
    if anchor is None:
        return float(phi @ beta), beta, grad[:, 1:], beta[1:].copy()
    coeffs = np.concatenate([[anchor * (1.0 - beta.sum())], beta])
    return float(offset + phi @ beta), coeffs, grad, beta.copy()


def _fit_values(
    x: np.ndarray, y: np.ndarray, target: np.ndarray, anchor: float | None
) -> np.ndarray:
    """Fitted values (``fit_and_gradient``'s f) for a batch: ``x`` (N, m, L), ``target`` (N, L)."""
    n, m, _ = x.shape
    if anchor is None:
        design = np.concatenate([np.ones((n, m, 1)), x], axis=2)
        phi = np.concatenate([np.ones((n, 1)), target], axis=1)
        rhs, offset = y, 0.0
    else:
        design, phi, rhs, offset = x - anchor, target - anchor, y - anchor, anchor
    gram = np.einsum("nmi,nmj->nij", design, design)
    beta = np.linalg.solve(gram, np.einsum("nmi,m->ni", design, rhs)[..., None])[..., 0]
    return offset + np.einsum("ni,ni->n", phi, beta)


def fit_under_shot_noise(
    sets: list[tuple[np.ndarray, np.ndarray, np.ndarray]],
    target: np.ndarray,
    target_std: np.ndarray,
    anchor: float | None,
) -> tuple[float, float]:
    """(mean, variance) of the mean over training sets of the fitted values when every noisy
    energy carries its shot noise (Ha, Ha^2): a quadrature over Gaussian errors on scrambled
    Sobol points (:data:`QUADRATURE_POINTS`, fixed seed: deterministic). ``sets``: per set
    (x (m, L), y (m,), std of x (m, L)); ``target`` (L,) and its std, shared by the sets."""
    dims = target.size + sum(x.size for x, _, _ in sets)
    points = qmc.Sobol(dims, scramble=True, seed=QUADRATURE_SEED).random(QUADRATURE_POINTS)
    z = ndtri(np.clip(points, 1e-12, 1.0 - 1e-12))
    t = target[None, :] + z[:, : target.size] * target_std[None, :]
    total = np.zeros(QUADRATURE_POINTS)
    at = target.size
    for x, y, sd in sets:
        dx = z[:, at : at + x.size].reshape(QUADRATURE_POINTS, *x.shape) * sd[None]
        total += _fit_values(x[None] + dx, y, t, anchor)
        at += x.size
    total /= len(sets)
    return float(total.mean()), float(total.var(ddof=1))
