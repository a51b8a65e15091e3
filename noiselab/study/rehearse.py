"""The rehearse job: the variational loop run against the emulated device, repeated.

Every in-loop energy evaluation is what the device would return: the parameterized circuit is
compiled once (the study's chosen patch and transpiler seed) and bound per evaluation, the
exact noisy distributions of every measured basis are emulated, finite-shot counts are drawn
at the evaluation's allocation and the in-loop recipe runs on them (``run_recipe(...,
sampled=True)``). The analytic expectation is never used in the loop (``analytic=True`` is a
test-only switch). After the loop the final parameters are assessed with the final recipe at
the study's budget, analytically, as ``assess`` does, and the final error is split into
ansatz error + optimizer error under noise + noise bias (they add up exactly), with the shot
noise apart.

Shots are counted exactly: every evaluation's measured shots plus the readout-calibration shots
it draws (the sampled path recalibrates per evaluation), plus the final estimate's. Device time:
``noiselab.study.device_time`` (the rule ``assess`` uses too), per evaluation and for the final
estimate, with the rehearse section's ``circuit_overhead_s`` per circuit run.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import ValidationError

from noiselab.chem.shift_rule import parameter_frequencies
from noiselab.chem.statevector import compile_statevector
from noiselab.common.errors import InputError, from_validation_error
from noiselab.common.units import HA_TO_MHA
from noiselab.common.wording import CAUTION, target_words
from noiselab.device.compile import compile_to_device
from noiselab.mitigate.experiment import make_calibrator, make_runner
from noiselab.mitigate.optimizers import (
    BudgetExhaustedError,
    OptimizerOutcome,
    ShiftRule,
    parameter_shift_descent,
    scipy_minimize,
    spsa,
)
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.mitigate.target import p_within, reaches_target
from noiselab.study.context import (
    StudyContext,
    build_context,
    recipes_verify,
    replace_experiment,
    with_verification,
)
from noiselab.study.device_time import (
    DeviceTime,
    recipe_device_time,
    seconds_per_shot,
    variant_durations_ns,
)
from noiselab.study.rehearse_spec import RehearseSettings
from noiselab.study.spec import Study, load_study

ProgressHook = Callable[[str, int, int], None]
OPTIMIZER_WORDS = {
    "spsa": "SPSA",
    "parameter_shift": "parameter-shift gradient",
    "cobyla": "COBYLA",
    "nelder_mead": "Nelder-Mead",
}


@dataclasses.dataclass(frozen=True)
class TracePoint:
    """After one iteration: shots spent so far, the energy the loop measured (mean of the
    iteration's evaluations) and the noiseless energy of the current iterate (Ha)."""

    shots: int
    energy_ha: float
    noiseless_energy_ha: float


@dataclasses.dataclass(frozen=True)
class RepeatResult:
    """One run of the loop and its final estimate (energies in Ha, errors in mHa)."""

    seed: int
    start_parameters: tuple[float, ...]
    final_parameters: tuple[float, ...]
    iterations: int
    evaluations: int
    stopped: str
    loop_shots: int  # measured + calibration shots of every in-loop evaluation
    evaluation_shots: tuple[int, ...]  # each evaluation's shots, calibration included
    final_shots: int  # the final estimate's, calibration included
    circuit_runs: int
    device_hours: float
    final_energy_ha: float  # expectation of the final estimate (no random draw)
    final_error_mha: float  # final_energy - exact = ansatz + optimizer + noise bias
    ansatz_error_mha: float
    optimizer_error_mha: float
    noise_bias_mha: float
    std_mha: float
    p_within_target: float
    trace: tuple[TracePoint, ...]

    @property
    def total_shots(self) -> int:
        return self.loop_shots + self.final_shots

    def to_json(self) -> dict[str, Any]:
        out = {
            f.name: getattr(self, f.name)
            for f in dataclasses.fields(self)
            if f.name not in ("trace", "evaluation_shots")
        }
        out["total_shots"] = self.total_shots
        out["trace"] = [dataclasses.asdict(t) for t in self.trace]
        return out


@dataclasses.dataclass(frozen=True)
class RehearseResult:
    """The repeats, P(final within target), the cost of one run and the verdict."""

    study: str
    device: str
    settings: dict[str, Any]
    loop_recipe: str
    final_recipe: str
    final_shots_budget: int
    exact_energy_ha: float
    ansatz_energy_ha: float
    target_mha: float
    confidence: float
    seconds_per_shot: float
    repeats: tuple[RepeatResult, ...]
    verdict: str
    wall_seconds: float = dataclasses.field(default=0.0, compare=False)

    @property
    def p_within_target(self) -> float:
        """Mean over repeats of P(final estimate within target): the optimizer's randomness
        from the repeats, the final estimate's shot noise from its standard error."""
        return float(np.mean([r.p_within_target for r in self.repeats]))

    @property
    def reaches_target(self) -> bool:
        return reaches_target(self.p_within_target, self.confidence)

    @property
    def total_shots(self) -> int:
        """Shots of one run (the largest over the repeats)."""
        return max(r.total_shots for r in self.repeats)

    @property
    def device_hours(self) -> float:
        """Device hours of one run (the largest over the repeats)."""
        return max(r.device_hours for r in self.repeats)

    def to_json(self) -> dict[str, Any]:
        return {
            "study": self.study,
            "device": self.device,
            "settings": self.settings,
            "loop_recipe": self.loop_recipe,
            "final_recipe": self.final_recipe,
            "final_shots_budget": self.final_shots_budget,
            "exact_energy_ha": self.exact_energy_ha,
            "ansatz_energy_ha": self.ansatz_energy_ha,
            "target_mha": self.target_mha,
            "confidence": self.confidence,
            "seconds_per_shot": self.seconds_per_shot,
            "total_shots": self.total_shots,
            "device_hours": self.device_hours,
            "p_within_target": self.p_within_target,
            "reaches_target": self.reaches_target,
            "verdict": self.verdict,
            "caution": CAUTION,
            "repeats": [r.to_json() for r in self.repeats],
        }

    def csv_rows(self) -> list[dict[str, Any]]:
        """The traces: one row per repeat and iteration."""
        rows = []
        for r in self.repeats:
            for i, t in enumerate(r.trace):
                rows.append(
                    {
                        "seed": r.seed,
                        "iteration": i,
                        "shots": t.shots,
                        "energy_ha": t.energy_ha,
                        "error_mha": (t.energy_ha - self.exact_energy_ha) * HA_TO_MHA,
                        "noiseless_energy_ha": t.noiseless_energy_ha,
                    }
                )
        return rows


# ---- one evaluation ---------------------------------------------------------------------------


class LoopEvaluator:
    """Energy evaluations at given parameters, as the device would return them; counts shots.

    ``objective(x)``: bind, emulate, draw counts at ``shots`` and run the recipe on them.
    Raises :class:`BudgetExhaustedError` once ``max_shots`` are spent.
    """

    def __init__(
        self,
        ctx: StudyContext,
        parameterized: Any,
        passes: Sequence[Mapping[str, Any]],
        shots: int,
        rng: np.random.Generator,
        *,
        calibrator: Any,
        max_shots: int | None = None,
        analytic: bool = False,
        clock: Callable[[Any], DeviceTime] | None = None,
        shared: Any = None,
    ) -> None:
        self.ctx, self.parameterized, self.passes = ctx, parameterized, list(passes)
        self.shots, self.rng, self.calibrator = int(shots), rng, calibrator
        self.max_shots, self.analytic = max_shots, analytic
        self.evaluation_shots: list[int] = []
        self.circuit_runs = 0
        self.clock = clock  # device time of one recipe result (noiselab.study.device_time)
        self.device_time = DeviceTime()
        self.shared = shared
        self.last_energy_ha = math.nan

    @property
    def shots_spent(self) -> int:
        return int(sum(self.evaluation_shots))

    def evaluate(self, x: np.ndarray, shots: int) -> Any:
        """The recipe's result at parameters ``x`` and ``shots`` (sampled unless analytic)."""
        bound = self.parameterized.bind(np.asarray(x, dtype=float))
        exp = replace_experiment(self.ctx.experiment, compiled=bound, shots=int(shots))
        runner = make_runner(exp) if self.shared is None else self.shared.runner(exp, x)
        return run_recipe(
            self.passes,
            exp,
            runner,
            sampled=not self.analytic,
            rng=self.rng,
            calibrator=self.calibrator,
        )

    def __call__(self, x: np.ndarray) -> float:
        if self.max_shots is not None and self.shots_spent >= self.max_shots:
            raise BudgetExhaustedError
        res = self.evaluate(x, self.shots)
        self.evaluation_shots.append(int(res.shots_total) + calibration_shots(res))
        self.circuit_runs += int(res.n_circuits)
        if self.clock is not None:
            self.device_time = self.device_time + self.clock(res)
        self.last_energy_ha = float(res.energy_ha)
        return float(res.energy_ha)


def calibration_shots(result: Any) -> int:
    """Readout-calibration shots a recipe result drew (0 for exact calibration)."""
    return int(result.details.get("calibration_shots_total", 0))


# ---- the job ----------------------------------------------------------------------------------


def resolve_settings(study: Study, overrides: Mapping[str, Any] | None) -> RehearseSettings:
    """The study's ``rehearse:`` section (or the defaults) with command-line overrides."""
    base = study.rehearse.model_dump() if study.rehearse is not None else {}
    changes = {k: v for k, v in (overrides or {}).items() if v is not None}
    if not changes and study.rehearse is not None:
        return study.rehearse
    try:
        return RehearseSettings.model_validate({**base, **changes})
    except ValidationError as exc:
        raise from_validation_error(
            exc, str(study.source), prefix="rehearse", model=RehearseSettings
        ) from None


def start_parameters(
    settings: RehearseSettings, optimum: np.ndarray, rng: np.random.Generator
) -> np.ndarray:
    """Hartree-Fock (all zero), the noiseless optimum perturbed, or seeded uniform random."""
    n = len(optimum)
    if settings.start == "hartree_fock":
        return np.zeros(n)
    if settings.start == "perturbed_optimum":
        return optimum + rng.normal(0.0, settings.perturbation_rad, n)
    return rng.uniform(-math.pi, math.pi, n)


def run_optimizer(
    settings: RehearseSettings,
    objective: LoopEvaluator,
    x0: np.ndarray,
    rng: np.random.Generator,
    rules: Sequence[ShiftRule],
    on_iteration: Any,
) -> OptimizerOutcome:
    opts, n = settings.optimizer_options(), settings.iterations
    if settings.optimizer == "spsa":
        return spsa(objective, x0, n, rng, opts, on_iteration)
    if settings.optimizer == "parameter_shift":
        return parameter_shift_descent(objective, x0, n, rules, opts, on_iteration)
    return scipy_minimize(objective, x0, n, settings.optimizer, opts, on_iteration)


def rehearse(
    study_or_path: Study | str | Path,
    *,
    cache: Any = None,
    context: StudyContext | None = None,
    progress: ProgressHook | None = None,
    analytic: bool = False,
    shared: Any = None,
    **overrides: Any,
) -> RehearseResult:
    """Rehearse the variational loop of a study on its emulated device, ``repeats`` times.

    ``overrides``: keys of the ``rehearse:`` section (``optimizer``, ``iterations``,
    ``shots_per_evaluation``, ``repeats``, ``start``, ``max_shots``, ``seed``, ...).
    ``analytic``: test-only; in-loop evaluations return the analytic expectation.
    ``shared``: a ``noiselab.study.rehearse_grid.SharedRuns``, emulations shared with other
    rehearsals of the same context (the grid).
    """
    from noiselab.study.assess import _default_cache

    t0 = time.perf_counter()
    study = study_or_path if isinstance(study_or_path, Study) else load_study(study_or_path)
    settings = resolve_settings(study, overrides)
    loop_passes = settings.loop_passes()
    final_passes = (
        study.recipes[settings.final_recipe] if settings.final_recipe else loop_passes
    )
    verify = recipes_verify([loop_passes, final_passes])
    if context is None:
        context = build_context(study, cache=_default_cache(cache), verification=verify)
    ctx = with_verification(context, verify)
    for where, passes in (("rehearse.loop_recipe", loop_passes), ("final recipe", final_passes)):
        try:
            for i, p in enumerate(parse_recipe(list(passes), where=where).passes):
                p.check(ctx.experiment, f"{where}[{i}]")
        except InputError as exc:
            raise InputError(f"{study.source}: {exc}") from None
    circuit = ctx.ansatz_circuit
    rules: list[ShiftRule] = []
    if settings.optimizer == "parameter_shift":
        try:
            rules = [ShiftRule(b, o) for b, o in parameter_frequencies(circuit)]
        except InputError as exc:
            raise InputError(f"{study.source}: {exc}") from None
    # compile once on the study's chosen patch and transpiler seed; bind per evaluation
    chosen_seed = ctx.ensemble.chosen_seed if ctx.ensemble is not None else 1234
    parameterized = compile_to_device(
        circuit,
        study.profile,
        layout=list(ctx.compiled.patch),
        optimization_level=study.optimization_level,
        seed=chosen_seed,
    )
    calibrator = make_calibrator(ctx.experiment)
    program = compile_statevector(circuit)
    hmat = ctx.qubit_problem.hamiltonian.to_matrix(sparse=True)
    optimum = np.asarray(ctx.optimum.parameters, dtype=float)

    def noiseless(x: np.ndarray) -> float:
        return float(program.expectation(hmat, np.asarray(x, dtype=float)))

    profile = study.profile
    # scheduled durations do not depend on the bound values: one bound context gives them all
    durations = variant_durations_ns(
        replace_experiment(ctx.experiment, compiled=parameterized.bind(optimum)),
        [loop_passes, final_passes],
    )

    def clock(res: Any) -> DeviceTime:
        return recipe_device_time(res, durations, profile, settings.circuit_overhead_s)

    repeats = []
    for r in range(settings.repeats):
        if progress is not None:
            progress("rehearsing the loop", r, settings.repeats)
        seed = settings.seed + r
        rng = np.random.default_rng(seed)
        x0 = start_parameters(settings, optimum, rng)
        evaluator = LoopEvaluator(
            ctx, parameterized, loop_passes, settings.shots_per_evaluation, rng,
            calibrator=calibrator, max_shots=settings.max_shots, analytic=analytic, clock=clock,
            shared=shared,
        )  # fmt: skip
        trace: list[TracePoint] = []

        def on_iteration(
            k: int, x: np.ndarray, values: tuple[float, ...], ev: LoopEvaluator = evaluator,
            tr: list[TracePoint] = trace,
        ) -> None:  # fmt: skip
            measured = float(np.mean(values)) if values else ev.last_energy_ha
            tr.append(TracePoint(ev.shots_spent, measured, noiseless(x)))

        outcome = run_optimizer(settings, evaluator, x0, rng, rules, on_iteration)
        repeats.append(
            final_estimate(
                ctx,
                evaluator,
                final_passes,
                outcome,
                seed,
                x0,
                trace,
                noiseless,
                clock,
            )
        )
    if progress is not None:
        progress("rehearsing the loop", settings.repeats, settings.repeats)
    loop_name = parse_recipe(list(loop_passes)).name
    result = RehearseResult(
        study=study.name,
        device=str(profile.name),
        settings=settings.model_dump(mode="json"),
        loop_recipe=loop_name,
        final_recipe=settings.final_recipe or loop_name,
        final_shots_budget=int(study.shots),
        exact_energy_ha=ctx.exact_energy_ha,
        ansatz_energy_ha=ctx.ansatz_energy_ha,
        target_mha=float(study.target_mha),
        confidence=float(study.confidence),
        seconds_per_shot=seconds_per_shot(parameterized.duration_ns, profile),
        repeats=tuple(repeats),
        verdict="",
    )
    return dataclasses.replace(
        result, verdict=rehearse_verdict(result), wall_seconds=time.perf_counter() - t0
    )


def final_estimate(
    ctx: StudyContext,
    evaluator: LoopEvaluator,
    final_passes: Sequence[Mapping[str, Any]],
    outcome: OptimizerOutcome,
    seed: int,
    x0: np.ndarray,
    trace: Sequence[TracePoint],
    noiseless: Callable[[np.ndarray], float],
    clock: Callable[[Any], DeviceTime],
) -> RepeatResult:
    """The final parameters assessed analytically with the final recipe at the study's shots."""
    x = np.asarray(outcome.parameters, dtype=float)
    bound = evaluator.parameterized.bind(x)
    exp = replace_experiment(ctx.experiment, compiled=bound, shots=int(ctx.study.shots))
    res = run_recipe(list(final_passes), exp, make_runner(exp), calibrator=evaluator.calibrator)
    final_shots = int(res.shots_total) + calibration_shots(res)
    e_noiseless = noiseless(x)
    exact, ansatz = ctx.exact_energy_ha, ctx.ansatz_energy_ha
    final_error = (float(res.energy_ha) - exact) * HA_TO_MHA
    loop_shots = evaluator.shots_spent
    runs = evaluator.circuit_runs + int(res.n_circuits)
    hours = (evaluator.device_time + clock(res)).hours
    return RepeatResult(
        seed=seed,
        start_parameters=tuple(float(v) for v in x0),
        final_parameters=tuple(float(v) for v in x),
        iterations=int(outcome.iterations),
        evaluations=len(evaluator.evaluation_shots),
        stopped=outcome.stopped,
        loop_shots=loop_shots,
        evaluation_shots=tuple(evaluator.evaluation_shots),
        final_shots=final_shots,
        circuit_runs=runs,
        device_hours=hours,
        final_energy_ha=float(res.energy_ha),
        final_error_mha=final_error,
        ansatz_error_mha=(ansatz - exact) * HA_TO_MHA,
        optimizer_error_mha=(e_noiseless - ansatz) * HA_TO_MHA,
        noise_bias_mha=(float(res.energy_ha) - e_noiseless) * HA_TO_MHA,
        std_mha=float(res.std_mha),
        p_within_target=p_within(final_error, float(res.std_mha), ctx.study.target_mha),
        trace=tuple(trace),
    )


def rehearse_verdict(result: RehearseResult) -> str:
    """One sentence: iterations, shots per evaluation, runs within target, P, shots, hours."""
    s = result.settings
    within = sum(abs(r.final_error_mha) <= result.target_mha for r in result.repeats)
    n = len(result.repeats)
    return (
        f"Verdict: with {s['iterations']} {OPTIMIZER_WORDS[s['optimizer']]} iterations at "
        f"{s['shots_per_evaluation']:,} shots per evaluation, the final energy lands within "
        f"{target_words(result.target_mha)} in {within} of {n} runs, "
        f"P = {result.p_within_target:.2f}; {result.total_shots:.2g} shots, "
        f"{result.device_hours:.2g} device hours per run."
    )
