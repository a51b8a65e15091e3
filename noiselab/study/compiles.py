"""The spread of each recipe's bias over the distinct compiles of the transpiler-seed ensemble.

The assessed compile is the one an experimenter would pick (fewest two-qubit gates, then the
shortest schedule; :func:`noiselab.device.compile.choose_compile`). Another seed gives another
circuit, and the device's bias moves with it. Here every recipe is re-run on each other distinct
compile with everything else shared (optimum, plan, profile, budget, calibration), on the
analytic path only (no sampling). Cost: one simulation per distinct other compile and per
circuit variant the recipes need (the demo: 1 other compile x 4 variants); identical compiled
circuits are simulated once, and every simulation goes through the results cache. Skipped (None)
under the trajectory method, where each compile would carry its own statistical error, and
when the study sets ``compile.bias_spread: false``.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from typing import Any

from noiselab.study.cache import CachingRunner, ResultsCache
from noiselab.study.context import replace_experiment


@dataclasses.dataclass(frozen=True)
class SpreadRun:
    """Per recipe: max - min bias over the distinct compiles (mHa; None: not computed), and the
    simulation counts of the extra runs."""

    spread_mha: dict[str, float | None]
    simulations: int = 0
    cache_hits: int = 0
    engine_seconds: float = 0.0


def bias_spread(
    ctx: Any,
    recipes: Mapping[str, Any],
    chosen_results: Mapping[str, Any],
    store: ResultsCache,
    run_recipes: Callable[..., dict[str, Any]],
) -> SpreadRun:
    """Spread of ``bias_exact_mha`` over the chosen compile (``chosen_results``) and the other
    distinct compiles of ``ctx.ensemble``; ``run_recipes(ctx, recipes, runner)`` is the job's."""
    ensemble = getattr(ctx, "ensemble", None)
    if (
        ensemble is None
        or not ctx.study.compile_bias_spread
        or ctx.emulation_method == "trajectory"
    ):
        return SpreadRun({name: None for name in recipes})
    biases = {name: [float(r.bias_exact_mha)] for name, r in chosen_results.items()}
    sims = hits = 0
    seconds = 0.0
    for compiled in ensemble.alternatives:
        experiment = replace_experiment(ctx.experiment, compiled=compiled)
        alt = dataclasses.replace(ctx, compiled=compiled, experiment=experiment)
        runner = CachingRunner(experiment, store)
        for name, result in run_recipes(alt, recipes, runner).items():
            biases[name].append(float(result.bias_exact_mha))
        sims += runner.simulations
        hits += runner.cache_hits
        seconds += runner.engine_seconds
    spread = {name: max(b) - min(b) for name, b in biases.items()}
    return SpreadRun(spread, sims, hits, seconds)
