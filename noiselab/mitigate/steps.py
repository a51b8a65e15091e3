"""Recipe steps after :func:`noiselab.mitigate.evaluate.evaluate`: *allocate* the shot budget,
the *variance* of the estimate by source, *score* it against the target, and the JSON details.

Each step is a function of typed, frozen inputs to a typed, frozen output; ``run_recipe``
chains them (measure, evaluate exactly, allocate, draw and evaluate again when sampled,
variance, score).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from noiselab.common.errors import NoiselabError
from noiselab.common.units import HA_TO_MHA
from noiselab.mitigate.base import meas_key
from noiselab.mitigate.estimate import (
    Estimate,
    SourceKey,
    estimate_variance,
    sample_distribution,
    single_shot_variance,
    source_variances,
    variance_from_sources,
)
from noiselab.mitigate.evaluate import Distributions, EstimateMemo, Evaluation
from noiselab.mitigate.experiment import (
    ExperimentContext,
    Runner,
    actual_scale,
    realized_scales,
    variant_inputs,
)
from noiselab.mitigate.plan import allocate_shots
from noiselab.mitigate.reports import PassReport, ScoredRun, VariantScore
from noiselab.mitigate.target import TargetAssessment, assess_target
from noiselab.mitigate.variants import CircuitVariant


@dataclass(frozen=True, eq=False)
class Measurements:
    """What the runner gave for each variant (``runs``: BasisDistributions) and the distributions
    a recipe reads (``probs``: variant -> basis -> probabilities; exact, or drawn by
    :func:`draw`)."""

    variants: tuple[CircuitVariant, ...]
    bases: tuple[str, ...]
    runs: Mapping[CircuitVariant, Any]
    probs: Distributions

    def by_source(self) -> dict[SourceKey, np.ndarray]:
        """``probs`` keyed by measurement source."""
        return {meas_key(v, b): self.probs[v][b] for v in self.variants for b in self.bases}


def measure(
    runner: Runner, variants: tuple[CircuitVariant, ...], bases: tuple[str, ...]
) -> Measurements:
    """The runner's exact distributions of every variant in ``bases``."""
    runs = {v: runner(v) for v in variants}
    for v, d in runs.items():
        missing = [b for b in bases if b not in d.bases]
        if missing:
            raise NoiselabError(f"runner: variant {v.label()} lacks bases {', '.join(missing)}")
    probs = {
        v: {b: np.asarray(runs[v].probs[runs[v].bases.index(b)], dtype=float) for b in bases}
        for v in variants
    }
    return Measurements(variants, bases, runs, probs)


@dataclass(frozen=True)
class Allocation:
    """Measurement shots per source (variant, basis), summing to the budget."""

    shots: Mapping[SourceKey, int]

    def of(self, variant: CircuitVariant, basis: str) -> int:
        return self.shots[meas_key(variant, basis)]


def allocate(
    ctx: ExperimentContext, estimate: Estimate, data: Measurements, split: str
) -> Allocation:
    """``ctx.shots`` over the variants' bases by :func:`~noiselab.mitigate.plan.allocate_shots`,
    from the single-shot standard deviation of the estimate's part in each (exact) source."""
    sigmas = np.array(
        [
            np.sqrt(
                [
                    single_shot_variance(
                        data.probs[v][b],
                        estimate.influence.get(meas_key(v, b), np.zeros(len(data.probs[v][b]))),
                    )
                    for b in data.bases
                ]
            )
            for v in data.variants
        ]
    )
    counts = allocate_shots(sigmas, int(ctx.shots), ctx.allocation, split)
    return Allocation(
        {
            meas_key(v, b): int(counts[i, j])
            for i, v in enumerate(data.variants)
            for j, b in enumerate(data.bases)
        }
    )


def draw(data: Measurements, alloc: Allocation, rng: np.random.Generator) -> Measurements:
    """Empirical distributions of the allocated shots (multinomial, seeded by ``rng``)."""
    probs = {
        v: {b: sample_distribution(data.probs[v][b], alloc.of(v, b), rng) for b in data.bases}
        for v in data.variants
    }
    return Measurements(data.variants, data.bases, data.runs, probs)


