"""Sweep knobs: the device-noise quantities a sweep can vary, with their units and ranges.

Below :mod:`noiselab.study.spec` (a study's ``sweep.vary`` names a knob) and
:mod:`noiselab.study.sweep` (which scales the device along one).
"""

from __future__ import annotations

import dataclasses

from noiselab.common.errors import input_error
from noiselab.device.profile import (
    MAX_COHERENCE_US,
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
    MIN_COHERENCE_US,
)
from noiselab.mitigate.passes.extrapolate import MAX_SCALE_FACTOR as MAX_NOISE_SCALE

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
