"""Measured distributions of many bases from one state: the analytic measurement kernel.

Density matrix: ``p(b) = Tr(rho (x)_q E_q^{b_q})`` with per-qubit effect tensors ``E_q`` of shape
``(2, 2, 2)`` (``[b, row, col]``). The density matrix is copied once so that each qubit's (row bit,
column bit) pair is one axis of 4, in contraction order; contracting a qubit is then one BLAS
product ``(M, 4) @ (4, 2)`` whose output is already laid out for the next qubit, O(4**k) per basis
(about 1.5 s for 180 bases on 12 qubits, one core).
Bases that share effects on the first contracted qubits share those intermediate tensors (the
qubits are contracted in order of fewest distinct effects first, bases grouped as a prefix tree).

Pure states (trajectories): ``E^1 = I - E^0`` commutes with ``E^0``, so both are diagonal in the
eigenbasis ``V`` of ``E^0``; ``p(b) = sum_r C(b|r) |<r|V^dagger psi>|^2`` with the classical
2x2 matrix ``C[b, r] = (V^dagger E^b V)[r, r]``: a rotation per qubit, ``|.|^2``, then a
column-stochastic matrix per qubit (applied after averaging over trajectories, it is linear).
"""

from __future__ import annotations

import concurrent.futures
import os
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np

from noiselab.emulate.memory import engine_threads
from noiselab.emulate.readout import apply_on_axis, apply_readout

#: Negative probabilities above this (in magnitude) are rounding noise and are clipped to 0.
CLIP_TOL = 1e-9


def _order_by_sharing(
    keys: Sequence[Sequence[Hashable]], n: int, tie: Sequence[int] | None = None
) -> list[int]:
    """Logical qubits, fewest distinct effects first; ties by ``tie[l]`` (default l)."""
    distinct = [len({kk[l] for kk in keys}) for l in range(n)]
    return sorted(range(n), key=lambda l: (distinct[l], l if tie is None else tie[l]))


def clean_probabilities(p: np.ndarray, *, what: str = "distribution") -> np.ndarray:
    """Real part, clip rounding negatives, renormalize each row (last axis) to sum 1."""
    p = np.asarray(p)
    if np.iscomplexobj(p):
        p = p.real
    p = np.array(p, dtype=float)
    low = p.min() if p.size else 0.0
    if low < -CLIP_TOL:
        raise ArithmeticError(f"{what}: negative probability {low:.3e}; the state is not valid")
    np.clip(p, 0.0, None, out=p)
    s = p.sum(axis=-1, keepdims=True)
    return p / np.where(s > 0, s, 1.0)


def contraction_threads() -> int:
    """Threads for the basis contraction: ``$NOISELAB_ENGINE_THREADS`` (0 or unset: every core)."""
    n = engine_threads()
    return n if n > 0 else max(1, os.cpu_count() or 1)


def _interleave(rho: np.ndarray, seq: Sequence[int]) -> np.ndarray:
    """``rho`` ``(2**k, 2**k)`` as a flat array whose axes are (row bit, column bit) pairs of the
    circuit qubits in ``seq`` (first = most significant), one contiguous copy."""
    dim = rho.shape[0]
    k = dim.bit_length() - 1
    if not rho.flags.c_contiguous and rho.flags.f_contiguous:
        # qiskit-aer hands back a column-major matrix: reshape its C-ordered transpose (a view),
        # whose leading axes are then the column bits
        t = rho.T.reshape((2,) * (2 * k))
        row = {q: k + (k - 1 - q) for q in range(k)}
        col = {q: k - 1 - q for q in range(k)}
    else:
        t = np.ascontiguousarray(rho).reshape((2,) * (2 * k))
        row = {q: k - 1 - q for q in range(k)}
        col = {q: k + (k - 1 - q) for q in range(k)}
    perm = [a for q in seq for a in (row[q], col[q])]
    return np.ascontiguousarray(t.transpose(perm), dtype=complex).reshape(-1)


def _pair_weights(e: np.ndarray) -> np.ndarray:
    """``(4, n_out)`` weights ``w[2i + j, b] = E[b][j, i]``: ``p = sum_ij rho[i, j] E[j, i]``."""
    e = np.asarray(e, dtype=complex)
    return np.ascontiguousarray(e.transpose(2, 1, 0).reshape(4, e.shape[0]))


