"""Exact ground energy of a qubit Hamiltonian in the molecule's (N, Sz) sector.

The number and Sz operators are sums of Z strings in every encoding here (also after the two-qubit
reduction), so they are diagonal in the computational basis: their eigenvalue on basis state k
(bit q = qubit q) is computed directly, and the Hamiltonian is diagonalized on the basis states of
the right sector only (ground energy of the unrestricted qubit Hamiltonian may belong to another
charge or spin state).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla
from qiskit.quantum_info import SparsePauliOp

from noiselab.chem.encode import QubitProblem
from noiselab.common.errors import ProblemTooLargeError

MAX_EXACT_QUBITS = 22
_DENSE_LIMIT = 200


def diagonal_values(op: SparsePauliOp) -> np.ndarray:
    """Diagonal of an operator made only of I/Z strings, as a real vector of length 2**n."""
    if np.any(op.paulis.x):
        raise ValueError("operator is not diagonal in the computational basis (X or Y present)")
    n = op.num_qubits
    if n > MAX_EXACT_QUBITS:
        raise ProblemTooLargeError(
            f"{n} qubits; allowed: at most {MAX_EXACT_QUBITS} for exact sectors"
        )
    idx = np.arange(2**n, dtype=np.int64)
    weights = 1 << np.arange(n, dtype=np.int64)
    masks = op.paulis.z.astype(np.int64) @ weights
    coeffs = op.coeffs * (-1j) ** op.paulis.phase
    out = np.zeros(2**n, dtype=complex)
    for mask, c in zip(masks, coeffs, strict=True):
        sign = 1 - 2 * (np.bitwise_count(idx & mask) & 1).astype(np.int64)
        out += c * sign
    return out.real


def sector_indices(qubit_problem: QubitProblem) -> np.ndarray:
    """Sorted basis-state indices with the molecule's particle number and Sz."""
    n_target = qubit_problem.n_alpha + qubit_problem.n_beta
    sz_target = 0.5 * (qubit_problem.n_alpha - qubit_problem.n_beta)
    ok = np.abs(diagonal_values(qubit_problem.number_op) - n_target) < 1e-9
    ok &= np.abs(diagonal_values(qubit_problem.sz_op) - sz_target) < 1e-9
    return np.nonzero(ok)[0]


def sector_mask(qubit_problem: QubitProblem) -> np.ndarray:
    """Boolean vector of length 2**num_qubits: True for basis states in the (N, Sz) sector."""
    mask = np.zeros(2**qubit_problem.num_qubits, dtype=bool)
    mask[sector_indices(qubit_problem)] = True
    return mask


def sector_ground_energy(qubit_problem: QubitProblem) -> float:
    """Lowest eigenvalue (Hartree) of the qubit Hamiltonian in the molecule's (N, Sz) sector."""
    if qubit_problem.num_qubits > MAX_EXACT_QUBITS:
        raise ProblemTooLargeError(
            f"{qubit_problem.num_qubits} qubits; allowed: at most {MAX_EXACT_QUBITS} "
            "for exact sectors"
        )
    idx = sector_indices(qubit_problem)
    h = qubit_problem.hamiltonian.to_matrix(sparse=True).tocsr()
    block = h[idx][:, idx]
    if len(idx) <= _DENSE_LIMIT:
        return float(np.linalg.eigvalsh(block.toarray())[0])
    vals = spla.eigsh(block, k=1, which="SA", tol=1e-12, return_eigenvectors=False)
    return float(vals[0])
