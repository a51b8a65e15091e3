"""Fermion-to-qubit encodings as binary matrices, and fast mapping of ladder-operator products.

Every encoding here is linear: the qubit basis state ``b`` of an occupation vector ``n`` (spin
orbitals in block order: modes 0..n_orb-1 alpha, n_orb..2*n_orb-1 beta) is ``b = A n mod 2``.

* Jordan-Wigner: ``A = I`` (qubit j stores n_j).
* parity: ``A`` lower triangular of ones (qubit j stores n_0 + ... + n_j mod 2).
* Bravyi-Kitaev: the Fenwick-tree matrix of Seeley, Richard and Love (J. Chem. Phys. 137, 224109,
  2012), built for the next power of two and truncated to ``n`` modes, which is valid for any n.

From ``A`` alone follow the Seeley-Richard-Love sets: update set U(j) (qubits other than j whose
value depends on n_j: column j of A), parity set P(j) (qubits whose sum is n_0+...+n_{j-1}:
the rows of A^-1 for modes < j, summed), and the occupation set (qubits whose sum is n_j: row j of
A^-1). With ``u_j`` = column j of A, ``p_j`` = parity mask, ``q_j`` = p_j XOR occupation mask:

    a_j^dagger = 1/2 X^{u_j} Z^{p_j} + 1/2 X^{u_j} Z^{q_j}
    a_j        = 1/2 X^{u_j} Z^{p_j} - 1/2 X^{u_j} Z^{q_j}

where ``X^x Z^z`` is the product over qubits of X^{x_k} Z^{z_k} (X to the left), so on a qubit with
both bits ``XZ = -iY``. Pauli strings are kept as bit masks (bit k = qubit k, qiskit order) and
multiplied symplectically in numpy: (X^a Z^b)(X^c Z^d) = (-1)^{|b & c|} X^{a^c} Z^{b^d}.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from qiskit.quantum_info import PauliList, SparsePauliOp

ENCODINGS = ("jordan_wigner", "parity", "bravyi_kitaev")
MAX_MODES = 64


def gf2_inverse(a: np.ndarray) -> np.ndarray:
    """Inverse of a square binary matrix over GF(2) (Gauss-Jordan); ValueError if singular."""
    n = a.shape[0]
    m = np.concatenate([a.astype(np.uint8) % 2, np.eye(n, dtype=np.uint8)], axis=1)
    for col in range(n):
        pivots = np.nonzero(m[col:, col])[0]
        if pivots.size == 0:
            raise ValueError("matrix is singular over GF(2)")
        piv = col + pivots[0]
        if piv != col:
            m[[col, piv]] = m[[piv, col]]
        rows = np.nonzero(m[:, col])[0]
        rows = rows[rows != col]
        m[rows] ^= m[col]
    return m[:, n:].copy()


def _bk_power_of_two(n: int) -> np.ndarray:
    """Seeley-Richard-Love recursion B_1 = [1], B_2k = [[B_k, 0], [L_k, B_k]] (L_k: last row 1)."""
    b = np.ones((1, 1), dtype=np.uint8)
    size = 1
    while size < n:
        low = np.zeros((size, size), dtype=np.uint8)
        low[-1, :] = 1
        b = np.block([[b, np.zeros((size, size), dtype=np.uint8)], [low, b]])
        size *= 2
    return b


def encoding_matrix(encoding: str, n_modes: int) -> np.ndarray:
    """Binary matrix ``A`` (n_modes x n_modes, uint8) with qubit state ``b = A n mod 2``."""
    if encoding == "jordan_wigner":
        return np.eye(n_modes, dtype=np.uint8)
    if encoding == "parity":
        return np.tril(np.ones((n_modes, n_modes), dtype=np.uint8))
    if encoding == "bravyi_kitaev":
        return _bk_power_of_two(n_modes)[:n_modes, :n_modes].copy()
    raise ValueError(f"unknown encoding {encoding!r}; allowed: {', '.join(ENCODINGS)}")


def _to_masks(rows: np.ndarray) -> np.ndarray:
    """Binary rows (k, n) -> uint64 bit masks with bit q = rows[:, q]."""
    weights = np.left_shift(np.uint64(1), np.arange(rows.shape[1], dtype=np.uint64))
    return (rows.astype(np.uint64) * weights).sum(axis=1, dtype=np.uint64)


@dataclass(frozen=True)
class LadderTable:
    """Bit masks of every mode's ladder operators in one encoding (see the module docstring)."""

    encoding: str
    n_modes: int
    matrix: np.ndarray  # A, b = A n mod 2
    inverse: np.ndarray  # A^-1, n = A^-1 b mod 2
    update_x: np.ndarray  # u_j: X mask (column j of A, includes qubit j itself)
    parity_z: np.ndarray  # p_j: Z mask whose sum is n_0 + ... + n_{j-1}
    parity_incl_z: np.ndarray  # q_j: Z mask whose sum is n_0 + ... + n_j
    occupation_z: np.ndarray  # Z mask whose sum is n_j, so (-1)^{n_j} = Z^{mask}


