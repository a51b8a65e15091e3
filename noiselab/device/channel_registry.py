"""The one registry of noise channels: which profile fields each channel owns, how a noise scale
s acts on them, and their physical bounds.

``scale_profile`` (the profile), ``DeviceModel.scaled`` (the resolved arrays), the error budget,
the sweep knobs and the zero-noise stretch amplifier all read it; nothing else lists channels.

Scaling rules (s >= 0): ``rate`` -> min(v s, bound); ``signed`` -> clip(v s, -bound, bound);
``time`` -> v / s (s = 0, or an overflow: infinite, stored as ``None`` in a profile and
``inf`` in a resolved model).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Literal

import numpy as np

# Physical maxima: a fully depolarizing channel on d dimensions has average infidelity (d-1)/d;
# a readout worse than a coin toss is a relabelling, not an error.
MAX_SINGLE_QUBIT_ERROR = 0.5
MAX_TWO_QUBIT_ERROR = 0.75
MAX_READOUT_ERROR = 0.5
MAX_JOINT_FLIP = 0.5
MAX_OVER_ROTATION = 0.5
MAX_ZZ_ANGLE_RAD = math.pi
# Always-on terms: 10 MHz is far beyond any usable coupler (common practice, no source).
MAX_ZZ_RATE_KHZ = 1.0e4
MAX_DETUNING_STD_KHZ = 1.0e4

Section = Literal["qubit", "pair", "crosstalk"]
Rule = Literal["rate", "signed", "time"]


def scale_value(value: float | None, s: float, rule: Rule, bound: float | None) -> float | None:
    """One profile value scaled by s (``None``: infinite time, stays infinite)."""
    if value is None:
        return None
    if rule == "time":
        if s == 0.0:
            return None
        out = value / s
        return out if math.isfinite(out) else None  # tiny s: coherence beyond float range
    assert bound is not None
    if rule == "rate":
        return min(value * s, bound)
    return max(-bound, min(value * s, bound))


def scale_array(values: np.ndarray, s: float, rule: Rule, bound: float | None) -> np.ndarray:
    """``scale_value`` elementwise on a resolved array (``inf`` = infinite time)."""
    v = np.asarray(values, dtype=float)
    if rule == "time":
        if s == 0.0:
            return np.full_like(v, np.inf)
        with np.errstate(over="ignore"):
            out = v / s
        return np.where(np.isfinite(out), out, np.inf)
    assert bound is not None
    if rule == "rate":
        return np.minimum(v * s, bound)
    return np.maximum(-bound, np.minimum(v * s, bound))


@dataclass(frozen=True)
class ChannelField:
    """One profile field a channel owns.

    ``section``: where it sits in the profile (``qubit``: ``qubits.default`` / overrides;
    ``pair``: ``couplers.default`` / overrides; ``crosstalk``: ``readout_crosstalk`` entries).
    ``key``: its profile key; ``attr``: its array in :class:`noiselab.device.model.DeviceModel`.
    """

    section: Section
    key: str
    attr: str
    rule: Rule
    bound: float | None = None  # largest magnitude after scaling (rate, signed)

    def scale(self, value: float | None, s: float) -> float | None:
        return scale_value(value, s, self.rule, self.bound)

    def scale_array(self, values: np.ndarray, s: float) -> np.ndarray:
        return scale_array(values, s, self.rule, self.bound)


@dataclass(frozen=True)
class Channel:
    """A noise channel group: its fields and whether it acts inside the emulated circuit
    (pulse stretching scales those; readout acts at measurement only)."""

    name: str
    fields: tuple[ChannelField, ...]
    in_circuit: bool


def _q(key: str, rule: Rule, bound: float | None = None) -> ChannelField:
    return ChannelField("qubit", key, key, rule, bound)


def _p(key: str, attr: str, rule: Rule, bound: float) -> ChannelField:
    return ChannelField("pair", key, attr, rule, bound)


CHANNEL_SPECS: Mapping[str, Channel] = MappingProxyType(
    {
        c.name: c
        for c in (
            Channel("relaxation", (_q("t1_us", "time"), _q("t2_us", "time")), True),
            Channel("single_qubit", (_q("gate_error", "rate", MAX_SINGLE_QUBIT_ERROR),), True),
            Channel(
                "two_qubit",
                (_p("gate_error", "pair_gate_error", "rate", MAX_TWO_QUBIT_ERROR),),
                True,
            ),
            Channel(
                "coherent",
                (
                    _q("over_rotation_fraction", "signed", MAX_OVER_ROTATION),
                    _p("zz_angle_rad", "zz_angle_rad", "signed", MAX_ZZ_ANGLE_RAD),
                    _p("zz_rate_khz", "zz_rate_khz", "signed", MAX_ZZ_RATE_KHZ),
                    _p("spectator_phase_rad", "spectator_phase_rad", "signed", MAX_ZZ_ANGLE_RAD),
                    _q("detuning_std_khz", "rate", MAX_DETUNING_STD_KHZ),
                ),
                True,
            ),
            Channel(
                "readout",
                (
                    _q("flip_0to1", "rate", MAX_READOUT_ERROR),
                    _q("flip_1to0", "rate", MAX_READOUT_ERROR),
                    ChannelField("crosstalk", "joint_flip", "joint_flip", "rate", MAX_JOINT_FLIP),
                    ChannelField(
                        "crosstalk",
                        "flip_a_if_b_reads_1",
                        "flip_i_if_j_reads_1",
                        "rate",
                        MAX_JOINT_FLIP,
                    ),
                    ChannelField(
                        "crosstalk",
                        "flip_b_if_a_reads_1",
                        "flip_j_if_i_reads_1",
                        "rate",
                        MAX_JOINT_FLIP,
                    ),
                ),
                False,
            ),
        )
    }
)

#: Channel names, in registry order.
CHANNELS: tuple[str, ...] = tuple(CHANNEL_SPECS)
#: Channels acting inside the circuit (what stretching the pulses scales; readout stays).
CIRCUIT_CHANNELS: tuple[str, ...] = tuple(n for n, c in CHANNEL_SPECS.items() if c.in_circuit)


def check_channels(channels: object) -> tuple[str, ...]:
    """Registry names from ``None`` (all), one name or an iterable; ``ValueError`` on unknown."""
    if channels is None:
        return CHANNELS
    items = [channels] if isinstance(channels, str) else list(channels)  # type: ignore[call-overload]
    unknown = sorted(set(items) - set(CHANNELS))
    if unknown:
        raise ValueError(unknown[0])
    return tuple(n for n in CHANNELS if n in set(items))
