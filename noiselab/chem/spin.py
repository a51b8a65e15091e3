"""Total spin S^2 as a qubit operator, and the S^2 of the exact sector ground state.

``S^2 = S- S+ + Sz (Sz + 1)`` with ``S+ = sum_p a+_{p alpha} a_{p beta}`` and
``S- = (S+)^dagger``; spin orbitals in block order (alpha j, beta n_orb + j). The operator is
mapped in the problem's encoding, with the fixed parity qubits dropped like the Hamiltonian's
when the problem drops them (S^2 conserves N_alpha and N_beta), so ``<psi|S^2|psi>`` of any
trial state on the logical qubits is its total spin: 0 for a singlet, 2 for a triplet,
s (s + 1) in general.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla
from qiskit.quantum_info import SparsePauliOp

from noiselab.chem.encode import QubitProblem, encode_fermion_operator
from noiselab.chem.exact import _DENSE_LIMIT, sector_indices
from noiselab.chem.pauli_sparse import MASK_BUILD_FROM_QUBITS, pauli_sparse

#: Two sector eigenvalues closer than this (Ha) count as one degenerate ground level.
DEGENERACY_HA = 1e-8


def spin_squared_op(qubit_problem: QubitProblem) -> SparsePauliOp:
    """S^2 on the problem's logical qubits (real coefficients, qubits as the Hamiltonian's)."""
    n = qubit_problem.n_orb
    # S- S+ = sum_pq a+_{p beta} a_{p alpha} a+_{q alpha} a_{q beta}
    terms = [
        (1.0, [(n + p, True), (p, False), (q, True), (n + q, False)])
        for p in range(n)
        for q in range(n)
    ]
    s_minus_s_plus = encode_fermion_operator(terms, qubit_problem)
    sz = qubit_problem.sz_op
    return (s_minus_s_plus + sz.compose(sz) + sz).simplify(atol=1e-12)


def spin_squared_of_state(qubit_problem: QubitProblem, state: np.ndarray) -> float:
    """<psi|S^2|psi> / <psi|psi> of a statevector on the logical qubits (qiskit bit order)."""
    s2 = spin_squared_op(qubit_problem).to_matrix(sparse=True)
    psi = np.asarray(state, dtype=complex)
    return float(np.real(np.vdot(psi, s2 @ psi)) / np.real(np.vdot(psi, psi)))


def exact_spin_squared(qubit_problem: QubitProblem) -> float:
    """S^2 of the lowest eigenstate of the Hamiltonian in the molecule's (N, Sz) sector.

    When that level is degenerate (within :data:`DEGENERACY_HA`), S^2 is diagonalized inside the
    degenerate space and its smallest value is returned (the lowest-spin exact ground state).
    """
    idx = sector_indices(qubit_problem)
    h = _sector_block(qubit_problem.hamiltonian, idx)
    s2 = _sector_block(spin_squared_op(qubit_problem), idx)
    if len(idx) <= _DENSE_LIMIT:
        vals, vecs = np.linalg.eigh(h.toarray())
    else:
        k = min(4, len(idx) - 1)
        vals, vecs = spla.eigsh(h, k=k, which="SA", tol=1e-12)
        order = np.argsort(vals)
        vals, vecs = vals[order], vecs[:, order]
    ground = vecs[:, np.abs(vals - vals[0]) < DEGENERACY_HA]
    block = ground.conj().T @ (s2 @ ground)
    return float(np.linalg.eigvalsh(0.5 * (block + block.conj().T))[0])


def _sector_block(op: SparsePauliOp, idx: np.ndarray) -> object:
    """Sparse block of ``op`` on the sector's basis states ``idx`` (sorted); from
    ``MASK_BUILD_FROM_QUBITS`` qubits on built on those rows only (no full matrix)."""
    if op.num_qubits < MASK_BUILD_FROM_QUBITS:
        return op.to_matrix(sparse=True).tocsr()[idx][:, idx]
    return pauli_sparse(op, rows=np.asarray(idx, dtype=np.int64)).matrix
