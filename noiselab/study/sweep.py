"""The sweep job: energy error against one device-noise knob, raw and mitigated.

A knob is either a uniform noise scale or one group of profile parameters. Every point *scales*
the device's own values of that group (``scale_profile(profile, factor, channels)``), so
per-qubit and per-pair overrides keep their ratios to each other; the knob value reported is the
device's reference value of that group (its mean over the qubits or pairs the circuit runs on)
times the factor. The compiled circuit, measurement plan and optimised parameters do not change
across a sweep, only the noise, so one experiment context serves every point; each point's
simulations go through the study's results cache, which makes an interrupted sweep resumable.

Crossings of the target are stated for the one rule of reaching it (P(|E - E_exact| <= target)
>= confidence at the study's budget, :func:`noiselab.mitigate.target.reaches_target`) and
separately for the bias alone (unlimited shots). Each is located by bisection on the knob to 1 %
relative, with new evaluations between the grid points that bracket it (through the results
cache), not by interpolation.
"""

from __future__ import annotations

import contextlib
import dataclasses
import itertools
import math
import time
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from noiselab.common.errors import input_error
from noiselab.common.wording import CAUTION, target_words
from noiselab.device.profile import VIRTUAL_GATES, relaxation_gate_infidelity, scale_profile
from noiselab.mitigate.recipe import run_recipe
from noiselab.study.assess import _default_cache, resolve_study
from noiselab.study.cache import CachingRunner
from noiselab.study.context import build_context
from noiselab.study.display import NotebookDisplay
from noiselab.study.executor import make_executor
from noiselab.study.knobs import Knob, get_knob
from noiselab.study.results import RunStats, trajectory_std_of

# ---------------------------------------------------------------- knob values


def check_value(knob: Knob, value: float, option: str, log: bool = False) -> float:
    """``value`` (base units) if the knob allows it, else InputError naming ``option``."""
    v = float(value)
    if not math.isfinite(v):
        raise input_error("sweep", option, f"{value} is not a finite number")
    strict = not knob.allow_zero or log
    if v < 0 or (v == 0 and strict):
        raise input_error(
            "sweep", option, f"{value} is out of range for {knob.name}", "> 0" if strict else ">= 0"
        )
    low = 0.0 if knob.lower is None else knob.lower
    if (knob.upper is not None and v > knob.upper) or (v > 0 and v < low):
        raise input_error(
            "sweep",
            option,
            f"{value} is out of range for {knob.name}",
            f"{low:g}..{knob.upper:g} ({knob.reason})",
        )
    return v


def knob_values(knob: Knob, start: float, stop: float, points: int, log: bool) -> tuple[float, ...]:
    """``points`` knob values from ``start`` to ``stop`` (base units), evenly or log spaced.

    Raises InputError for values outside the knob's range (negative rates, errors above the
    physical maximum, zero coherence time, zero ends with ``log``) and for fewer than 2 points.
    """
    start = check_value(knob, start, "--from", log)
    stop = check_value(knob, stop, "--to", log)
    if start == stop:
        raise input_error("sweep", "--from/--to", "the range is empty", "two different values")
    if points < 2:
        raise input_error("sweep", "--points", f"{points} points", "2 or more")
    if log:
        a, b = math.log10(start), math.log10(stop)
        inner = [10 ** (a + (b - a) * i / (points - 1)) for i in range(1, points - 1)]
        return (start, *inner, stop)  # the ends exactly as given
    return tuple(start + (stop - start) * i / (points - 1) for i in range(points))


def knob_factor(knob: Knob, value: float, reference: float) -> float:
    """Scale factor of the knob's channels that moves the reference value to ``value``."""
    if knob.channels is None:
        return value
    if knob.inverse:
        return reference / value
    if reference <= 0:
        raise input_error(
            "sweep",
            "--vary",
            f"the device has no {knob.phrase.removeprefix('the ')} to scale (reference value 0)",
            "a knob whose channel is present in the profile",
        )
    return value / reference


# ---------------------------------------------------------------- records


