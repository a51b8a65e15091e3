"""Truncation error of Pauli propagation: the rigorous bound and a Monte Carlo estimate.

Truncation drops terms ``c_i P_i`` with ``program[:s_i]`` still ahead; the propagated value
misses exactly ``sum_i c_i f_i`` with ``f_i`` the value on ``|0...0>`` of ``P_i`` carried
through ``program[:s_i]``. The rigorous bound ``sum_i |c_i|`` (``|f_i| <= 1``) is far from
tight: most dropped strings are damped by the noise still ahead or vanish on the initial state.

**Estimate** (an estimate with a standard error, not a bound), in two parts. (1) A check run at
the finer threshold ``finer * threshold``: its difference to the main run is what the terms
between the two thresholds contribute (deterministic; most of the error, as dropped terms are
damped by the noise still ahead). (2) What the check run itself drops: every such term is kept
independently with probability ``p_i = min(1, |c_i| / tau)`` (Poisson sampling; ``tau`` per
observable: its dropped mass over ``samples``, so about ``samples`` terms are kept) and
carried on to the start with the threshold ``refine * mass / samples``; the Horvitz-Thompson sum
``sum_kept c_i f_i / p_i`` is unbiased for the missing part (Horvitz and Thompson 1952), up to
what the continuation itself drops (``residual``: a bound, in the same units). Error bar: the
kept terms with ``p_i < 1`` are spread at random over ``batches`` batches; ``batches`` times the
variance of the batch sums estimates the variance (conservative for Poisson sampling: the
batches are slightly anti-correlated). The random numbers are a hash of (seed, tag, step,
string): the same draws whatever the grouping or order of the work, so a group propagated
alone (in a worker) gives the same numbers as in a joint run.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from noiselab.emulate.pauli_propagation import (
    Instruction,
    PauliTerms,
    Propagated,
    Truncation,
    propagate,
)

_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_BATCH_SALT = np.uint64(0x9E3779B97F4A7C15)


@dataclass(frozen=True)
class Sampling:
    """How the truncation error is estimated (see the module docstring).

    ``seed``: of the hash; ``samples``: expected kept terms per observable; ``batches``: for
    the error bar; ``finer``: the check run's threshold over the main one (1: no check run);
    ``refine``: continuation threshold over mass / samples; ``tag_step``: only tags divisible by it
    are estimated (e.g. 2: means, not second moments)."""

    seed: int
    samples: int = 1024
    batches: int = 16
    finer: float = 0.1
    refine: float = 0.1
    tag_step: int = 1


@dataclass(frozen=True)
class TruncationEstimate:
    """Per tag: estimated truncation error of the main run's value (add it to the value to
    correct), its standard error, and a bound on what the estimate's own continuation dropped
    (rigorous, as loose as any dropped-mass bound); all in the observable's units. ``kept``:
    dropped terms carried on; ``check_bound``: the check run's dropped-mass bound."""

    estimate: np.ndarray  # float64 (n_tags,)
    std: np.ndarray  # float64 (n_tags,)
    residual: np.ndarray  # float64 (n_tags,)
    check_bound: np.ndarray  # float64 (n_tags,)
    kept: int
    peak_strings: int  # of the check run and the continuation


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
        if s.tag_step > 1:
            lost = lost.select(lost.tag % s.tag_step == 0)
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
    check_observable: PauliTerms | None = None,
) -> tuple[Propagated, TruncationEstimate]:
    """:func:`propagate` with ``rule``, and the estimate of what its truncation missed;
    ``check_observable``: the same observables expanded more finely, for the check run (None:
    ``observable``; tags absent from it count as not estimated)."""
    main = propagate(observable, program, rule)
    check_rule = dataclasses.replace(rule, min_abs_coeff=rule.min_abs_coeff * sampling.finer)
    check_obs = observable if check_observable is None else check_observable
    check, est = _sampled(check_obs, program, check_rule, sampling)
    n = max(len(main.values), len(check.values))
    diff = _pad(check.values, n) - _pad(main.values, n)
    diff[np.arange(n) % max(int(sampling.tag_step), 1) != 0] = 0.0
    out = dataclasses.replace(
        est,
        estimate=diff + _pad(est.estimate, n),
        std=_pad(est.std, n),
        residual=_pad(est.residual, n),
        check_bound=_pad(check.bounds, n),
        peak_strings=max(est.peak_strings, check.peak_strings),
    )
    return main, out


def _pad(a: np.ndarray, n: int) -> np.ndarray:
    out = np.zeros(n)
    out[: min(n, len(a))] = a[:n]
    return out


def _sampled(
    observable: PauliTerms,
    program: Sequence[Instruction],
    rule: Truncation,
    sampling: Sampling,
) -> tuple[Propagated, TruncationEstimate]:
    """:func:`propagate` with ``rule`` and the Monte Carlo estimate of what it dropped."""
    tau0 = rule.min_abs_coeff if rule.min_abs_coeff > 0 else 1e-9
    collect = _Collector(sampling, tau0)
    main = propagate(observable, program, rule, on_drop=collect)
    n_tags = len(main.bounds)
    tau = np.maximum(tau0, main.bounds / max(int(sampling.samples), 1))
    b = max(int(sampling.batches), 2)
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
        batch[p >= 1.0] = b  # kept for sure: no randomness, no batch
        tag = lost.tag * (b + 1) + batch
        inject.setdefault(step, []).append(PauliTerms(lost.x, lost.z, lost.coeff / p, tag))
    zero = np.zeros(n_tags)
    if not inject:
        return main, TruncationEstimate(zero, zero, zero, main.bounds, 0, 0)
    joined = {step: PauliTerms.join(parts) for step, parts in inject.items()}
    empty = np.zeros(0, dtype=np.uint64)
    start = PauliTerms(empty, empty, np.zeros(0), np.zeros(0, dtype=np.int64))
    # relative to the dropped mass per sample, not to tau: where little is dropped (tau at its
    # floor) the few carried terms are continued almost exactly
    per_sample = main.bounds / max(int(sampling.samples), 1)
    cut = np.repeat(sampling.refine * np.maximum(per_sample, 1e-15), b + 1)
    carry = Truncation(max_strings=rule.max_strings)
    cont = propagate(start, program, carry, cut=cut, inject=joined)
    per = _pad(cont.values, n_tags * (b + 1)).reshape(n_tags, b + 1)
    residual = _pad(cont.bounds, n_tags * (b + 1)).reshape(n_tags, b + 1).sum(axis=1)
    estimate = per.sum(axis=1)
    std = np.sqrt(b * per[:, :b].var(axis=1, ddof=1))
    return main, TruncationEstimate(
        estimate, std, residual, main.bounds, kept, max(main.peak_strings, cont.peak_strings)
    )
