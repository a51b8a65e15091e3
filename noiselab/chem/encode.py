"""Qubit Hamiltonian of an electronic problem: Jordan-Wigner, parity or Bravyi-Kitaev encoding.

Qubit order: logical qubit j is spin orbital j in block order (j < n_orb: spatial orbital j, alpha;
n_orb + j: spatial orbital j, beta), stored as the encoding dictates (see
:mod:`noiselab.chem.fermion`). Qubit 0 is the rightmost character of a Pauli label and the least
significant bit of a basis-state index (qiskit order).

Dropping the fixed parity qubits (``drop_fixed_parity_qubits``; parity encoding only; the
symmetry tapering of Bravyi, Gambetta, Mezzacapo and Temme, arXiv:1701.08213): qubit n_orb-1
holds the parity of N_alpha and qubit 2*n_orb-1 the parity of N.
Both are fixed by the molecule's sector, so the Hamiltonian has only I or Z on them; each Z is
replaced by its eigenvalue and the two qubits are dropped. The remaining qubits keep their order:
remaining qubit i is full qubit i for i < n_orb-1 and full qubit i+1 for n_orb-1 <= i < 2*n_orb-2.
With the two qubits dropped, ``number_op`` and ``sz_op`` are still returned, with the same qubits
dropped (they remain diagonal, non-constant operators on the remaining qubits), and
``symmetries`` is empty: the three parities it would hold are exactly the ones that fixed the
dropped qubits.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from qiskit.quantum_info import PauliList, SparsePauliOp

from noiselab.chem import fermion
from noiselab.chem.fermion import ENCODINGS
from noiselab.chem.molecule import ElectronicProblem
from noiselab.common.errors import InputError, ProblemTooLargeError

MAX_QUBITS = 40


class Symmetry(NamedTuple):
    """A Z2 symmetry of the qubit Hamiltonian: one Z string, its eigenvalue in the target sector."""

    name: str
    pauli: SparsePauliOp
    eigenvalue: int


@dataclass(frozen=True)
class QubitProblem:
    """Qubit Hamiltonian (Hartree) with its sector, reference state and exact energy.

    ``hf_bitstring[q]`` is the value of logical qubit q in the Hartree-Fock state.
    ``removed_qubits``: full-space qubits dropped by ``drop_fixed_parity_qubits`` (else empty).
    """

    hamiltonian: SparsePauliOp
    num_qubits: int
    encoding: str
    drop_fixed_parity_qubits: bool
    number_op: SparsePauliOp | None
    sz_op: SparsePauliOp | None
    hf_bitstring: tuple[int, ...]
    n_alpha: int
    n_beta: int
    n_orb: int
    exact_energy_ha: float
    hf_energy_ha: float
    symmetries: tuple[Symmetry, ...]
    removed_qubits: tuple[int, ...] = ()

    @property
    def hf_index(self) -> int:
        """Basis-state index of the Hartree-Fock state (bit q = qubit q)."""
        return sum(b << q for q, b in enumerate(self.hf_bitstring))

    @property
    def num_terms(self) -> int:
        """Number of Pauli strings in the Hamiltonian (constant included)."""
        return len(self.hamiltonian)


def check_encoding(encoding: str, drop_fixed_parity_qubits: bool = False) -> None:
    """One-line InputError for an unknown encoding or drop_fixed_parity_qubits off parity."""
    if encoding not in ENCODINGS:
        raise InputError(
            f"encoding: unknown encoding {encoding!r}; allowed: {', '.join(ENCODINGS)}"
        )
    if drop_fixed_parity_qubits and encoding != "parity":
        raise InputError(
            f"encoding: drop_fixed_parity_qubits needs the parity encoding, got {encoding!r}; "
            "allowed: parity"
        )


def _sector_eigenvalues(n_alpha: int, n_beta: int) -> tuple[int, int]:
    """Parity-encoding eigenvalues of Z on qubit n_orb-1 ((-1)^N_alpha) and 2*n_orb-1 ((-1)^N)."""
    return (-1) ** n_alpha, (-1) ** (n_alpha + n_beta)


def drop_parity_qubits(op: SparsePauliOp, n_orb: int, n_alpha: int, n_beta: int) -> SparsePauliOp:
    """Drop the two fixed parity qubits from an operator that conserves N and N_alpha parity."""
    k1, k2 = n_orb - 1, 2 * n_orb - 1
    e1, e2 = _sector_eigenvalues(n_alpha, n_beta)
    x, z = op.paulis.x, op.paulis.z
    if np.any(x[:, [k1, k2]]):
        raise ValueError("operator does not conserve the parities of the dropped qubits")
    factor = np.where(z[:, k1], e1, 1) * np.where(z[:, k2], e2, 1)
    keep = np.ones(op.num_qubits, dtype=bool)
    keep[[k1, k2]] = False
    paulis = PauliList.from_symplectic(z[:, keep], x[:, keep])
    # op.paulis may carry a phase; coeffs already include it via the label convention
    coeffs = op.coeffs * factor * (-1j) ** op.paulis.phase
    return SparsePauliOp(paulis, coeffs).simplify(atol=1e-12)


def _real(op: SparsePauliOp) -> SparsePauliOp:
    if np.any(np.abs(op.coeffs.imag) > 1e-10):
        raise ValueError("operator is not Hermitian: imaginary Pauli coefficients remain")
    return SparsePauliOp(op.paulis, op.coeffs.real.astype(float))


def _z_symmetry(mask: int, n_qubits: int) -> SparsePauliOp:
    label = "".join("Z" if (mask >> q) & 1 else "I" for q in reversed(range(n_qubits)))
    return SparsePauliOp(label, [1.0])


def encode(
    problem: ElectronicProblem,
    encoding: str = "jordan_wigner",
    drop_fixed_parity_qubits: bool = False,
) -> QubitProblem:
    """Map an :class:`~noiselab.chem.molecule.ElectronicProblem` to a :class:`QubitProblem`."""
    check_encoding(encoding, drop_fixed_parity_qubits)
    n_orb, na, nb = problem.n_orb, problem.n_alpha, problem.n_beta
    n_modes = 2 * n_orb
    if n_modes > MAX_QUBITS:
        raise ProblemTooLargeError(
            f"molecule: {n_modes} spin orbitals; allowed: at most {MAX_QUBITS} "
            "(choose an active_space)"
        )
    if drop_fixed_parity_qubits and n_modes < 3:
        raise InputError(
            "encoding: drop_fixed_parity_qubits would leave no qubit; "
            "allowed: false for this molecule"
        )
    table = fermion.ladder_table(encoding, n_modes)
    h = fermion.to_sparse_pauli_op(
        fermion.hamiltonian_parts(table, problem.h1, problem.h2, problem.e_core_ha), n_modes
    )
    weights_n = np.ones(n_modes)
    weights_sz = np.concatenate([np.full(n_orb, 0.5), np.full(n_orb, -0.5)])
    number_op = fermion.to_sparse_pauli_op(fermion.diagonal_z_parts(table, weights_n), n_modes)
    sz_op = fermion.to_sparse_pauli_op(fermion.diagonal_z_parts(table, weights_sz), n_modes)

    occupation = [1 if j < na else 0 for j in range(n_orb)] + [
        1 if j < nb else 0 for j in range(n_orb)
    ]
    hf_bits = fermion.occupation_to_qubits(table, occupation)

    occ = [int(m) for m in table.occupation_z]
    alpha_mask = int(np.bitwise_xor.reduce(np.array(occ[:n_orb], dtype=np.uint64)))
    beta_mask = int(np.bitwise_xor.reduce(np.array(occ[n_orb:], dtype=np.uint64)))
    symmetries: tuple[Symmetry, ...] = (
        Symmetry("number_parity", _z_symmetry(alpha_mask ^ beta_mask, n_modes), (-1) ** (na + nb)),
        Symmetry("alpha_parity", _z_symmetry(alpha_mask, n_modes), (-1) ** na),
        Symmetry("beta_parity", _z_symmetry(beta_mask, n_modes), (-1) ** nb),
    )
    removed: tuple[int, ...] = ()
    num_qubits = n_modes
    if drop_fixed_parity_qubits:
        removed = (n_orb - 1, 2 * n_orb - 1)
        h = _real(drop_parity_qubits(h, n_orb, na, nb))
        number_op = _real(drop_parity_qubits(number_op, n_orb, na, nb))
        sz_op = _real(drop_parity_qubits(sz_op, n_orb, na, nb))
        hf_bits = tuple(b for q, b in enumerate(hf_bits) if q not in removed)
        symmetries = ()
        num_qubits = n_modes - 2
    return QubitProblem(
        hamiltonian=h,
        num_qubits=num_qubits,
        encoding=encoding,
        drop_fixed_parity_qubits=drop_fixed_parity_qubits,
        number_op=number_op,
        sz_op=sz_op,
        hf_bitstring=tuple(int(b) for b in hf_bits),
        n_alpha=na,
        n_beta=nb,
        n_orb=n_orb,
        exact_energy_ha=problem.exact_energy_ha,
        hf_energy_ha=problem.hf_energy_ha,
        symmetries=symmetries,
        removed_qubits=removed,
    )


def encode_fermion_operator(
    terms: Sequence[tuple[complex, Sequence[tuple[int, bool]]]],
    qubit_problem: QubitProblem,
    hermitian: bool = True,
) -> SparsePauliOp:
    """Map ``sum coeff * prod (a_mode or a+_mode)`` to qubits in ``qubit_problem``'s encoding.

    Modes are spin orbitals in block order. With ``drop_fixed_parity_qubits`` the operator must
    conserve N and N_alpha parity; its two fixed qubits are dropped as in the Hamiltonian.
    ``hermitian=True`` returns real coefficients (and checks that the imaginary parts vanish).
    """
    n_modes = 2 * qubit_problem.n_orb
    table = fermion.ladder_table(qubit_problem.encoding, n_modes)
    parts = fermion.fermion_terms_parts(table, terms)
    op = fermion.to_sparse_pauli_op(parts, n_modes, hermitian=hermitian)
    if qubit_problem.drop_fixed_parity_qubits:
        op = drop_parity_qubits(
            op, qubit_problem.n_orb, qubit_problem.n_alpha, qubit_problem.n_beta
        )
        if hermitian:
            op = _real(op)
    return op
