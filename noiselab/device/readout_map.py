"""Readout error of a device profile on a patch, for the emulator: per-qubit assignment
matrices, joint flips, outcome-dependent flips, and the dense map for checks.

Convention (REFERENCES.md, readout): ``A[measured, prepared]`` per qubit; a probability vector
over the patch's qubits has entry m with bit_q = (m >> q) & 1. The full map is
M = (prod of joint flips C_ij) @ (prod of outcome-dependent flips K_ij, pairs ascending)
@ (A_{k-1} x ... x A_0) (see :mod:`noiselab.device.profile` for the keys).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from noiselab.common.errors import ProblemTooLargeError
from noiselab.device.profile import DeviceProfile, check_patch


def readout_matrices(profile: DeviceProfile, patch: Sequence[int]) -> np.ndarray:
    """Per-qubit assignment matrices, shape (k, 2, 2); columns are the prepared state:
    A = [[1 - P(1|0), P(0|1)], [P(1|0), 1 - P(0|1)]]."""
    patch = check_patch(profile, patch)
    out = np.empty((len(patch), 2, 2))
    for i, q in enumerate(patch):
        qp = profile.qubit(q)
        out[i] = [
            [1.0 - qp.flip_0to1, qp.flip_1to0],
            [qp.flip_0to1, 1.0 - qp.flip_1to0],
        ]
    return out


def readout_crosstalk(
    profile: DeviceProfile, patch: Sequence[int]
) -> tuple[tuple[int, int, float], ...]:
    """Joint-flip terms ``(i, j, c)`` on circuit qubits i < j of the patch (c > 0 only).

    On a probability vector p over the k circuit qubits (entry m has bit_q = (m >> q) & 1) each
    term maps p -> (1 - c) p + c p[m ^ (1<<i) ^ (1<<j)], applied after the per-qubit matrices.
    """
    patch = check_patch(profile, patch)
    out = []
    for i, qi in enumerate(patch):
        for j in range(i + 1, len(patch)):
            c = profile.joint_flip(qi, patch[j])
            if c > 0.0:
                out.append((i, j, c))
    return tuple(out)


def conditional_flip_matrix(flip_i: float, flip_j: float) -> np.ndarray:
    """4x4 map on a pair (index bit_i + 2 bit_j, columns the bits before it): i's bit flips
    with ``flip_i`` when j's bit is 1, j's with ``flip_j`` when i's is 1, independently."""
    m = np.zeros((4, 4))
    for v in range(4):
        bi, bj = v & 1, v >> 1
        pi, pj = flip_i * bj, flip_j * bi
        for fi, wi in ((0, 1.0 - pi), (1, pi)):
            for fj, wj in ((0, 1.0 - pj), (1, pj)):
                m[(bi ^ fi) + 2 * (bj ^ fj), v] += wi * wj
    return m


def _left_local(m: np.ndarray, qubits: Sequence[int], local: np.ndarray) -> np.ndarray:
    """``local`` (2^len(qubits) square, bit l of its index = bit ``qubits[l]``) applied to the
    row index of the dense map ``m``."""
    idx = np.arange(m.shape[0])
    mask = sum(1 << q for q in qubits)
    y = sum(((idx >> q) & 1) << l for l, q in enumerate(qubits))
    out = np.zeros_like(m)
    for v in range(len(local)):
        src = (idx & ~mask) | sum(((v >> l) & 1) << q for l, q in enumerate(qubits))
        out += local[y, v][:, None] * m[src, :]
    return out


