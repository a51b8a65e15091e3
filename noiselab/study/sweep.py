"""The sweep job: energy error against one device-noise knob, raw and mitigated.

A knob is either a uniform noise scale or one group of profile parameters. Every point *scales*
the device's own values of that group (``scale_profile(profile, factor, channels)``), so
per-qubit and per-pair overrides keep their ratios to each other; the knob value reported is the
device's reference value of that group (its mean over the qubits or pairs the circuit runs on)
times the factor. The compiled circuit, measurement plan and optimised parameters do not change
across a sweep, only the noise, so one experiment context serves every point; each point's
simulations go through the study's results cache, which makes an interrupted sweep resumable.

Crossings of the chemical-accuracy target are found by linear interpolation of log10 |error|
against the knob value (against log10 of the knob value with ``log=True``).
"""

from __future__ import annotations

import contextlib
import dataclasses
import itertools
import math
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from noiselab.common.errors import input_error
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.device.profile import (
    MAX_COHERENCE_US,
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
    MIN_COHERENCE_US,
)
from noiselab.mitigate.passes.extrapolate import MAX_SCALE_FACTOR as MAX_NOISE_SCALE

_PROBABILITY = "a probability; larger is not an error rate"

# ---------------------------------------------------------------- knobs


@dataclasses.dataclass(frozen=True)
class Knob:
    """One sweepable quantity.

    ``value`` is in base units (a probability 0..1, microseconds, or a bare factor);
    ``display_factor`` converts it to the units shown (100 for percent).
    ``inverse`` is True when the channel's scale factor is reference / value (coherence times:
    a longer T1 means a smaller relaxation rate).
    """

    name: str
    phrase: str  # used in sentences: "the two-qubit gate error"
    axis_label: str  # with units
    unit: str  # shown after a value ("%", "us", "")
    channels: tuple[str, ...] | None  # None: every channel (uniform noise scale)
    display_factor: float = 1.0
    inverse: bool = False
    upper: float | None = None  # largest allowed value (base units)
    allow_zero: bool = True
    lower: float | None = None  # smallest allowed value above zero (base units)
    reason: str = _PROBABILITY  # why the range ends where it does (shown when refused)

    def show(self, value: float) -> str:
        """``value`` (base units) in display units with three significant digits."""
        v = value * self.display_factor
        text = f"{v:.0f}" if abs(v) >= 100 else f"{v:.3g}"
        return f"{text} {self.unit}" if self.unit else text


KNOBS: dict[str, Knob] = {
    "noise-scale": Knob(
        name="noise-scale",
        phrase="the noise scale factor",
        axis_label="noise scale factor (1 = device as profiled)",
        unit="",
        channels=None,
        upper=MAX_NOISE_SCALE,
        reason="beyond, every circuit is close to fully depolarized",
    ),
    "two-qubit-error": Knob(
        name="two-qubit-error",
        phrase="the two-qubit gate error",
        axis_label="two-qubit gate error (%)",
        unit="%",
        channels=("two_qubit",),
        display_factor=100.0,
        upper=MAX_TWO_QUBIT_ERROR,
    ),
    "one-qubit-error": Knob(
        name="one-qubit-error",
        phrase="the single-qubit gate error",
        axis_label="single-qubit gate error (%)",
        unit="%",
        channels=("single_qubit",),
        display_factor=100.0,
        upper=MAX_SINGLE_QUBIT_ERROR,
    ),
    "coherence-us": Knob(
        name="coherence-us",
        phrase="T1 (with T2 scaled alongside)",
        axis_label="T1 (us), T2 scaled with it",
        unit="us",
        channels=("relaxation",),
        inverse=True,
        allow_zero=False,
        lower=MIN_COHERENCE_US,
        upper=MAX_COHERENCE_US,
        reason="T1 from 1 ns to 1000 s; outside, a unit typo",
    ),
    "readout-error": Knob(
        name="readout-error",
        phrase="the readout assignment error",
        axis_label="readout assignment error (%)",
        unit="%",
        channels=("readout",),
        display_factor=100.0,
        upper=MAX_READOUT_ERROR,
    ),
}
KNOB_ALIASES = {"scale": "noise-scale"}


def get_knob(name: str) -> Knob:
    """The knob called ``name``; InputError naming the allowed ones otherwise."""
    key = KNOB_ALIASES.get(name, name)
    if key not in KNOBS:
        raise input_error("sweep", "--vary", f"unknown knob {name!r}", ", ".join(KNOBS))
    return KNOBS[key]


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
    """Where one recipe's |error| crosses the target, in knob base units, and the sentence."""

    recipe: str
    crossings: tuple[float, ...]  # central |error| = target
    band_crossings: tuple[float, ...]  # |error| + std = target (shot noise at the budget)
    sentence: str


