"""Knob values and target crossings of a sweep (bisection), against hand-computed cases."""

from __future__ import annotations

import dataclasses
import math

import pytest

from noiselab.common.errors import InputError
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.mitigate.target import p_within, reaches_target
from noiselab.study.crossings import (
    SweepEntry,
    SweepPoint,
    bias_within,
    bisect_crossing,
    crossing_sentence,
    locate_crossings,
    recipe_crossing,
)
from noiselab.study.knobs import get_knob


def _entry(error_mha: float, std_mha: float, conf: float = 0.95) -> SweepEntry:
    """A sweep entry with P and the rule computed as run_recipe computes them."""
    p = p_within(error_mha, std_mha, CHEMICAL_ACCURACY_MHA)
    return SweepEntry("r", 0.0, error_mha, std_mha, 0.0, p, "-", None, reaches_target(p, conf))


def test_bisection_locates_a_power_law_crossing_to_one_percent() -> None:
    # |bias| = a x^2 crosses t at x = sqrt(t / a) (hand computation); bisection on a log grid
    a, t = 4.0, CHEMICAL_ACCURACY_MHA
    calls: list[float] = []

    def inside(x: float) -> bool:
        calls.append(x)
        return a * x * x < t

    x, n = bisect_crossing(0.1, 1.0, True, inside, log_x=True)
    assert n == len(calls) and n > 0
    assert all(0.1 < c < 1.0 for c in calls)
    assert x == pytest.approx(math.sqrt(t / a), rel=0.005)  # half the 1 % bracket
    # linear spacing, descending bracket (inside at the upper end): T1-like knob
    x, _ = bisect_crossing(300.0, 20.0, True, lambda v: 1000.0 / v < 10.0, log_x=False)
    assert x == pytest.approx(100.0, rel=0.005)


def test_locate_crossings_uses_new_evaluations_not_interpolation() -> None:
    # bias = 0.2 + x^3 mHa: not a straight line in log-log, so interpolating between the grid
    # points 1 and 4 would miss the crossing by several percent; the grid only brackets it
    xs = [0.5, 1.0, 4.0]
    entries = [_entry(0.2 + x**3, 0.0) for x in xs]
    seen: list[float] = []

    def evaluate(x: float) -> SweepEntry:
        seen.append(x)
        return _entry(0.2 + x**3, 0.0)

    out, n = locate_crossings(
        xs, entries, lambda e: bias_within(e, CHEMICAL_ACCURACY_MHA), evaluate, log_x=True
    )
    assert len(out) == 1 and n == len(seen) > 0
    # hand computation: 0.2 + x^3 = t at x = (t - 0.2)^(1/3)
    assert out[0] == pytest.approx((CHEMICAL_ACCURACY_MHA - 0.2) ** (1 / 3), rel=0.005)
    assert all(1.0 < v < 4.0 for v in seen)


def test_rule_crossing_comes_before_the_bias_crossing() -> None:
    # bias = x mHa with a std of 0.5 mHa: the bias alone crosses at x = t; the rule needs
    # P(|N(x, 0.5)| <= t) >= 0.95, reached for x < t - 1.645 * 0.5 to good approximation
    # (source: standard normal quantile 1.645 for a one-sided 95 %; the other tail is negligible)
    knob = get_knob("noise_scale")
    xs = (0.25, 0.5, 1.0, 2.0, 4.0)
    pts = [SweepPoint(x, x, (dataclasses.replace(_entry(x, 0.5), recipe="raw"),)) for x in xs]

    def evaluate(x: float) -> SweepEntry:
        return dataclasses.replace(_entry(x, 0.5), recipe="raw")

    c = recipe_crossing("raw", knob, pts, CHEMICAL_ACCURACY_MHA, 0.95, True, evaluate)
    assert len(c.crossings) == 1 and len(c.bias_crossings) == 1 and c.evaluations > 0
    assert c.bias_crossings[0] == pytest.approx(CHEMICAL_ACCURACY_MHA, rel=0.005)
    assert c.crossings[0] == pytest.approx(CHEMICAL_ACCURACY_MHA - 1.645 * 0.5, rel=0.006)
    assert "reaches chemical accuracy (±1.594 mHa) at the budget (P >= 0.95) while" in c.sentence
    assert "its bias alone (unlimited shots) is within the target while" in c.sentence


def test_over_correction_between_two_outside_points_is_probed() -> None:
    # signed bias 5 - 10 x (hand computation: inside |bias| < 2 for 0.3 < x < 0.7); both grid
    # ends are outside, the sign change sends a probe to x = 0.5, then both sides are bisected
    xs = [0.0, 1.0]
    entries = [_entry(5.0, 0.0), _entry(-5.0, 0.0)]
    out, _ = locate_crossings(
        xs, entries, lambda e: bias_within(e, 2.0), lambda x: _entry(5 - 10 * x, 0.0)
    )
    assert out == pytest.approx((0.3, 0.7), rel=0.01)
    none, n = locate_crossings([1, 2, 3], [_entry(0.1, 0.0)] * 3, lambda e: True, None)
    assert none == () and n == 0


