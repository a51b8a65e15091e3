"""The rehearse job: the variational loop run against the emulated device, repeated.

Every in-loop energy evaluation is what the device would return: the parameterized circuit is
compiled once (the study's chosen patch and transpiler seed) and its parameters bound in the
simulator, the exact noisy distributions of every measured basis are emulated, finite-shot
counts are drawn at the evaluation's allocation and the in-loop recipe runs on them
(``run_recipe(..., sampled=True)``; :mod:`noiselab.study.loop`). The analytic expectation is
never used in the loop (``analytic=True`` is a test-only switch). The repeats of SPSA and
parameter-shift descent run in lockstep, the points of one step of all repeats emulated in one
call. After the loop the final parameters are assessed with the final recipe at the study's
budget, analytically, as ``assess`` does, and the final error is split into ansatz error +
optimizer error under noise + noise bias (they add up exactly), with the shot noise apart.

Shots are counted exactly: every evaluation's measured shots, each repeat's readout
calibration once (drawn at its first evaluation and reused, as a real run calibrates at its
start), plus the final estimate's. Device time: ``noiselab.study.device_time`` (the rule
``assess`` uses too), per evaluation (its calibration once per repeat) and for the final
estimate, with the rehearse section's ``circuit_overhead_s`` per circuit run.

Just over 400 lines: the job's records, the optimizer driver, exact shot and device-time
accounting and the final error split (the loop evaluator is :mod:`noiselab.study.loop`).
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
    OptimizerOutcome,
    ShiftRule,
    Steps,
    parameter_shift_steps,
    scipy_minimize,
    spsa_steps,
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
from noiselab.study.job import as_cache
from noiselab.study.loop import (
    LoopEvaluator,
    RepeatResult,
    TracePoint,
    run_lockstep,
    trace_hook,
    with_progress,
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
        raise from_validation_error(exc, str(study.source), prefix="rehearse") from None


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


#: optimizers written as steps (mitigate.optimizers.Steps): their repeats run in lockstep
STEPPED_OPTIMIZERS = ("spsa", "parameter_shift")


def optimizer_steps(
    settings: RehearseSettings,
    x0: np.ndarray,
    rng: np.random.Generator,
    rules: Sequence[ShiftRule],
    on_iteration: Any,
) -> Steps | None:
    """The optimizer as steps (SPSA, parameter shift), or None for the scipy ones."""
    opts, n = settings.optimizer_options(), settings.iterations
    if settings.optimizer == "spsa":
        return spsa_steps(x0, n, rng, opts, on_iteration)
    if settings.optimizer == "parameter_shift":
        return parameter_shift_steps(x0, n, rules, opts, on_iteration)
    return None


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
    t0 = time.perf_counter()
    study = study_or_path if isinstance(study_or_path, Study) else load_study(study_or_path)
    settings = resolve_settings(study, overrides)
    loop_passes = settings.loop_passes()
    final_passes = study.recipes[settings.final_recipe] if settings.final_recipe else loop_passes
    verify = recipes_verify([loop_passes, final_passes])
    if context is None:
        context = build_context(study, cache=as_cache(cache), verification=verify)
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

    evaluators, traces, starts, hooks = [], [], [], []
    for r in range(settings.repeats):
        rng = np.random.default_rng(settings.seed + r)
        starts.append(start_parameters(settings, optimum, rng))
        evaluators.append(
            LoopEvaluator(
                ctx,
                parameterized,
                loop_passes,
                settings.shots_per_evaluation,
                rng,
                calibrator=calibrator,
                max_shots=settings.max_shots,
                analytic=analytic,
                clock=clock,
                shared=shared,
            )
        )
        traces.append([])
        hooks.append(trace_hook(evaluators[-1], traces[-1], noiseless))
    lockstep = settings.optimizer in STEPPED_OPTIMIZERS
    if lockstep and progress is not None:
        progress("rehearsing the loop (iterations)", 0, settings.iterations)
        hooks[0] = with_progress(hooks[0], progress, settings.iterations)
    steps = [
        optimizer_steps(settings, x0, ev.rng, rules, hook)
        for ev, x0, hook in zip(evaluators, starts, hooks, strict=True)
    ]
    if lockstep:
        # every repeat's next points go to the emulator together
        outcomes = run_lockstep([s for s in steps if s is not None], evaluators)
    else:
        outcomes = []
        for r, (ev, x0) in enumerate(zip(evaluators, starts, strict=True)):
            if progress is not None:
                progress("rehearsing the loop", r, settings.repeats)
            outcomes.append(
                scipy_minimize(
                    ev,
                    x0,
                    settings.iterations,
                    settings.optimizer,
                    settings.optimizer_options(),
                    hooks[r],
                )
            )
        if progress is not None:
            progress("rehearsing the loop", settings.repeats, settings.repeats)
    repeats = [
        final_estimate(
            ctx,
            ev,
            final_passes,
            out,
            settings.seed + r,
            x0,
            trace,
            noiseless,
            clock,
        )
        for r, (ev, out, x0, trace) in enumerate(
            zip(evaluators, outcomes, starts, traces, strict=True)
        )
    ]
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