def ladder_table(encoding: str, n_modes: int) -> LadderTable:
    """Build the :class:`LadderTable` of ``encoding`` for ``n_modes`` spin orbitals."""
    if not 1 <= n_modes <= MAX_MODES:
        raise ValueError(f"{n_modes} spin orbitals; allowed: 1..{MAX_MODES}")
    a = encoding_matrix(encoding, n_modes)
    a_inv = gf2_inverse(a)
    cumulative = np.cumsum(a_inv, axis=0, dtype=np.int64) % 2  # row j: sum of rows 0..j of A^-1
    parity_excl = np.vstack([np.zeros((1, n_modes), dtype=np.int64), cumulative[:-1]])
    return LadderTable(
        encoding=encoding,
        n_modes=n_modes,
        matrix=a,
        inverse=a_inv,
        update_x=_to_masks(a.T),
        parity_z=_to_masks(parity_excl),
        parity_incl_z=_to_masks(cumulative),
        occupation_z=_to_masks(a_inv),
    )


def _mask_to_set(mask: int) -> frozenset[int]:
    return frozenset(q for q in range(64) if (int(mask) >> q) & 1)


def update_set(table: LadderTable, j: int) -> frozenset[int]:
    """Seeley-Richard-Love U(j): qubits other than j that change when n_j changes."""
    return _mask_to_set(table.update_x[j]) - {j}


def parity_set(table: LadderTable, j: int) -> frozenset[int]:
    """Seeley-Richard-Love P(j): qubits whose sum (mod 2) is n_0 + ... + n_{j-1}."""
    return _mask_to_set(table.parity_z[j])


def flip_set(table: LadderTable, j: int) -> frozenset[int]:
    """Seeley-Richard-Love F(j): qubits other than j whose sum with qubit j gives n_j."""
    return _mask_to_set(table.occupation_z[j]) - {j}


def remainder_set(table: LadderTable, j: int) -> frozenset[int]:
    """Seeley-Richard-Love R(j) = P(j) minus F(j)."""
    return parity_set(table, j) - flip_set(table, j)


def occupation_to_qubits(table: LadderTable, occupation: Sequence[int]) -> tuple[int, ...]:
    """Qubit basis state (qubit 0 first) of a spin-orbital occupation vector."""
    n = np.asarray(occupation, dtype=np.int64)
    return tuple(int(v) for v in (table.matrix.astype(np.int64) @ n) % 2)


def _popcount_parity(v: np.ndarray) -> np.ndarray:
    return (np.bitwise_count(v) & 1).astype(np.int8)


@dataclass(frozen=True)
class SymplecticSum:
    """Sum of ``coeffs[k] * X^{x[k]} Z^{z[k]}`` (bit masks, see module docstring), unsimplified."""

    x: np.ndarray
    z: np.ndarray
    coeffs: np.ndarray


def expand_products(
    table: LadderTable, coeffs: np.ndarray, modes: np.ndarray, daggers: Sequence[bool]
) -> SymplecticSum:
    """Map ``sum_t coeffs[t] * prod_k op_k(modes[t, k])`` to Pauli masks, vectorized over terms t.

    ``daggers[k]`` says whether slot k is a creation (True) or annihilation (False) operator;
    operators multiply left to right, so slot 0 is leftmost.
    """
    modes = np.asarray(modes, dtype=np.int64).reshape(len(coeffs), len(daggers))
    parts = [
        (
            np.zeros(len(coeffs), dtype=np.uint64),
            np.zeros(len(coeffs), dtype=np.uint64),
            np.asarray(coeffs, dtype=complex),
        )
    ]
    for slot, dagger in enumerate(daggers):
        m = modes[:, slot]
        ux = table.update_x[m]
        new = []
        for x, z, c in parts:
            sign = _popcount_parity(z & ux)
            base = c * np.where(sign, -0.5, 0.5)
            new.append((x ^ ux, z ^ table.parity_z[m], base))
            new.append((x ^ ux, z ^ table.parity_incl_z[m], base if dagger else -base))
        parts = new
    return SymplecticSum(
        x=np.concatenate([p[0] for p in parts]),
        z=np.concatenate([p[1] for p in parts]),
        coeffs=np.concatenate([p[2] for p in parts]),
    )


def _label_coeffs(s: SymplecticSum) -> np.ndarray:
    """Coefficients for Pauli labels: X^x Z^z = (-i)^{#Y} * label."""
    ny = np.bitwise_count(s.x & s.z).astype(np.int64) % 4
    return s.coeffs * np.array([1, -1j, -1, 1j])[ny]


