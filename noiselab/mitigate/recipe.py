"""Recipes: ordered mitigation passes applied to emulated measurement data, scored against exact
energies with bias and shot noise kept apart.

``run_recipe(recipe, ctx, runner)`` asks ``runner(variant)`` for the measured distributions of
each circuit variant its passes need, applies the correction passes per variant and basis, the
estimator pass per variant and the combination pass across variants, allocates the shot budget,
and returns a :class:`RecipeResult`. ``sampled=False`` (default): exact distributions, analytic
standard error. ``sampled=True``: multinomial counts are drawn from ``rng`` and pushed through
the same code (the spread of such estimates is the analytic standard error).

Bias = expectation: the reported energy is computed from exact inputs only (exact measured
distributions, exact readout-calibration distributions), so no random draw enters the bias and
the study's seed changes only sampled paths. Readout inversion is non-linear in the calibration;
its expectation is taken to first order, i.e. evaluated at the exact calibration (the second-order
term is far below the calibration's standard error; tests/test_mitigate_passes.py checks it).
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from noiselab.common.errors import InputError, NoiselabError
from noiselab.common.units import HA_TO_MHA
from noiselab.mitigate.base import (
    STAGE_COMBINE,
    STAGE_CORRECT,
    STAGE_ESTIMATE,
    STAGE_NAMES,
    MitigationPass,
    VariantData,
    Workspace,
    cal_key,
    meas_key,
    plan_estimate,
    raw_distribution,
)
from noiselab.mitigate.estimate import (
    Estimate,
    estimate_variance,
    sample_distribution,
    single_shot_variance,
    source_variances,
    variance_from_sources,
)
from noiselab.mitigate.experiment import (
    Calibrator,
    ExperimentContext,
    Runner,
    actual_scale,
    default_calibrator,
    realized_scales,
    variant_inputs,
)
from noiselab.mitigate.plan import largest_remainder
from noiselab.mitigate.registry import PASSES, make_pass
from noiselab.mitigate.result import RecipeResult, plain_json
from noiselab.mitigate.target import assess_target
from noiselab.mitigate.variants import CircuitVariant

# ---- recipe specification ---------------------------------------------------------------------


class RecipeSpec(BaseModel):
    """A named recipe: ordered pass entries ``{"pass": name, **options}``."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    name: str | None = None
    passes: tuple[dict[str, Any], ...] = Field(default_factory=tuple)


@dataclass(frozen=True, eq=False)
class ParsedRecipe:
    name: str
    passes: tuple[MitigationPass, ...]

    def spec(self) -> list[dict[str, Any]]:
        return [p.spec() for p in self.passes]

    def of_stage(self, stage: int) -> MitigationPass | None:
        found = [p for p in self.passes if p.stage == stage]
        return found[0] if found else None


def _stage_order() -> str:
    """The registered passes in the order a recipe allows them (by stage)."""
    return ", ".join(sorted(PASSES, key=lambda name: PASSES[name].stage))


def parse_recipe(
    recipe: Sequence[Mapping[str, Any]] | RecipeSpec, where: str = "recipe"
) -> ParsedRecipe:
    """Validate a recipe; InputError naming ``recipe[i].<option>`` on the first problem.

    Order: correction passes (readout), then at most one estimator (postselect), then at most
    one combination (extrapolate); each pass at most once.
    """
    name = None
    if isinstance(recipe, RecipeSpec):
        name, entries = recipe.name, list(recipe.passes)
    elif isinstance(recipe, Mapping):
        raise InputError(
            f"{where}: expected a list of passes, got a mapping; allowed: a list of {{pass: ...}}"
        )
    else:
        entries = list(recipe)
    passes = []
    last_stage = -1
    seen: set[str] = set()
    for i, entry in enumerate(entries):
        p = make_pass(entry, f"{where}[{i}]")
        if p.name in seen:
            raise InputError(
                f"{where}[{i}].pass: {p.name!r} appears twice; allowed: each pass once"
            )
        if p.stage < last_stage:
            raise InputError(
                f"{where}[{i}].pass: {p.name!r} ({STAGE_NAMES[p.stage]}) must come before the "
                f"{STAGE_NAMES[last_stage]} pass; allowed order: {_stage_order()}"
            )
        if p.stage == last_stage and p.stage != STAGE_CORRECT:
            raise InputError(f"{where}[{i}].pass: only one {STAGE_NAMES[p.stage]} pass per recipe")
        last_stage = p.stage
        seen.add(p.name)
        passes.append(p)
    if not name:
        name = "+".join(p.describe() for p in passes) or "raw"
    return ParsedRecipe(name=name, passes=tuple(passes))


