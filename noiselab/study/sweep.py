"""The sweep job: energy error against one device-noise knob, raw and mitigated.

A knob is either a uniform noise scale or one group of profile parameters. Every point *scales*
the device's own values of that group (``scale_profile(profile, factor, channels)``), so
per-qubit and per-pair overrides keep their ratios to each other; the knob value reported is the
device's reference value of that group (its mean over the qubits or pairs the circuit runs on)
times the factor. The compiled circuit, measurement plan and optimised parameters do not change
across a sweep, only the noise, so one experiment context serves every point; each point's
simulations go through the study's results cache, which makes an interrupted sweep resumable.

Each knob (:mod:`noiselab.study.knobs`) carries its bounds and its reference value. Crossings
of the target (:mod:`noiselab.study.crossings`) are located by bisection on the knob with new
evaluations between the grid points that bracket them, through the results cache.

About 500 lines: the sweep record and its JSON (notes on the coherence knob's two modes
included), the configuration tasks that budget reuses, and the job itself.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from typing import Any

from noiselab.common.errors import arg, did_you_mean, input_error
from noiselab.common.wording import CAUTION
from noiselab.device.coherence import scale_coherence_with_gates
from noiselab.device.profile import scale_profile
from noiselab.mitigate.recipe import run_recipe
from noiselab.study.cache import CachingRunner
from noiselab.study.context import build_context, replace_experiment
from noiselab.study.crossings import (
    BISECTION_REL_TOL,
    Evaluate,
    RecipeCrossing,
    SweepEntry,
    SweepPoint,
    recipe_crossing,
)
from noiselab.study.display import NotebookDisplay
from noiselab.study.executor import make_executor
from noiselab.study.job import own_executor, scan_fields, start_job
from noiselab.study.knobs import Knob, get_knob
from noiselab.study.results import RunStats, trajectory_std_of

# ---------------------------------------------------------------- records


#: What the coherence knob does to the gate errors (said in its output), per mode of
#: ``sweep.coherence_gate_errors`` / ``--coherence-gate-errors``.
COHERENCE_NOTE = (
    "the coherence_us knob changes T1 and T2 with every quoted gate error kept fixed "
    "(coherence_gate_errors: fixed): only the "
    "idle relaxation and the split of each gate's error between relaxation and depolarizing "
    "change, so the error need not fall as T1 rises; to see longer coherence lower the gate "
    "errors too, sweep single_qubit_error or two_qubit_error alongside"
)
COHERENCE_FOLLOW_NOTE = (
    "the coherence_us knob changes T1 and T2 and moves the relaxation part of every quoted gate "
    "error with them (coherence_gate_errors: follow): each gate error is what T1/T2 cause over "
    "the gate's duration plus the rest of the quoted error, held fixed (the rest is assumed "
    "independent of coherence)"
)
#: The modes of the coherence knob; the first is the default.
COHERENCE_GATE_MODES = ("follow", "fixed")


@dataclasses.dataclass(frozen=True, repr=False)
class SweepResult(NotebookDisplay):
    """A finished sweep."""

    study_name: str
    device_name: str
    knob: str
    log: bool
    current_value: float  # the device as profiled, base units
    target_mha: float
    shots_total: int
    exact_energy_ha: float
    ansatz_energy_ha: float
    recipes: tuple[str, ...]
    points: tuple[SweepPoint, ...]
    crossings: tuple[RecipeCrossing, ...]
    stats: Any = dataclasses.field(default=None, compare=False)  # RunStats, not in the JSON
    emulation_method: str = "density_matrix"  # or "trajectory"
    emulation_notice: str | None = None
    confidence: float = 0.95
    #: coherence_us only: "follow" or "fixed" (None for the other knobs)
    coherence_gate_errors: str | None = None
    #: coherence_us with "follow": where a gate error was clipped (rest below 0, or too large)
    clipped: tuple[str, ...] = ()

    @property
    def knob_spec(self) -> Knob:
        return get_knob(self.knob)

    def summary(self) -> str:
        """One line: study, knob and range, recipes, crossings found."""
        k = self.knob_spec
        found = sum(len(c.crossings) for c in self.crossings)
        return (
            f"{self.study_name}: {k.phrase.removeprefix('the ')} from {k.show(self.values[0])} to "
            f"{k.show(self.values[-1])} ({len(self.points)} points), recipes "
            f"{', '.join(self.recipes)}; {found} crossing(s) of ±{self.target_mha:.4g} mHa"
        )

    def to_records(self) -> list[dict[str, Any]]:
        """One dict per point and recipe: knob value (base units), error and std (mHa), P."""
        return [
            {
                self.knob.replace("-", "_"): p.value,
                "recipe": e.recipe,
                "error_mha": float(e.error_mha),
                "std_mha": float(e.std_mha),
                "p_within_target": float(e.p_within_target),
                "reaches_target": bool(e.reaches_target),
            }
            for p in self.points
            for e in p.entries
        ]

    @property
    def crossing_method(self) -> str:
        """How the crossings were located (one line)."""
        n = sum(c.evaluations for c in self.crossings)
        return (
            f"crossings located by bisection on the knob to {BISECTION_REL_TOL * 100:g} % relative "
            f"({n} extra evaluation(s) between the grid points, through the results cache)"
        )

    def notes(self) -> tuple[str, ...]:
        """Plain-language remarks about the sweep (the relaxation floor of gate errors)."""
        knob = self.knob_spec
        out: list[str] = []
        if knob.name == "coherence_us":
            follow = self.coherence_gate_errors == "follow"
            out.append(COHERENCE_FOLLOW_NOTE if follow else COHERENCE_NOTE)
        if self.clipped:
            shown = "; ".join(self.clipped[:4]) + ("; ..." if len(self.clipped) > 4 else "")
            out.append(
                f"clipped gate errors ({shown}): where the quoted error is below what T1/T2 "
                "cause over the gate, its other part is taken as 0; an error above the maximum "
                "is held at the maximum"
            )
        low = [p.value for p in self.points if p.floored]
        if low:
            out.append(
                f"at {knob.phrase} up to {knob.show(max(low))} the quoted value is below what "
                "T1/T2 alone cause during the gate: the noise model uses relaxation alone there, "
                "so the error no longer falls with the knob (use coherence_us to lower that floor)"
            )
        return tuple(out)

    @property
    def values(self) -> tuple[float, ...]:
        return tuple(p.value for p in self.points)

    def series(self, recipe: str) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """(signed error mHa, std mHa) of ``recipe`` across the points."""
        es = [p.entry(recipe) for p in self.points]
        return tuple(e.error_mha for e in es), tuple(e.std_mha for e in es)

    def to_json(self) -> dict[str, Any]:
        """Plain JSON-able dict (units in key names)."""
        knob = self.knob_spec
        return {
            "study": self.study_name,
            "device": self.device_name,
            "knob": self.knob,
            "knob_axis": knob.axis_label,
            "knob_unit_base": {"%": "probability (0..1)", "us": "microseconds", "": "factor"}[
                knob.unit
            ],
            "log_spacing": self.log,
            **(
                {"coherence_gate_errors": self.coherence_gate_errors}
                if self.coherence_gate_errors is not None
                else {}
            ),
            "current_value": self.current_value,
            "target_mha": self.target_mha,
            "confidence": self.confidence,
            "shots_total": self.shots_total,
            "exact_energy_ha": self.exact_energy_ha,
            "ansatz_energy_ha": self.ansatz_energy_ha,
            "recipes": list(self.recipes),
            "emulation_method": self.emulation_method,
            "points": [
                {
                    "value": p.value,
                    "channel_factor": p.factor,
                    "below_relaxation_floor": p.floored,
                    "results": [dataclasses.asdict(e) for e in p.entries],
                }
                for p in self.points
            ],
            "crossings": [dataclasses.asdict(c) for c in self.crossings],
            "crossing_method": self.crossing_method,
            "notes": list(self.notes()),
            "caution": CAUTION,
        }


PointHook = Callable[[int, SweepPoint], None]


# ---------------------------------------------------------------- running configurations


@dataclasses.dataclass(frozen=True)
class ConfigTask:
    """One noise configuration to evaluate: the study's experiment with ``profile`` swapped in,
    every recipe run through a caching runner on ``cache`` (picklable: executor task)."""

    experiment: Any  # noiselab.mitigate.experiment.ExperimentContext
    profile: Any  # DeviceProfile of this configuration
    recipes: tuple[tuple[str, tuple[dict[str, Any], ...]], ...]
    cache: Any  # ResultsCache (reopened in a worker process)


@dataclasses.dataclass(frozen=True)
class ConfigOutcome:
    """Every recipe's result for one configuration and what it cost."""

    results: tuple[tuple[str, Any], ...]  # (recipe name, RecipeResult)
    simulations: int
    cache_hits: int
    engine_seconds: float


