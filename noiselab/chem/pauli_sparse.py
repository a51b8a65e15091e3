"""Sparse matrix of a Pauli sum, built block of rows by block of rows from its X-masks.

For ``MASK_BUILD_FROM_QUBITS`` qubits and more the noiseless optimizer and the exact <S^2> use
this matrix instead of qiskit's ``SparsePauliOp.to_matrix(sparse=True)``, which holds complex
values and builds the whole matrix at once (a 20-qubit chemistry Hamiltonian: ~4e8 non-zeros,
~9 GiB complex, more while it is built). Here a real Pauli sum (every term with an even number
of Y, the chemistry case) gives float64 values with int32 column indices (12 bytes a non-zero)
and a complex one complex128 values; rows are built 2**BLOCK_BITS at a time.

Entry ``(m, m ^ x)`` of ``sum_j c_j P_j`` (``P_j|k> = i^ny_j (-1)^{|k & z_j|} |k ^ x_j>``, see
:mod:`noiselab.chem.statevector`) is ``sum_{j: x_j = x} c_j (-i)^{ny_j} (-1)^{|m & z_j|}``; the
signs split into a row block's high bits (one sign per term) and a table over the low bits.
Entries with ``|value| <= ZERO_HA`` (cancellations) are left out.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp
from qiskit.quantum_info import SparsePauliOp

from noiselab.common.errors import ProblemTooLargeError
from noiselab.common.memory import format_bytes, memory_budget

#: From this many qubits on, matrices are built here (below: qiskit's, as before).
MASK_BUILD_FROM_QUBITS = 17
#: Rows per block: 2**BLOCK_BITS.
BLOCK_BITS = 10
#: Bytes of one storage segment while building.
SEGMENT_BYTES = 2**28
#: Entries at most this large (in the operator's unit) are dropped as cancellations.
ZERO_HA = 1e-13


@dataclass(frozen=True, eq=False)
class PauliSparse:
    """A sparse operator matrix; ``@`` a complex vector keeps real values real (no copy)."""

    matrix: sp.csr_matrix

    @property
    def nbytes(self) -> int:
        m = self.matrix
        return int(m.data.nbytes + m.indices.nbytes + m.indptr.nbytes)

    def __matmul__(self, psi: np.ndarray) -> np.ndarray:
        m = self.matrix
        if m.dtype.kind == "f" and np.iscomplexobj(psi):  # real and imaginary parts in one pass
            pair = np.ascontiguousarray(psi, dtype=complex).view(np.float64).reshape(-1, 2)
            return np.ascontiguousarray(m @ pair).view(complex).reshape(-1)
        return m @ psi


def _terms(op: SparsePauliOp) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(unique X-masks, start of each in the sorted terms, Z-masks, signed coefficients)."""
    n = op.num_qubits
    if n > 62:
        raise ProblemTooLargeError(f"operator on {n} qubits; allowed: at most 62")
    weights = np.left_shift(np.int64(1), np.arange(n, dtype=np.int64))
    x = op.paulis.x.astype(np.int64) @ weights
    z = op.paulis.z.astype(np.int64) @ weights
    ny = np.bitwise_count(x & z).astype(np.int64)
    coef = np.asarray(op.coeffs, dtype=complex) * (-1j) ** ny
    if np.max(np.abs(coef.imag), initial=0.0) == 0.0:
        coef = coef.real.copy()
    order = np.argsort(x, kind="stable")
    x, z, coef = x[order], z[order], coef[order]
    xs, starts = np.unique(x, return_index=True)
    return xs, starts, z, coef