# ---- evaluation -------------------------------------------------------------------------------


def _row(dist: Any, basis: str) -> np.ndarray:
    return np.asarray(dist.probs[dist.bases.index(basis)], dtype=float)


class _CalibrationSource:
    """Calibration distributions for one evaluation: exact or drawn from ``rng``."""

    def __init__(self, ctx: ExperimentContext, calibrator: Calibrator, mode: str, rng: Any) -> None:
        self.ctx = ctx
        self.calibrator = calibrator
        self.mode = mode  # "exact" | "rng"
        self.rng = rng
        self.exact: dict[Any, np.ndarray] = {}
        self.used: dict[Any, np.ndarray] = {}
        self.shots: dict[Any, int | None] = {}

    def __call__(
        self, variant: CircuitVariant, states: tuple[int, ...], shots: int | None
    ) -> np.ndarray:
        cal_v = variant.calibration_variant()
        exact = np.asarray(self.calibrator(cal_v, tuple(states)), dtype=float)
        out = np.empty_like(exact)
        for i, s in enumerate(states):
            key = cal_key(variant, s)
            if key not in self.used:
                self.exact[key] = exact[i]
                self.shots[key] = shots
                if shots is None or self.mode == "exact":
                    self.used[key] = exact[i]
                else:
                    self.used[key] = sample_distribution(exact[i], shots, self.rng)
            out[i] = self.used[key]
        return out


@dataclass(eq=False)
class _Evaluation:
    estimate: Estimate
    per_variant: dict[CircuitVariant, Estimate]
    details: dict[str, Any]
    cal: _CalibrationSource
    fixed_variance: dict[str, float]


class EstimateMemo:
    """Per-variant estimates shared by the recipes of one job (e.g. the settings of a tune grid).

    Settings that differ only in their combination stage (scale set, fit) need the same
    correction and estimate of each circuit variant; with a memo each is computed once. An entry
    is keyed by the context, runner and calibrator (by identity), the variant, the specs of the
    correction and estimator passes, the bases read and the calibration mode; it keeps the
    estimate, the details the passes wrote and the calibration circuits they drew on (replayed
    on a hit, so shots and variances are registered as without the memo). Only exact calibration
    (deterministic) is stored: sampled evaluations bypass the memo. Create one per
    job and pass it to every :func:`run_recipe` of the job; results are bit-identical.
    """

    def __init__(self) -> None:
        self._entries: dict[tuple[Any, ...], _MemoEntry] = {}
        # id -> (estimate, single-shot variance per source); the estimate keeps the id unique
        self._variances: dict[int, tuple[Estimate, dict[Any, float]]] = {}
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        return len(self._entries)

    def _source_variances(
        self, est: Estimate, probs: Mapping[Any, np.ndarray]
    ) -> dict[Any, float]:
        """:func:`source_variances` of a stored estimate on the exact distributions (which
        every recipe of the job shares), computed once per estimate."""
        hit = self._variances.get(id(est))
        if hit is None or hit[0] is not est:
            hit = (est, source_variances(est, probs))
            self._variances[id(est)] = hit
        return hit[1]


@dataclass(frozen=True, eq=False)
class _MemoEntry:
    estimate: Estimate
    details: dict[str, Any]
    calibration_calls: tuple[tuple[CircuitVariant, tuple[int, ...], int | None], ...]


def _merge_details(into: dict[str, Any], new: Mapping[str, Any]) -> None:
    """Add one variant's details as if its passes had written them into ``into`` directly
    (passes write per-variant entries of dicts, append to lists, or set values)."""
    for k, val in new.items():
        if isinstance(val, dict) and isinstance(into.get(k, {}), dict):
            into.setdefault(k, {}).update(val)
        elif isinstance(val, list) and isinstance(into.get(k, []), list):
            into.setdefault(k, []).extend(val)
        else:
            into[k] = val


def _variant_estimate(
    corrects: Sequence[MitigationPass],
    estimator: MitigationPass | None,
    variant: CircuitVariant,
    bases: tuple[str, ...],
    ws: Workspace,
) -> Estimate:
    """Correction passes, then the estimator (or the plan estimate), on one variant's data."""
    data: VariantData = {
        b: raw_distribution(meas_key(variant, b), ws.measured[variant][b]) for b in bases
    }
    for p in corrects:
        data = p.correct(variant, data, ws)
    return estimator.estimate(variant, data, ws) if estimator else plan_estimate(ws.ctx, data)


