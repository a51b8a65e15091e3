"""Recipes: ordered mitigation passes applied to emulated measurement data, scored against exact
energies with bias and shot noise kept apart.

``run_recipe(recipe, ctx, runner)`` asks ``runner(variant)`` for the measured distributions of
each circuit variant its passes need, applies the correction passes per variant and basis, the
estimator pass per variant and the combination pass across variants, allocates the shot budget,
and returns a :class:`RecipeResult`. ``sampled=False`` (default): exact distributions, analytic
standard error. ``sampled=True``: multinomial counts are drawn from ``rng`` and pushed through
the same code (the spread of such estimates is the analytic standard error). The steps it chains
(measure, evaluate, allocate, draw, variance, score) are pure functions of frozen records in
:mod:`noiselab.mitigate.evaluate` and :mod:`noiselab.mitigate.steps`.

Bias = expectation: the reported energy is computed from exact inputs only (exact measured
distributions, exact readout-calibration distributions), so no random draw enters the bias and
the study's seed changes only sampled paths. Readout inversion is non-linear in the calibration;
its expectation is taken to first order, i.e. evaluated at the exact calibration (the second-order
term is far below the calibration's standard error; tests/test_mitigate_passes.py checks it).

A pass option that is random in a real run (:class:`~noiselab.mitigate.base.SpreadTerm`, e.g.
``error_cancellation``'s ``learning_spread``) enters the error bar as a fixed variance: the
central difference of the exact energy with the option stepped down and up, times its standard
deviation (:func:`spread_sensitivities`); sampled evaluations draw its linearized shift.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from noiselab.common.errors import InputError
from noiselab.common.units import HA_TO_MHA
from noiselab.mitigate.base import (
    STAGE_COMBINE,
    STAGE_CORRECT,
    STAGE_ESTIMATE,
    STAGE_NAMES,
    InstanceTerm,
    MitigationPass,
    SpreadTerm,
)
from noiselab.mitigate.estimate import Estimate
from noiselab.mitigate.evaluate import CalibrationSource, EstimateMemo, evaluate
from noiselab.mitigate.experiment import Calibrator, ExperimentContext, Runner
from noiselab.mitigate.registry import PASSES, make_pass
from noiselab.mitigate.result import RecipeResult, plain_json
from noiselab.mitigate.steps import (
    allocate,
    details_json,
    draw,
    measure,
    score,
    variance,
    variant_scores,
)
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

    def variants(self, ctx: ExperimentContext) -> tuple[CircuitVariant, ...]:
        """The circuit variants to run: the combination pass's, or the device as it is, each
        with the suppression passes' transforms appended."""
        combiner = self.of_stage(STAGE_COMBINE)
        base = combiner.variants(ctx) if combiner else (CircuitVariant(),)
        extra = tuple(t for p in self.passes if p.stage != STAGE_COMBINE for t in p.transforms(ctx))
        if not extra:
            return base
        return tuple(CircuitVariant(v.transforms + extra) for v in base)

    def bases(self, ctx: ExperimentContext) -> tuple[str, ...]:
        """The measurement bases read: the estimator pass's, or the plan's."""
        estimator = self.of_stage(STAGE_ESTIMATE)
        return tuple(estimator.bases(ctx) if estimator else ctx.plan.bases)

    def shot_split(self) -> Literal["equal", "weighted"]:
        """How the budget is split across the variants (the combination pass says)."""
        combiner = self.of_stage(STAGE_COMBINE)
        return combiner.shot_split() if combiner else "equal"


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
    _check_pairs(passes, where)
    if not name:
        name = "+".join(p.describe() for p in passes) or "raw"
    return ParsedRecipe(name=name, passes=tuple(passes))


def _check_pairs(passes: Sequence[MitigationPass], where: str) -> None:
    """Refuse passes that declare each other incompatible, or that come in the wrong order."""
    names = [p.name for p in passes]
    for i, p in enumerate(passes):
        for j, q in enumerate(passes):
            reason = p.incompatible.get(q.name) or q.incompatible.get(p.name)
            if reason and i < j:
                raise InputError(
                    f"{where}[{j}].pass: {q.name!r} cannot share a recipe with {p.name!r} "
                    f"({reason}); allowed: one of them"
                )
        for later in p.runs_before:
            if later in names[:i]:
                raise InputError(
                    f"{where}[{i}].pass: {p.name!r} must come before {later!r}; allowed order: "
                    f"{p.name}, {later}"
                )


