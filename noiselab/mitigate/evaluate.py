"""Recipe step 1, *evaluate*: the passes of a recipe on measured distributions (exact or drawn).

Per circuit variant the correction passes, then the estimator pass (or the plan estimate); then
the combination pass across variants. Readout-calibration circuits are read through a
:class:`CalibrationSource` (exact, or drawn from an rng), which records each calibration source
and its shots. An :class:`EstimateMemo` shares each variant's outcome across the recipes of one
job (exact inputs only).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from noiselab.mitigate.base import (
    STAGE_COMBINE,
    STAGE_CORRECT,
    STAGE_ESTIMATE,
    MitigationPass,
    VariantData,
    Workspace,
    cal_key,
    meas_key,
    plan_estimate,
    raw_distribution,
)
from noiselab.mitigate.estimate import Estimate, SourceKey, sample_distribution, source_variances
from noiselab.mitigate.experiment import Calibrator, ExperimentContext
from noiselab.mitigate.reports import PassReport
from noiselab.mitigate.variants import CircuitVariant

Distributions = Mapping[CircuitVariant, Mapping[str, np.ndarray]]
CalibrationCall = tuple[CircuitVariant, tuple[int, ...], int | None]
Calibration = Callable[[CircuitVariant, tuple[int, ...], int | None], np.ndarray]


@dataclass(frozen=True, eq=False)
class CalibrationUse:
    """The calibration sources one evaluation read: exact distributions, those used (exact or
    drawn) and their shots (None: exact), by source key."""

    exact: Mapping[SourceKey, np.ndarray]
    used: Mapping[SourceKey, np.ndarray]
    shots: Mapping[SourceKey, int | None]


class CalibrationSource:
    """Calibration distributions for one evaluation: exact (``rng`` None) or drawn from ``rng``;
    each source is drawn once and recorded (:meth:`use`).

    ``record``: drawn calibrations kept across evaluations (source key -> (shots, drawn
    distribution)): a source found there is reused, not drawn again, and a new draw is added to
    it, so a loop of evaluations calibrates once, as a real run does."""

    def __init__(
        self,
        calibrator: Calibrator,
        rng: np.random.Generator | None = None,
        record: dict[Any, tuple[int, np.ndarray]] | None = None,
    ) -> None:
        self.calibrator = calibrator
        self.rng = rng
        self.record = record
        self._exact: dict[Any, np.ndarray] = {}
        self._used: dict[Any, np.ndarray] = {}
        self._shots: dict[Any, int | None] = {}

    @property
    def exact_only(self) -> bool:
        return self.rng is None

    def __call__(
        self, variant: CircuitVariant, states: tuple[int, ...], shots: int | None
    ) -> np.ndarray:
        exact = np.asarray(self.calibrator(variant.calibration_variant(), tuple(states)), float)
        out = np.empty_like(exact)
        for i, s in enumerate(states):
            key = cal_key(variant, s)
            if key not in self._used:
                self._exact[key] = exact[i]
                self._shots[key] = shots
                if shots is None or self.rng is None:
                    self._used[key] = exact[i]
                elif self.record is not None and key in self.record:
                    self._used[key] = self.record[key][1]
                else:
                    self._used[key] = sample_distribution(exact[i], shots, self.rng)
                    if self.record is not None:
                        self.record[key] = (int(shots), self._used[key])
            out[i] = self._used[key]
        return out

    def use(self) -> CalibrationUse:
        return CalibrationUse(dict(self._exact), dict(self._used), dict(self._shots))


@dataclass(frozen=True, eq=False)
class VariantOutcome:
    """One variant after the per-variant passes: its estimate and the reports (pass name,
    report) in pass order."""

    estimate: Estimate
    reports: tuple[tuple[str, PassReport], ...]


@dataclass(frozen=True, eq=False)
class Evaluation:
    """Output of :func:`evaluate`: the recipe's estimate, each variant's, the passes' reports
    (merged over the variants, by pass name), the fixed variances of the combination (Ha**2) and
    the calibration sources read."""

    estimate: Estimate
    per_variant: Mapping[CircuitVariant, Estimate]
    reports: Mapping[str, PassReport]
    fixed_variance: Mapping[str, float]
    calibration: CalibrationUse


@dataclass(frozen=True, eq=False)
class _MemoEntry:
    outcome: VariantOutcome
    calibration_calls: tuple[CalibrationCall, ...]


class EstimateMemo:
    """Per-variant outcomes shared by the recipes of one job (e.g. the settings of a tune grid).

    Settings that differ only in their combination stage (scale set, fit) need the same
    correction and estimate of each circuit variant; with a memo each is computed once. An entry
    is keyed by the context, runner and calibrator (by identity), the variant, the cache keys of
    the correction and estimator passes, and the bases read; it keeps the estimate, the passes'
    reports and the calibration circuits they read (replayed on a hit, so shots and variances are
    registered as without the memo). Only exact evaluations are stored: sampled ones bypass the
    memo. Create one per job and pass it to every ``run_recipe`` of the job; results are
    bit-identical.
    """

    def __init__(self) -> None:
        self._entries: dict[tuple[Any, ...], _MemoEntry] = {}
        # id -> (estimate, single-shot variance per source); the estimate keeps the id unique
        self._variances: dict[int, tuple[Estimate, dict[Any, float]]] = {}
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        return len(self._entries)

    def source_variances(self, est: Estimate, probs: Mapping[Any, np.ndarray]) -> dict[Any, float]:
        """:func:`source_variances` of a stored estimate on the exact distributions (which
        every recipe of the job shares), computed once per estimate."""
        hit = self._variances.get(id(est))
        if hit is None or hit[0] is not est:
            hit = (est, source_variances(est, probs))
            self._variances[id(est)] = hit
        return hit[1]

    def outcome(
        self,
        key: tuple[Any, ...],
        cal: CalibrationSource,
        compute: Callable[[Calibration], VariantOutcome],
    ) -> VariantOutcome:
        """The stored outcome under ``key`` (its calibration reads replayed on ``cal``), or
        ``compute(calibration)`` stored."""
        entry = self._entries.get(key)
        if entry is None:
            calls: list[CalibrationCall] = []

            def recording(
                v: CircuitVariant, states: tuple[int, ...], shots: int | None
            ) -> np.ndarray:
                calls.append((v, tuple(states), shots))
                return cal(v, states, shots)

            entry = _MemoEntry(compute(recording), tuple(calls))
            self._entries[key] = entry
            self.misses += 1
            return entry.outcome
        self.hits += 1
        for v, states, shots in entry.calibration_calls:
            cal(v, states, shots)  # registers the calibration sources and their shots
        return entry.outcome


def variant_outcome(
    corrects: Sequence[MitigationPass],
    estimator: MitigationPass | None,
    variant: CircuitVariant,
    bases: tuple[str, ...],
    ws: Workspace,
) -> VariantOutcome:
    """Correction passes, then the estimator (or the plan estimate), on one variant's data."""
    data: VariantData = {
        b: raw_distribution(meas_key(variant, b), ws.measured[variant][b]) for b in bases
    }
    reports: list[tuple[str, PassReport]] = []
    for p in corrects:
        corrected = p.correct(variant, data, ws)
        data = corrected.data
        if corrected.report is not None:
            reports.append((p.name, corrected.report))
    if estimator is None:
        return VariantOutcome(plan_estimate(ws.ctx, data), tuple(reports))
    estimated = estimator.estimate(variant, data, ws)
    if estimated.report is not None:
        reports.append((estimator.name, estimated.report))
    return VariantOutcome(estimated.estimate, tuple(reports))