#: What the coherence knob does to the gate errors (said in its output).
COHERENCE_NOTE = (
    "the coherence-us knob changes T1 and T2 with every quoted gate error kept fixed: only the "
    "idle relaxation and the split of each gate's error between relaxation and depolarizing "
    "change, so the error need not fall as T1 rises; to see longer coherence lower the gate "
    "errors too, sweep one-qubit-error or two-qubit-error alongside"
)


@dataclasses.dataclass(frozen=True)
class SweepEntry:
    """One recipe at one sweep point. Energies in Ha, errors in mHa (against the exact energy)."""

    recipe: str
    energy_ha: float
    error_mha: float  # energy - exact, signed
    std_mha: float  # standard error at the study's shot budget
    bias_ansatz_mha: float
    p_within_target: float
    limited_by: str
    trajectory_std_mha: float | None = None  # emulator's own error (trajectory method only)
    reaches_target: bool = False  # the one rule at the budget


@dataclasses.dataclass(frozen=True)
class SweepPoint:
    """One knob value (base units), the channel scale factor it meant, every recipe's result."""

    value: float
    factor: float
    entries: tuple[SweepEntry, ...]
    floored: bool = False  # quoted gate error below the T1/T2 floor: relaxation alone is used

    def entry(self, recipe: str) -> SweepEntry:
        for e in self.entries:
            if e.recipe == recipe:
                return e
        raise KeyError(recipe)


