"""error_cancellation's learning_spread: the learned model's random error in the error bar."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from helpers.pass_contract import h2_experiment

from noiselab.common.errors import InputError
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.mitigate.target import assess_target
from noiselab.study.results import learning_line, verdict_line

POST = {"pass": "postselect", "mode": "discard"}


def _pec(**options) -> list[dict]:
    return [{"pass": "error_cancellation", **options}, POST]


@pytest.fixture(scope="module")
def demo():
    return h2_experiment()


def test_zero_spread_is_the_model_taken_as_exact(demo) -> None:
    ctx, runner, cal = demo
    exact = run_recipe(_pec(learning_spread=0.0), ctx, runner, calibrator=cal)
    spread = run_recipe(_pec(learning_spread=0.05), ctx, runner, calibrator=cal)
    d0, d1 = exact.details, spread.details
    # no learning term at 0: the error bar is measurement and calibration only, as before
    assert "std_learning_mha" not in d0 and "std_learning_mha" not in d0["error_cancellation"]
    assert exact.std_mha**2 == pytest.approx(
        d0["std_measurement_mha"] ** 2 + d0["std_calibration_mha"] ** 2, rel=1e-12
    )
    # the spread is random: the bias (an expectation) stays, the error bar grows in quadrature
    assert spread.energy_ha == exact.energy_ha
    learn = d1["error_cancellation"]["std_learning_mha"]
    assert d1["std_learning_mha"] == pytest.approx(learn, rel=1e-12)
    assert spread.std_mha**2 == pytest.approx(exact.std_mha**2 + learn**2, rel=1e-12)
    # the sensitivity is the central difference of the energy at learning_error -+ 0.05
    ends = [
        run_recipe(_pec(learning_spread=0.0, learning_error=e), ctx, runner, calibrator=cal)
        for e in (-0.05, 0.05)
    ]
    slope_mha = (ends[1].energy_ha - ends[0].energy_ha) / 0.1 * 1000
    assert d1["error_cancellation"]["learning_sensitivity_mha"] == pytest.approx(slope_mha)
    assert learn == pytest.approx(abs(slope_mha) * 0.05, rel=1e-12)
    assert learn > 0.1  # on the demo it is not negligible


def test_analytic_std_matches_the_spread_of_learned_models(demo) -> None:
    ctx, runner, cal = demo
    s = 0.1
    analytic = run_recipe(_pec(learning_spread=s), ctx, runner, calibrator=cal)
    predicted = analytic.details["error_cancellation"]["std_learning_mha"]
    # the learned rates drawn as (1 + d) times the true ones, d ~ N(0, s): the standard deviation
    # of the exact mitigated energy over d by 5-point Gauss-Hermite quadrature (probabilists'
    # weight; numpy.polynomial.hermite_e.hermegauss, Abramowitz and Stegun 25.4.46, from memory),
    # each point a full re-emulation with the model learned with error d
    nodes, weights = np.polynomial.hermite_e.hermegauss(5)
    weights = weights / math.sqrt(2 * math.pi)
    energies = np.array(
        [
            run_recipe(
                _pec(learning_spread=0.0, learning_error=s * x), ctx, runner, calibrator=cal
            ).energy_ha
            for x in nodes
        ]
    )
    mean = float(weights @ energies)
    quad_std_mha = math.sqrt(float(weights @ (energies - mean) ** 2)) * 1000
    assert predicted == pytest.approx(quad_std_mha, rel=0.15)
    # and drawn: 40 learning errors, each a re-emulation (common practice, no source: the sample
    # std of 40 normal draws lies within 3 x 1/sqrt(2 x 40) = 34 % of the true one)
    rng = np.random.default_rng(11)
    drawn = np.array(
        [
            run_recipe(
                _pec(learning_spread=0.0, learning_error=float(d)), ctx, runner, calibrator=cal
            ).energy_ha
            for d in rng.normal(0.0, s, size=40)
        ]
    )
    assert drawn.std(ddof=1) * 1000 == pytest.approx(predicted, rel=0.34)


def test_a_learning_dominated_error_bar_is_named(demo) -> None:
    ctx, runner, cal = demo
    result = run_recipe(_pec(learning_spread=0.2), ctx, runner, calibrator=cal)
    assert result.limited_by == "learning"
    assert result.shots_needed is None
    ok, text = verdict_line("pec", result, ctx.target_mha, ctx.confidence, ctx.shots)
    assert not ok
    assert "learned noise model" in text and "Noise model assumed" in text
    note = assess_target(0.5, 1.0, 4.0, 10**6, 1.6, 0.95, fixed_source="learning").note
    assert note == "the uncertainty of the learned noise model keeps P below the confidence"


def test_the_assumption_is_stated_in_one_line() -> None:
    ec = {"learning_error": 0.0, "learning_spread": 0.05, "std_learning_mha": 2.1}
    line = learning_line(SimpleNamespace(details={"error_cancellation": ec}))
    assert line is not None and "\n" not in line
    assert "5 % random error" in line and "2.1 mHa of the error bar" in line
    exact = learning_line(
        SimpleNamespace(details={"error_cancellation": {**ec, "learning_spread": 0.0}})
    )
    assert exact is not None and "favours the experiment" in exact
    assert learning_line(SimpleNamespace(details={})) is None


@pytest.mark.parametrize("value", [-0.1, 1.0, float("nan")])
def test_impossible_spread_is_refused(value: float) -> None:
    with pytest.raises(InputError, match=r"recipe\[0\]\.learning_spread"):
        parse_recipe([{"pass": "error_cancellation", "learning_spread": value}])
