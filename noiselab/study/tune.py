"""The tune job: rank a grid of mitigation settings by the probability of reaching the target.

A setting is one choice on each axis: readout correction method, symmetry post-selection mode,
noise amplifier, set of noise scale factors and extrapolation fit. Each becomes a
recipe (readout, post-selection, extrapolation passes in that order). The distinct circuit
variants of the whole grid are simulated first, in parallel through the executor when asked,
and cached; evaluating a setting afterwards costs no further simulation.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from noiselab.common.atomic import write_text_atomic
from noiselab.common.errors import InputError, arg
from noiselab.mitigate.recipe import EstimateMemo, parse_recipe, run_recipe
from noiselab.mitigate.registry import make_pass
from noiselab.study.cache import CachingRunner, ResultsCache, job_key
from noiselab.study.context import StudyContext, build_context, with_verification
from noiselab.study.grid import DEFAULT_AXES, NONE, REGRESSION, Grid, check_axes
from noiselab.study.job import (
    job_fields,
    load_job_result,
    override_key_options,
    own_executor,
    save_job_result,
    start_job,
)
from noiselab.study.results import (
    RunStats,
    TuneEntry,
    TuneResult,
    csv_text,
    jsonable,
    rank_key,
    verdict_line,
)
from noiselab.study.spec import Study, TuneGrid

ProgressHook = Callable[[str, int, int], None]


@dataclasses.dataclass(frozen=True)
class GridOverride:
    """Axes given on the command line (None: take the study's ``tune:`` section or the default)."""

    readout: Sequence[str] | None = None
    postselect: Sequence[str] | None = None
    amplifier: Sequence[str] | None = None
    scales: Sequence[Sequence[float]] | None = None
    fit: Sequence[str] | None = None
    family: Sequence[str] | None = None
    suppress: Sequence[str] | None = None


def resolve_grid(study: Study, override: GridOverride | None = None) -> tuple[Grid, dict[str, str]]:
    """Axes from the command line, else the study's tune section, else the defaults.

    Returns the grid and, per axis, where it came from (for messages: the argument ``fit``, on
    the command line ``--fit``, or 'tune.fit').
    """
    override = override or GridOverride()
    _validate_override(override)
    section = study.tune or TuneGrid()
    defaults = DEFAULT_AXES
    values: dict[str, Any] = {}
    origin: dict[str, str] = {}
    for axis, default in defaults.items():
        cli = getattr(override, axis)
        file_value = getattr(section, axis)
        if cli is not None:
            values[axis], origin[axis] = cli, arg(axis)
        elif file_value is not None:
            values[axis], origin[axis] = file_value, f"{study.source}: tune.{axis}"
        else:
            values[axis], origin[axis] = default, f"default {axis}"
    grid = Grid(
        readout=tuple(dict.fromkeys(str(v) for v in values["readout"])),
        postselect=tuple(dict.fromkeys(str(v) for v in values["postselect"])),
        amplifier=tuple(dict.fromkeys(str(v) for v in values["amplifier"])),
        scales=tuple(dict.fromkeys(tuple(float(x) for x in s) for s in values["scales"])),
        fit=tuple(dict.fromkeys(str(v) for v in values["fit"])),
        family=tuple(dict.fromkeys(str(v) for v in values["family"])),
        suppress=tuple(dict.fromkeys(str(v) for v in values["suppress"])),
    )
    check_axes(grid, origin)
    return grid, origin


def _validate_override(override: GridOverride) -> None:
    """Given axes through the file's own ``tune:`` model (bounds included); a refused value is
    named by its argument (``scales``; on the command line ``--scales``)."""
    from pydantic import ValidationError

    from noiselab.common.errors import from_validation_error

    given = {
        axis: list(value)
        for axis, value in dataclasses.asdict(override).items()
        if value is not None
    }
    try:
        TuneGrid.model_validate(given)
    except ValidationError as exc:
        text = str(from_validation_error(exc, None))
        axis = text.split(":", 1)[0].split(".")[0].split("[")[0]
        raise InputError(f"{arg(axis)}: {text.removeprefix(axis).lstrip(':. ')}") from None


@dataclasses.dataclass(frozen=True)
class Setting:
    """One point of the grid as options and as a recipe."""

    label: str
    options: dict[str, Any]
    passes: tuple[dict[str, Any], ...]


def grid_settings(grid: Grid, symmetries_available: bool = True) -> tuple[list[Setting], list[str]]:
    """Every valid combination of the axes, and notes on what was left out and why.

    The families beyond the stack: ``error_cancellation`` runs first, with every readout and
    post-selection choice but no extrapolation; ``distillation`` alone (it composes with no
    readout correction, and is itself the estimator). Both keep the grid small, and run without
    suppression. Suppression passes come first in a setting's recipe; ``measure_twirl`` only
    with a readout correction (it symmetrizes the assignment for the correction to invert), and
    ``clifford_regression`` takes no suppression partner (its training circuits are not
    transformed).
    """
    notes: list[str] = []
    post_axis = grid.postselect
    if not symmetries_available and any(p != NONE for p in post_axis):
        notes.append("post-selection left out: the encoding keeps no symmetry to check")
        post_axis = (NONE,)
    with_family = any(f != NONE for f in grid.family)
    with_suppress = any(s != NONE for s in grid.suppress)
    settings: list[Setting] = []
    skipped = refused = 0
    for family in grid.family:
        suppress_axis = grid.suppress if family == NONE else (NONE,)
        if family != NONE and NONE not in grid.suppress:
            continue
        for sup in suppress_axis:
            suppressors = [] if sup == NONE else sup.split("+")
            for ro, ps, amp in itertools.product(grid.readout, post_axis, grid.amplifier):
                if family == "error_cancellation" and amp != NONE:
                    continue
                if family == "distillation" and (ro, ps, amp) != (NONE, NONE, NONE):
                    continue
                if "measure_twirl" in suppressors and ro == NONE:
                    continue
                zne_choices: list[tuple[tuple[float, ...] | None, str | None]]
                if amp in (NONE, REGRESSION):
                    zne_choices = [(None, None)]
                else:
                    zne_choices = [(sc, fit) for sc in grid.scales for fit in grid.fit]
                for scales, fit in zne_choices:
                    passes: list[dict[str, Any]] = [{"pass": name} for name in suppressors]
                    if family == "error_cancellation":
                        passes.append({"pass": "error_cancellation"})
                    if ro != NONE:
                        passes.append({"pass": "readout", "method": ro})
                    if ps != NONE:
                        passes.append({"pass": "postselect", "mode": ps})
                    if family == "distillation":
                        passes.append({"pass": "distillation"})
                    if amp == REGRESSION:
                        passes.append({"pass": REGRESSION})
                    elif amp != NONE:
                        passes.append(
                            {
                                "pass": "extrapolate",
                                "amplifier": amp,
                                "scales": list(scales),
                                "fit": fit,
                            }
                        )
                    try:
                        specs = tuple(make_pass(p, where="tune").spec() for p in passes)
                    except InputError:
                        skipped += 1  # e.g. an exponential fit given only two scale factors
                        continue
                    try:
                        parse_recipe(list(specs), where="tune")
                    except InputError:
                        refused += 1  # a pair of passes that declare each other incompatible
                        continue
                    options = {
                        "readout": ro,
                        "postselect": ps,
                        "amplifier": amp,
                        "scales": list(scales) if scales is not None else [],
                        "fit": fit or NONE,
                    }
                    if with_family:
                        options["family"] = family
                    if with_suppress:
                        options["suppress"] = sup
                    settings.append(Setting(_label(options), options, specs))
    if skipped:
        notes.append(f"{skipped} combination(s) left out: the fit needs more scale factors")
    if refused:
        notes.append(
            f"{refused} combination(s) left out: {REGRESSION} takes no suppression partner"
        )
    return settings, notes


def _label(o: dict[str, Any]) -> str:
    parts = [] if o.get("family", NONE) == NONE else [f"family={o['family']}"]
    if o.get("suppress", NONE) != NONE:
        parts.append(f"suppress={o['suppress']}")
    parts += [f"readout={o['readout']}", f"post={o['postselect']}"]
    if o["amplifier"] == NONE:
        parts.append("zne=none")
    elif o["amplifier"] == REGRESSION:
        parts.append(f"zne=none {REGRESSION}")
    else:
        scales = ",".join(f"{s:g}" for s in o["scales"])
        parts.append(f"zne={o['amplifier']}[{scales}]/{o['fit']}")
    return " ".join(parts)


def applicable(ctx: StudyContext, settings: list[Setting]) -> tuple[list[Setting], list[str]]:
    """The settings whose passes this experiment allows, and a note per family left out
    (e.g. distillation on a device without 2n + 1 qubits) and per suppression pass that changes
    nothing here (its settings equal those without it, which the grid has or the note says)."""
    kept: list[Setting] = []
    notes: dict[str, str] = {}
    settings, noop_notes = _drop_noop_suppression(ctx, settings)
    for s in settings:
        family = s.options.get("family", NONE)
        if family == NONE or family in notes:
            if family == NONE:
                kept.append(s)
            continue
        try:
            for p in parse_recipe(list(s.passes)).passes:
                p.check(ctx.experiment, "tune")
        except InputError as exc:
            notes[family] = f"{family} left out: {str(exc).split(': ', 1)[-1]}"
            continue
        kept.append(s)
    return kept, [*noop_notes, *notes.values()]


def _drop_noop_suppression(
    ctx: StudyContext, settings: list[Setting]
) -> tuple[list[Setting], list[str]]:
    """Leave out the settings with a suppression pass that is a no-op on this experiment
    (``MitigationPass.no_op``): the same setting without it gives the same energy."""
    reasons: dict[str, str | None] = {}
    kept: list[Setting] = []
    for s in settings:
        sup = s.options.get("suppress", NONE)
        names = [] if sup == NONE else sup.split("+")
        for name in names:
            if name not in reasons:
                reasons[name] = make_pass({"pass": name}, where="tune").no_op(ctx.experiment)
        if any(reasons[n] for n in names):
            continue
        kept.append(s)
    notes = [f"{n} left out: {why}" for n, why in reasons.items() if why]
    return kept, notes


def needed_variants(ctx: StudyContext, settings: Sequence[Setting]) -> list[Any]:
    """The distinct circuit variants the settings need (as their recipes declare them)."""
    out: dict[Any, None] = {}
    for s in settings:
        out.update(dict.fromkeys(parse_recipe(list(s.passes)).variants(ctx.experiment)))
    return list(out)


def tune(
    study_or_path: Study | str | Path,
    *,
    grid: GridOverride | None = None,
    cache: ResultsCache | str | Path | bool | None = None,
    seed: int | None = None,
    shots: int | None = None,
    workers: int | None = None,
    executor: Any = None,
    progress: ProgressHook | None = None,
    context: StudyContext | None = None,
    reuse: bool = True,
    method: str | None = None,
    trajectories: int | None = None,
    cluster: Any = None,
) -> TuneResult:
    """Evaluate every setting of the grid at the study's budget and rank them.

    Rank: highest probability within target first, then fewest shots needed, then grid order.
    ``workers`` > 1 (or an ``executor`` from :mod:`noiselab.study.executor`) runs the distinct
    simulations in parallel. ``reuse``: return the stored result of an identical earlier tune
    of the same files (False recomputes, still reading simulations from the cache).
    ``cluster``: a Dask scheduler address (``tcp://HOST:PORT``) or ``distributed.Client``.
    ``method`` / ``trajectories`` override the study's ``emulation:`` section.
    """
    # every input is read (bounded) and validated before the cache key reads the files again
    job = start_job(
        study_or_path, cache, seed=seed, shots=shots, method=method, trajectories=trajectories
    )
    study, store, t0 = job.study, job.store, job.t0
    resolved, _ = resolve_grid(study, grid)
    key = None
    if reuse and store.enabled and context is None and not isinstance(study_or_path, Study):
        options = {
            **override_key_options(study, seed, shots, method, trajectories),
            "grid": dataclasses.asdict(grid or GridOverride()),
        }
        key = job_key("tune", study_or_path, jsonable(options))
        stored = load_job_result(store, key, TuneResult, t0)
        if stored is not None:
            return stored
    with own_executor(workers, cluster, executor) as ex:
        # the verification bases are measured only when a setting may verify
        verify = "verify" in resolved.postselect
        ctx = (
            with_verification(context, verify)
            if context is not None
            else build_context(study, cache=store, progress=progress, verification=verify)
        )
        settings, notes = grid_settings(
            resolved, bool(getattr(ctx.qubit_problem, "symmetries", ()))
        )
        settings, left_out = applicable(ctx, settings)
        notes += left_out
        if not settings:
            raise InputError(f"{study.source}: tune: the grid has no valid setting")
        runner = CachingRunner(ctx.experiment, store)
        variants = needed_variants(ctx, settings)

        def sim_progress(done: int, total: int) -> None:
            if progress is not None:
                progress("simulating circuit variants", done, total)

        runner.prefetch(variants, ex, on_done=sim_progress)
        described = str(getattr(ex, "description", "in-process"))

    # settings that differ only in their extrapolation share each variant's corrected estimate
    memo = EstimateMemo()
    results: list[tuple[Setting, Any]] = []
    for i, s in enumerate(settings):
        result = run_recipe(list(s.passes), ctx.experiment, runner, memo=memo)
        results.append((s, result))
        if progress is not None:
            progress("scoring settings", i + 1, len(settings))
    order = {s.label: i for i, s in enumerate(settings)}  # exact ties: the grid's own order
    results.sort(key=lambda sr: (*rank_key(sr[1]), order[sr[0].label]))
    entries = tuple(
        TuneEntry(rank=i + 1, label=s.label, setting=s.options, passes=s.passes, result=r)
        for i, (s, r) in enumerate(results)
    )
    best = entries[0]
    _, verdict = verdict_line(
        best.label, best.result, study.target_mha, study.confidence, study.shots, what="setting"
    )
    if notes:
        verdict += " (" + "; ".join(notes) + ")"
    stats = RunStats.of_runner(runner, t0, described)
    result = TuneResult(
        entries=entries,
        distinct_variants=len(runner.requested),
        verdict=verdict,
        **job_fields(study, ctx, stats),
    )
    save_job_result(store, key, result)
    return result


def write_tune_outputs(result: TuneResult, out: str | Path) -> list[Path]:
    """tune.csv (ranked, one row per setting) and tune.json into ``out`` (atomic writes)."""
    folder = Path(out)
    return [
        write_text_atomic(folder / "tune.csv", csv_text(result.csv_rows())),
        write_text_atomic(folder / "tune.json", json.dumps(result.to_json(), indent=2) + "\n"),
    ]