#: Rows per BLAS call: small enough that OpenBLAS runs each call on one thread (its own threads
#: spin and oversubscribe the cores next to ours) and the operands stay in cache.
STEP_ROWS = 2**12


def _step(
    x: np.ndarray, w: np.ndarray, out: np.ndarray | None = None, pool: Any = None, parts: int = 1
) -> np.ndarray:
    """Contract the leading (row, column) pair of the flat ``x``: ``(M, 4) @ (4, n_out)``
    products over blocks of :data:`STEP_ROWS` rows (on ``pool``'s threads if given). The result
    ``(M * n_out,)`` keeps the pair layout; the new outcome is the least significant part of the
    trailing outcome index."""
    m = x.size // 4
    a = x.reshape(4, m).T
    res = np.empty((m, w.shape[1]), dtype=complex) if out is None else out.reshape(m, -1)

    def rows(lo: int, hi: int) -> None:
        for r in range(lo, hi, STEP_ROWS):
            e = min(hi, r + STEP_ROWS)
            np.matmul(a[r:e], w, out=res[r:e])

    if pool is None or parts < 2 or m < 2 * STEP_ROWS * parts:
        rows(0, m)
    else:
        cuts = [m * i // parts // STEP_ROWS * STEP_ROWS for i in range(parts)] + [m]
        list(pool.map(rows, cuts[:-1], cuts[1:]))
    return res.reshape(-1)


class _Buffers:
    """One reusable output buffer per tree depth (a depth's nodes are built one at a time)."""

    def __init__(self) -> None:
        self._by_depth: dict[int, np.ndarray] = {}

    def get(self, depth: int, size: int) -> np.ndarray:
        buf = self._by_depth.get(depth)
        if buf is None or buf.size < size:
            buf = np.empty(size, dtype=complex)
            self._by_depth[depth] = buf
        return buf[:size]


def dm_distributions(
    rho: np.ndarray | list[np.ndarray],
    qubits: Sequence[int],
    effects: Sequence[Sequence[np.ndarray]],
    keys: Sequence[Sequence[Hashable]],
    *,
    threads: int | None = None,
) -> np.ndarray:
    """Distributions ``(n_bases, 2**n)`` of measuring circuit qubits ``qubits`` of ``rho``.

    ``rho``: ``(2**k, 2**k)`` density matrix (qiskit order), or a one-element list holding it,
    which is emptied once the matrix is copied (the caller's only reference goes, saving one
    density matrix of peak memory). ``qubits[l]``: circuit qubit holding logical qubit l.
    ``effects[i][l]``: effect tensor of logical qubit l in basis i; ``keys[i][l]``: a hashable
    naming it (equal keys must mean equal tensors). Unmeasured circuit qubits are traced out.
    Entry k of a row has ``bit_l = (k >> l) & 1``. ``threads``: default
    :func:`contraction_threads`.

    The matrix is copied once into (row bit, column bit) pairs in contraction order; each step is
    then one BLAS product with the step's ``(4, 2)`` weights, output already in the layout of the
    next step, into a buffer reused by every node of that depth. Intermediates total at most one
    density matrix; with threads, the rows of each large product are split over them.
    """
    if isinstance(rho, list):
        holder, mat = rho, np.asarray(rho[0])
    else:
        holder, mat = None, np.asarray(rho)
    dim = mat.shape[0]
    k = dim.bit_length() - 1
    n = len(qubits)
    # ties: most significant circuit qubit first, which makes the pair copy close to sequential
    order = _order_by_sharing(keys, n, [-c for c in qubits])
    traced = [c for c in range(k - 1, -1, -1) if c not in qubits]
    x = _interleave(mat, traced + [qubits[l] for l in order])
    del mat
    if holder is not None:
        holder.clear()
    trace = _pair_weights(np.eye(2, dtype=complex)[None])
    for _ in traced:
        x = _step(x, trace)
    weights: dict[tuple[int, Hashable], np.ndarray] = {}
    out = np.empty((len(effects), 2**n))
    # after contraction, bit j (from the most significant) of the index is logical order[j]
    perm = [order.index(n - 1 - p) for p in range(n)]
    n_threads = contraction_threads() if threads is None else max(1, int(threads))

    def w_of(l: int, i: int) -> np.ndarray:
        key = (l, keys[i][l])
        if key not in weights:
            weights[key] = _pair_weights(effects[i][l])
        return weights[key]

    def groups_at(depth: int, members: list[int]) -> list[list[int]]:
        l = order[depth]
        groups: dict[Hashable, list[int]] = {}
        for i in members:
            groups.setdefault(keys[i][l], []).append(i)
        return list(groups.values())

    def leaf(x: np.ndarray, members: list[int]) -> None:
        flat = x.real
        if n:
            flat = np.transpose(flat.reshape((2,) * n), perm).reshape(-1)
        for i in members:
            out[i] = flat

    def rec(x: np.ndarray, depth: int, members: list[int], bufs: _Buffers, pool: Any) -> None:
        if depth == n:
            leaf(x, members)
            return
        for g in groups_at(depth, members):
            w = w_of(order[depth], g[0])
            y = _step(x, w, bufs.get(depth, x.size // 2), pool, n_threads)
            rec(y, depth + 1, g, bufs, pool)

    members = list(range(len(effects)))
    if n_threads == 1 or n == 0:
        rec(x, 0, members, _Buffers(), None)
    else:
        # the tree is walked in this thread; the rows of every large product are split over the
        # pool (BLAS releases the GIL), so threads add no temporaries
        with concurrent.futures.ThreadPoolExecutor(n_threads) as pool:
            rec(x, 0, members, _Buffers(), pool)
    return clean_probabilities(out, what="density-matrix distribution")


def effect_rotation(e: np.ndarray, tol: float = 1e-12) -> tuple[np.ndarray | None, np.ndarray]:
    """``(V, C)`` with ``E^b = V diag(C[b]) V^dagger``; V is ``None`` for the identity."""
    e0 = np.asarray(e[0])
    if abs(e0[0, 1]) < tol and abs(e0[1, 0]) < tol:
        v = None
        c = np.array([[e[b][r, r].real for r in (0, 1)] for b in (0, 1)])
    else:
        _, v = np.linalg.eigh(e0)
        c = np.array([[(v.conj().T @ e[b] @ v)[r, r].real for r in (0, 1)] for b in (0, 1)])
    return v, np.clip(c, 0.0, 1.0)


def sv_batch_mean_distributions(
    psis: np.ndarray,
    qubits: Sequence[int],
    rotations: Sequence[Sequence[tuple[np.ndarray | None, np.ndarray]]],
    keys: Sequence[Sequence[Hashable]],
) -> np.ndarray:
    """Mean over a batch of pure states ``psis (B, 2**k)`` of each basis' distribution.

    ``rotations[i][l] = (V, C)`` from :func:`effect_rotation` for logical qubit l in basis i.
    Returns ``(n_bases, 2**n)``.
    """
    bsz, dim = psis.shape
    k = dim.bit_length() - 1
    n = len(qubits)
    x = np.asarray(psis).reshape((bsz,) + (2,) * k)
    order = _order_by_sharing(keys, n)
    out = np.empty((len(rotations), 2**n))
    unmeasured = tuple(1 + (k - 1 - c) for c in range(k) if c not in qubits)
    # measured axes after summing the unmeasured ones, in qiskit order (logical MSB first)
    kept = [c for c in range(k - 1, -1, -1) if c in qubits]
    perm = [kept.index(qubits[n - 1 - p]) for p in range(n)]

    def rec(x: np.ndarray, depth: int, members: list[int]) -> None:
        if depth == n:
            pr = (np.abs(x) ** 2).mean(axis=0)
            if unmeasured:
                pr = pr.sum(axis=tuple(a - 1 for a in unmeasured))
            flat = np.transpose(pr, perm).reshape(-1) if n else pr.reshape(-1)
            for i in members:
                mats = [rotations[i][l][1] for l in range(n)]
                out[i] = apply_readout(flat, mats)
            return
        l = order[depth]
        ax = 1 + (k - 1 - qubits[l])
        groups: dict[Hashable, list[int]] = {}
        for i in members:
            groups.setdefault(keys[i][l], []).append(i)
        for members_g in groups.values():
            v = rotations[members_g[0]][l][0]
            if v is None:
                rec(x, depth + 1, members_g)
            else:
                y = apply_on_axis(x, v.conj().T, ax)
                rec(y, depth + 1, members_g)

    rec(x, 0, list(range(len(rotations))))
    return out
