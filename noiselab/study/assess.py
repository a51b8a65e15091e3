"""The assess job: every recipe of a study at its shot budget, the best one, and the verdict.

The context (exact energy, noiseless optimum, compiled circuit, plan) is built once; all recipes
share one caching runner, so a circuit variant two recipes need is simulated once, and a
repeated assess reads every simulation from the results cache.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from noiselab.study.cache import JOB_KIND, CachingRunner, ResultsCache, job_key, open_cache
from noiselab.study.context import (
    StudyContext,
    build_context,
    naming_source,
    recipes_verify,
    with_verification,
)
from noiselab.study.results import AssessResult, RunStats, best_of, csv_text, verdict_line
from noiselab.study.spec import Study, load_study

ProgressHook = Callable[[str, int, int], None]

DEMO_STUDY = "h2-equilibrium.yaml"


def demo_study_path() -> Path:
    """The shipped demo study (configs/studies/ of the source tree)."""
    here = Path(__file__).resolve()
    for root in (here.parents[2], Path.cwd()):
        p = root / "configs" / "studies" / DEMO_STUDY
        if p.is_file():
            return p
    from noiselab.common.errors import NoiselabError

    raise NoiselabError(
        f"demo: the shipped study configs/studies/{DEMO_STUDY} was not found next to the package"
    )


def resolve_study(
    study_or_path: Study | str | Path,
    seed: int | None,
    shots: int | None,
    method: str | None = None,
    trajectories: int | None = None,
) -> Study:
    """A Study from a Study or a path, with optional seed, shot and emulation overrides."""
    if isinstance(study_or_path, Study):
        return study_or_path.with_overrides(
            seed=seed, shots=shots, method=method, trajectories=trajectories
        )
    overrides = {"seed": seed, "shots": shots, "method": method, "trajectories": trajectories}
    return load_study(study_or_path, overrides)


def override_key_options(
    study: Study,
    seed: int | str | None,
    shots: int | str | None,
    method: str | None,
    trajectories: int | str | None,
) -> dict[str, Any]:
    """Job-key options of validated overrides (``1e6`` and ``1000000`` give one key)."""
    return {
        "seed": None if seed is None else study.seed,
        "shots": None if shots is None else study.shots,
        **emulation_key_options(
            method, None if trajectories is None else study.emulation.trajectories
        ),
    }


def emulation_key_options(method: str | None, trajectories: int | None) -> dict[str, Any]:
    """Job-key options of the emulation overrides; "auto" depends on the memory available, so
    the test override of the memory guard enters too."""
    import os

    from noiselab.emulate.memory import MEMORY_LIMIT_ENV

    return {
        "method": method,
        "trajectories": trajectories,
        "memory_limit": os.environ.get(MEMORY_LIMIT_ENV),
    }


def _default_cache(cache: ResultsCache | str | Path | bool | None) -> ResultsCache:
    if isinstance(cache, ResultsCache):
        return cache
    if cache is False:
        return ResultsCache.disabled()
    if cache is None or cache is True:
        return open_cache()
    return open_cache(cache)


def check_recipes(ctx: StudyContext, recipes: dict[str, tuple[dict[str, Any], ...]]) -> None:
    """Refuse recipes that do not fit this experiment (e.g. post-selection without symmetries).

    The error names the study file and ``recipes.<name>[i].<option>``.
    """
    from noiselab.common.errors import InputError
    from noiselab.mitigate.recipe import parse_recipe

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
    from noiselab.mitigate.recipe import run_recipe

    out: dict[str, Any] = {}
    total = len(recipes)
    if progress is not None:
        progress(label, 0, total)
    for i, (name, passes) in enumerate(recipes.items()):
        out[name] = run_recipe(list(passes), ctx.experiment, runner, calibrator=runner.calibrator)
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
) -> AssessResult:
    """Run every recipe of the study at its budget and name the best.

    ``cache``: a ResultsCache, a path, None (the user cache folder) or False (no cache).
    ``seed`` / ``shots`` override the study's. ``progress(description, done, total)`` is called
    as steps finish. ``context`` reuses an already built context of the same study.
    ``reuse``: return the stored result of an identical earlier assess of the same files (a
    study given as a path; False recomputes, still reading simulations from the cache).
    ``method`` / ``trajectories`` override the study's ``emulation:`` section.
    """
    t0 = time.perf_counter()
    store = _default_cache(cache)
    # every input is read (bounded) and validated before the cache key reads the files again
    study = resolve_study(study_or_path, seed, shots, method, trajectories)
    key = None
    if reuse and store.enabled and context is None and not isinstance(study_or_path, Study):
        options = override_key_options(study, seed, shots, method, trajectories)
        key = job_key("assess", study_or_path, options)
        hit = store.get(JOB_KIND, key) if key is not None else None
        if hit is not None:
            try:
                stats = RunStats(0, 0, 0.0, time.perf_counter() - t0, reused=True)
                return AssessResult.from_record(json.loads(hit[0]), stats)
            except Exception:  # a damaged entry is a miss: dropped, and the job runs again
                store.discard(JOB_KIND, key)
    if context is not None:
        ctx = with_verification(context, recipes_verify(study.recipes.values()))
    else:  # measures the verification bases exactly when a recipe verifies
        ctx = build_context(study, cache=store, progress=progress)
    check_recipes(ctx, study.recipes)
    runner = CachingRunner(ctx.experiment, store)
    with naming_source(study.source):
        results = run_recipes(ctx, study.recipes, runner, progress)
    best = best_of(results)
    reachable, verdict = verdict_line(
        best, results[best], study.target_mha, study.confidence, study.shots
    )
    stats = RunStats(
        simulations=runner.simulations,
        cache_hits=runner.cache_hits,
        engine_seconds=runner.engine_seconds,
        wall_seconds=time.perf_counter() - t0,
    )
    result = AssessResult(
        context=ctx.summary(),
        target_mha=study.target_mha,
        confidence=study.confidence,
        shots=study.shots,
        seed=study.seed,
        recipes=results,
        passes=dict(study.recipes),
        best_recipe=best,
        reachable=reachable,
        verdict=verdict,
        stats=stats,
        emulation_method=ctx.emulation_method,
        emulation_notice=ctx.emulation_notice,
    )
    if key is not None:
        store.put(JOB_KIND, key, json.dumps(result.to_record()).encode(), stats.wall_seconds)
    return result


def write_assess_data(result: AssessResult, out: str | Path) -> list[Path]:
    """assess.json and assess.csv into ``out`` (atomic writes); figures are the report layer's."""
    import json

    from noiselab.common.atomic import write_text_atomic

    folder = Path(out)
    return [
        write_text_atomic(folder / "assess.json", json.dumps(result.to_json(), indent=2) + "\n"),
        write_text_atomic(folder / "assess.csv", csv_text(result.csv_rows())),
    ]