def run_config(task: ConfigTask) -> ConfigOutcome:
    """Run ``task`` (module level, so process pools and dask can run it)."""
    experiment = replace_experiment(task.experiment, profile=task.profile)
    runner = CachingRunner(experiment, task.cache)
    results = tuple(
        (name, run_recipe(list(passes), experiment, runner)) for name, passes in task.recipes
    )
    return ConfigOutcome(results, runner.simulations, runner.cache_hits, runner.engine_seconds)


RAW_RECIPE = "raw"


def chosen_recipes(
    study: Any, names: Sequence[str] | None, where: str = arg("recipes")
) -> tuple[tuple[str, tuple[dict[str, Any], ...]], ...]:
    """Raw (no passes) first, then the named recipes of the study (default: all of them).

    A study recipe with no passes already is the raw one; otherwise ``raw`` is added.
    """
    all_recipes = dict(study.recipes)
    if names is None:
        picked = list(all_recipes)
        defaults = getattr(getattr(study, "sweep", None), "recipes", None)
        if defaults:
            picked = list(defaults)
    else:
        picked = list(dict.fromkeys(names))
    for n in picked:
        if n not in all_recipes and n != RAW_RECIPE:
            raise input_error(
                str(study.source),
                where,
                f"unknown recipe {n!r}{did_you_mean(n, list(all_recipes))}",
                ", ".join(all_recipes),
            )
    raw_name = next((n for n, p in all_recipes.items() if len(p) == 0), None)
    out: list[tuple[str, tuple[dict[str, Any], ...]]] = [(raw_name or RAW_RECIPE, ())]
    for n in picked:
        if n == out[0][0] or n == RAW_RECIPE:
            continue
        out.append((n, tuple(all_recipes[n])))
    return tuple(out)


