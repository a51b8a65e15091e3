"""Readout assignment error applied analytically to exact distributions.

Convention (REFERENCES.md, readout): a per-qubit assignment matrix ``A[measured, prepared]``,
``A = [[1 - P(1|0), P(0|1)], [P(1|0), 1 - P(0|1)]]`` (columns are the prepared state, each column
sums to 1). Uncorrelated errors act on a distribution as ``A_{n-1} x ... x A_0``; we never build
that 2**n x 2**n matrix but apply each 2x2 along its own axis of the reshaped vector.

Correlated readout (crosstalk) acts on a pair of qubits ``(a, b)`` after the per-qubit matrices.
A term is ``(a, b, c)`` with a number c, the device layer's joint flip (both reported bits flip
together with probability c: ``p -> (1 - c) p + c p[m ^ (1<<a) ^ (1<<b)]``, see
:mod:`noiselab.device.profile`), or ``(a, b, M)`` with a general 4x4 column-stochastic matrix
indexed ``i = bit_a + 2 * bit_b`` (``a`` the lower bit inside the pair; the outcome-dependent
flips of the device layer are such matrices), or ``(qubits, M)`` with a 2^m x 2^m matrix on m
qubits (a measurement-twirled group of them).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from noiselab.common.errors import InputError

#: A crosstalk term: (qubit a, qubit b, joint-flip probability or 4x4 matrix on the pair), or
#: (qubits, 2^m x 2^m matrix) on m qubits, bit l of its index the bit of ``qubits[l]``.
PairMatrix = tuple[int, int, "float | np.ndarray"] | tuple[tuple[int, ...], np.ndarray]


def joint_flip_matrix(c: float) -> np.ndarray:
    """4x4 pair matrix (index bit_a + 2*bit_b) of a joint flip with probability ``c``."""
    flip = np.zeros((4, 4))
    for i in range(4):
        flip[i ^ 3, i] = 1.0
    return (1.0 - c) * np.eye(4) + c * flip


def _num_qubits_of(length: int) -> int:
    n = int(length).bit_length() - 1
    if n < 0 or (1 << n) != length:
        raise InputError(f"probabilities: last axis has length {length}; allowed: a power of 2")
    return n


def apply_on_axis(x: np.ndarray, m: np.ndarray, axis: int) -> np.ndarray:
    """``m`` (2x2) applied along ``axis`` (length 2): y[.., i, ..] = sum_j m[i, j] x[.., j, ..].

    Four scaled adds on strided views: no transposed copies (faster than tensordot here).
    """
    shape = x.shape
    a = int(np.prod(shape[:axis], dtype=np.int64))
    v = x.reshape(a, 2, -1)
    y = np.empty(v.shape, dtype=np.result_type(x.dtype, m.dtype))
    x0, x1 = v[:, 0, :], v[:, 1, :]
    for i in (0, 1):
        np.multiply(x0, m[i, 0], out=y[:, i, :])
        y[:, i, :] += m[i, 1] * x1
    return y.reshape(shape)


def _axis(batch_ndim: int, n: int, q: int) -> int:
    # qubit 0 is the least significant bit, i.e. the last axis of the C-ordered reshape
    return batch_ndim + (n - 1 - q)


def apply_readout(
    probs: np.ndarray,
    matrices: Sequence[np.ndarray],
    crosstalk: Sequence[PairMatrix] = (),
) -> np.ndarray:
    """Apply per-qubit assignment matrices, then pair crosstalk, to distributions ``(..., 2**n)``.

    ``matrices[q]`` is qubit q's 2x2 assignment matrix (``None`` skips that qubit). Returns a new
    array of the same shape; leading axes are batch axes.
    """
    p = np.asarray(probs, dtype=float)
    n = _num_qubits_of(p.shape[-1])
    if len(matrices) != n:
        raise InputError(
            f"readout: {len(matrices)} assignment matrices for {n} qubits; allowed: one per qubit"
        )
    batch = p.shape[:-1]
    x = p.reshape(*batch, *(2,) * n)
    nb = len(batch)
    for q, a in enumerate(matrices):
        if a is None:
            continue
        a = np.asarray(a, dtype=float)
        if a.shape != (2, 2):
            raise InputError(f"readout: matrix of qubit {q} has shape {a.shape}; allowed: (2, 2)")
        x = apply_on_axis(x, a, _axis(nb, n, q))
    for term in crosstalk:
        if len(term) == 2:
            qs, local = tuple(int(q) for q in term[0]), np.asarray(term[1], dtype=float)
        else:
            qs, local = (int(term[0]), int(term[1])), np.asarray(term[2], dtype=float)
            if local.ndim == 0:
                local = joint_flip_matrix(float(local))
        m = len(qs)
        if len(set(qs)) != m or not all(0 <= q < n for q in qs):
            raise InputError(
                f"readout: crosstalk pair or group {qs}; allowed: different qubits 0..{n - 1}"
            )
        if local.shape != (2**m, 2**m):
            raise InputError(
                f"readout: crosstalk matrix has shape {local.shape}; allowed: {(2**m, 2**m)}"
            )
        # local[i_out, i_in], i = sum_l bit(qs[l]) << l  ->  t[out_{m-1}..out_0, in_{m-1}..in_0]
        t = local.reshape((2,) * (2 * m))
        axes = [_axis(nb, n, q) for q in reversed(qs)]
        y = np.tensordot(t, x, axes=(list(range(m, 2 * m)), axes))
        x = np.moveaxis(y, list(range(m)), axes)
    return np.ascontiguousarray(x.reshape(p.shape))


def assignment_matrix(p1_given_0: float, p0_given_1: float) -> np.ndarray:
    """2x2 assignment matrix ``A[measured, prepared]`` from the two flip probabilities."""
    return np.array([[1.0 - p1_given_0, p0_given_1], [p1_given_0, 1.0 - p0_given_1]])