def test_sentences_in_device_units() -> None:
    knob = get_knob("two_qubit_error")
    t = CHEMICAL_ACCURACY_MHA
    s = crossing_sentence(
        "zne", knob, [0.001, 0.01], [True, False], [0.0042], [True, False], [0.0051], t, 0.95
    )
    assert s == (
        "zne reaches chemical accuracy (±1.594 mHa) at the budget (P >= 0.95) while the "
        "two-qubit gate error is below 0.42 %; its bias alone (unlimited shots) is within the "
        "target while the two-qubit gate error is below 0.51 %"
    )
    coh = get_knob("coherence_us")
    # error falls as T1 grows: within target above the crossing
    s = crossing_sentence("raw", coh, [20.0, 200.0], [False, True], [120.0], [False, True],
                          [110.0], t, 0.95)  # fmt: skip
    assert "while T1 (with T2 scaled alongside) is above 120 us" in s
    s = crossing_sentence("raw", knob, [0.001, 0.01], [False] * 2, [], [False] * 2, [], t, 0.95)
    assert s.startswith(
        "raw does not reach chemical accuracy (±1.594 mHa) at the budget (P >= 0.95) anywhere"
    )
    assert "its bias alone (unlimited shots) is outside the target over the whole range" in s
    s = crossing_sentence("raw", knob, [0.01], [False], [], [True], [], t, 0.9)
    assert s == (
        "raw does not reach chemical accuracy (±1.594 mHa) at the budget (P >= 0.9) at the "
        "two-qubit gate error of 1 %; its bias alone (unlimited shots) is within the target at "
        "the two-qubit gate error of 1 %"
    )


@pytest.mark.parametrize(
    ("knob", "start", "stop"),
    [
        ("two_qubit_error", -0.01, 0.02),  # a negative error rate
        ("two_qubit_error", 0.001, 1.5),  # an error above 1
        ("readout_error", 0.01, 0.7),  # readout worse than a coin toss
        ("coherence_us", 0.0, 100.0),  # zero coherence time
        ("noise_scale", 0.0, 2.0),  # zero with log spacing (below)
    ],
)
def test_bad_ranges_are_input_errors(knob: str, start: float, stop: float) -> None:
    with pytest.raises(InputError):
        get_knob(knob).values(start, stop, 3, log=knob == "noise_scale")


def test_unknown_knob() -> None:
    with pytest.raises(InputError, match="allowed: noise_scale"):
        get_knob("gate-fidelity")


def test_knob_values_and_factors() -> None:
    vals = get_knob("coherence_us").values(10.0, 1000.0, 3, log=True)
    assert vals == pytest.approx((10.0, 100.0, 1000.0))
    # coherence: twice the T1 halves the relaxation rate
    assert get_knob("coherence_us").factor(200.0, 100.0) == pytest.approx(0.5)
    assert get_knob("two_qubit_error").factor(0.02, 0.01) == pytest.approx(2.0)
    assert get_knob("noise_scale").factor(1.7, 123.0) == pytest.approx(1.7)


def _profile(gate_error_2q: float, gate_error_1q: float = 3e-4) -> object:
    from noiselab.device.profile import profile_from_mapping

    return profile_from_mapping(
        {
            "schema_version": 1,
            "name": "floor-chip",
            "qubit_count": 2,
            "links": [[0, 1]],
            "native_gates": {"single_qubit": ["rz", "sx"], "two_qubit": "cz"},
            "durations": {"single_qubit_ns": 35, "two_qubit_ns": 300, "readout_ns": 1000},
            "qubits": {
                "default": {
                    "t1_us": 50,
                    "t2_us": 40,
                    "gate_error": gate_error_1q,
                    "flip_0to1": 0.01,
                    "flip_1to0": 0.02,
                }
            },
            "couplers": {"default": {"gate_error": gate_error_2q}},
        }
    )


def test_relaxation_floor_and_reference_values() -> None:
    knob = get_knob("two_qubit_error")
    # T1 = 50 us over a 300 ns gate costs of order t / T1 = 0.6 % of fidelity (Nielsen & Chuang
    # sec. 8.3, to first order): 1e-5 is far below that floor, 5 % far above
    assert knob.below_floor(_profile(1e-5), (0, 1))
    assert not knob.below_floor(_profile(5e-2), (0, 1))
    assert not get_knob("readout_error").below_floor(_profile(1e-5), (0, 1))
    p = _profile(2e-2)
    assert knob.reference(p, (0, 1)) == pytest.approx(2e-2)
    # readout knob: the mean of P(1|0) and P(0|1), (0.01 + 0.02) / 2
    assert get_knob("readout_error").reference(p, (0, 1)) == pytest.approx(0.015)
    assert get_knob("coherence_us").reference(p, (0, 1)) == pytest.approx(50.0)
