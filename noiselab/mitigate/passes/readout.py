"""Readout correction from emulated, finite-shot calibration circuits.

Methods:

* ``per_qubit_inverse``: two calibration circuits (all qubits in 0, all in 1) give one 2x2
  assignment matrix per qubit (from the marginals); the measured distribution is multiplied by the
  tensor product of their inverses (applied axis by axis, never formed).
* ``full_inverse``: 2**n calibration circuits give the full assignment matrix over the measured
  qubits (correlated errors and crosstalk included); refused above 10 qubits.
* ``nearest_probability``: the per-qubit inverse, then the Euclidean projection of the
  quasi-probabilities onto the probability simplex (Smolin, Gambetta and Smith, PRL 108, 070502
  (2012): the nearest valid distribution, found by the sort-based algorithm).

Variance: the inversions are linear in the measured distribution, so a weight vector u on the
corrected distribution becomes A^-T u on the raw one; the calibration's own sampling noise enters
through dA^-1 = -A^-1 dA A^-1 (first order, exact in the limit of many calibration shots). For the
projection the delta method is used: on the support S of the projected vector the projection is
the affine map x -> x - mean_S(x) restricted to S, so u becomes 1_S (u - mean_S(u)) before the
inversion's pullback (valid while small perturbations do not change the support).
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field

from noiselab.common.counts import MAX_SHOTS, Count
from noiselab.common.errors import InputError
from noiselab.emulate.calibration import per_qubit_matrices
from noiselab.mitigate.base import (
    STAGE_CORRECT,
    Corrected,
    CorrectedDistribution,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
    cal_key,
)
from noiselab.mitigate.estimate import SourceKey
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant

MAX_FULL_QUBITS = 10


class ReadoutOptions(PassOptions):
    method: Literal["per_qubit_inverse", "full_inverse", "nearest_probability"] = (
        "per_qubit_inverse"
    )
    calibration_shots: Count | None = Field(
        default=4000,
        ge=0,
        le=MAX_SHOTS,
        description="shots per calibration circuit; 0 or null: exact matrices",
    )


@dataclass(frozen=True)
class ReadoutReport(PassReport):
    """The assignment errors the calibration gave, per variant label and logical qubit:
    ``(P(1|0), P(0|1))`` (per-qubit methods; the full inverse reports none)."""

    kind: ClassVar[str] = "readout"
    flips: Mapping[str, tuple[tuple[float, float], ...]]

    def details(self, run: ScoredRun) -> dict[str, Any]:
        if not self.flips:
            return {}
        return {
            "readout_assignment": {
                label: [{"flip_0to1": f01, "flip_1to0": f10} for f01, f10 in per_qubit]
                for label, per_qubit in self.flips.items()
            }
        }


def apply_per_qubit(mats: list[np.ndarray], vec: np.ndarray) -> np.ndarray:
    """(M_{n-1} x ... x M_0) vec, with ``mats[q]`` acting on qubit q (bit q of the index)."""
    t = np.asarray(vec, dtype=float)
    for q, m in enumerate(mats):
        # C order: viewed as (high bits, bit q, low bits), M acts on the middle axis
        t = np.matmul(m, t.reshape(-1, 2, 2**q)).reshape(-1)
    return t


@functools.lru_cache(maxsize=32)
def _bit_tables(n: int) -> tuple[np.ndarray, np.ndarray]:
    """(bits[q, k] = bit q of k as floats, flip[q, k] = k with bit q flipped)."""
    k = np.arange(2**n)
    q = np.arange(n)[:, None]
    return ((k[None, :] >> q) & 1).astype(float), k[None, :] ^ (1 << q)


def _calibration_gradients(
    v: np.ndarray, partial: np.ndarray, n: int
) -> tuple[np.ndarray, np.ndarray]:
    """Gradients of u . (A^-1 p) with respect to the all-0 and all-1 calibration distributions,
    given v = A^-T u and ``partial[b]`` = p with qubit b's inverse alone applied.

    With A = A_{n-1} x ... x A_0, d(A^-1) = -A^-1 dA A^-1 and dA = (x_{c != b} A_c) x dA_b, so
    d(u . A^-1 p) = -sum_{a,c} dA_b[a, c] G_b[a, c] with G_b[a, c] = sum_k v[k] partial_b[k']
    over k with bit b = a and k' = k with bit b set to c. P(1|0) of qubit b is the all-0
    outcomes' mean of bit b (P(0|1) likewise for all-1), which gives the gradients (up to a
    constant per source, which no variance sees).
    """
    bits, flip = _bit_tables(n)
    w = v[None, :] * partial  # w[b, k] = v[k] partial_b[k]
    g11 = (w * bits).sum(axis=1)
    g00 = w.sum(axis=1) - g11
    x = v[None, :] * np.take_along_axis(partial, flip, axis=1)  # v[k] partial_b[k ^ 2**b]
    g10 = (x * bits).sum(axis=1)
    g01 = x.sum(axis=1) - g10
    # A_b = [[1 - e0, e1], [e0, 1 - e1]]: de0 moves column 0 by (-1, +1), de1 column 1 by (+1, -1)
    u0 = -(g10 - g00) @ bits
    u1 = -(g01 - g11) @ (1.0 - bits)
    return u0, u1


def project_to_simplex(x: np.ndarray) -> np.ndarray:
    """Euclidean projection onto {p >= 0, sum p = 1} (sort-based)."""
    u = np.sort(x)[::-1]
    css = np.cumsum(u) - 1.0
    j = np.arange(1, len(x) + 1)
    rho = int(np.nonzero(u - css / j > 0)[0][-1])
    theta = css[rho] / (rho + 1.0)
    return np.maximum(x - theta, 0.0)


def _invertible(mat: np.ndarray, what: str) -> None:
    cond = np.linalg.cond(mat)
    if not np.isfinite(cond) or cond > 1e12:
        raise InputError(
            f"{what}: the estimated assignment matrix is singular (readout error near 50%)"
        )


class ReadoutPass(MitigationPass):
    """Readout correction with calibration estimated from its own finite-shot circuits."""

    name: ClassVar[str] = "readout"
    stage: ClassVar[int] = STAGE_CORRECT
    Options: ClassVar[type[PassOptions]] = ReadoutOptions
    options: ReadoutOptions

    def describe(self) -> str:
        return f"readout({self.options.method})"

    def check(self, ctx, where: str) -> None:
        n = ctx.plan.num_qubits
        if self.options.method == "full_inverse" and n > MAX_FULL_QUBITS:
            raise InputError(
                f"{where}.method: full_inverse needs 2**n calibration circuits and is limited to "
                f"{MAX_FULL_QUBITS} measured qubits (this problem has {n}); allowed: "
                "per_qubit_inverse, nearest_probability"
            )

    def calibration_states(self, n: int) -> tuple[int, ...]:
        if self.options.method == "full_inverse":
            return tuple(range(2**n))
        return (0, 2**n - 1)

    def correct(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Corrected:
        n = ws.ctx.plan.num_qubits
        states = self.calibration_states(n)
        shots = self.options.calibration_shots or None
        cal = ws.calibration(variant, states, shots)
        keys = [cal_key(variant, s) for s in states]
        if self.options.method == "full_inverse":
            full = {b: _full_inverse(d, cal, keys) for b, d in data.items()}
            return Corrected(full, ReadoutReport(flips={}))
        mats = per_qubit_matrices(cal[0], cal[1], n)
        for q, m in enumerate(mats):
            _invertible(m, f"readout calibration of logical qubit {q}")
        inv = [np.linalg.inv(m) for m in mats]
        out = {b: _per_qubit_inverse(d, inv, keys, n) for b, d in data.items()}
        if self.options.method == "nearest_probability":
            out = {b: _project(d) for b, d in out.items()}
        flips = tuple((float(m[1, 0]), float(m[0, 1])) for m in mats)
        return Corrected(out, ReadoutReport(flips={variant.label(): flips}))


def _per_qubit_inverse(
    d: CorrectedDistribution, inv: list[np.ndarray], keys: list[SourceKey], n: int
) -> CorrectedDistribution:
    q = apply_per_qubit(inv, d.probs)
    inv_t = [m.T for m in inv]
    raw = np.asarray(d.probs, dtype=float)

    def pullback(u: np.ndarray) -> dict[SourceKey, np.ndarray]:
        v = apply_per_qubit(inv_t, u)
        out = dict(d.pullback(v))
        # built per call, not kept: n x 2**n per basis would add up over hundreds of bases
        partial = np.stack(
            [np.matmul(m, raw.reshape(-1, 2, 2**b)).reshape(-1) for b, m in enumerate(inv)]
        )
        u0, u1 = _calibration_gradients(v, partial, n)
        for key, val in ((keys[0], u0), (keys[1], u1)):
            out[key] = out[key] + val if key in out else val
        return out

    return CorrectedDistribution(q, pullback)


def _full_inverse(
    d: CorrectedDistribution, cal: np.ndarray, keys: list[SourceKey]
) -> CorrectedDistribution:
    a = np.asarray(cal, dtype=float).T  # column j: measured distribution when preparing j
    _invertible(a, "readout calibration (full matrix)")
    q = np.linalg.solve(a, d.probs)

    def pullback(u: np.ndarray) -> dict[SourceKey, np.ndarray]:
        v = np.linalg.solve(a.T, u)
        out = dict(d.pullback(v))
        for j, key in enumerate(keys):
            if q[j] != 0.0:
                val = -q[j] * v
                out[key] = out[key] + val if key in out else val
        return out

    return CorrectedDistribution(q, pullback)


def _project(d: CorrectedDistribution) -> CorrectedDistribution:
    p = project_to_simplex(d.probs)
    support = p > 0

    def pullback(u: np.ndarray) -> dict[SourceKey, np.ndarray]:
        ju = np.where(support, u - u[support].mean(), 0.0)
        return d.pullback(ju)

    return CorrectedDistribution(p, pullback)