@dataclasses.dataclass(frozen=True)
class SweepResult:
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

    @property
    def knob_spec(self) -> Knob:
        return get_knob(self.knob)

    def notes(self) -> tuple[str, ...]:
        """Plain-language remarks about the sweep (the relaxation floor of gate errors)."""
        knob = self.knob_spec
        low = [p.value for p in self.points if p.floored]
        if not low:
            return ()
        return (
            f"at {knob.phrase} up to {knob.show(max(low))} the quoted value is below what T1/T2 "
            "alone cause during the gate: the noise model uses relaxation alone there, so the "
            "error no longer falls with the knob (use coherence-us to lower that floor)",
        )

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
            "notes": list(self.notes()),
            "caution": "emulated: only as good as the device noise model",
        }


# ---------------------------------------------------------------- crossings


_TINY_MHA = 1e-9


def find_crossings(
    values: Sequence[float], errors_mha: Sequence[float], target_mha: float, log_x: bool = False
) -> tuple[float, ...]:
    """Knob values where |error| crosses ``target_mha``, in the order of ``values``.

    Between adjacent points of the same sign whose |error| lies on opposite sides of the
    target, log10 |error| is interpolated linearly against the value (against log10 value when
    ``log_x``); where the signed error changes sign (passing through zero: a mitigated estimate
    over-correcting) the signed error is interpolated linearly instead, which can give two
    crossings in one interval. A point exactly on the target counts once.
    """
    if len(values) != len(errors_mha):
        raise ValueError("values and errors differ in length")
    t = float(target_mha)
    lt = math.log10(t)
    xs = [math.log10(v) if log_x else float(v) for v in values]
    es = [float(e) for e in errors_mha]
    ys = [math.log10(max(abs(e), _TINY_MHA)) - lt for e in es]
    fractions: list[tuple[int, float]] = []
    for i in range(len(xs) - 1):
        e0, e1 = es[i], es[i + 1]
        if ys[i] == 0.0:
            fractions.append((i, 0.0))
            continue
        if e0 * e1 <= 0:
            hits = [(lv - e0) / (e1 - e0) for lv in (t, -t) if (e0 - lv) * (e1 - lv) < 0]
            fractions += [(i, f) for f in sorted(hits)]
        elif ys[i] * ys[i + 1] < 0:
            fractions.append((i, -ys[i] / (ys[i + 1] - ys[i])))
    out = []
    for i, f in fractions:
        x = xs[i] + f * (xs[i + 1] - xs[i])
        out.append(float(values[i]) if f == 0.0 else (10**x if log_x else x))
    if ys and ys[-1] == 0.0:
        out.append(float(values[-1]))
    return tuple(out)


def _interpolated_abs_error(e0: float, e1: float, f: float) -> float:
    """|error| a fraction ``f`` of the way between two points, by the rule of find_crossings."""
    if e0 * e1 <= 0:
        return abs(e0 + f * (e1 - e0))
    a0, a1 = max(abs(e0), _TINY_MHA), max(abs(e1), _TINY_MHA)
    return 10 ** (math.log10(a0) + f * (math.log10(a1) - math.log10(a0)))


def band_crossings(
    values: Sequence[float],
    errors_mha: Sequence[float],
    stds_mha: Sequence[float],
    target_mha: float,
    log_x: bool = False,
    steps: int = 400,
) -> tuple[float, ...]:
    """Knob values where |error| + one standard error crosses the target.

    |error| between points follows :func:`find_crossings`' rule, the standard error is
    interpolated linearly; roots are located on a fine grid in each interval and refined
    linearly. Always at or inside the central crossings where the error grows.
    """
    xs = [math.log10(v) if log_x else float(v) for v in values]
    out: list[float] = []
    for i in range(len(xs) - 1):
        e0, e1 = float(errors_mha[i]), float(errors_mha[i + 1])
        s0, s1 = float(stds_mha[i]), float(stds_mha[i + 1])

        def g(f: float, e0: float = e0, e1: float = e1, s0: float = s0, s1: float = s1) -> float:
            return _interpolated_abs_error(e0, e1, f) + s0 + f * (s1 - s0) - target_mha

        fs = [k / steps for k in range(steps + 1)]
        gs = [g(f) for f in fs]
        for k in range(steps):
            if gs[k] == 0.0 and (k > 0 or i == 0):
                f = fs[k]
            elif gs[k] * gs[k + 1] < 0:
                f = fs[k] + (fs[k + 1] - fs[k]) * (-gs[k]) / (gs[k + 1] - gs[k])
            else:
                continue
            x = xs[i] + f * (xs[i + 1] - xs[i])
            out.append(10**x if log_x else x)
    return tuple(out)


def _target_words(target_mha: float) -> str:
    if abs(target_mha - CHEMICAL_ACCURACY_MHA) < 1e-4:
        return "chemical accuracy"
    return f"the {target_mha:.3g} mHa target"