@dataclasses.dataclass(frozen=True)
class RecipeCrossing:
    """Where one recipe crosses the target, in knob base units, and the sentence."""

    recipe: str
    crossings: tuple[float, ...]  # reaches the target at the budget (P >= confidence) flips
    bias_crossings: tuple[float, ...]  # |bias| = target (the bias alone, unlimited shots)
    sentence: str
    evaluations: int = 0  # new evaluations of the recipe the bisections took


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
        if knob.name == "coherence-us":
            out.append(COHERENCE_NOTE)
        low = [p.value for p in self.points if p.floored]
        if low:
            out.append(
                f"at {knob.phrase} up to {knob.show(max(low))} the quoted value is below what "
                "T1/T2 alone cause during the gate: the noise model uses relaxation alone there, "
                "so the error no longer falls with the knob (use coherence-us to lower that floor)"
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


# ---------------------------------------------------------------- crossings


BISECTION_REL_TOL = 0.01  # a crossing is located until its bracket is 1 % of the knob value

#: A knob value (base units) -> the recipe's entry there (a new, cached evaluation).
Evaluate = Callable[[float], SweepEntry]


def bias_within(entry: SweepEntry, target_mha: float) -> bool:
    """The bias alone (unlimited shots) inside the target: |bias| < target."""
    return abs(float(entry.error_mha)) < float(target_mha)


def _midpoint(a: float, b: float, log_x: bool) -> float:
    if log_x and a > 0 and b > 0:
        return math.sqrt(a * b)
    return 0.5 * (a + b)


def bisect_crossing(
    lo: float,
    hi: float,
    inside_lo: bool,
    inside: Callable[[float], bool],
    log_x: bool = False,
    rel_tol: float = BISECTION_REL_TOL,
) -> tuple[float, int]:
    """(knob value where ``inside`` flips between ``lo`` and ``hi``, evaluations used).

    ``inside(lo)`` is ``inside_lo`` and ``inside(hi)`` its opposite; the bracket is halved
    (geometrically with ``log_x``) until its width is at most ``rel_tol`` of its larger end, and
    its midpoint is returned.
    """
    n = 0
    while abs(hi - lo) > rel_tol * max(abs(lo), abs(hi)):
        mid = _midpoint(lo, hi, log_x)
        n += 1
        if inside(mid) == inside_lo:
            lo = mid
        else:
            hi = mid
    return _midpoint(lo, hi, log_x), n


def locate_crossings(
    values: Sequence[float],
    entries: Sequence[SweepEntry],
    inside: Callable[[SweepEntry], bool],
    evaluate: Evaluate,
    log_x: bool = False,
) -> tuple[tuple[float, ...], int]:
    """(knob values where ``inside(entry)`` flips, in the order of ``values``; evaluations used).

    Each grid interval whose ends differ is bisected with new evaluations. An interval whose
    ends are both outside while the signed bias changes sign (an over-correcting estimate
    passing through zero) is probed once where the bias would be zero; when inside there, both
    halves are bisected.
    """
    out: list[float] = []
    n = 0

    def at(x: float) -> bool:
        return inside(evaluate(x))

    for i in range(len(values) - 1):
        a, b = float(values[i]), float(values[i + 1])
        ea, eb = entries[i], entries[i + 1]
        ia, ib = inside(ea), inside(eb)
        if ia != ib:
            x, k = bisect_crossing(a, b, ia, at, log_x)
            out.append(x)
            n += k
        elif not ia and float(ea.error_mha) * float(eb.error_mha) < 0:
            f = float(ea.error_mha) / (float(ea.error_mha) - float(eb.error_mha))
            if log_x and a > 0 and b > 0:
                probe = 10 ** (math.log10(a) + f * (math.log10(b) - math.log10(a)))
            else:
                probe = a + f * (b - a)
            n += 1
            if at(probe):
                x1, k1 = bisect_crossing(a, probe, False, at, log_x)
                x2, k2 = bisect_crossing(probe, b, True, at, log_x)
                out += [x1, x2]
                n += k1 + k2
    return tuple(out), n


def _region(
    knob: Knob, values: Sequence[float], flags: Sequence[bool], crossings: Sequence[float]
) -> tuple[str, str]:
    """(kind, words) of where ``flags`` hold: kind "all", "none" or "part"."""
    lo, hi = min(values), max(values)
    if lo == hi:
        return ("all" if flags[0] else "none"), f"at {knob.phrase} of {knob.show(lo)}"
    span = f"over the whole range of {knob.phrase} ({knob.show(lo)} to {knob.show(hi)})"
    if not crossings:
        if all(flags):
            return "all", span
        if not any(flags):
            return "none", span
    ascending = values[-1] > values[0]
    first_inside = flags[0] if ascending else flags[-1]  # at the smallest value
    if len(crossings) == 1:
        word = "below" if first_inside else "above"
        return "part", f"while {knob.phrase} is {word} {knob.show(crossings[0])}"
    bounds = [lo, *sorted(crossings), hi]
    parts = []
    inside_now = first_inside
    for a, b in itertools.pairwise(bounds):
        if inside_now:
            parts.append(f"{knob.show(a)} to {knob.show(b)}")
        inside_now = not inside_now
    return "part", f"for {knob.phrase} from " + " and from ".join(parts)


def crossing_sentence(
    recipe: str,
    knob: Knob,
    values: Sequence[float],
    reaches: Sequence[bool],
    crossings: Sequence[float],
    bias_inside: Sequence[bool],
    bias_crossings: Sequence[float],
    target_mha: float,
    confidence: float,
) -> str:
    """One sentence in the device's own units: where the recipe reaches the target at the
    budget (the rule: P >= confidence), then where its bias alone is within it."""
    goal = target_words(target_mha)
    rule = f"at the budget (P >= {confidence:g})"
    kind, words = _region(knob, values, reaches, crossings)
    if kind == "none":
        head = f"{recipe} does not reach {goal} {rule} {words.replace('over', 'anywhere in', 1)}"
    else:
        head = f"{recipe} reaches {goal} {rule} {words}"
    kind, words = _region(knob, values, bias_inside, bias_crossings)
    if kind == "all":
        tail = f"its bias alone (unlimited shots) is within the target {words}"
    elif kind == "none":
        tail = f"its bias alone (unlimited shots) is outside the target {words}"
    else:
        tail = f"its bias alone (unlimited shots) is within the target {words}"
    return f"{head}; {tail}"


def recipe_crossing(
    recipe: str,
    knob: Knob,
    points: Sequence[SweepPoint],
    target_mha: float,
    confidence: float,
    log_x: bool,
    evaluate: Evaluate,
) -> RecipeCrossing:
    """Crossings (by bisection through ``evaluate``) and the sentence for one recipe."""
    values = [p.value for p in points]
    entries = [p.entry(recipe) for p in points]
    rule, n1 = locate_crossings(values, entries, lambda e: e.reaches_target, evaluate, log_x)
    bias, n2 = locate_crossings(
        values, entries, lambda e: bias_within(e, target_mha), evaluate, log_x
    )
    sentence = crossing_sentence(
        recipe,
        knob,
        values,
        [e.reaches_target for e in entries],
        rule,
        [bias_within(e, target_mha) for e in entries],
        bias,
        target_mha,
        confidence,
    )
    return RecipeCrossing(
        recipe=recipe, crossings=rule, bias_crossings=bias, sentence=sentence, evaluations=n1 + n2
    )


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
    experiment = dataclasses.replace(task.experiment, profile=task.profile)
    runner = CachingRunner(experiment, task.cache)
    results = tuple(
        (name, run_recipe(list(passes), experiment, runner)) for name, passes in task.recipes
    )
    return ConfigOutcome(results, runner.simulations, runner.cache_hits, runner.engine_seconds)


RAW_RECIPE = "raw"


def chosen_recipes(
    study: Any, names: Sequence[str] | None, where: str = "--recipe"
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
                str(study.source), where, f"unknown recipe {n!r}", ", ".join(all_recipes)
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


def scan_fields(
    study: Any, ctx: Any, recipes: tuple[str, ...], stats: RunStats
) -> dict[str, Any]:
    """Fields that sweep and budget results take from the study, its context and the run."""
    return {
        "study_name": study.name,
        "device_name": str(study.profile.name),
        "recipes": recipes,
        "target_mha": float(study.target_mha),
        "shots_total": int(study.shots),
        "exact_energy_ha": float(ctx.exact_energy_ha),
        "ansatz_energy_ha": float(ctx.ansatz_energy_ha),
        "stats": stats,
        "emulation_method": ctx.emulation_method,
        "emulation_notice": ctx.emulation_notice,
        "confidence": float(study.confidence),
    }


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


# ---------------------------------------------------------------- reference values


def _patch_pairs(profile: Any, patch: Sequence[int]) -> list[tuple[int, int]]:
    inside = set(patch)
    pairs = [p for p in profile.pairs() if p[0] in inside and p[1] in inside]
    return pairs or list(profile.pairs())


def reference_value(knob: Knob, profile: Any, patch: Sequence[int]) -> float:
    """The device's value of the knob (base units): its mean over the circuit's qubits or pairs."""
    if knob.channels is None:
        return 1.0
    qubits = [profile.qubit(q) for q in patch]
    if knob.name == "two-qubit-error":
        pairs = _patch_pairs(profile, patch)
        return sum(profile.pair_error(a, b) for a, b in pairs) / max(len(pairs), 1)
    if knob.name == "one-qubit-error":
        return sum(q.gate_error for q in qubits) / len(qubits)
    if knob.name == "readout-error":
        return sum(0.5 * (q.flip_0to1 + q.flip_1to0) for q in qubits) / len(qubits)
    if knob.name == "coherence-us":
        t1 = [q.t1_us for q in qubits]
        if any(t is None for t in t1):
            raise input_error(
                profile.source,
                "qubits.default.t1_us",
                "infinite T1 cannot be swept",
                "finite T1 and T2",
            )
        return sum(t1) / len(t1)  # type: ignore[arg-type]
    raise AssertionError(knob.name)  # pragma: no cover


def below_relaxation_floor(knob: Knob, profile: Any, patch: Sequence[int]) -> bool:
    """True when a gate-error knob's scaled value is below what T1/T2 alone cause over the gate
    on some qubit or pair of the patch (the noise model then uses relaxation alone, so lowering
    the knob further changes nothing)."""
    if knob.name == "two-qubit-error":
        gate = profile.two_qubit_gate
        return any(
            profile.pair_error(a, b) < relaxation_gate_infidelity(profile, gate, (a, b))
            for a, b in _patch_pairs(profile, patch)
        )
    if knob.name == "one-qubit-error":
        physical = [g for g in profile.single_qubit_gates if g not in VIRTUAL_GATES]
        if not physical:
            return False
        return any(
            profile.qubit(q).gate_error < relaxation_gate_infidelity(profile, physical[0], (q,))
            for q in patch
        )
    return False


def default_range(knob: Knob, reference: float) -> tuple[float, float]:
    """A quarter to four times the device's value (clipped to the knob's range)."""
    lo, hi = reference / 4.0, reference * 4.0
    if knob.upper is not None:
        hi = min(hi, knob.upper)
    return lo, hi


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
) -> SweepResult:
    """Sweep ``knob`` from ``start`` to ``stop`` (base units) over ``points`` values.

    Every argument left as None comes from the study's ``sweep:`` section, else the built-in
    default: knob ``noise-scale``, a quarter to four times the device's value, 5 points, even
    spacing, all of the study's recipes (raw always first). ``values`` gives the knob values
    explicitly instead. ``cache``: a ResultsCache, a path, None (the user cache folder) or
    False. ``workers`` > 1 runs points in local processes (``executor``: any study executor,
    e.g. a dask one; ``cluster``: a Dask scheduler address or Client). ``on_point(index,
    point)`` is called in the calling process as each point finishes. ``method`` /
    ``trajectories`` override the study's ``emulation:`` section.
    """
    t0 = time.perf_counter()
    study = resolve_study(study_or_path, seed, shots, method, trajectories)
    defaults = getattr(study, "sweep", None)

    def default(name: str, given: Any, fallback: Any) -> Any:
        if given is not None:
            return given
        from_study = getattr(defaults, name, None)
        return fallback if from_study is None else from_study

    spec = get_knob(default("vary", knob, "noise-scale"))
    same_knob = knob is None or getattr(defaults, "vary", None) in (None, knob)
    # the study's range belongs to the study's knob; another knob gets the built-in range
    start = start if not same_knob else default("start", start, None)
    stop = stop if not same_knob else default("stop", stop, None)
    from noiselab.study.spec import validate_sweep_options

    given = validate_sweep_options(str(study.source), points=points, start=start, stop=stop)
    start, stop = given.start, given.stop
    points = int(default("points", given.points, 5))
    log = bool(default("log", log, False))
    picked = chosen_recipes(study, recipes)
    store = _default_cache(cache)
    if points < 2 and values is None:
        raise input_error("sweep", "--points", f"{points} points", "2 or more")
    # refuse a bad range before the (slow) context is built
    if start is not None:
        check_value(spec, start, "--from", log)
    if stop is not None:
        check_value(spec, stop, "--to", log)
    if values is not None:
        values = [check_value(spec, v, "values", log) for v in values]
        if len(values) < 1:
            raise input_error("sweep", "values", "no knob values", "at least one value")
    with own_executor(workers, cluster, executor) as ex:
        return _sweep_with(
            study, spec, start, stop, points, log, picked, values, store, ex, progress,
            on_point, context, t0,
        )


@contextlib.contextmanager
def own_executor(workers: int | None, cluster: Any, executor: Any) -> Iterator[Any]:
    """``executor`` if given, else one made (and closed) here from ``workers`` / ``cluster``;
    made before the slow context so that a bad cluster address fails at once."""
    if executor is not None:
        yield executor
        return

    ex = make_executor(workers, cluster)
    try:
        yield ex
    finally:
        ex.close()


def _sweep_with(
    study: Any,
    spec: Knob,
    start: float | None,
    stop: float | None,
    points: int,
    log: bool,
    picked: tuple[tuple[str, tuple[dict[str, Any], ...]], ...],
    values: Sequence[float] | None,
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
    ref = reference_value(spec, profile, patch)
    if values is None:
        d_lo, d_hi = default_range(spec, ref)
        values = knob_values(
            spec, d_lo if start is None else start, d_hi if stop is None else stop, points, log
        )
    values = tuple(float(v) for v in values)
    factors_used = tuple(knob_factor(spec, v, ref) for v in values)
    channels = None if spec.channels is None else list(spec.channels)
    profiles = [scale_profile(profile, f, channels) for f in factors_used]
    floored = [below_relaxation_floor(spec, p, patch) for p in profiles]
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
            prof = scale_profile(profile, knob_factor(spec, value, ref), channels)
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
        **scan_fields(study, ctx, names, stats),
    )
