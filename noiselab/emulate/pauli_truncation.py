"""Truncation error of Pauli propagation: the rigorous bound, a Monte Carlo estimate, a limit.

Truncation drops terms ``c_i P_i`` with ``program[:s_i]`` still ahead; the propagated value
misses exactly ``sum_i c_i f_i`` with ``f_i`` the value on ``|0...0>`` of ``P_i`` carried
through ``program[:s_i]``. The rigorous bound ``sum_i |c_i|`` (``|f_i| <= 1``) is far from
tight: most dropped strings are damped by the noise still ahead or vanish on the initial state.

**Estimate** (an estimate with a standard error, not a bound): every dropped term is kept
independently with probability ``p_i = min(1, |c_i| / tau)`` (Poisson sampling; ``tau`` per
observable: ``keep_factor`` times the threshold, raised to its dropped mass over ``samples``
where that is larger) and carried on to the start, truncated on the way by Russian roulette at
``refine * tau`` (a term below survives with probability ``|c| / cut`` as ``sign(c) cut``:
unbiased); the Horvitz-Thompson sum ``sum_kept c_i f_i / p_i`` is unbiased for the missing part
(Horvitz and Thompson 1952), up to what the observables' expansion dropped before propagating
(``residual``: a rigorous bound, small as the expansion runs far below the threshold). Its
variance ``sum_i c_i^2 f_i^2 (1 - p_i) / p_i <= tau
sum_i |c_i| f_i^2`` shrinks with ``tau``: a smaller ``keep_factor`` carries more terms for a
tighter estimate. Error bar: the kept terms with ``p_i < 1`` are spread at random over
``batches`` batches; ``batches`` times the variance of the batch sums estimates their variance
(conservative for Poisson sampling: the batches are slightly anti-correlated). The terms kept for
sure (``p_i = 1``) have no sampling randomness, but their continuation's roulette has: they are
spread over ``batches`` groups, each carried twice at half weight with independent draws, and
the sum of the squared replica differences estimates that variance. The random
numbers are a hash of (seed, tag, step, string): the same draws whatever the grouping or order
of the work, so a group propagated alone (in a worker) gives the same numbers as in a joint run.

**Limit** (:func:`truncation_limit`): ``|estimate| + 3 standard errors``, a statistical bound
on the truncation error (it holds with about 99.7 % probability when the estimate is normal),
reported beside the rigorous bound; not rigorous, and said so wherever it is shown.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from noiselab.emulate.pauli_propagation import (
    Instruction,
    PauliTerms,
    Propagated,
    Roulette,
    Truncation,
    propagate,
)

_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_BATCH_SALT = np.uint64(0x9E3779B97F4A7C15)
_ROULETTE_SALT = np.uint64(0xD6E8FEB86659FD93)


#: Default smallest ``tau`` over the threshold. With ``refine`` 1 (roulette at ``tau``) the
#: variance times the time falls as ``keep_factor`` does (hchain-10 at 1e-4: 1/16 and refine 0.1
#: 0.95 mHa in 17 s; 1/64: 0.47 mHa in 13 s; 1/256: 0.14 mHa in 48 s); 1/64 keeps the time.
KEEP_FACTOR = 1.0 / 64.0


@dataclass(frozen=True)
class Sampling:
    """How the truncation error is estimated (see the module docstring).

    ``seed``: of the hash; ``keep_factor``: the smallest ``tau`` over the threshold (smaller:
    more terms carried, a smaller standard error); ``samples``: expected kept terms per
    observable where the dropped mass would keep more at the smallest ``tau``; ``batches``: for
    the error bar; ``refine``: continuation threshold over ``tau``."""

    seed: int
    keep_factor: float = KEEP_FACTOR
    samples: int = 65536
    batches: int = 16
    refine: float = 1.0


#: Standard errors in the statistical limit on the truncation error (two-sided 99.7 % for a
#: normal estimate; common practice, no source).
LIMIT_SIGMAS = 3.0


def truncation_limit(estimate: float, std: float) -> float:
    """Statistical bound on the truncation error: ``|estimate| + LIMIT_SIGMAS * std`` (same
    units as its inputs; not rigorous, see the module docstring)."""
    return abs(float(estimate)) + LIMIT_SIGMAS * float(std)


@dataclass(frozen=True)
class TruncationEstimate:
    """Per tag: estimated truncation error of the main run's value (add it to the value to
    correct), its standard error, and a rigorous bound on what the continuation dropped for good
    (a weight cut; the roulette drops nothing unaccounted); all in the observable's units.
    ``kept``: dropped terms carried on."""

    estimate: np.ndarray  # float64 (n_tags,)
    std: np.ndarray  # float64 (n_tags,)
    residual: np.ndarray  # float64 (n_tags,)
    kept: int
    peak_strings: int  # of the continuation


def _mix(h: np.ndarray) -> np.ndarray:
    """splitmix64 finalizer (Steele, Lea and Flood 2014), elementwise on uint64."""
    h = (h ^ (h >> np.uint64(30))) * _M1
    h = (h ^ (h >> np.uint64(27))) * _M2
    return h ^ (h >> np.uint64(31))


def _hash(seed: int, tag: np.ndarray, step: int, x: np.ndarray, z: np.ndarray) -> np.ndarray:
    key = np.uint64(seed % 2**64) ^ (tag.astype(np.uint64) << np.uint64(40)) ^ np.uint64(step)
    with np.errstate(over="ignore"):
        return _mix(_mix(_mix(key) ^ x) ^ z)


def _uniform(h: np.ndarray) -> np.ndarray:
    return (h >> np.uint64(11)).astype(np.float64) * 2.0**-53


class _Collector:
    """Keeps every dropped term that any ``tau >= tau0`` could keep (stage one)."""

    def __init__(self, sampling: Sampling, tau0: float) -> None:
        self.sampling, self.tau0 = sampling, tau0
        self.parts: list[tuple[int, PauliTerms, np.ndarray]] = []

    def __call__(self, step: int, lost: PauliTerms) -> None:
        s = self.sampling
        h = _hash(s.seed, lost.tag, step, lost.x, lost.z)
        u = _uniform(h)
        keep = u * self.tau0 < np.abs(lost.coeff)  # u < min(1, |c| / tau0)
        if keep.any():
            self.parts.append((step, lost.select(keep), h[keep]))


def propagate_estimated(
    observable: PauliTerms,
    program: Sequence[Instruction],
    rule: Truncation,
    sampling: Sampling,
) -> tuple[Propagated, TruncationEstimate]:
    """:func:`propagate` with ``rule``, and the Monte Carlo estimate of what its truncation
    missed (see the module docstring)."""
    tau0 = rule.min_abs_coeff * sampling.keep_factor if rule.min_abs_coeff > 0 else 1e-12
    collect = _Collector(sampling, tau0)
    main = propagate(observable, program, rule, on_drop=collect)
    n_tags = len(main.bounds)
    tau = np.maximum(tau0, main.bounds / max(int(sampling.samples), 1))
    b = max(int(sampling.batches), 2)
    slots = 3 * b  # per tag: b Poisson batches, then b groups of sure terms in two replicas
    inject: dict[int, list[PauliTerms]] = {}
    kept = 0
    for step, lost, h in collect.parts:
        p = np.minimum(1.0, np.abs(lost.coeff) / tau[lost.tag])
        keep = _uniform(h) < p
        if not keep.any():
            continue
        lost, h, p = lost.select(keep), h[keep], p[keep]
        kept += len(lost)
        with np.errstate(over="ignore"):
            batch = (_mix(h ^ _BATCH_SALT) % np.uint64(b)).astype(np.int64)
        sure = p >= 1.0
        base = lost.tag * slots
        # a sure term (p = 1) has no sampling randomness but its continuation's roulette has:
        # two half-weight replicas with independent draws measure it
        tag = np.concatenate([base + np.where(sure, b, 0) + batch, (base + 2 * b + batch)[sure]])
        coeff = np.concatenate([np.where(sure, 0.5, 1.0 / p) * lost.coeff, 0.5 * lost.coeff[sure]])
        x = np.concatenate([lost.x, lost.x[sure]])
        z = np.concatenate([lost.z, lost.z[sure]])
        inject.setdefault(step, []).append(PauliTerms(x, z, coeff, tag))
    zero = np.zeros(n_tags)
    if not inject:
        return main, TruncationEstimate(zero, zero, zero, 0, 0)
    joined = {step: PauliTerms.join(parts) for step, parts in inject.items()}
    empty = np.zeros(0, dtype=np.uint64)
    start = PauliTerms(empty, empty, np.zeros(0), np.zeros(0, dtype=np.int64))
    # relative to tau, the least weight of a carried term (half of it for the replicas): each
    # is continued to about ``refine``, below which the roulette decides
    scale = np.concatenate([np.ones(b), np.full(2 * b, 0.5)])
    cut = (sampling.refine * tau[:, None] * scale[None, :]).ravel()
    carry = Truncation(max_strings=rule.max_strings)
    cont = propagate(start, program, carry, cut=cut, inject=joined, roulette=_roulette(sampling))
    per = _pad(cont.values, n_tags * slots).reshape(n_tags, slots)
    residual = _pad(cont.bounds, n_tags * slots).reshape(n_tags, slots).sum(axis=1)
    estimate = per.sum(axis=1)
    replicas = per[:, b : 2 * b] - per[:, 2 * b :]
    var = b * per[:, :b].var(axis=1, ddof=1) + np.square(replicas).sum(axis=1)
    std = np.sqrt(var)
    return main, TruncationEstimate(estimate, std, residual, kept, int(cont.peak_strings))


def _roulette(sampling: Sampling) -> Roulette:
    """Russian-roulette draws for the continuation, hashed like the sampling's."""
    salt = np.uint64(sampling.seed % 2**64) ^ _ROULETTE_SALT

    def draw(step: int, terms: PauliTerms) -> np.ndarray:
        with np.errstate(over="ignore"):
            return _uniform(_hash(int(salt), terms.tag, step, terms.x, terms.z))

    return draw


def _pad(a: np.ndarray, n: int) -> np.ndarray:
    out = np.zeros(n)
    out[: min(n, len(a))] = a[:n]
    return out
