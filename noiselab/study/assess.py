"""The assess job: every recipe of a study at its shot budget, the best one, and the verdict.

The context (exact energy, noiseless optimum, compiled circuit, plan) is built once; all recipes
share one caching runner, so a circuit variant two recipes need is simulated once, and a
repeated assess reads every simulation from the results cache.
"""

from __future__ import annotations

import dataclasses
import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from noiselab.common.atomic import write_text_atomic
from noiselab.common.errors import InputError, arg
from noiselab.common.shipped import shipped_path
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.study.cache import CachingRunner, ResultsCache, job_key
from noiselab.study.compiles import bias_spread
from noiselab.study.context import (
    StudyContext,
    build_context,
    naming_source,
    recipes_verify,
    with_verification,
)
from noiselab.study.device_time import (
    DEFAULT_CIRCUIT_OVERHEAD_S,
    device_time_inputs,
    recipes_device_hours,
)
from noiselab.study.drift import MAX_DRAWS, assess_drift, drift_sentence
from noiselab.study.job import (
    job_fields,
    load_job_result,
    override_key_options,
    own_executor,
    save_job_result,
    start_job,
)
from noiselab.study.pauli_assess import METHOD as PAULI_METHOD
from noiselab.study.pauli_assess import NOTICE as PAULI_NOTICE
from noiselab.study.pauli_assess import auto_method, pauli_recipes
from noiselab.study.results import AssessResult, RunStats, best_of, csv_text, verdict_line
from noiselab.study.spec import Study

ProgressHook = Callable[[str, int, int], None]

DEMO_STUDY = "h2-equilibrium.yaml"


def demo_study_path() -> Path:
    """The shipped demo study (``configs/studies/`` of a checkout, or the wheel's copy)."""
    return shipped_path("studies", DEMO_STUDY.removesuffix(".yaml"), "demo", "study")


def check_recipes(ctx: StudyContext, recipes: dict[str, tuple[dict[str, Any], ...]]) -> None:
    """Refuse recipes that do not fit this experiment (e.g. post-selection without symmetries).

    The error names the study file and ``recipes.<name>[i].<option>``.
    """
    source = str(ctx.study.source)
    for name, passes in recipes.items():
        where = f"recipes.{name}"
        try:
            parsed = parse_recipe(list(passes), where=where)
            for i, p in enumerate(parsed.passes):
                p.check(ctx.experiment, f"{where}[{i}]")
        except InputError as exc:
            text = str(exc)
            raise InputError(text if text.startswith(source) else f"{source}: {text}") from None


def run_recipes(
    ctx: StudyContext,
    recipes: dict[str, tuple[dict[str, Any], ...]],
    runner: CachingRunner,
    progress: ProgressHook | None = None,
    label: str = "recipes",
) -> dict[str, Any]:
    """``run_recipe`` for each named recipe with the shared runner; results in study order."""
    if ctx.emulation_method == PAULI_METHOD:  # no distributions to run recipes on
        raise InputError(
            f"{ctx.study.source}: emulation.method: {PAULI_METHOD} is available to assess and "
            "compare only (raw and per-qubit readout recipes); allowed here: density_matrix, "
            "trajectory, auto"
        )
    out: dict[str, Any] = {}
    total = len(recipes)
    if progress is not None:
        progress(label, 0, total)
    for i, (name, passes) in enumerate(recipes.items()):
        out[name] = run_recipe(list(passes), ctx.experiment, runner)
        if progress is not None:
            progress(label, i + 1, total)
    return out


