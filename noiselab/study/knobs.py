"""Sweep knobs: the device-noise quantities a sweep can vary, each with its units, its bounds
and its own reference value (the device's value over the circuit's qubits or pairs).

Below :mod:`noiselab.study.spec` (a study's ``sweep.knob`` names a knob) and
:mod:`noiselab.study.sweep` (which scales the device along one). A new device channel that a
sweep should vary needs one entry in :data:`KNOBS`: its channels, bounds and reference.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence
from typing import Any

from noiselab.common.errors import arg, closest_key, input_error, quote
from noiselab.device.profile import (
    MAX_COHERENCE_US,
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
    MIN_COHERENCE_US,
    VIRTUAL_GATES,
    relaxation_gate_infidelity,
)
from noiselab.mitigate.passes.extrapolate import MAX_SCALE_FACTOR as MAX_NOISE_SCALE

Patch = Sequence[int]

_PROBABILITY = "a probability; larger is not an error rate"


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
    #: the device's value (base units) over a patch; None: a bare factor whose reference is 1
    reference_of: Callable[[Any, Patch], float] | None = None
    #: whether a scaled device is below the T1/T2 floor of the knob's gates (None: never)
    floor_of: Callable[[Any, Patch], bool] | None = None

    def show(self, value: float) -> str:
        """``value`` (base units) in display units with three significant digits."""
        v = value * self.display_factor
        text = f"{v:.0f}" if abs(v) >= 100 else f"{v:.3g}"
        return f"{text} {self.unit}" if self.unit else text

    def reference(self, profile: Any, patch: Patch) -> float:
        """The device's value of the knob (base units): its mean over the circuit's qubits or
        pairs (1 for the noise scale factor)."""
        return 1.0 if self.reference_of is None else self.reference_of(profile, patch)

    def below_floor(self, profile: Any, patch: Patch) -> bool:
        """True when a gate-error knob's scaled value is below what T1/T2 alone cause over the
        gate on some qubit or pair of the patch (the noise model then uses relaxation alone,
        so lowering the knob further changes nothing)."""
        return False if self.floor_of is None else self.floor_of(profile, patch)

    def check(self, value: float, argument: str, log: bool = False) -> float:
        """``value`` (base units) if the knob allows it, else InputError naming ``argument``
        (the sweep's ``start``, ``stop`` or ``values``)."""
        v = float(value)
        if not math.isfinite(v):
            raise input_error("sweep", arg(argument), f"{value} is not a finite number")
        strict = not self.allow_zero or log
        if v < 0 or (v == 0 and strict):
            raise input_error(
                "sweep",
                arg(argument),
                f"{value} is out of range for {self.name}",
                "> 0" if strict else ">= 0",
            )
        low = 0.0 if self.lower is None else self.lower
        if (self.upper is not None and v > self.upper) or (v > 0 and v < low):
            raise input_error(
                "sweep",
                arg(argument),
                f"{value} is out of range for {self.name}",
                f"{low:g}..{self.upper:g} ({self.reason})",
            )
        return v

    def values(self, start: float, stop: float, points: int, log: bool) -> tuple[float, ...]:
        """``points`` knob values from ``start`` to ``stop`` (base units), evenly or log spaced.

        Raises InputError for values outside the knob's range (negative rates, errors above
        the physical maximum, zero coherence time, zero ends with ``log``) and for fewer than 2
        points.
        """
        start = self.check(start, "start", log)
        stop = self.check(stop, "stop", log)
        if start == stop:
            where = f"{arg('start')}/{arg('stop')}"
            raise input_error("sweep", where, "the range is empty", "two different values")
        if points < 2:
            raise input_error("sweep", arg("points"), f"{points} points", "2 or more")
        if log:
            a, b = math.log10(start), math.log10(stop)
            inner = [10 ** (a + (b - a) * i / (points - 1)) for i in range(1, points - 1)]
            return (start, *inner, stop)  # the ends exactly as given
        return tuple(start + (stop - start) * i / (points - 1) for i in range(points))

    def factor(self, value: float, reference: float) -> float:
        """Scale factor of the knob's channels that moves the reference value to ``value``."""
        if self.channels is None:
            return value
        if self.inverse:
            return reference / value
        if reference <= 0:
            raise input_error(
                "sweep",
                arg("knob"),
                f"the device has no {self.phrase.removeprefix('the ')} to scale (reference "
                "value 0)",
                "a knob whose channel is present in the profile",
            )
        return value / reference

    def default_range(self, reference: float) -> tuple[float, float]:
        """A quarter to four times the device's value (clipped to the knob's range)."""
        lo, hi = reference / 4.0, reference * 4.0
        if self.upper is not None:
            hi = min(hi, self.upper)
        return lo, hi


# ---------------------------------------------------------------- reference values


def _patch_pairs(profile: Any, patch: Patch) -> list[tuple[int, int]]:
    inside = set(patch)
    pairs = [p for p in profile.pairs() if p[0] in inside and p[1] in inside]
    return pairs or list(profile.pairs())


def _two_qubit_error(profile: Any, patch: Patch) -> float:
    pairs = _patch_pairs(profile, patch)
    return sum(profile.pair_error(a, b) for a, b in pairs) / max(len(pairs), 1)


def _one_qubit_error(profile: Any, patch: Patch) -> float:
    return sum(profile.qubit(q).gate_error for q in patch) / len(patch)


def _readout_error(profile: Any, patch: Patch) -> float:
    qubits = [profile.qubit(q) for q in patch]
    return sum(0.5 * (q.flip_0to1 + q.flip_1to0) for q in qubits) / len(qubits)


def _t1_us(profile: Any, patch: Patch) -> float:
    t1 = [profile.qubit(q).t1_us for q in patch]
    if any(t is None for t in t1):
        raise input_error(
            profile.source,
            "qubits.default.t1_us",
            "infinite T1 cannot be swept",
            "finite T1 and T2",
        )
    return sum(t1) / len(t1)


def _two_qubit_floor(profile: Any, patch: Patch) -> bool:
    gate = profile.two_qubit_gate
    return any(
        profile.pair_error(a, b) < relaxation_gate_infidelity(profile, gate, (a, b))
        for a, b in _patch_pairs(profile, patch)
    )


def _one_qubit_floor(profile: Any, patch: Patch) -> bool:
    physical = [g for g in profile.single_qubit_gates if g not in VIRTUAL_GATES]
    if not physical:
        return False
    return any(
        profile.qubit(q).gate_error < relaxation_gate_infidelity(profile, physical[0], (q,))
        for q in patch
    )


KNOBS: dict[str, Knob] = {
    "noise_scale": Knob(
        name="noise_scale",
        phrase="the noise scale factor",
        axis_label="noise scale factor (1 = device as profiled)",
        unit="",
        channels=None,
        upper=MAX_NOISE_SCALE,
        reason="beyond, every circuit is close to fully depolarized",
    ),
    "two_qubit_error": Knob(
        name="two_qubit_error",
        phrase="the two-qubit gate error",
        axis_label="two-qubit gate error (%)",
        unit="%",
        channels=("two_qubit",),
        display_factor=100.0,
        upper=MAX_TWO_QUBIT_ERROR,
        reference_of=_two_qubit_error,
        floor_of=_two_qubit_floor,
    ),
    "single_qubit_error": Knob(
        name="single_qubit_error",
        phrase="the single-qubit gate error",
        axis_label="single-qubit gate error (%)",
        unit="%",
        channels=("single_qubit",),
        display_factor=100.0,
        upper=MAX_SINGLE_QUBIT_ERROR,
        reference_of=_one_qubit_error,
        floor_of=_one_qubit_floor,
    ),
    "coherence_us": Knob(
        name="coherence_us",
        phrase="T1 (with T2 scaled alongside)",
        axis_label="T1 (us), T2 scaled with it",
        unit="us",
        channels=("relaxation",),
        inverse=True,
        allow_zero=False,
        lower=MIN_COHERENCE_US,
        upper=MAX_COHERENCE_US,
        reason="T1 from 1 ns to 1000 s; outside, a unit typo",
        reference_of=_t1_us,
    ),
    "readout_error": Knob(
        name="readout_error",
        phrase="the readout assignment error",
        axis_label="readout assignment error (%)",
        unit="%",
        channels=("readout",),
        display_factor=100.0,
        upper=MAX_READOUT_ERROR,
        reference_of=_readout_error,
    ),
}
#: Names knobs had before they were spelt like the channels (underscores): each is refused with
#: its present name as the suggestion.
FORMER_KNOB_NAMES = {
    "noise-scale": "noise_scale",
    "scale": "noise_scale",
    "two-qubit-error": "two_qubit_error",
    "one-qubit-error": "single_qubit_error",
    "one_qubit_error": "single_qubit_error",
    "coherence-us": "coherence_us",
    "readout-error": "readout_error",
}


def unknown_knob(name: str) -> str:
    """"unknown knob 'x' (did you mean `y`?)" for a name that is no knob."""
    near = FORMER_KNOB_NAMES.get(name) or closest_key(name.replace("-", "_"), list(KNOBS))
    hint = f" (did you mean `{near}`?)" if near else ""
    return f"unknown knob {quote(name)}{hint}"


def get_knob(name: str) -> Knob:
    """The knob called ``name``; InputError naming the allowed ones otherwise."""
    if name not in KNOBS:
        raise input_error("sweep", arg("knob"), unknown_knob(name), ", ".join(KNOBS))
    return KNOBS[name]