@dataclass(frozen=True)
class ErrorBudget:
    """Variance of the recipe's energy by source at the allocated shots (Ha**2): measurement,
    readout calibration, and the fixed parts a pass reports (by name); each variant's standard
    error (mHa); the trajectory method's own standard error (Ha; None for exact emulation, not
    part of the total: no device has it)."""

    measurement: float
    calibration: float
    fixed: Mapping[str, float]
    variant_std_mha: Mapping[CircuitVariant, float]
    trajectory_std_ha: float | None

    @property
    def total(self) -> float:
        return self.measurement + self.calibration + sum(self.fixed.values())

    def largest_fixed(self) -> str:
        """The name of the largest part that no measurement shot shrinks ("calibration" on a
        tie)."""
        parts = [("calibration", self.calibration), *self.fixed.items()]
        return max(parts, key=lambda item: item[1])[0]


def _split_variance(
    est: Estimate, probs: Mapping[Any, np.ndarray], shots: Mapping[Any, int | None]
) -> tuple[float, float]:
    """(measurement variance, calibration variance) at the given shots (Ha**2)."""
    meas = {k: v for k, v in est.influence.items() if k[0] == "meas"}
    calib = {k: v for k, v in est.influence.items() if k[0] == "cal"}
    return (
        estimate_variance(Estimate(0.0, meas), probs, shots),
        estimate_variance(Estimate(0.0, calib), probs, shots),
    )


def variance(
    exact: Evaluation,
    used: Evaluation,
    data: Measurements,
    alloc: Allocation,
    memo: EstimateMemo | None = None,
) -> ErrorBudget:
    """The :class:`ErrorBudget` of ``used`` (the evaluation reported: ``exact`` itself, or one on
    drawn data ``data``), its shots from ``alloc`` and ``exact``'s calibration. The delta method
    runs at the distributions the estimate was computed from; the fixed parts and the trajectory
    error are those of the exact evaluation."""
    shots: dict[SourceKey, int | None] = {**alloc.shots, **exact.calibration.shots}
    probs = data.by_source()
    probs.update(used.calibration.used)
    var_meas, var_cal = _split_variance(used.estimate, probs, shots)
    stds = {}
    for v, e_v in used.per_variant.items():
        if memo is not None and used is exact:  # exact inputs: the same for every recipe
            svars = memo.source_variances(e_v, probs)
        else:
            svars = source_variances(e_v, probs)
        stds[v] = math.sqrt(variance_from_sources(svars, shots)) * HA_TO_MHA
    traj = _trajectory_std(exact.estimate, data)
    return ErrorBudget(var_meas, var_cal, dict(exact.fixed_variance), stds, traj)


def _trajectory_std(est: Estimate, data: Measurements) -> float | None:
    """Trajectory standard error of the estimate (linearized), or None for exact emulation:
    the estimate's influence on each measured basis read on every batch (from the per-batch
    distributions or the per-batch values the run kept)."""
    total = 0.0
    found = False
    for v in data.variants:
        d = data.runs[v]
        if getattr(d, "is_exact", True):
            continue
        found = True
        vals: np.ndarray | float = 0.0
        for b in data.bases:
            u = est.influence.get(meas_key(v, b))
            if u is not None:
                vals = vals + d.batch_functional(b, u)
        if isinstance(vals, np.ndarray) and len(vals) > 1:
            total += float(vals.var(ddof=1)) / len(vals)
    return math.sqrt(total) if found else None


@dataclass(frozen=True)
class Score:
    """The energy against the references (mHa), its standard error (mHa) and the target rule's
    verdict at the budget."""

    energy_ha: float
    bias_exact_mha: float
    bias_ansatz_mha: float
    std_mha: float
    verdict: TargetAssessment


