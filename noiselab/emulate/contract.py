"""Measured distributions of many bases from one state: the analytic measurement kernel.

Density matrix: ``p(b) = Tr(rho (x)_q E_q^{b_q})`` with per-qubit effect tensors ``E_q`` of shape
``(2, 2, 2)`` (``[b, row, col]``). The density matrix, reshaped to ``2k`` axes, is contracted one
qubit at a time (each step turns a row and a column axis into one outcome axis), O(4**k) per basis
(about 2 s for 100 bases on 12 qubits, 2 cores).
Bases that share effects on the first contracted qubits share those intermediate tensors (the
qubits are contracted in order of fewest distinct effects first, bases grouped as a prefix tree).

Pure states (trajectories): ``E^1 = I - E^0`` commutes with ``E^0``, so both are diagonal in the
eigenbasis ``V`` of ``E^0``; ``p(b) = sum_r C(b|r) |<r|V^dagger psi>|^2`` with the classical
2x2 matrix ``C[b, r] = (V^dagger E^b V)[r, r]``: a rotation per qubit, ``|.|^2``, then a
column-stochastic matrix per qubit (applied after averaging over trajectories, it is linear).
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence

import numpy as np

from noiselab.emulate.readout import apply_on_axis, apply_readout

#: Negative probabilities above this (in magnitude) are rounding noise and are clipped to 0.
CLIP_TOL = 1e-9


def _order_by_sharing(keys: Sequence[Sequence[Hashable]], n: int) -> list[int]:
    distinct = [len({kk[l] for kk in keys}) for l in range(n)]
    return sorted(range(n), key=lambda l: (distinct[l], l))


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


def _contract_qubit(x: np.ndarray, p: int, m: int, e: np.ndarray) -> np.ndarray:
    """Contract qubit position ``p`` (0 = most significant of ``m``) of ``x`` ``(B, D, D)``.

    ``e`` ``(n_out, 2, 2)``: effects ``E[b]`` (``n_out = 1`` with the identity traces the qubit
    out). Returns ``(B * n_out, D/2, D/2)``; the new outcome is the least significant part of the
    leading index. Works on strided views of ``x`` (no transposed copy): ``y[b] = sum_ij
    E[b][j, i] x[.., i, .., .., j, ..]``, zero coefficients skipped.
    """
    bsz = x.shape[0]
    hi, lo = 2**p, 2 ** (m - 1 - p)
    x6 = x.reshape(bsz, hi, 2, lo, hi, 2, lo)
    n_out = e.shape[0]
    y = np.empty((bsz, n_out, hi, lo, hi, lo), dtype=np.result_type(x.dtype, e.dtype))
    tmp: np.ndarray | None = None
    for b in range(n_out):
        yb = y[:, b]
        first = True
        for i in (0, 1):
            for j in (0, 1):
                c = e[b, j, i]  # p = sum_ij rho[i, j] E[j, i]
                if c == 0:
                    continue
                v = x6[:, :, i, :, :, j, :]
                if first:
                    np.multiply(v, c, out=yb)
                    first = False
                else:
                    if tmp is None:
                        tmp = np.empty_like(yb)
                    np.multiply(v, c, out=tmp)
                    yb += tmp
        if first:
            yb[...] = 0
    d = hi * lo
    return y.reshape(bsz * n_out, d, d)


def dm_distributions(
    rho: np.ndarray,
    qubits: Sequence[int],
    effects: Sequence[Sequence[np.ndarray]],
    keys: Sequence[Sequence[Hashable]],
) -> np.ndarray:
    """Distributions ``(n_bases, 2**n)`` of measuring circuit qubits ``qubits`` of ``rho``.

    ``rho``: ``(2**k, 2**k)`` density matrix (qiskit order). ``qubits[l]``: circuit qubit holding
    logical qubit l. ``effects[i][l]``: effect tensor of logical qubit l in basis i;
    ``keys[i][l]``: a hashable naming it (equal keys must mean equal tensors). Unmeasured circuit
    qubits are traced out. Entry k of a row has ``bit_l = (k >> l) & 1``.

    Each step keeps the matrix form ``(outcomes so far, D, D)`` of the remaining qubits and
    halves D; intermediates of one prefix-tree branch total at most one density matrix.
    """
    dim = rho.shape[0]
    k = dim.bit_length() - 1
    n = len(qubits)
    order = _order_by_sharing(keys, n)
    rho = np.asarray(rho)
    transposed = not rho.flags.c_contiguous and rho.flags.f_contiguous
    if transposed:
        # qiskit-aer hands back a column-major matrix: work on its C-ordered transpose (a view)
        # with transposed effects, Tr(rho E) = sum_ab rho^T[a, b] E^T[b, a]
        rho = rho.T
    x = rho.reshape(1, dim, dim)
    rem = list(range(k - 1, -1, -1))  # circuit qubit at each position, most significant first
    trace = np.eye(2, dtype=complex)[None]
    for c in range(k):
        if c not in qubits:
            pos = rem.index(c)
            x = _contract_qubit(x, pos, len(rem), trace)
            rem.pop(pos)
    out = np.empty((len(effects), 2**n))
    # after contraction, bit j (from the most significant) of the index is logical order[j]
    perm = [order.index(n - 1 - p) for p in range(n)]

    def rec(x: np.ndarray, depth: int, rem: list[int], members: list[int]) -> None:
        if depth == n:
            flat = x.real.reshape(-1)
            if n:
                flat = np.transpose(flat.reshape((2,) * n), perm).reshape(-1)
            for i in members:
                out[i] = flat
            return
        l = order[depth]
        pos = rem.index(qubits[l])
        sub = rem[:pos] + rem[pos + 1 :]
        groups: dict[Hashable, list[int]] = {}
        for i in members:
            groups.setdefault(keys[i][l], []).append(i)
        for members_g in groups.values():
            e = effects[members_g[0]][l]
            y = _contract_qubit(x, pos, len(rem), e.transpose(0, 2, 1) if transposed else e)
            rec(y, depth + 1, sub, members_g)
            del y  # free this branch before the next one is built (peak memory)

    rec(x, 0, rem, list(range(len(effects))))
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