def _memo_estimate(
    memo: EstimateMemo,
    scope: tuple[Any, ...],
    corrects: Sequence[MitigationPass],
    estimator: MitigationPass | None,
    variant: CircuitVariant,
    bases: tuple[str, ...],
    ws: Workspace,
    cal: _CalibrationSource,
) -> Estimate:
    stages = [*corrects, *([estimator] if estimator else [])]
    key = (*scope, variant, tuple(p.cache_key() for p in stages), bases, cal.mode)
    entry = memo._entries.get(key)
    if entry is None:
        calls: list[tuple[CircuitVariant, tuple[int, ...], int | None]] = []

        def recording(v: CircuitVariant, states: tuple[int, ...], shots: int | None) -> np.ndarray:
            calls.append((v, tuple(states), shots))
            return cal(v, states, shots)

        sub = Workspace(ctx=ws.ctx, measured=ws.measured, calibration=recording)
        est = _variant_estimate(corrects, estimator, variant, bases, sub)
        entry = _MemoEntry(est, copy.deepcopy(sub.details), tuple(calls))
        memo._entries[key] = entry
        memo.misses += 1
        _merge_details(ws.details, sub.details)
        return est
    memo.hits += 1
    for v, states, shots in entry.calibration_calls:
        cal(v, states, shots)  # registers the calibration sources and their shots
    _merge_details(ws.details, copy.deepcopy(entry.details))
    return entry.estimate


def _evaluate(
    parsed: ParsedRecipe,
    ctx: ExperimentContext,
    variants: tuple[CircuitVariant, ...],
    bases: tuple[str, ...],
    measured: Mapping[CircuitVariant, Mapping[str, np.ndarray]],
    cal: _CalibrationSource,
    memo: EstimateMemo | None = None,
    memo_scope: tuple[Any, ...] = (),
    rng: np.random.Generator | None = None,
) -> _Evaluation:
    ws = Workspace(ctx=ctx, measured=measured, calibration=cal, rng=rng)
    corrects = [p for p in parsed.passes if p.stage == STAGE_CORRECT]
    estimator = parsed.of_stage(STAGE_ESTIMATE)
    combiner = parsed.of_stage(STAGE_COMBINE)
    use_memo = memo is not None and cal.mode == "exact"
    per_variant: dict[CircuitVariant, Estimate] = {}
    for v in variants:
        if use_memo:
            scope = (ctx, cal.calibrator, *memo_scope)
            per_variant[v] = _memo_estimate(memo, scope, corrects, estimator, v, bases, ws, cal)
        else:
            per_variant[v] = _variant_estimate(corrects, estimator, v, bases, ws)
    if combiner is not None:
        est = combiner.combine(variants, [per_variant[v] for v in variants], ws)
    else:
        est = per_variant[variants[0]]
    return _Evaluation(est, per_variant, ws.details, cal, ws.fixed_variance)


def _allocate(
    ctx: ExperimentContext,
    est: Estimate,
    measured: Mapping[CircuitVariant, Mapping[str, np.ndarray]],
    variants: tuple[CircuitVariant, ...],
    bases: tuple[str, ...],
    split: str,
) -> dict[Any, int]:
    """Integer shots per (variant, basis) source, summing to ctx.shots."""
    zeros = np.zeros(2**ctx.plan.num_qubits)
    within: list[np.ndarray] = []
    cost: list[float] = []
    for v in variants:
        var = np.array(
            [
                single_shot_variance(measured[v][b], est.influence.get(meas_key(v, b), zeros))
                for b in bases
            ]
        )
        sd = np.sqrt(var)
        if ctx.allocation == "uniform" or sd.sum() <= 0:
            within.append(np.full(len(bases), 1.0 / len(bases)))
            cost.append(len(bases) * float(var.sum()))
        else:
            within.append(sd / sd.sum())
            cost.append(float(sd.sum()) ** 2)
    k = len(variants)
    if split == "weighted" and sum(cost) > 0:
        frac = np.sqrt(np.array(cost))
        frac = frac / frac.sum()
    else:
        frac = np.full(k, 1.0 / k)
    shares = np.concatenate([frac[i] * within[i] for i in range(k)])
    counts = largest_remainder(shares, int(ctx.shots))
    keys = [meas_key(v, b) for v in variants for b in bases]
    return dict(zip(keys, (int(c) for c in counts), strict=True))


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