# ---- the recipe as a chain of steps ------------------------------------------------------------


def spread_sensitivities(
    parsed: ParsedRecipe,
    ctx: ExperimentContext,
    runner: Runner,
    calibrator: Calibrator,
    memo: EstimateMemo | None = None,
) -> tuple[tuple[SpreadTerm, float], ...]:
    """Each :class:`SpreadTerm` of the recipe's passes (those with ``std`` > 0) with the exact
    energy's sensitivity to its option (Ha per option unit): the central difference of the
    recipe evaluated exactly with the pass replaced by the term's ``minus`` and ``plus`` (their
    circuit variants are emulated by ``runner`` like any other, and cached with them)."""
    out = []
    for i, p in enumerate(parsed.passes):
        for term in p.spread_terms(ctx):
            if term.std <= 0.0:
                continue
            energies = []
            for q in (term.minus, term.plus):
                other = ParsedRecipe(parsed.name, (*parsed.passes[:i], q, *parsed.passes[i + 1 :]))
                variants, bases = other.variants(ctx), other.bases(ctx)
                data = measure(runner, variants, bases)
                cal = CalibrationSource(calibrator)
                ev = evaluate(other.passes, ctx, variants, bases, data.probs, cal, memo, (runner,))
                energies.append(float(ev.estimate.value))
            out.append((term, (energies[1] - energies[0]) / (2.0 * term.step)))
    return tuple(out)


def _replaced_energy(
    parsed: ParsedRecipe,
    i: int,
    q: MitigationPass,
    ctx: ExperimentContext,
    runner: Runner,
    calibrator: Calibrator,
    memo: EstimateMemo | None,
) -> float:
    """The recipe's exact energy (Ha) with its pass ``i`` replaced by ``q``."""
    other = ParsedRecipe(parsed.name, (*parsed.passes[:i], q, *parsed.passes[i + 1 :]))
    variants, bases = other.variants(ctx), other.bases(ctx)
    data = measure(runner, variants, bases)
    cal = CalibrationSource(calibrator)
    ev = evaluate(other.passes, ctx, variants, bases, data.probs, cal, memo, (runner,))
    return float(ev.estimate.value)


def instance_energies(
    parsed: ParsedRecipe,
    ctx: ExperimentContext,
    runner: Runner,
    calibrator: Calibrator,
    memo: EstimateMemo | None = None,
) -> tuple[tuple[InstanceTerm, np.ndarray], ...]:
    """Each :class:`InstanceTerm` of the recipe's passes with the exact energy (Ha) of the
    recipe on each of its instances (their circuit variants emulated and cached like any
    other)."""
    out = []
    for i, p in enumerate(parsed.passes):
        term = p.instance_term(ctx)
        if term is None:
            continue
        energies = [
            _replaced_energy(parsed, i, q, ctx, runner, calibrator, memo) for q in term.instances
        ]
        out.append((term, np.asarray(energies, dtype=float)))
    return tuple(out)


