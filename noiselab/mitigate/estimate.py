"""Analytic estimators and their single-shot variances; the multinomial sampling path.

Every estimate is carried with its *influence*: the gradient of the estimate with respect to the
outcome distribution of each raw data source (a measured basis of one circuit, or a readout
calibration circuit). A source measured with N shots then adds ``Var_p(u) / N`` to the variance,
with ``Var_p(u) = u**2 . p - (u . p)**2`` (exact for linear estimators, the delta method for
ratios and fits). Sources are independent (distinct circuits), so their variances add.
"""

from __future__ import annotations

from collections.abc import Hashable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

SourceKey = Hashable


@dataclass(frozen=True, eq=False)
class Estimate:
    """A scalar estimate (Ha) and its gradient vector per raw data source.

    Arithmetic follows the formulas, influences included: ``a + b`` and ``sum(...)`` (influences
    added source by source), ``a + c`` for a constant c (same influences), ``c * a`` and
    ``a / c`` for a scalar c, and ``a / b`` (:func:`ratio`, the delta method). The results are
    those of :func:`linear_combination` and :func:`ratio`, to the last bit.
    """

    value: float
    influence: Mapping[SourceKey, np.ndarray] = field(default_factory=dict)

    #: numpy scalars (np.float64 * Estimate) defer to the methods below
    __array_ufunc__ = None

    def scaled(self, factor: float) -> Estimate:
        return Estimate(self.value * factor, {k: v * factor for k, v in self.influence.items()})

    def __add__(self, other: Estimate | float) -> Estimate:
        if isinstance(other, Estimate):
            return linear_combination([1.0, 1.0], [self, other])
        return Estimate(self.value + float(other), self.influence)

    def __radd__(self, other: float) -> Estimate:  # sum() starts from 0
        return self + other

    def __mul__(self, factor: float) -> Estimate:
        if isinstance(factor, Estimate):
            return NotImplemented  # a product of estimates is not linear: no rule here
        return self.scaled(float(factor))

    __rmul__ = __mul__

    def __truediv__(self, other: Estimate | float) -> Estimate:
        if isinstance(other, Estimate):
            return ratio(self, other)
        d = float(other)
        return Estimate(self.value / d, {k: v / d for k, v in self.influence.items()})


def group_energy(probs: np.ndarray, weights: np.ndarray) -> float:
    """E_g = w . p (Ha)."""
    return float(np.dot(weights, probs))


def single_shot_variance(probs: np.ndarray, weights: np.ndarray) -> float:
    """Var_g = w**2 . p - (w . p)**2 (Ha**2); also right for quasi-probabilities' raw pullback."""
    mean = float(np.dot(weights, probs))
    return max(float(np.dot(weights * weights, probs)) - mean * mean, 0.0)


def standard_error(variances: np.ndarray, shots: np.ndarray) -> float:
    """sqrt(sum_g Var_g / N_g)."""
    v = np.asarray(variances, dtype=float)
    n = np.asarray(shots, dtype=float)
    return float(np.sqrt(np.sum(v / n)))


def total(estimates: Sequence[Estimate]) -> Estimate:
    """sum_i E_i in one pass (``sum(estimates)`` gives the same, copying the influences at each
    step: use this for the hundreds of groups of a plan)."""
    return linear_combination([1.0] * len(estimates), estimates)


def linear_combination(coeffs: Sequence[float], estimates: Sequence[Estimate]) -> Estimate:
    """sum_i c_i E_i with influences added source by source."""
    value = 0.0
    influence: dict[SourceKey, np.ndarray] = {}
    for c, est in zip(coeffs, estimates, strict=True):
        value += c * est.value
        for k, u in est.influence.items():
            influence[k] = influence[k] + c * u if k in influence else c * u
    return Estimate(value, influence)


def ratio(num: Estimate, den: Estimate) -> Estimate:
    """num / den with the delta-method gradient (u_num - R u_den) / den."""
    r = num.value / den.value
    # ordered union (not a set): the variance sums follow this order, and a set's order would
    # change with the string hash seed of each process (a worker would differ in the last bits)
    keys = list(dict.fromkeys([*num.influence, *den.influence]))
    influence = {}
    for k in keys:
        un = num.influence.get(k)
        ud = den.influence.get(k)
        u = (un if un is not None else 0.0) - r * (ud if ud is not None else 0.0)
        influence[k] = np.asarray(u, dtype=float) / den.value
    return Estimate(r, influence)


def source_variances(
    est: Estimate, probs: Mapping[SourceKey, np.ndarray]
) -> dict[SourceKey, float]:
    """Single-shot variance of the estimate's influence on each source (Ha**2 per shot)."""
    return {k: single_shot_variance(probs[k], u) for k, u in est.influence.items()}


def estimate_variance(
    est: Estimate,
    probs: Mapping[SourceKey, np.ndarray],
    shots: Mapping[SourceKey, int | None],
) -> float:
    """sum_sources Var_p(u) / N; sources with ``shots`` None (exact) contribute nothing."""
    return variance_from_sources(source_variances(est, probs), shots)


def variance_from_sources(
    svars: Mapping[SourceKey, float], shots: Mapping[SourceKey, int | None]
) -> float:
    """sum_sources Var_p(u) / N from single-shot variances per source (None shots: exact)."""
    total = 0.0
    for k, var in svars.items():
        n = shots.get(k)
        if n is None:
            continue
        if n <= 0:
            if var > 0:
                return float("inf")
            continue
        total += var / n
    return total


def sample_counts(probs: np.ndarray, shots: int, rng: np.random.Generator) -> np.ndarray:
    """Multinomial counts of ``shots`` draws (negative rounding noise clipped)."""
    p = np.clip(np.asarray(probs, dtype=float), 0.0, None)
    s = p.sum()
    if s <= 0:
        raise ValueError("cannot sample from an all-zero distribution")
    return rng.multinomial(int(shots), p / s)


def sample_distribution(probs: np.ndarray, shots: int, rng: np.random.Generator) -> np.ndarray:
    """Empirical distribution (counts / shots) of ``shots`` multinomial draws."""
    return sample_counts(probs, shots, rng) / float(shots)