def assess(
    study_or_path: Study | str | Path,
    *,
    cache: ResultsCache | str | Path | bool | None = None,
    seed: int | None = None,
    shots: int | None = None,
    progress: ProgressHook | None = None,
    context: StudyContext | None = None,
    reuse: bool = True,
    method: str | None = None,
    trajectories: int | None = None,
    drift: int | None = None,
    workers: int | None = None,
    cluster: Any = None,
    executor: Any = None,
) -> AssessResult:
    """Run every recipe of the study at its budget and name the best.

    ``cache``: a ResultsCache, a path, None (the user cache folder) or False (no cache).
    ``seed`` / ``shots`` override the study's. ``progress(description, done, total)`` is called
    as steps finish. ``context`` reuses an already built context of the same study.
    ``reuse``: return the stored result of an identical earlier assess of the same files (a
    study given as a path; False recomputes, still reading simulations from the cache).
    ``method`` / ``trajectories`` override the study's ``emulation:`` section.
    ``drift``: also run every recipe on this many drawn device days (noiselab.study.drift).
    ``workers`` / ``cluster`` / ``executor`` (noiselab.study.executor): under
    ``pauli_propagation`` each energy sum and each share of the groups' moments is one task on them;
    other methods refuse them.
    """
    if drift is not None and not 0 <= int(drift) <= MAX_DRAWS:
        raise InputError(f"{arg('drift')}: {drift} draws; allowed: 0 to {MAX_DRAWS}")
    drift = int(drift) if drift else 0
    # every input is read (bounded) and validated before the cache key reads the files again
    job = start_job(
        study_or_path,
        cache,
        seed=seed,
        shots=shots,
        method=method,
        trajectories=trajectories,
        pauli_ok=True,
    )
    study, store, t0 = job.study, job.store, job.t0
    study, auto_reason = auto_method(study)
    parallel = (workers or 1) > 1 or cluster is not None or executor is not None
    if parallel and study.emulation.method != PAULI_METHOD:  # refused before any work
        raise InputError(
            f"{arg('workers')}/{arg('cluster')}: assess spreads work only with emulation.method "
            f"{PAULI_METHOD}; allowed here: leave them out (method {study.emulation.method})"
        )
    key = None
    if reuse and store.enabled and context is None and not isinstance(study_or_path, Study):
        options = override_key_options(study, seed, shots, method, trajectories)
        if drift:
            options["drift"] = drift
        key = job_key("assess", study_or_path, options)
        stored = load_job_result(store, key, AssessResult, t0)
        if stored is not None:
            return stored
    if context is not None:
        ctx = with_verification(context, recipes_verify(study.recipes.values()))
    else:  # measures the verification bases exactly when a recipe verifies
        ctx = build_context(study, cache=store, progress=progress)
    if ctx.emulation_method == PAULI_METHOD:
        with own_executor(workers, cluster, executor) as ex:
            result = _assess_pauli(study, ctx, drift, t0, ex, auto_reason)
        save_job_result(store, key, result)
        return result
    check_recipes(ctx, study.recipes)
    runner = CachingRunner(ctx.experiment, store)
    with naming_source(study.source):
        results = run_recipes(ctx, study.recipes, runner, progress)
        spread = bias_spread(ctx, study.recipes, results, store, run_recipes)
        days = (
            assess_drift(ctx, study.recipes, drift, store, run_recipes, progress) if drift else None
        )
    best = best_of(results)
    overhead_s = circuit_overhead_s(study)
    reachable, verdict = verdict_line(
        best, results[best], study.target_mha, study.confidence, study.shots
    )
    if days is not None:
        verdict = f"{verdict} {drift_sentence(best, days.stats[best], days.rel_std)}"
    verdict = with_optimizer_caveat(verdict, ctx.warnings)
    extra = [r for r in (spread, days) if r is not None]
    stats = dataclasses.replace(
        RunStats.of_runner(runner, t0),
        simulations=runner.simulations + sum(r.simulations for r in extra),
        cache_hits=runner.cache_hits + sum(r.cache_hits for r in extra),
        engine_seconds=runner.engine_seconds + sum(r.engine_seconds for r in extra),
    )
    result = AssessResult(
        recipes=results,
        passes=dict(study.recipes),
        best_recipe=best,
        reachable=reachable,
        verdict=verdict,
        **job_fields(study, ctx, stats),
        bias_spread_mha=spread.spread_mha,
        drift={} if days is None else days.stats,
        drift_rel_std={} if days is None else days.rel_std,
        device_hours=recipes_device_hours(ctx.experiment, study.recipes, results, overhead_s),
        device_time=device_time_inputs(study.profile, overhead_s),
    )
    save_job_result(store, key, result)
    return result