def _merge(into: dict[str, PassReport], name: str, report: PassReport) -> None:
    into[name] = into[name].merge(report) if name in into else report


def evaluate(
    passes: Sequence[MitigationPass],
    ctx: ExperimentContext,
    variants: tuple[CircuitVariant, ...],
    bases: tuple[str, ...],
    measured: Distributions,
    cal: CalibrationSource,
    memo: EstimateMemo | None = None,
    memo_scope: tuple[Any, ...] = (),
) -> Evaluation:
    """The recipe ``passes`` on ``measured`` (variant -> basis -> distribution) and the
    calibration read through ``cal`` (which, with an rng, also drives the passes' own draws)."""
    corrects = [p for p in passes if p.stage == STAGE_CORRECT]
    estimator = next((p for p in passes if p.stage == STAGE_ESTIMATE), None)
    ws = Workspace(
        ctx=ctx,
        measured=measured,
        calibration=cal,
        rng=cal.rng,
        estimator=estimator,
        corrections=tuple(corrects),
    )
    combiner = next((p for p in passes if p.stage == STAGE_COMBINE), None)
    stage_keys = tuple(p.cache_key() for p in [*corrects, *([estimator] if estimator else [])])
    per_variant: dict[CircuitVariant, Estimate] = {}
    reports: dict[str, PassReport] = {}
    for v in variants:
        if memo is not None and cal.exact_only:
            key = (ctx, cal.calibrator, *memo_scope, v, stage_keys, bases)

            def compute(recording: Calibration, v: CircuitVariant = v) -> VariantOutcome:
                sub = Workspace(ctx=ctx, measured=measured, calibration=recording)
                return variant_outcome(corrects, estimator, v, bases, sub)

            outcome = memo.outcome(key, cal, compute)
        else:
            outcome = variant_outcome(corrects, estimator, v, bases, ws)
        per_variant[v] = outcome.estimate
        for name, report in outcome.reports:
            _merge(reports, name, report)
    if combiner is None:
        return Evaluation(per_variant[variants[0]], per_variant, reports, {}, cal.use())
    combined = combiner.combine(variants, [per_variant[v] for v in variants], ws)
    if combined.report is not None:
        _merge(reports, combiner.name, combined.report)
    return Evaluation(
        combined.estimate, per_variant, reports, dict(combined.fixed_variance), cal.use()
    )