def to_sparse_pauli_op(
    parts: Sequence[SymplecticSum], n_qubits: int, atol: float = 1e-12, hermitian: bool = True
):
    """Sum the parts, merge equal Pauli strings, drop coefficients below ``atol``.

    With ``hermitian=True`` the coefficients are returned real, after checking that every merged
    imaginary part is below ``atol`` (ValueError otherwise); with ``False`` they stay complex.
    """
    x = np.concatenate([p.x for p in parts])
    z = np.concatenate([p.z for p in parts])
    c = np.concatenate([_label_coeffs(p) for p in parts])
    keys = np.stack([x, z], axis=1)
    uniq, inverse = np.unique(keys, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    re = np.bincount(inverse, weights=c.real, minlength=len(uniq))
    im = np.bincount(inverse, weights=c.imag, minlength=len(uniq))
    if hermitian:
        if np.any(np.abs(im) > max(atol, 1e-10 * np.max(np.abs(re), initial=1.0))):
            raise ValueError("operator is not Hermitian: imaginary Pauli coefficients remain")
        vals = re
    else:
        vals = re + 1j * im
    keep = np.abs(vals) > atol
    if not np.any(keep):
        return SparsePauliOp("I" * n_qubits, [0.0])
    uniq, vals = uniq[keep], vals[keep]
    bits = np.arange(n_qubits, dtype=np.uint64)
    xb = ((uniq[:, 0:1] >> bits) & np.uint64(1)).astype(bool)
    zb = ((uniq[:, 1:2] >> bits) & np.uint64(1)).astype(bool)
    return SparsePauliOp(PauliList.from_symplectic(zb, xb), vals)


def identity_part(constant: float, n_qubits: int) -> SymplecticSum:
    """The constant ``constant * I`` as a :class:`SymplecticSum`."""
    zero = np.zeros(1, dtype=np.uint64)
    return SymplecticSum(x=zero, z=zero.copy(), coeffs=np.array([constant], dtype=complex))


def hamiltonian_parts(
    table: LadderTable, h1: np.ndarray, h2: np.ndarray, e_core: float, tol: float = 1e-14
) -> list[SymplecticSum]:
    """Second-quantized H in spin orbitals (block order), mapped term by term to Pauli masks.

    ``H = e_core + sum_{pq,s} h1[p,q] a+_{ps} a_{qs}
    + 1/2 sum_{pqrs,s,t} (pq|rs) a+_{ps} a+_{rt} a_{st} a_{qs}``, ``h2[p,q,r,s] = (pq|rs)``.
    """
    n = h1.shape[0]
    parts = [identity_part(e_core, table.n_modes)]
    p, q = np.nonzero(np.abs(h1) > tol)
    if p.size:
        coef = np.tile(h1[p, q], 2)
        modes = np.stack([np.concatenate([p, p + n]), np.concatenate([q, q + n])], axis=1)
        parts.append(expand_products(table, coef, modes, (True, False)))
    p, q, r, s = np.nonzero(np.abs(h2) > tol)
    if p.size:
        coefs, mode_rows = [], []
        for sig in (0, n):
            for tau in (0, n):
                P, Q, R, S = p + sig, q + sig, r + tau, s + tau
                ok = (P != R) & (Q != S)
                coefs.append(0.5 * h2[p, q, r, s][ok])
                mode_rows.append(np.stack([P[ok], R[ok], S[ok], Q[ok]], axis=1))
        parts.append(
            expand_products(
                table, np.concatenate(coefs), np.concatenate(mode_rows), (True, True, False, False)
            )
        )
    return parts


def fermion_terms_parts(
    table: LadderTable, terms: Sequence[tuple[complex, Sequence[tuple[int, bool]]]]
) -> list[SymplecticSum]:
    """Map a list of ``(coefficient, [(mode, is_creation), ...])`` products to Pauli masks."""
    by_shape: dict[tuple[bool, ...], tuple[list[complex], list[list[int]]]] = {}
    parts: list[SymplecticSum] = []
    for coef, ops in terms:
        if not ops:
            parts.append(identity_part(coef, table.n_modes))
            continue
        key = tuple(bool(d) for _, d in ops)
        cs, ms = by_shape.setdefault(key, ([], []))
        cs.append(coef)
        ms.append([int(m) for m, _ in ops])
    for key, (cs, ms) in by_shape.items():
        parts.append(expand_products(table, np.asarray(cs, dtype=complex), np.asarray(ms), key))
    return parts


def diagonal_z_parts(
    table: LadderTable, weights: np.ndarray, constant: float = 0.0
) -> list[SymplecticSum]:
    """``constant + sum_j weights[j] * n_j`` with ``n_j = (I - Z^{occupation_j}) / 2``."""
    w = np.asarray(weights, dtype=float)
    zero = np.zeros(table.n_modes, dtype=np.uint64)
    return [
        identity_part(constant + 0.5 * float(w.sum()), table.n_modes),
        SymplecticSum(x=zero, z=table.occupation_z.copy(), coeffs=(-0.5 * w).astype(complex)),
    ]
