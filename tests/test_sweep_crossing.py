"""Knob values and target crossings of a sweep, against hand-computed analytic cases."""

from __future__ import annotations

import math

import pytest

from noiselab.common.errors import InputError
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.study.sweep import (
    SweepEntry,
    SweepPoint,
    crossing_sentence,
    find_crossings,
    get_knob,
    knob_factor,
    knob_values,
    recipe_crossing,
)


def test_power_law_crossing_is_exact_in_log_log() -> None:
    # |error| = a x^2 is a straight line in log-log, so log interpolation is exact:
    # a x^2 = t  =>  x = sqrt(t / a)   (hand computation)
    a, t = 4.0, CHEMICAL_ACCURACY_MHA
    xs = [10 ** (-2 + 2 * i / 6) for i in range(7)]  # 0.01 .. 1, log spaced
    ys = [a * x * x for x in xs]
    (x_cross,) = find_crossings(xs, ys, t, log_x=True)
    assert x_cross == pytest.approx(math.sqrt(t / a), rel=1e-12)


def test_exponential_crossing_is_exact_with_linear_x() -> None:
    # |error| = exp(k x): log10|error| is linear in x, crossing at x = ln(t) / k (hand computation)
    k, t = 1.3, 2.0
    xs = [0.25 * i for i in range(9)]
    ys = [math.exp(k * x) for x in xs]
    (x_cross,) = find_crossings(xs, ys, t, log_x=False)
    assert x_cross == pytest.approx(math.log(t) / k, rel=1e-12)


def test_linear_interpolation_between_two_points_by_hand() -> None:
    # two points (1, 1 mHa) and (3, 100 mHa), target 10 mHa: log10 goes 0 -> 2, crossing at
    # the midpoint x = 2 (hand computation)
    assert find_crossings([1.0, 3.0], [1.0, 100.0], 10.0) == pytest.approx((2.0,))
    # sign of the error does not matter, only its size
    assert find_crossings([1.0, 3.0], [-1.0, -100.0], 10.0) == pytest.approx((2.0,))


def test_sign_change_interpolates_the_signed_error() -> None:
    # -1 mHa at x = 0 to +3 mHa at x = 1, target 2 mHa: the signed error is linear,
    # -1 + 4 x = 2 at x = 0.75 (hand computation); log|error| would not be linear here
    assert find_crossings([0.0, 1.0], [-1.0, 3.0], 2.0) == pytest.approx((0.75,))
    # +5 to -5 across the band: in at x = 0.3, out at x = 0.7 (hand computation: 5 - 10 x = +-2)
    assert find_crossings([0.0, 1.0], [5.0, -5.0], 2.0) == pytest.approx((0.3, 0.7))


def test_band_crossing_by_hand() -> None:
    from noiselab.study.sweep import band_crossings

    # error 0 -> 4 mHa (signed, linear), std 1 mHa, target 2 mHa: |e| + s = 4 x + 1 = 2 at
    # x = 0.25, the central value 4 x = 2 at x = 0.5 (hand computation)
    assert band_crossings([0.0, 1.0], [0.0, 4.0], [1.0, 1.0], 2.0) == pytest.approx(
        (0.25,), abs=1e-9
    )
    assert find_crossings([0.0, 1.0], [0.0, 4.0], 2.0) == pytest.approx((0.5,))
    # a power law with a constant std: (x / 2)^2 + 0.5 = 2 at x = 2 sqrt(1.5), exact in log-log
    # only for the central part, so allow the grid's accuracy (hand computation)
    xs = [1.0, 4.0]
    es = [(x / 2) ** 2 for x in xs]
    (b,) = band_crossings(xs, es, [0.5, 0.5], 2.0, log_x=True)
    assert b == pytest.approx(2 * 1.5**0.5, rel=1e-4)


def test_no_crossing_and_two_crossings() -> None:
    assert find_crossings([1, 2, 3], [0.1, 0.2, 0.3], 1.0) == ()
    # error dips below the target and comes back (a ZNE bias changing sign, say)
    out = find_crossings([1, 2, 3, 4], [5.0, 0.5, 0.5, 5.0], 1.0)
    assert len(out) == 2 and 1 < out[0] < 2 and 3 < out[1] < 4


