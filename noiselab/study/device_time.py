"""Device time: what an experiment's shots and circuit changes cost on the machine (seconds).

One rule, used by ``assess`` (its budget), ``compare`` (its ranked table) and ``rehearse`` (every
in-loop evaluation and the final estimate):

- a measured shot of a circuit costs its scheduled duration + the readout + the profile's
  ``repetition_delay_us`` (the time between shots, reset included);
- a readout-calibration shot costs the readout + the repetition delay (its preparation, one
  layer of x gates, is counted as one single-qubit gate duration);
- a circuit variant keeps its own duration: a folded variant its re-scheduled one, a stretched
  variant the base duration times its stretch factor (stretched pulses take longer);
- each distinct circuit of an estimate (variants x bases, plus calibration circuits) costs
  ``circuit_overhead_s`` once per estimate (loading and starting it).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import Any

from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.recipe import parse_recipe

#: time between shots (reset included) when the profile states none; superconducting chips:
#: a few hundred microseconds (common practice, from memory; ../shared REFERENCES.md)
DEFAULT_REPETITION_DELAY_US = 250.0
#: time to load and start one circuit (common practice, no source)
DEFAULT_CIRCUIT_OVERHEAD_S = 0.05
SECONDS_PER_HOUR = 3600.0


def repetition_delay_us(profile: Any) -> float:
    """The profile's ``repetition_delay_us``, or the common-practice default (us)."""
    value = getattr(profile, "repetition_delay_us", None)
    return float(value) if value is not None else DEFAULT_REPETITION_DELAY_US


def seconds_per_shot(duration_ns: float, profile: Any) -> float:
    """One shot of a circuit scheduled over ``duration_ns``: circuit + readout + delay (s)."""
    readout_ns = float(profile.durations.readout_ns)
    return (float(duration_ns) + readout_ns) * 1e-9 + repetition_delay_us(profile) * 1e-6


def calibration_seconds_per_shot(profile: Any) -> float:
    """One readout-calibration shot: one single-qubit gate, readout and delay (s)."""
    return seconds_per_shot(float(profile.durations.single_qubit_ns), profile)


def variant_durations_ns(
    ctx: ExperimentContext, recipes: Sequence[Sequence[Mapping[str, Any]]]
) -> dict[str, float]:
    """Scheduled duration (ns) of every circuit variant the recipes measure, by variant label
    (the labels of ``RecipeResult.shots_per_circuit``). Durations do not depend on the values
    of bound parameters, so one context serves every evaluation of a parameterized circuit."""
    out: dict[str, float] = {}
    for passes in recipes:
        for variant in parse_recipe(list(passes)).variants(ctx):
            label = variant.label()
            if label not in out:
                real = ctx.realizer.realize(variant.transforms)
                # a synthetic context (tests) has no circuit: its shots cost readout and delay
                ns = 0.0 if real.compiled is None else float(real.compiled.duration_ns)
                out[label] = ns * float(real.profile_scale)
    return out


@dataclasses.dataclass(frozen=True)
class DeviceTime:
    """Device time of shots and circuit changes (seconds), additive."""

    shot_seconds: float = 0.0
    circuit_runs: int = 0
    circuit_overhead_s: float = DEFAULT_CIRCUIT_OVERHEAD_S

    @property
    def seconds(self) -> float:
        return self.shot_seconds + self.circuit_runs * self.circuit_overhead_s

    @property
    def hours(self) -> float:
        return self.seconds / SECONDS_PER_HOUR

    def __add__(self, other: DeviceTime) -> DeviceTime:
        return DeviceTime(
            self.shot_seconds + other.shot_seconds,
            self.circuit_runs + other.circuit_runs,
            self.circuit_overhead_s,
        )


def recipe_device_time(
    result: Any,
    durations_ns: Mapping[str, float],
    profile: Any,
    circuit_overhead_s: float = DEFAULT_CIRCUIT_OVERHEAD_S,
) -> DeviceTime:
    """Device time of one recipe estimate (a ``RecipeResult``): its measured shots per circuit
    at their variant's duration, its calibration shots, one overhead per distinct circuit."""
    seconds = 0.0
    for key, shots in result.shots_per_circuit.items():
        label = key.rsplit("|", 1)[0]
        seconds += int(shots) * seconds_per_shot(durations_ns[label], profile)
    cal = int((result.details or {}).get("calibration_shots_total", 0))
    seconds += cal * calibration_seconds_per_shot(profile)
    return DeviceTime(seconds, int(result.n_circuits), float(circuit_overhead_s))


def recipes_device_hours(
    ctx: ExperimentContext,
    recipes: Mapping[str, Sequence[Mapping[str, Any]]],
    results: Mapping[str, Any],
    circuit_overhead_s: float = DEFAULT_CIRCUIT_OVERHEAD_S,
) -> dict[str, float]:
    """Device hours of each named recipe's estimate (``results[name]``) on ``ctx``."""
    durations = variant_durations_ns(ctx, list(recipes.values()))
    return {
        name: recipe_device_time(r, durations, ctx.profile, circuit_overhead_s).hours
        for name, r in results.items()
    }


def device_time_inputs(profile: Any, circuit_overhead_s: float) -> dict[str, float]:
    """What the device-time rule used, for the JSON (us, ns, s)."""
    return {
        "repetition_delay_us": repetition_delay_us(profile),
        "readout_ns": float(profile.durations.readout_ns),
        "circuit_overhead_s": float(circuit_overhead_s),
    }