def score(ctx: ExperimentContext, energy_ha: float, errors: ErrorBudget) -> Score:
    """Biases, standard error and :func:`~noiselab.mitigate.target.assess_target` at
    ``ctx.shots`` (the measurement part scales with the shots, the rest is fixed)."""
    bias_exact = (energy_ha - ctx.exact_energy_ha) * HA_TO_MHA
    bias_ansatz = (energy_ha - ctx.ansatz_energy_ha) * HA_TO_MHA
    mha2 = HA_TO_MHA**2
    verdict = assess_target(
        bias_exact,
        errors.measurement * ctx.shots * mha2,
        (errors.calibration + sum(errors.fixed.values())) * mha2,
        int(ctx.shots),
        ctx.target_mha,
        ctx.confidence,
        fixed_source=errors.largest_fixed(),
    )
    std_mha = math.sqrt(errors.total) * HA_TO_MHA
    return Score(energy_ha, bias_exact, bias_ansatz, std_mha, verdict)


def variant_scores(
    ctx: ExperimentContext,
    used: Evaluation,
    data: Measurements,
    alloc: Allocation,
    errors: ErrorBudget,
) -> tuple[VariantScore, ...]:
    """Each variant as scored: energy, standard error at its shots, scales, engine time."""
    return tuple(
        VariantScore(
            label=v.label(),
            energy_ha=float(used.per_variant[v].value),
            std_mha=errors.variant_std_mha[v],
            shots=int(sum(alloc.of(v, b) for b in data.bases)),
            scale=float(actual_scale(ctx, v)),
            scale_realized=float(realized_scales(ctx, v)["total"]),
            engine_seconds=float(getattr(data.runs[v], "engine_seconds", 0.0)),
            two_qubit_count=_two_qubit_count(ctx, v),
        )
        for v in data.variants
    )


def _two_qubit_count(ctx: ExperimentContext, variant: CircuitVariant) -> int | None:
    if ctx.compiled is None:
        return None
    compiled = variant_inputs(ctx, variant)[0]
    return int(getattr(compiled, "two_qubit_count", 0))


def details_json(
    ctx: ExperimentContext,
    scored: tuple[VariantScore, ...],
    reports: Mapping[str, PassReport],
    data: Measurements,
    alloc: Allocation,
    errors: ErrorBudget,
    verdict: TargetAssessment,
    calibration_shots: Mapping[SourceKey, int | None],
) -> dict[str, Any]:
    """``RecipeResult.details``: the one place its JSON is built, from the typed records (the
    passes' parts from their reports' ``details``)."""
    run = ScoredRun(
        bases=data.bases,
        variants=scored,
        shots={(k[1].label(), k[2]): n for k, n in alloc.shots.items()},
    )
    details: dict[str, Any] = {}
    for report in reports.values():
        details.update(report.details(run))
    details["variants"] = {v.label: v.to_json() for v in scored}
    details["bases"] = list(data.bases)
    details["std_measurement_mha"] = math.sqrt(errors.measurement) * HA_TO_MHA
    details["std_calibration_mha"] = math.sqrt(errors.calibration) * HA_TO_MHA
    for name, var in errors.fixed.items():
        details[f"std_{name}_mha"] = math.sqrt(var) * HA_TO_MHA
    if errors.trajectory_std_ha is not None:
        # emulation error of the trajectory method (not part of std_mha: no device has it)
        details["trajectory_std_mha"] = errors.trajectory_std_ha * HA_TO_MHA
    details["calibration_shots_total"] = int(
        sum(n for n in calibration_shots.values() if n is not None)
    )
    details["calibration_circuits"] = len(calibration_shots)
    if verdict.note:
        details["limited_by_note"] = verdict.note
    plan_bases = set(ctx.plan.bases)  # a property that builds the tuple on every call
    extra = [b for b in data.bases if b not in plan_bases]
    if extra:
        details["extra_bases"] = extra
        details["extra_basis_shots"] = int(
            sum(alloc.of(v, b) for v in data.variants for b in extra)
        )
    return details
