"""``assess --drift N``: the study's recipes on N drawn device "days" (noiselab.device.drift).

Every draw shares the nominal context: noiseless optimum, chosen compile, measurement plan,
budget and target; only the device profile changes (the readout calibration is taken on the
drawn day). Each draw's recipes run on the analytic path through the results cache, so the cost
is one simulation per draw and circuit variant. The draws come from
``numpy.random.default_rng([seed, DRIFT_STREAM])`` with the study's seed: drift is a random part
of the prediction, so ``--seed`` moves it (and nothing else of the nominal result).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from noiselab.device.drift import draw_profiles
from noiselab.mitigate.target import reaches_target
from noiselab.study.cache import CachingRunner, ResultsCache
from noiselab.study.context import replace_experiment
from noiselab.study.results import DriftStats

DRIFT_STREAM = 0xD21F7
MAX_DRAWS = 1000


@dataclasses.dataclass(frozen=True)
class DriftRun:
    """Per recipe :class:`DriftStats`, the spreads used and what the draws cost."""

    stats: dict[str, DriftStats]
    rel_std: dict[str, float]
    seed: int
    simulations: int = 0
    cache_hits: int = 0
    engine_seconds: float = 0.0


def drift_stats(biases_mha: list[float], p_within: list[float], confidence: float) -> DriftStats:
    """Summary of one recipe's draws; reaching is the one rule (mitigate.target.reaches_target)."""
    b = np.asarray(biases_mha, dtype=float)
    p = np.asarray(p_within, dtype=float)
    return DriftStats(
        draws=len(b),
        p_within_target_mean=float(p.mean()),
        reaching=sum(reaches_target(x, confidence) for x in p),
        bias_mha_p05=float(np.percentile(b, 5)),
        bias_mha_p95=float(np.percentile(b, 95)),
        biases_mha=tuple(float(x) for x in b),
    )


def assess_drift(
    ctx: Any,
    recipes: Mapping[str, Any],
    draws: int,
    store: ResultsCache,
    run_recipes: Callable[..., dict[str, Any]],
    progress: Callable[[str, int, int], None] | None = None,
) -> DriftRun:
    """Run ``recipes`` on ``draws`` drifted profiles of ``ctx.study.profile``."""
    study = ctx.study
    profiles = draw_profiles(study.profile, draws, [int(study.seed), DRIFT_STREAM])
    biases: dict[str, list[float]] = {name: [] for name in recipes}
    ps: dict[str, list[float]] = {name: [] for name in recipes}
    sims = hits = 0
    seconds = 0.0
    if progress is not None:
        progress("drift draws", 0, len(profiles))
    for i, profile in enumerate(profiles):
        experiment = replace_experiment(ctx.experiment, profile=profile)
        day = dataclasses.replace(ctx, experiment=experiment)
        runner = CachingRunner(experiment, store)
        for name, r in run_recipes(day, recipes, runner).items():
            biases[name].append(float(r.bias_exact_mha))
            ps[name].append(float(r.p_within_target))
        sims += runner.simulations
        hits += runner.cache_hits
        seconds += runner.engine_seconds
        if progress is not None:
            progress("drift draws", i + 1, len(profiles))
    confidence = float(study.confidence)
    return DriftRun(
        stats={n: drift_stats(biases[n], ps[n], confidence) for n in recipes},
        rel_std=study.profile.drift.model_dump(),
        seed=int(study.seed),
        simulations=sims,
        cache_hits=hits,
        engine_seconds=seconds,
    )


def drift_sentence(name: str, stats: DriftStats, rel_std: Mapping[str, float]) -> str:
    """'Under drift, 'x' reaches the target on 27 of 32 drawn days (...)'."""
    spreads = (
        f"T1 {rel_std['t1_rel_std']:.0%}, T2 {rel_std['t2_rel_std']:.0%}, one-qubit error "
        f"{rel_std['single_qubit_error_rel_std']:.0%}, two-qubit error "
        f"{rel_std['two_qubit_error_rel_std']:.0%}, readout {rel_std['readout_error_rel_std']:.0%}"
    )
    return (
        f"Under day-to-day drift (relative std. {spreads}), '{name}' reaches the target on "
        f"{stats.reaching} of {stats.draws} drawn days (bias {stats.bias_mha_p05:+.3g} to "
        f"{stats.bias_mha_p95:+.3g} mHa, 5th-95th percentile)."
    )
