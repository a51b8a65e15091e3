"""EstimateMemo: a tune-like grid gives bit-identical results with and without the memo."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from noiselab.mitigate.recipe import EstimateMemo, run_recipe
from noiselab.study.cache import CachingRunner, ResultsCache
from noiselab.study.context import build_context
from noiselab.study.spec import load_study
from noiselab.study.tune import Grid, grid_settings

DEMO = Path(__file__).resolve().parents[1] / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.fixture(scope="module")
def demo() -> tuple:
    ctx = build_context(load_study(DEMO), cache=ResultsCache.disabled())
    runner = CachingRunner(ctx.experiment, ResultsCache.disabled())
    return ctx, runner


def _grid() -> list:
    grid = Grid(
        readout=("none", "per_qubit_inverse", "full_inverse", "nearest_probability"),
        postselect=("none", "discard", "verify"),
        amplifier=("none", "stretch", "two_qubit_gates"),
        scales=((1.0, 2.0, 3.0), (1.0, 3.0, 5.0)),
        fit=("linear", "richardson"),
    )
    settings, _ = grid_settings(grid)
    return [list(s.passes) for s in settings]


def _run(recipes: list, ctx, runner, memo: EstimateMemo | None, **kw) -> list[dict]:
    return [
        run_recipe(r, ctx, runner, calibrator=runner.calibrator, memo=memo, **kw).to_dict()
        for r in recipes
    ]


def test_grid_identical_with_and_without_memo(demo: tuple) -> None:
    ctx, runner = demo
    recipes = _grid()
    plain = _run(recipes, ctx.experiment, runner, None)
    memo = EstimateMemo()
    shared = _run(recipes, ctx.experiment, runner, memo)
    assert memo.hits > memo.misses > 0  # settings share variants: most evaluations are hits
    for a, b in zip(plain, shared, strict=True):
        assert a == b, a["recipe"]  # exact equality: bit-identical floats, same key order
        assert list(a["details"]) == list(b["details"])
    # a second pass over the warm memo is still identical (nothing mutated in place)
    assert _run(recipes[:12], ctx.experiment, runner, memo) == plain[:12]


def test_memo_keeps_contexts_apart(demo: tuple) -> None:
    ctx, runner = demo
    other = dataclasses.replace(ctx.experiment, shots=ctx.experiment.shots // 7, seed=3)
    recipe = [
        {"pass": "readout", "method": "per_qubit_inverse"},
        {"pass": "postselect", "mode": "discard"},
    ]
    memo = EstimateMemo()
    first = run_recipe(recipe, ctx.experiment, runner, calibrator=runner.calibrator, memo=memo)
    second = run_recipe(recipe, other, runner, calibrator=runner.calibrator, memo=memo)
    alone = run_recipe(recipe, other, runner, calibrator=runner.calibrator)
    assert second.to_dict() == alone.to_dict()
    assert second.std_mha != first.std_mha  # the budget differs, so must the standard error


def test_sampled_runs_bypass_the_memo(demo: tuple) -> None:
    ctx, runner = demo
    recipe = [
        {"pass": "readout", "method": "per_qubit_inverse"},
        {"pass": "postselect", "mode": "verify"},
        {"pass": "extrapolate", "amplifier": "stretch", "scales": [1, 2, 3], "fit": "linear"},
    ]
    memo = EstimateMemo()
    run_recipe(recipe, ctx.experiment, runner, calibrator=runner.calibrator, memo=memo)
    stored = len(memo)

    def sampled(seed: int, m: EstimateMemo | None) -> dict:
        rng = np.random.default_rng(seed)
        res = run_recipe(
            recipe,
            ctx.experiment,
            runner,
            calibrator=runner.calibrator,
            sampled=True,
            rng=rng,
            memo=m,
        )
        return res.to_dict()

    a, b = sampled(5, memo), sampled(6, memo)
    assert a == sampled(5, None)  # same draws as without the memo
    assert a["energy_ha"] != b["energy_ha"]  # fresh counts per rng, not a stored estimate
    assert len(memo) == stored  # sampled evaluations stored nothing


def test_readout_calibration_gradient_matches_finite_differences() -> None:
    """The per-qubit inverse's pullback (vectorized) against central differences of
    u . (A^-1 p) in each calibration outcome (common practice, no source)."""
    from noiselab.mitigate.base import raw_distribution
    from noiselab.mitigate.passes.readout import _per_qubit_inverse, per_qubit_matrices

    n = 3
    rng = np.random.default_rng(4)
    p = rng.dirichlet(np.ones(2**n))
    u = rng.normal(size=2**n)
    cal0 = 0.9 * np.eye(2**n)[0] + 0.1 * rng.dirichlet(np.ones(2**n))
    cal1 = 0.9 * np.eye(2**n)[-1] + 0.1 * rng.dirichlet(np.ones(2**n))
    keys = [("cal", 0), ("cal", 1)]

    def value(c0: np.ndarray, c1: np.ndarray) -> float:
        inv = [np.linalg.inv(m) for m in per_qubit_matrices(c0, c1, n)]
        return float(u @ _per_qubit_inverse(raw_distribution("meas", p), inv, keys, n).probs)

    inv = [np.linalg.inv(m) for m in per_qubit_matrices(cal0, cal1, n)]
    grads = _per_qubit_inverse(raw_distribution("meas", p), inv, keys, n).pullback(u)
    h = 1e-6
    for which, key in ((0, keys[0]), (1, keys[1])):
        fd = np.zeros(2**n)
        for k in range(2**n):
            e = np.zeros(2**n)
            e[k] = h
            plus = (cal0 + e, cal1) if which == 0 else (cal0, cal1 + e)
            minus = (cal0 - e, cal1) if which == 0 else (cal0, cal1 - e)
            fd[k] = (value(*plus) - value(*minus)) / (2 * h)
        np.testing.assert_allclose(grads[key], fd, atol=1e-7)
    # and the measured distribution's: exact for a linear map, so one step suffices
    base = value(cal0, cal1)
    fd_meas = np.zeros(2**n)
    for k in range(2**n):
        e = np.zeros(2**n)
        e[k] = 1.0
        fd_meas[k] = (
            float(u @ _per_qubit_inverse(raw_distribution("meas", p + e), inv, keys, n).probs)
            - base
        )
    np.testing.assert_allclose(grads["meas"], fd_meas, atol=1e-9)
