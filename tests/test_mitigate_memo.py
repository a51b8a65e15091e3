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
        amplification=("none", "stretch", "two_qubit_gates"),
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
