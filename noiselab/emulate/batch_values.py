"""Per-batch estimator values of the trajectory method, instead of per-batch distributions.

A trajectory batch's distribution ``p`` (2**n outcomes) enters every estimator of the
mitigation layer through linear functionals ``u . p``. Any ``u`` is a sum of parity functions:
``u . p = 2**-n sum_m W(u)[m] W(p)[m]`` with ``W`` the Walsh-Hadamard transform,
``W(p)[m] = sum_k p_k (-1)**popcount(k & m)`` (the expectation of the Z-string with support m).
The estimators of a plan read a few masks per basis (the support of each term, times the
symmetry operators a post-selection reads), so a batch keeps ``W(T p)[m]`` for those masks only;
``T`` is the identity or a per-qubit correction (the inverse assignment matrices of a readout
correction), for which ``u . p = (T^-T u) . (T p)``. :func:`batch_functional` recovers
``u . p_batch`` for every batch and refuses a ``u`` whose transform reaches masks not kept.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from noiselab.common.errors import NoiselabError

#: Relative weight of a functional's Walsh coefficients outside the kept masks that is tolerated
#: (rounding of the transform; anything larger means the estimator reads other masks).
RESIDUAL_TOL = 1e-9


def walsh(x: np.ndarray) -> np.ndarray:
    """Walsh-Hadamard transform over the last axis (length 2**n), unnormalized:
    ``out[..., m] = sum_k x[..., k] (-1)**popcount(k & m)``."""
    y = np.array(x, dtype=float)
    lead = y.shape[:-1]
    dim = y.shape[-1]
    h = 1
    while h < dim:
        v = y.reshape(*lead, dim // (2 * h), 2, h)
        a = v[..., 0, :].copy()
        v[..., 0, :] += v[..., 1, :]
        v[..., 1, :] *= -1.0
        v[..., 1, :] += a
        h *= 2
    return y


def apply_per_qubit_axes(mats: Sequence[np.ndarray], x: np.ndarray) -> np.ndarray:
    """``(M_{n-1} x ... x M_0)`` applied to the last axis of ``x`` (``mats[q]`` on bit q)."""
    y = np.asarray(x, dtype=float)
    lead = y.shape[:-1]
    dim = y.shape[-1]
    for q, m in enumerate(mats):
        v = y.reshape(*lead, dim // (2 ** (q + 1)), 2, 2**q)
        y = np.einsum("ab,...bk->...ak", np.asarray(m, dtype=float), v).reshape(*lead, dim)
    return y


@dataclass(frozen=True, eq=False)
class BatchValueSpec:
    """What a trajectory batch keeps: per basis (in the emulated order) the sorted masks whose
    Walsh values are stored, and the per-qubit transforms ``T`` (``None``: identity; else one
    2x2 matrix per logical qubit) applied before the transform."""

    masks: tuple[np.ndarray, ...]
    transforms: tuple[tuple[np.ndarray, ...] | None, ...] = (None,)

    @property
    def values_per_transform(self) -> int:
        return int(sum(len(m) for m in self.masks))

    @property
    def num_values(self) -> int:
        return self.values_per_transform * len(self.transforms)

    def reduce(self, probs: np.ndarray) -> np.ndarray:
        """The kept values of one batch's distributions ``(n_bases, 2**n)``, transform-major."""
        out = np.empty(self.num_values)
        pos = 0
        for t in self.transforms:
            w = walsh(probs if t is None else apply_per_qubit_axes(t, probs))
            for i, m in enumerate(self.masks):
                out[pos : pos + len(m)] = w[i, m.astype(np.int64)]
                pos += len(m)
            del w
        return out

    def transform_array(self, num_qubits: int) -> np.ndarray:
        """The transforms as one array ``(n_transforms, n, 2, 2)`` (identity for None)."""
        eye = np.broadcast_to(np.eye(2), (num_qubits, 2, 2))
        return np.array([eye if t is None else np.asarray(t, dtype=float) for t in self.transforms])


def batch_functional(
    values: np.ndarray,
    masks: np.ndarray,
    counts: np.ndarray,
    transforms: np.ndarray,
    basis_index: int,
    u: np.ndarray,
) -> np.ndarray:
    """``u . p_batch`` for every batch from the kept values (the stored layout of
    :class:`BatchValueSpec`: ``masks`` concatenated over bases, ``counts`` per basis,
    ``transforms (n_t, n, 2, 2)``). Tries each transform; raises when none reproduces ``u``."""
    u = np.asarray(u, dtype=float)
    dim = len(u)
    start = int(np.sum(counts[:basis_index]))
    mine = masks[start : start + int(counts[basis_index])].astype(np.int64)
    per_t = int(np.sum(counts))
    best = np.inf
    for t, mats in enumerate(transforms):
        w = apply_per_qubit_axes([np.linalg.inv(m).T for m in mats], u)
        coeff = walsh(w) / dim
        scale = float(np.abs(coeff).sum())
        outside = scale - float(np.abs(coeff[mine]).sum())
        if outside <= RESIDUAL_TOL * max(scale, 1e-300):
            block = values[:, t * per_t + start : t * per_t + start + len(mine)]
            return block @ coeff[mine]
        best = min(best, outside / max(scale, 1e-300))
    raise NoiselabError(
        f"trajectory error: an estimator reads outcome parities beyond the per-batch values kept "
        f"(relative weight {best:.2g} outside); allowed: run this recipe with the per-batch "
        "distributions (a study whose recipes all need no full distribution keeps values only)"
    )