def run_configs(
    tasks: Sequence[ConfigTask],
    workers: int | None,
    on_done: Callable[[int, ConfigOutcome], None] | None = None,
    executor: Any = None,
) -> tuple[list[ConfigOutcome], str]:
    """Evaluate ``tasks`` in order, in-process or through the study executor; ``on_done(i, out)``
    runs in the calling process after each task (in task order for in-process runs)."""
    own = executor is None
    ex = make_executor(workers) if own else executor
    try:
        if getattr(ex, "in_process", True):
            outs = []
            for i, t in enumerate(tasks):
                out = run_config(t)
                outs.append(out)
                if on_done is not None:
                    on_done(i, out)
            return outs, str(getattr(ex, "description", "in-process"))
        cb = None if on_done is None else (lambda i, out: on_done(i, out))
        return list(ex.map(run_config, list(tasks), on_result=cb)), str(ex.description)
    finally:
        if own:
            ex.close()


def entry_from(name: str, r: Any) -> SweepEntry:
    """A SweepEntry from a RecipeResult."""
    return SweepEntry(
        recipe=name,
        energy_ha=float(r.energy_ha),
        error_mha=float(r.bias_exact_mha),
        std_mha=float(r.std_mha),
        bias_ansatz_mha=float(r.bias_ansatz_mha),
        p_within_target=float(r.p_within_target),
        limited_by=str(r.limited_by),
        trajectory_std_mha=trajectory_std_of(r),
        reaches_target=bool(r.reaches_target),
    )


# ---------------------------------------------------------------- the job


ProgressHook = Callable[[str, int, int], None]


def sweep(
    study_or_path: Any,
    knob: str | None = None,
    start: float | None = None,
    stop: float | None = None,
    points: int | None = None,
    log: bool | None = None,
    *,
    recipes: Sequence[str] | None = None,
    values: Sequence[float] | None = None,
    cache: Any = None,
    seed: int | None = None,
    shots: int | None = None,
    workers: int | None = None,
    executor: Any = None,
    progress: ProgressHook | None = None,
    on_point: PointHook | None = None,
    context: Any = None,
    method: str | None = None,
    trajectories: int | None = None,
    cluster: Any = None,
    coherence_gate_errors: str | None = None,
) -> SweepResult:
    """Sweep ``knob`` from ``start`` to ``stop`` (base units) over ``points`` values.

    Every argument left as None comes from the study's ``sweep:`` section, else the built-in
    default: knob ``noise_scale``, a quarter to four times the device's value, 5 points, even
    spacing, all of the study's recipes (raw always first). ``values`` gives the knob values
    explicitly instead. ``cache``: a ResultsCache, a path, None (the user cache folder) or
    False. ``workers`` > 1 runs points in local processes (``executor``: any study executor,
    e.g. a dask one; ``cluster``: a Dask scheduler address or Client). ``on_point(index,
    point)`` is called in the calling process as each point finishes. ``method`` /
    ``trajectories`` override the study's ``emulation:`` section. ``coherence_gate_errors``
    (coherence_us only): "follow" (default) moves the relaxation part of every quoted gate
    error with T1/T2 (:mod:`noiselab.device.coherence`), "fixed" keeps the quoted errors.
    """
    job = start_job(
        study_or_path, cache, seed=seed, shots=shots, method=method, trajectories=trajectories
    )
    study, store, t0 = job.study, job.store, job.t0
    defaults = getattr(study, "sweep", None)

    def default(name: str, given: Any, fallback: Any) -> Any:
        if given is not None:
            return given
        from_study = getattr(defaults, name, None)
        return fallback if from_study is None else from_study

    spec = get_knob(default("knob", knob, "noise_scale"))
    same_knob = knob is None or getattr(defaults, "knob", None) in (None, knob)
    # the study's range belongs to the study's knob; another knob gets the built-in range
    start = start if not same_knob else default("start", start, None)
    stop = stop if not same_knob else default("stop", stop, None)
    from noiselab.study.spec import validate_sweep_options

    given = validate_sweep_options(
        str(study.source),
        points=points,
        start=start,
        stop=stop,
        coherence_gate_errors=coherence_gate_errors,
    )
    start, stop = given.start, given.stop
    mode = default("coherence_gate_errors", given.coherence_gate_errors, COHERENCE_GATE_MODES[0])
    points = int(default("points", given.points, 5))
    log = bool(default("log", log, False))
    picked = chosen_recipes(study, recipes)
    if points < 2 and values is None:
        raise input_error("sweep", arg("points"), f"{points} points", "2 or more")
    # refuse a bad range before the (slow) context is built
    if start is not None:
        spec.check(start, "start", log)
    if stop is not None:
        spec.check(stop, "stop", log)
    if values is not None:
        values = [spec.check(v, "values", log) for v in values]
        if len(values) < 1:
            raise input_error("sweep", arg("values"), "no knob values", "at least one value")
    with own_executor(workers, cluster, executor) as ex:
        return _sweep_with(
            study,
            spec,
            start,
            stop,
            points,
            log,
            picked,
            values,
            mode if spec.name == "coherence_us" else None,
            store,
            ex,
            progress,
            on_point,
            context,
            t0,
        )