def _assess_pauli(
    study: Study,
    ctx: StudyContext,
    drift: int,
    t0: float,
    executor: Any = None,
    auto_reason: str | None = None,
) -> AssessResult:
    """assess under ``emulation.method: pauli_propagation`` (noiselab.study.pauli_assess);
    ``auto_reason``: why ``auto`` chose it (first in the notice)."""
    if drift:
        raise InputError(f"{arg('drift')}: not available with {PAULI_METHOD}; allowed: 0")
    with naming_source(study.source):
        t = time.perf_counter()
        results = pauli_recipes(ctx, executor)
        seconds = time.perf_counter() - t
    best = best_of(results)
    overhead_s = circuit_overhead_s(study)
    reachable, verdict = verdict_line(
        best, results[best], study.target_mha, study.confidence, study.shots
    )
    verdict = with_optimizer_caveat(verdict, ctx.warnings)
    stats = RunStats(0, 0, seconds, time.perf_counter() - t0)
    fields = job_fields(study, ctx, stats)
    bounds = ", ".join(
        f"{name} {r.details['truncation_bound_mha']:.3g} mHa" for name, r in results.items()
    )
    notice = f"{PAULI_NOTICE}; truncation bound (rigorous): {bounds}"
    if all("truncation_estimate_mha" in r.details for r in results.values()):
        estimates = ", ".join(
            f"{name} {r.details['truncation_estimate_mha']:+.3g} "
            f"± {r.details['truncation_estimate_std_mha']:.2g} mHa"
            for name, r in results.items()
        )
        limits = ", ".join(
            f"{name} {r.details['truncation_limit_mha']:.2g} mHa" for name, r in results.items()
        )
        notice += (
            f"; truncation error estimate (seeded Monte Carlo; energies not corrected, the "
            f"verdict takes the worse reading): {estimates}; truncation limit (|estimate| + 3 "
            f"standard errors, statistical, not rigorous): {limits}"
        )
    if auto_reason:
        notice = f"{auto_reason}. {notice}"
    if any("calibration_note" in r.details for r in results.values()):
        notice += (
            "; the readout recipes' std leaves out the finite calibration's variance "
            "(optimistic: exact calibration matrices)"
        )
    fields["emulation_notice"] = notice
    return AssessResult(
        recipes=results,
        passes=dict(study.recipes),
        best_recipe=best,
        reachable=reachable,
        verdict=verdict,
        **fields,
        device_hours=recipes_device_hours(ctx.experiment, study.recipes, results, overhead_s),
        device_time=device_time_inputs(study.profile, overhead_s),
    )


def circuit_overhead_s(study: Study) -> float:
    """Seconds per circuit change: the study's ``rehearse.circuit_overhead_s``, else the
    common-practice default (``noiselab.study.device_time``)."""
    section = getattr(study, "rehearse", None)
    return float(section.circuit_overhead_s) if section is not None else DEFAULT_CIRCUIT_OVERHEAD_S


def with_optimizer_caveat(verdict: str, warnings: tuple[str, ...]) -> str:
    """The verdict, plus one sentence when the noiseless optimum is in doubt (biases are
    measured against the exact energy, so an optimizer failure would read as device bias)."""
    if not warnings:
        return verdict
    return (
        f"{verdict} Caveat: the noiseless optimum is in doubt ({len(warnings)} optimizer "
        "warning(s)); part of every bias may be the optimizer's, not the device's."
    )


def write_assess_data(
    result: AssessResult, out: str | Path, provenance: dict[str, Any] | None = None
) -> list[Path]:
    """assess.json (with the ``provenance`` block when given) and assess.csv into ``out``
    (atomic writes); figures are the report layer's."""
    folder = Path(out)
    data = result.to_json()
    if provenance is not None:
        data = {**data, "provenance": provenance}
    return [
        write_text_atomic(folder / "assess.json", json.dumps(data, indent=2) + "\n"),
        write_text_atomic(folder / "assess.csv", csv_text(result.csv_rows())),
    ]