def crossing_sentence(
    recipe: str,
    knob: Knob,
    values: Sequence[float],
    errors_mha: Sequence[float],
    crossings: Sequence[float],
    target_mha: float,
) -> str:
    """One sentence in the device's own units, e.g. 'raw stays within chemical accuracy while
    the two-qubit gate error is below 0.42 %'."""
    goal = _target_words(target_mha)
    inside = [abs(e) <= target_mha for e in errors_mha]
    lo, hi = min(values), max(values)
    span = f"{knob.show(lo)} to {knob.show(hi)}"
    if lo == hi:
        verdict = f"is within {goal}" if all(inside) else f"is outside {goal}"
        return f"{recipe} {verdict} at {knob.phrase} of {knob.show(lo)}"
    if not crossings:
        if all(inside):
            return f"{recipe} stays within {goal} over the whole range of {knob.phrase} ({span})"
        return f"{recipe} does not reach {goal} anywhere in the range of {knob.phrase} ({span})"
    ascending = values[-1] > values[0]
    first_inside = inside[0] if ascending else inside[-1]  # at the smallest value
    if len(crossings) == 1:
        word = "below" if first_inside else "above"
        return (
            f"{recipe} stays within {goal} while {knob.phrase} is {word} {knob.show(crossings[0])}"
        )
    edges = sorted(crossings)
    bounds = [lo, *edges, hi]
    parts = []
    inside_now = first_inside
    for a, b in itertools.pairwise(bounds):
        if inside_now:
            parts.append(f"{knob.show(a)} to {knob.show(b)}")
        inside_now = not inside_now
    return f"{recipe} is within {goal} for {knob.phrase} from " + " and from ".join(parts)


def recipe_crossing(
    recipe: str, knob: Knob, points: Sequence[SweepPoint], target_mha: float, log_x: bool
) -> RecipeCrossing:
    """Crossings and the sentence for one recipe of a sweep."""
    values = [p.value for p in points]
    errs = [p.entry(recipe).error_mha for p in points]
    stds = [p.entry(recipe).std_mha for p in points]
    central = find_crossings(values, errs, target_mha, log_x)
    band = band_crossings(values, errs, stds, target_mha, log_x)
    sentence = crossing_sentence(recipe, knob, values, errs, central, target_mha)
    if band and len(central) == 1 and len(band) == 1:
        sentence += (
            f" ({knob.show(band[0])} allowing one standard error of shot noise at the budget)"
        )
    return RecipeCrossing(recipe=recipe, crossings=central, band_crossings=band, sentence=sentence)


PointHook = Callable[[int, SweepPoint], None]


# ---------------------------------------------------------------- running configurations


@dataclasses.dataclass(frozen=True)
class ConfigTask:
    """One noise configuration to evaluate: the study's experiment with ``profile`` swapped in,
    every recipe run through a caching runner on ``cache`` (picklable: executor task)."""

    experiment: Any  # noiselab.mitigate.recipe.ExperimentContext
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
    from noiselab.mitigate.recipe import run_recipe
    from noiselab.study.cache import CachingRunner

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
    from noiselab.study.executor import make_executor

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
    from noiselab.study.results import trajectory_std_of

    return SweepEntry(
        recipe=name,
        energy_ha=float(r.energy_ha),
        error_mha=float(r.bias_exact_mha),
        std_mha=float(r.std_mha),
        bias_ansatz_mha=float(r.bias_ansatz_mha),
        p_within_target=float(r.p_within_target),
        limited_by=str(r.limited_by),
        trajectory_std_mha=trajectory_std_of(r),
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
        return sum(0.5 * (q.p_read1_prep0 + q.p_read0_prep1) for q in qubits) / len(qubits)
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
    from noiselab.device.profile import VIRTUAL_GATES, relaxation_gate_infidelity

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
    import time

    from noiselab.study.assess import _default_cache, resolve_study

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
    from noiselab.study.executor import make_executor

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
    import time

    from noiselab.device.profile import scale_profile
    from noiselab.study.context import build_context
    from noiselab.study.results import RunStats

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
    crossings = tuple(recipe_crossing(n, spec, pts, study.target_mha, log) for n in names)
    stats = RunStats(
        simulations=sum(o.simulations for o in outs),
        cache_hits=sum(o.cache_hits for o in outs),
        engine_seconds=sum(o.engine_seconds for o in outs),
        wall_seconds=time.perf_counter() - t0,
        executor=described,
    )
    return SweepResult(
        study_name=study.name,
        device_name=str(profile.name),
        knob=spec.name,
        log=log,
        current_value=ref,
        target_mha=float(study.target_mha),
        shots_total=int(study.shots),
        exact_energy_ha=float(ctx.exact_energy_ha),
        ansatz_energy_ha=float(ctx.ansatz_energy_ha),
        recipes=names,
        points=pts,
        crossings=crossings,
        stats=stats,
        emulation_method=ctx.emulation_method,
        emulation_notice=ctx.emulation_notice,
    )