def _sweep_with(
    study: Any,
    spec: Knob,
    start: float | None,
    stop: float | None,
    points: int,
    log: bool,
    picked: tuple[tuple[str, tuple[dict[str, Any], ...]], ...],
    values: Sequence[float] | None,
    mode: str | None,
    store: Any,
    executor: Any,
    progress: ProgressHook | None,
    on_point: PointHook | None,
    context: Any,
    t0: float,
) -> SweepResult:
    ctx = context if context is not None else build_context(study, cache=store, progress=progress)
    profile = study.profile
    patch = tuple(ctx.compiled.patch)
    ref = spec.reference(profile, patch)
    if values is None:
        d_lo, d_hi = spec.default_range(ref)
        values = spec.values(
            d_lo if start is None else start, d_hi if stop is None else stop, points, log
        )
    values = tuple(float(v) for v in values)
    factors_used = tuple(spec.factor(v, ref) for v in values)
    channels = None if spec.channels is None else list(spec.channels)
    clipped: dict[str, None] = {}

    def scaled(factor: float) -> Any:
        if mode != "follow":
            return scale_profile(profile, factor, channels)
        moved = scale_coherence_with_gates(profile, factor)
        clipped.update(dict.fromkeys(moved.clipped))
        return moved.profile

    profiles = [scaled(f) for f in factors_used]
    floored = [spec.below_floor(p, patch) for p in profiles]
    tasks = [ConfigTask(ctx.experiment, p, picked, store) for p in profiles]
    label = f"sweep {spec.name}"
    done_points: dict[int, SweepPoint] = {}

    def finished(i: int, out: ConfigOutcome) -> None:
        point = SweepPoint(
            values[i], factors_used[i], tuple(entry_from(n, r) for n, r in out.results), floored[i]
        )
        done_points[i] = point
        if progress is not None:
            progress(label, len(done_points), len(tasks))
        if on_point is not None:
            on_point(i, point)

    if progress is not None:
        progress(label, 0, len(tasks))
    outs, described = run_configs(tasks, None, finished, executor)
    pts = tuple(
        done_points.get(i)
        or SweepPoint(
            values[i], factors_used[i], tuple(entry_from(n, r) for n, r in o.results), floored[i]
        )
        for i, o in enumerate(outs)
    )
    names = tuple(n for n, _ in picked)
    extra: list[ConfigOutcome] = []

    def evaluator(name: str, passes: tuple[dict[str, Any], ...]) -> Evaluate:
        def evaluate(value: float) -> SweepEntry:
            prof = scaled(spec.factor(value, ref))
            out = run_config(ConfigTask(ctx.experiment, prof, ((name, passes),), store))
            extra.append(out)
            return entry_from(name, out.results[0][1])

        return evaluate

    target, conf = float(study.target_mha), float(study.confidence)
    crossings = tuple(
        recipe_crossing(n, spec, pts, target, conf, log, evaluator(n, passes))
        for n, passes in picked
    )
    outs = [*outs, *extra]
    stats = RunStats.of_outcomes(outs, t0, described)
    return SweepResult(
        knob=spec.name,
        log=log,
        current_value=ref,
        points=pts,
        crossings=crossings,
        coherence_gate_errors=mode,
        clipped=tuple(clipped),
        **scan_fields(study, ctx, names, stats),
    )
