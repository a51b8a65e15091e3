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

import dataclasses
import itertools
import math
from collections.abc import Callable, Sequence
from typing import Any

from noiselab.common.errors import input_error
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.device.profile import MAX_READOUT_ERROR, MAX_SINGLE_QUBIT_ERROR, MAX_TWO_QUBIT_ERROR

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

    def show(self, value: float) -> str:
        """``value`` (base units) in display units with three significant digits."""
        v = value * self.display_factor
        text = f"{v:.3g}"
        return f"{text} {self.unit}" if self.unit else text


KNOBS: dict[str, Knob] = {
    "noise-scale": Knob(
        name="noise-scale",
        phrase="the noise scale factor",
        axis_label="noise scale factor (1 = device as profiled)",
        unit="",
        channels=None,
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


def knob_values(knob: Knob, start: float, stop: float, points: int, log: bool) -> tuple[float, ...]:
    """``points`` knob values from ``start`` to ``stop`` (base units), evenly or log spaced.

    Raises InputError for values outside the knob's range (negative rates, errors above 1,
    zero coherence time, zero or negative ends with ``log``) and for fewer than 2 points.
    """
    for opt, v in (("--from", start), ("--to", stop)):
        if not math.isfinite(v):
            raise input_error("sweep", opt, f"{v} is not a finite number")
        if v < 0 or (v == 0 and (not knob.allow_zero or log)):
            allowed = "> 0" if (not knob.allow_zero or log) else ">= 0"
            raise input_error("sweep", opt, f"{v} is out of range for {knob.name}", allowed)
        if knob.upper is not None and v > knob.upper:
            raise input_error(
                "sweep",
                opt,
                f"{v} is out of range for {knob.name}",
                f"0..{knob.upper:g} (a probability; larger is not an error rate)",
            )
    if start == stop:
        raise input_error("sweep", "--from/--to", "the range is empty", "two different values")
    if points < 2:
        raise input_error("sweep", "--points", f"{points} points", "2 or more")
    if log:
        a, b = math.log10(start), math.log10(stop)
        return tuple(10 ** (a + (b - a) * i / (points - 1)) for i in range(points))
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


@dataclasses.dataclass(frozen=True)
class SweepPoint:
    """One knob value (base units), the channel scale factor it meant, every recipe's result."""

    value: float
    factor: float
    entries: tuple[SweepEntry, ...]

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

    @property
    def knob_spec(self) -> Knob:
        return get_knob(self.knob)

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
            "points": [
                {
                    "value": p.value,
                    "channel_factor": p.factor,
                    "results": [dataclasses.asdict(e) for e in p.entries],
                }
                for p in self.points
            ],
            "crossings": [dataclasses.asdict(c) for c in self.crossings],
        }


# ---------------------------------------------------------------- crossings


_TINY_MHA = 1e-9


def find_crossings(
    values: Sequence[float], errors_mha: Sequence[float], target_mha: float, log_x: bool = False
) -> tuple[float, ...]:
    """Knob values where |error| crosses ``target_mha``.

    Between adjacent points whose |error| lies on opposite sides of the target, log10 |error|
    is interpolated linearly against the value (against log10 value when ``log_x``). A point
    exactly on the target counts once.
    """
    if len(values) != len(errors_mha):
        raise ValueError("values and errors differ in length")
    lt = math.log10(target_mha)
    xs = [math.log10(v) if log_x else float(v) for v in values]
    ys = [math.log10(max(abs(e), _TINY_MHA)) - lt for e in errors_mha]
    out: list[float] = []
    for i in range(len(xs) - 1):
        y0, y1 = ys[i], ys[i + 1]
        if y0 == 0.0:
            out.append(float(values[i]))
            continue
        if y0 * y1 < 0:
            x = xs[i] + (xs[i + 1] - xs[i]) * (-y0) / (y1 - y0)
            out.append(10**x if log_x else x)
    if ys and ys[-1] == 0.0:
        out.append(float(values[-1]))
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
    upper = [abs(p.entry(recipe).error_mha) + p.entry(recipe).std_mha for p in points]
    central = find_crossings(values, errs, target_mha, log_x)
    band = find_crossings(values, upper, target_mha, log_x)
    sentence = crossing_sentence(recipe, knob, values, errs, central, target_mha)
    if band and len(central) == 1 and len(band) == 1:
        sentence += (
            f" ({knob.show(band[0])} allowing one standard error of shot noise at the budget)"
        )
    return RecipeCrossing(recipe=recipe, crossings=central, band_crossings=band, sentence=sentence)


PointHook = Callable[[int, SweepPoint], None]