def test_sentences_in_device_units() -> None:
    knob = get_knob("two-qubit-error")
    s = crossing_sentence("zne", knob, [0.001, 0.01], [0.5, 5.0], [0.0042], CHEMICAL_ACCURACY_MHA)
    assert s == (
        "zne stays within chemical accuracy (±1.594 mHa) while the two-qubit gate error is below "
        "0.42 %"
    )
    coh = get_knob("coherence-us")
    # error falls as T1 grows: within target above the crossing
    s = crossing_sentence("raw", coh, [20.0, 200.0], [8.0, 0.8], [120.0], CHEMICAL_ACCURACY_MHA)
    assert "above 120 us" in s
    s = crossing_sentence("raw", knob, [0.001, 0.01], [5.0, 9.0], [], CHEMICAL_ACCURACY_MHA)
    assert "does not reach chemical accuracy" in s
    s = crossing_sentence("raw", knob, [0.01], [0.5], [], CHEMICAL_ACCURACY_MHA)
    assert s == "raw is within chemical accuracy (±1.594 mHa) at the two-qubit gate error of 1 %"


def test_recipe_crossing_band_is_earlier_than_central() -> None:
    knob = get_knob("noise-scale")
    pts = [
        SweepPoint(x, x, (SweepEntry("raw", 0.0, 1.0 * x, 0.5, 0.0, 0.5, "bias"),))
        for x in (0.5, 1.0, 2.0, 4.0)
    ]
    c = recipe_crossing("raw", knob, pts, CHEMICAL_ACCURACY_MHA, log_x=True)
    assert len(c.crossings) == 1 and len(c.band_crossings) == 1
    # |error| = x crosses t at x = t exactly (a power law, log-log interpolation exact)
    assert c.crossings[0] == pytest.approx(CHEMICAL_ACCURACY_MHA)
    assert c.band_crossings[0] < c.crossings[0]


@pytest.mark.parametrize(
    ("knob", "start", "stop"),
    [
        ("two-qubit-error", -0.01, 0.02),  # a negative error rate
        ("two-qubit-error", 0.001, 1.5),  # an error above 1
        ("readout-error", 0.01, 0.7),  # readout worse than a coin toss
        ("coherence-us", 0.0, 100.0),  # zero coherence time
        ("noise-scale", 0.0, 2.0),  # zero with log spacing (below)
    ],
)
def test_bad_ranges_are_input_errors(knob: str, start: float, stop: float) -> None:
    with pytest.raises(InputError):
        knob_values(get_knob(knob), start, stop, 3, log=knob == "noise-scale")


def test_unknown_knob() -> None:
    with pytest.raises(InputError, match="allowed: noise-scale"):
        get_knob("gate-fidelity")


def test_knob_values_and_factors() -> None:
    vals = knob_values(get_knob("coherence-us"), 10.0, 1000.0, 3, log=True)
    assert vals == pytest.approx((10.0, 100.0, 1000.0))
    # coherence: twice the T1 halves the relaxation rate
    assert knob_factor(get_knob("coherence-us"), 200.0, 100.0) == pytest.approx(0.5)
    assert knob_factor(get_knob("two-qubit-error"), 0.02, 0.01) == pytest.approx(2.0)
    assert knob_factor(get_knob("scale"), 1.7, 123.0) == pytest.approx(1.7)


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
    from noiselab.study.sweep import below_relaxation_floor, reference_value

    knob = get_knob("two-qubit-error")
    # T1 = 50 us over a 300 ns gate costs of order t / T1 = 0.6 % of fidelity (Nielsen & Chuang
    # sec. 8.3, to first order): 1e-5 is far below that floor, 5 % far above
    assert below_relaxation_floor(knob, _profile(1e-5), (0, 1))
    assert not below_relaxation_floor(knob, _profile(5e-2), (0, 1))
    assert not below_relaxation_floor(get_knob("readout-error"), _profile(1e-5), (0, 1))
    p = _profile(2e-2)
    assert reference_value(knob, p, (0, 1)) == pytest.approx(2e-2)
    # readout knob: the mean of P(1|0) and P(0|1), (0.01 + 0.02) / 2
    assert reference_value(get_knob("readout-error"), p, (0, 1)) == pytest.approx(0.015)
    assert reference_value(get_knob("coherence-us"), p, (0, 1)) == pytest.approx(50.0)