def _twirled_group_map(
    profile: DeviceProfile,
    patch: tuple[int, ...],
    group: list[int],
    cond: list[tuple[int, int, np.ndarray]],
) -> np.ndarray:
    """The term that, after the twirled profile's symmetric per-qubit matrices of ``group``
    (circuit qubits), gives the exact measurement-twirl average of the conditional flips and the
    original per-qubit matrices there: avg_s X_s (prod K) (x A) X_s, times (x A_sym)^-1."""
    original = {q: (f01, f10) for q, f01, f10 in profile.untwirled_readout_flips}
    dim = 2 ** len(group)
    pos = {c: l for l, c in enumerate(group)}
    full = np.eye(dim)
    sym_inv = np.eye(dim)
    for l, c in enumerate(group):
        qp = profile.qubit(patch[c])
        f01, f10 = original.get(patch[c], (qp.flip_0to1, qp.flip_1to0))
        a = np.array([[1.0 - f01, f10], [f01, 1.0 - f10]])
        full = _left_local(full, [l], a)
        sym = np.array([[1.0 - qp.flip_0to1, qp.flip_1to0], [qp.flip_0to1, 1.0 - qp.flip_1to0]])
        sym_inv = _left_local(sym_inv, [l], np.linalg.pinv(sym))
    for i, j, k4 in cond:
        full = _left_local(full, [pos[i], pos[j]], k4)
    idx = np.arange(dim)
    for l in range(len(group)):  # the average over all s is the product of one-bit averages
        flip = idx ^ (1 << l)
        full = 0.5 * (full + full[np.ix_(flip, flip)])
    return full @ sym_inv


def readout_terms(
    profile: DeviceProfile, patch: Sequence[int], measured: Sequence[int] | None = None
) -> list[tuple[Any, ...]]:
    """Readout crosstalk on circuit qubits, in the order it acts after the per-qubit matrices:
    the conditional flips ``(i, j, K)`` (4x4, index bit_i + 2 bit_j; pairs ascending), then the
    joint flips ``(i, j, c)``. Only pairs whose two qubits are in ``measured`` (default all).
    On a measurement-twirled profile (``untwirled_readout_flips`` set) the conditional flips
    become one term ``(qubits, G)`` on the qubits they touch: the exact twirl average."""
    patch = check_patch(profile, patch)
    keep = set(range(len(patch)) if measured is None else measured)
    cond = []
    for i, qi in enumerate(patch):
        for j in range(i + 1, len(patch)):
            if i in keep and j in keep and profile.has_pair(qi, patch[j]):
                fi, fj = profile.conditional_flips(qi, patch[j])
                if fi > 0.0 or fj > 0.0:
                    cond.append((i, j, conditional_flip_matrix(fi, fj)))
    joint = [(i, j, c) for i, j, c in readout_crosstalk(profile, patch) if i in keep and j in keep]
    if cond and profile.untwirled_readout_flips:
        group = sorted({q for i, j, _ in cond for q in (i, j)})
        return [(tuple(group), _twirled_group_map(profile, patch, group, cond)), *joint]
    return [*cond, *joint]


MAX_DENSE_READOUT_QUBITS = 12


def readout_transfer_matrix(profile: DeviceProfile, patch: Sequence[int]) -> np.ndarray:
    """Dense readout map M (2^k x 2^k, columns = true outcome) including crosstalk.

    M = (prod of C_ij) @ (prod of K_ij) @ (A_{k-1} x ... x A_0), C_ij = (1 - c) I + c F_ij, K_ij
    the conditional flips (:func:`readout_terms`). For checks; k <= 12.
    """
    patch = check_patch(profile, patch)
    k = len(patch)
    if k > MAX_DENSE_READOUT_QUBITS:
        raise ProblemTooLargeError(
            f"readout matrix: {k} qubits; "
            f"allowed: at most {MAX_DENSE_READOUT_QUBITS} for the dense form"
        )
    mats = readout_matrices(profile, patch)
    m = np.ones((1, 1))
    for a in mats:  # qubit 0 ends up least significant
        m = np.kron(a, m)
    idx = np.arange(2**k)
    for term in readout_terms(profile, patch):
        if len(term) == 2:
            m = _left_local(m, term[0], term[1])
        elif np.ndim(term[2]) == 2:
            m = _left_local(m, term[:2], term[2])
        else:
            i, j, c = term
            flipped = idx ^ (1 << i) ^ (1 << j)
            m = (1.0 - c) * m + c * m[flipped, :]
    return m