def run_recipe(
    recipe: Sequence[Mapping[str, Any]] | RecipeSpec,
    ctx: ExperimentContext,
    runner: Runner,
    *,
    sampled: bool = False,
    rng: np.random.Generator | None = None,
    calibrator: Calibrator | None = None,
    memo: EstimateMemo | None = None,
) -> RecipeResult:
    """Apply a recipe to the runner's data and score it (see the module docstring).

    ``calibrator(variant, states)``: exact readout-calibration distributions; default
    :func:`make_calibrator` (emulate's calibration circuits on ``ctx.profile``).
    ``memo``: an :class:`EstimateMemo` shared by the recipes of one job (None: nothing shared);
    the result is the same with and without it, sampled evaluations never read it.
    """
    parsed = parse_recipe(recipe)
    for i, p in enumerate(parsed.passes):
        p.check(ctx, f"recipe[{i}]")
    estimator = parsed.of_stage(STAGE_ESTIMATE)
    combiner = parsed.of_stage(STAGE_COMBINE)
    variants = combiner.variants(ctx) if combiner else (CircuitVariant(),)
    bases = tuple(estimator.bases(ctx) if estimator else ctx.plan.bases)
    calibrator = calibrator or default_calibrator(ctx)

    dists = {v: runner(v) for v in variants}
    for v, d in dists.items():
        missing = [b for b in bases if b not in d.bases]
        if missing:
            raise NoiselabError(f"runner: variant {v.label()} lacks bases {', '.join(missing)}")
    exact_meas = {v: {b: _row(dists[v], b) for b in bases} for v in variants}

    # phase 1: exact distributions everywhere -> influences, allocation, analytic variance
    scope = (runner,)
    ev1 = _evaluate(
        parsed,
        ctx,
        variants,
        bases,
        exact_meas,
        _CalibrationSource(ctx, calibrator, "exact", None),
        memo,
        scope,
    )
    split = getattr(combiner.options, "shot_split", "equal") if combiner else "equal"
    shots = _allocate(ctx, ev1.estimate, exact_meas, variants, bases, split)
    all_shots: dict[Any, int | None] = {**shots, **ev1.cal.shots}
    exact_probs: dict[Any, np.ndarray] = {
        meas_key(v, b): exact_meas[v][b] for v in variants for b in bases
    }
    exact_probs.update(ev1.cal.exact)
    var_meas, var_cal = _split_variance(ev1.estimate, exact_probs, all_shots)

    if not sampled:
        # the bias is the expectation: exact calibration, no random draw (the finite
        # calibration's noise is in the standard error; first order, see the module docstring)
        ev = ev1
        probs_for_std = exact_probs
        est_for_std = ev1.estimate
        per_variant_std = ev1.per_variant
    else:
        rng = rng if rng is not None else np.random.default_rng(ctx.seed)
        sampled_meas = {
            v: {b: sample_distribution(exact_meas[v][b], shots[meas_key(v, b)], rng) for b in bases}
            for v in variants
        }
        ev = _evaluate(
            parsed,
            ctx,
            variants,
            bases,
            sampled_meas,
            _CalibrationSource(ctx, calibrator, "rng", rng),
            rng=rng,
        )
        probs_for_std = {meas_key(v, b): sampled_meas[v][b] for v in variants for b in bases}
        probs_for_std.update(ev.cal.used)
        est_for_std = ev.estimate
        per_variant_std = ev.per_variant
        var_meas, var_cal = _split_variance(est_for_std, probs_for_std, all_shots)

    traj_std = _trajectory_std(ev1.estimate, dists, variants, bases)
    energy = float(ev.estimate.value)
    var_amp = float(ev1.fixed_variance.get("amplification", 0.0))
    std_ha = math.sqrt(var_meas + var_cal + var_amp)
    bias_exact = (energy - ctx.exact_energy_ha) * HA_TO_MHA
    bias_ansatz = (energy - ctx.ansatz_energy_ha) * HA_TO_MHA
    mha2 = HA_TO_MHA**2
    verdict = assess_target(
        bias_exact,
        var_meas * ctx.shots * mha2,
        (var_cal + var_amp) * mha2,
        int(ctx.shots),
        ctx.target_mha,
        ctx.confidence,
        fixed_source="amplification" if var_amp > var_cal else "calibration",
    )

    details = dict(ev.details)
    per = {}
    for v in variants:
        e_v = per_variant_std[v]
        if memo is not None and not sampled:  # exact inputs: the same for every recipe
            svars = memo._source_variances(e_v, probs_for_std)
        else:
            svars = source_variances(e_v, probs_for_std)
        per[v.label()] = {
            "energy_ha": float(ev.per_variant[v].value),
            "std_mha": math.sqrt(variance_from_sources(svars, all_shots)) * HA_TO_MHA,
            "shots": int(sum(shots[meas_key(v, b)] for b in bases)),
            "scale": float(actual_scale(ctx, v)),
            "scale_realized": float(realized_scales(ctx, v)["total"]),
            "engine_seconds": float(getattr(dists[v], "engine_seconds", 0.0)),
            "two_qubit_count": _two_qubit_count(ctx, v),
        }
    details["variants"] = per
    if "extrapolation" in details:
        details["extrapolation"]["stds_mha"] = [per[v.label()]["std_mha"] for v in variants]
        details["extrapolation"]["engine_seconds"] = [
            per[v.label()]["engine_seconds"] for v in variants
        ]
        details["extrapolation"]["two_qubit_counts"] = [
            per[v.label()]["two_qubit_count"] for v in variants
        ]
    details["bases"] = list(bases)
    details["std_measurement_mha"] = math.sqrt(var_meas) * HA_TO_MHA
    details["std_calibration_mha"] = math.sqrt(var_cal) * HA_TO_MHA
    if "extrapolation" in details:
        details["std_amplification_mha"] = math.sqrt(var_amp) * HA_TO_MHA
    if traj_std is not None:
        # emulation error of the trajectory method (not part of std_mha: no device has it)
        details["trajectory_std_mha"] = traj_std * HA_TO_MHA
    cal_total = int(sum(n for n in ev1.cal.shots.values() if n is not None))
    details["calibration_shots_total"] = cal_total
    details["calibration_circuits"] = len(ev1.cal.shots)
    if verdict.note:
        details["limited_by_note"] = verdict.note
    if "acceptance" in details:
        kept = 0.0
        for v in variants:
            acc = details["acceptance"].get(v.label(), {})
            kept += sum(shots[meas_key(v, b)] * acc.get(b, 1.0) for b in bases)
        details["effective_shots"] = kept
        accepted_bases = [
            (shots[meas_key(v, b)], a)
            for v in variants
            for b, a in details["acceptance"].get(v.label(), {}).items()
        ]
        n_sel = sum(n for n, _ in accepted_bases)
        details["acceptance_rate"] = sum(n * a for n, a in accepted_bases) / n_sel if n_sel else 1.0
    plan_bases = set(ctx.plan.bases)  # a property that builds the tuple on every call
    extra = [b for b in bases if b not in plan_bases]
    if extra:
        details["extra_bases"] = extra
        details["extra_basis_shots"] = int(
            sum(shots[meas_key(v, b)] for v in variants for b in extra)
        )

    return RecipeResult(
        recipe=parsed.name,
        spec=tuple(parsed.spec()),
        energy_ha=energy,
        bias_exact_mha=bias_exact,
        bias_ansatz_mha=bias_ansatz,
        std_mha=std_ha * HA_TO_MHA,
        shots_total=int(ctx.shots),
        shots_per_circuit={f"{k[1].label()}|{k[2]}": int(n) for k, n in shots.items()},
        n_circuits=len(shots) + len(ev1.cal.shots),
        engine_seconds=float(sum(getattr(d, "engine_seconds", 0.0) for d in dists.values())),
        p_within_target=verdict.p_within_target,
        shots_needed=verdict.shots_needed,
        limited_by=verdict.limited_by,
        reaches_target=verdict.reaches_target,
        details=plain_json(details),
        sampled=bool(sampled),
    )


def _trajectory_std(
    est: Estimate,
    dists: Mapping[CircuitVariant, Any],
    variants: tuple[CircuitVariant, ...],
    bases: tuple[str, ...],
) -> float | None:
    """Trajectory standard error of the estimate (linearized), or None for exact emulation."""
    total = 0.0
    found = False
    for v in variants:
        batches = getattr(dists[v], "trajectory_batches", None)
        if batches is None:
            continue
        found = True
        d = dists[v]
        vals = np.zeros(batches.shape[0])
        for b in bases:
            u = est.influence.get(meas_key(v, b))
            if u is not None:
                vals += batches[:, d.bases.index(b), :] @ u
        if len(vals) > 1:
            total += float(vals.var(ddof=1)) / len(vals)
    return math.sqrt(total) if found else None


def _two_qubit_count(ctx: ExperimentContext, variant: CircuitVariant) -> int | None:
    if ctx.compiled is None:
        return None
    compiled = variant_inputs(ctx, variant)[0]
    return int(getattr(compiled, "two_qubit_count", 0))