def run_recipe(
    recipe: Sequence[Mapping[str, Any]] | RecipeSpec | ParsedRecipe,
    ctx: ExperimentContext,
    runner: Runner,
    *,
    sampled: bool = False,
    rng: np.random.Generator | None = None,
    calibrator: Calibrator | None = None,
    memo: EstimateMemo | None = None,
    calibration_record: dict[Any, tuple[int, np.ndarray]] | None = None,
) -> RecipeResult:
    """Apply a recipe to the runner's data and score it (see the module docstring).

    ``recipe``: pass entries, a :class:`RecipeSpec` or an already parsed recipe (its passes
    keep what they derived from ``ctx`` between calls on the same context).
    ``calibrator(variant, states)``: exact readout-calibration distributions; default
    ``ctx.calibrator`` (emulate's calibration circuits on ``ctx.profile``, kept by the context).
    ``memo``: an :class:`EstimateMemo` shared by the recipes of one job (None: nothing shared);
    the result is the same with and without it, sampled evaluations never read it.
    ``calibration_record`` (sampled only): drawn readout calibrations shared across calls
    (see :class:`CalibrationSource`): a loop of evaluations calibrates once.
    """
    parsed = recipe if isinstance(recipe, ParsedRecipe) else parse_recipe(recipe)
    for i, p in enumerate(parsed.passes):
        p.check(ctx, f"recipe[{i}]")
    variants, bases = parsed.variants(ctx), parsed.bases(ctx)
    calibrator = calibrator or ctx.calibrator

    data = measure(runner, variants, bases)
    # exact distributions everywhere -> influences, allocation, analytic variance; the bias is
    # the expectation: exact calibration, no random draw (the finite calibration's noise is in
    # the standard error; first order, see the module docstring)
    cal = CalibrationSource(calibrator)
    exact = evaluate(parsed.passes, ctx, variants, bases, data.probs, cal, memo, (runner,))
    spreads = spread_sensitivities(parsed, ctx, runner, calibrator, memo)
    if spreads:
        fixed = {t.name: (sens * t.std) ** 2 for t, sens in spreads}
        exact = dataclasses.replace(exact, fixed_variance={**exact.fixed_variance, **fixed})
    instances = instance_energies(parsed, ctx, runner, calibrator, memo)
    if instances:  # the variance of the instances' mean
        fixed = {t.name: float(np.var(e, ddof=1)) / len(e) for t, e in instances}
        exact = dataclasses.replace(exact, fixed_variance={**exact.fixed_variance, **fixed})
    alloc = allocate(ctx, exact.estimate, data, parsed.shot_split())
    used, used_data = exact, data
    if sampled:
        rng = rng if rng is not None else np.random.default_rng(ctx.seed)
        used_data = draw(data, alloc, rng)
        cal = CalibrationSource(calibrator, rng, calibration_record)
        used = evaluate(parsed.passes, ctx, variants, bases, used_data.probs, cal)
        shift = 0.0
        if spreads:  # draw each spread option's realized value (linearized)
            shift += sum(sens * t.std * float(rng.normal()) for t, sens in spreads)
        # the realized instances' mean in place of their expectation
        shift += sum(float(np.mean(e)) - float(exact.estimate.value) for _, e in instances)
        if shift != 0.0:
            est = Estimate(used.estimate.value + shift, used.estimate.influence)
            used = dataclasses.replace(used, estimate=est)
    errors = variance(exact, used, used_data, alloc, memo)
    scored = score(ctx, float(used.estimate.value), errors)
    per_variant = variant_scores(ctx, used, used_data, alloc, errors)
    cal_shots = exact.calibration.shots
    details = details_json(
        ctx, per_variant, used.reports, used_data, alloc, errors, scored.verdict, cal_shots
    )
    for t, sens in spreads:
        own = details.get(t.details_key)
        if isinstance(own, dict):
            own[f"std_{t.name}_mha"] = abs(sens * t.std) * HA_TO_MHA
            own[f"{t.name}_sensitivity_mha"] = sens * HA_TO_MHA
    for t, e in instances:  # std_<name>_mha is there already (a fixed variance)
        offset = float(np.mean(e)) - float(exact.estimate.value)
        details[f"{t.name}_mean_offset_mha"] = offset * HA_TO_MHA
        details[f"{t.name}_instances"] = len(e)
    return RecipeResult(
        recipe=parsed.name,
        spec=tuple(parsed.spec()),
        energy_ha=scored.energy_ha,
        bias_exact_mha=scored.bias_exact_mha,
        bias_ansatz_mha=scored.bias_ansatz_mha,
        std_mha=scored.std_mha,
        shots_total=int(ctx.shots),
        shots_per_circuit={f"{k[1].label()}|{k[2]}": int(n) for k, n in alloc.shots.items()},
        n_circuits=len(alloc.shots) + len(cal_shots),
        engine_seconds=float(sum(getattr(d, "engine_seconds", 0.0) for d in data.runs.values())),
        p_within_target=scored.verdict.p_within_target,
        shots_needed=scored.verdict.shots_needed,
        limited_by=scored.verdict.limited_by,
        reaches_target=scored.verdict.reaches_target,
        details=plain_json(details),
        sampled=bool(sampled),
        variants=per_variant,
        reports=dict(used.reports),
    )