def pauli_sparse(
    op: SparsePauliOp, rows: np.ndarray | None = None, max_bytes: int | None = None
) -> PauliSparse:
    """Matrix of ``op``; ``rows`` (sorted basis indices): the block on those rows and columns.

    ``max_bytes`` (default: the job's memory budget) bounds the stored matrix; passing it is
    refused in one line while building.
    """
    n = op.num_qubits
    xs, starts, z, coef = _terms(op)
    bits = min(BLOCK_BITS, n)
    low = np.arange(2**bits, dtype=np.int64)
    # signs over the low bits, one row per distinct low Z-mask; a sparse (X-mask, low Z-mask)
    # matrix of the high-bit-signed coefficients picks and sums them per block
    z_low, which = np.unique(z & (2**bits - 1), return_inverse=True)
    table = 1.0 - 2.0 * (np.bitwise_count(z_low[:, None] & low[None, :]) & 1)
    owner = np.repeat(np.arange(len(xs)), np.diff(np.append(starts, len(z))))
    z_high = z >> bits
    limit = memory_budget().usable if max_bytes is None else int(max_bytes)
    size = 2**n if rows is None else len(rows)
    counts = np.zeros(size, dtype=np.int64)
    datas, cols = _Store(coef.dtype), _Store(np.dtype(np.int32))
    blocks = np.arange(2 ** (n - bits)) if rows is None else np.unique(rows >> bits)
    for i, b in enumerate(blocks.tolist()):
        if rows is None:
            lo, first, sub = low, b << bits, table
        else:
            first, last = np.searchsorted(rows, [b << bits, (b + 1) << bits])
            lo = rows[first:last] & (2**bits - 1)
            sub = table[:, lo]
        sign = 1.0 - 2.0 * (np.bitwise_count(z_high & b) & 1)
        pick = sp.csr_matrix((coef * sign, (owner, which)), shape=(len(xs), len(z_low)))
        block = (pick @ sub).T  # (rows of the block, X-masks)
        keep = np.abs(block) > ZERO_HA
        col = ((b << bits) | lo)[:, None] ^ xs[None, :]
        if rows is not None:  # columns inside ``rows`` only, as positions in ``rows``
            pos = np.minimum(np.searchsorted(rows, col), len(rows) - 1)
            keep &= rows[pos] == col
            col = pos
        counts[first : first + len(lo)] = keep.sum(axis=1)
        datas.add(block[keep])
        cols.add(col[keep].astype(np.int32))
        stored = datas.size * datas.dtype.itemsize + cols.size * 4
        if stored > limit:
            raise ProblemTooLargeError(
                f"operator matrix on {n} qubits: more than {format_bytes(stored)} after "
                f"{i + 1} of {len(blocks)} row blocks; allowed: at most "
                f"{format_bytes(limit)} (the memory budget): fewer qubits"
            )
    indptr = np.zeros(size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    if indptr[-1] < 2**31:
        indptr = indptr.astype(np.int32)
    matrix = sp.csr_matrix((datas.join(), cols.join(), indptr), shape=(size, size), copy=False)
    return PauliSparse(matrix)


class _Store:
    """Appends into segments of SEGMENT_BYTES (mapped separately, so each returns to the system
    when freed): joining them peaks at the result plus one segment."""

    def __init__(self, dtype: Any) -> None:
        self.dtype = np.dtype(dtype)
        self.per = max(1, SEGMENT_BYTES // self.dtype.itemsize)
        self.parts: list[np.ndarray] = []
        self.size = 0

    def add(self, values: np.ndarray) -> None:
        at = 0
        while at < values.size:
            used = self.size - self.per * (len(self.parts) - 1) if self.parts else self.per
            if used == self.per:
                self.parts.append(np.empty(self.per, dtype=self.dtype))
                used = 0
            take = min(self.per - used, values.size - at)
            self.parts[-1][used : used + take] = values[at : at + take]
            self.size += take
            at += take

    def join(self) -> np.ndarray:
        out = np.empty(self.size, dtype=self.dtype)
        at = 0
        while self.parts:
            part = self.parts.pop(0)
            take = min(part.size, self.size - at)
            out[at : at + take] = part[:take]
            at += take
            del part
        return out


def operator_matrix(op: SparsePauliOp) -> Any:
    """What ``@`` a statevector: qiskit's sparse matrix below ``MASK_BUILD_FROM_QUBITS`` qubits
    (results unchanged there), else :func:`pauli_sparse`."""
    if op.num_qubits < MASK_BUILD_FROM_QUBITS:
        return op.to_matrix(sparse=True).tocsr()
    return pauli_sparse(op)
