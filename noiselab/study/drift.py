"""``assess --drift N``: the study's recipes on N drawn device "days" (noiselab.device.drift).

Every draw shares the nominal context: noiseless optimum, chosen compile, measurement plan,
budget and target; only the device profile changes (the readout calibration is taken on the
drawn day). Each draw's recipes run on the analytic path. With the density-matrix method every
(day, circuit variant) simulation is made in ONE qiskit-aer call, each circuit carrying its day's
noise as written superoperators (``emulate.batch.emulate_written``; equal to the noise-model
path to rounding, not stored in the results cache: the whole assess is); otherwise each day is
simulated through the results cache. The draws come from
``numpy.random.default_rng([seed, DRIFT_STREAM])`` with the study's seed: drift is a random part
of the prediction, so ``--seed`` moves it (and nothing else of the nominal result).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterator, Mapping
from typing import Any

import numpy as np

from noiselab.common.errors import InputError
from noiselab.device.drift import draw_profiles
from noiselab.emulate.batch import BATCH_BYTES, emulate_written
from noiselab.emulate.engine import choose_method
from noiselab.emulate.written import WrittenNoise
from noiselab.mitigate.experiment import make_calibrator, variant_inputs
from noiselab.mitigate.recipe import parse_recipe
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


class DrawnDayRunner:
    """The runner of one drawn day whose simulations were all made in one batch beforehand
    (``emulate.batch.emulate_written``); readout calibration from the same numpy channels."""

    def __init__(self, experiment: Any, runs: Mapping[Any, Any], noises: Mapping[Any, Any]):
        self.experiment = experiment
        self._runs = dict(runs)
        patch = tuple(experiment.compiled.patch)
        self.calibrator = make_calibrator(
            experiment, written=lambda p: noises.get(p.fingerprint) or WrittenNoise(p, patch)
        )
        self.simulations = len(self._runs)
        self.cache_hits = 0
        self.engine_seconds = float(sum(r.engine_seconds for r in self._runs.values()))

    def __call__(self, variant: Any) -> Any:
        return self._runs[variant]


def batched_days(
    ctx: Any, recipes: Mapping[str, Any], profiles: list[Any]
) -> Iterator[DrawnDayRunner] | None:
    """One runner per drawn profile, in order; the (day, circuit variant) simulations of as many
    days as :data:`~noiselab.emulate.batch.BATCH_BYTES` of results allow (all of them on small
    problems) are made in one qiskit-aer call, each circuit with its day's noise written in.
    None when the density-matrix method does not apply (trajectories, memory guard): the caller
    then simulates day by day through the results cache."""
    exp = ctx.experiment
    k = exp.compiled.circuit.num_qubits
    try:
        method, _ = choose_method(
            k, exp.emulation_method, max_density_matrix_qubits=exp.max_density_matrix_qubits
        )
    except InputError:
        return None
    if method != "density_matrix":
        return None
    wanted = (v for passes in recipes.values() for v in parse_recipe(list(passes)).variants(exp))
    variants = list(dict.fromkeys(wanted))
    n = exp.compiled.num_logical_qubits
    day_bytes = len(variants) * (2 * len(exp.measured_bases) * 8 * 2**n + 16 * 4**k)
    group = max(1, BATCH_BYTES // day_bytes)
    return _day_runners(exp, variants, profiles, group)


def _day_runners(
    exp: Any, variants: list[Any], profiles: list[Any], group: int
) -> Iterator[DrawnDayRunner]:
    for start in range(0, len(profiles), group):
        days = [replace_experiment(exp, profile=p) for p in profiles[start : start + group]]
        jobs, noises = [], []
        per_day: list[dict[str, WrittenNoise]] = []
        for day in days:
            known: dict[str, WrittenNoise] = {}
            for v in variants:
                compiled, profile, _ = variant_inputs(day, v)
                if profile.fingerprint not in known:
                    known[profile.fingerprint] = WrittenNoise(profile, compiled.patch)
                jobs.append((compiled, profile))
                noises.append(known[profile.fingerprint])
            per_day.append(known)
        runs = emulate_written(jobs, list(exp.measured_bases), noises)
        for i, day in enumerate(days):
            mine = runs[i * len(variants) : (i + 1) * len(variants)]
            yield DrawnDayRunner(day, dict(zip(variants, mine, strict=True)), per_day[i])


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
    batched = batched_days(ctx, recipes, profiles)
    for i, profile in enumerate(profiles):
        if batched is not None:
            runner = next(batched)
            experiment = runner.experiment
        else:
            experiment = replace_experiment(ctx.experiment, profile=profile)
            runner = CachingRunner(experiment, store)
        day = dataclasses.replace(ctx, experiment=experiment)
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
