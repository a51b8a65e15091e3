"""In-loop energy evaluations of the rehearse job, and the loops that drive optimizers on them.

A :class:`LoopEvaluator` is one repeat's view of the device: one experiment context on the
parameterized compile (so the recipe's derived tables are built once), the repeat's random
generator, its shot count, and its readout calibration, drawn once at the first evaluation and
reused by every later one (a real run calibrates at the start; the calibration's randomness
differs between repeats and so stays in their spread). Points are emulated in batches
(:func:`emulate_points`): every parameter set an optimizer step asks for, of every repeat run
in lockstep, goes to one qiskit-aer call per circuit variant (``emulate_parameter_sets``), and
each evaluation then draws its counts and runs the recipe on them. The records of one repeat
(:class:`TracePoint`, :class:`RepeatResult`) and its iteration hooks live here too.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from noiselab.emulate.batch import emulate_parameter_sets
from noiselab.mitigate.experiment import variant_inputs
from noiselab.mitigate.optimizers import BudgetExhaustedError, OptimizerOutcome, Steps
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.study.context import StudyContext, replace_experiment
from noiselab.study.device_time import DeviceTime, calibration_seconds_per_shot


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


class LoopEvaluator:
    """Energy evaluations at given parameters, as the device would return them; counts shots.

    ``objective(x)``: emulate, draw counts at ``shots`` and run the recipe on them. Raises
    :class:`BudgetExhaustedError` once ``max_shots`` are spent. The readout calibration is drawn
    at the first evaluation and reused (``calibration_record``); its shots and circuits are
    counted once, with that evaluation.
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
        self.ctx, self.parameterized = ctx, parameterized
        self.recipe = parse_recipe(list(passes))
        self.shots, self.rng, self.calibrator = int(shots), rng, calibrator
        self.max_shots, self.analytic = max_shots, analytic
        self.experiment = replace_experiment(
            ctx.experiment, compiled=parameterized, shots=self.shots
        )
        self.calibration_record: dict[Any, tuple[int, np.ndarray]] = {}
        self.evaluation_shots: list[int] = []
        self.circuit_runs = 0
        self.clock = clock  # device time of one recipe result (noiselab.study.device_time)
        self.device_time = DeviceTime()
        self.shared = shared  # emulations shared with other rehearsals (rehearse --grid)
        self.last_energy_ha = math.nan

    @property
    def shots_spent(self) -> int:
        return int(sum(self.evaluation_shots))

    @property
    def exhausted(self) -> bool:
        return self.max_shots is not None and self.shots_spent >= self.max_shots

    def variants(self) -> tuple[Any, ...]:
        """The circuit variants one evaluation measures."""
        return self.recipe.variants(self.experiment)

    def score(self, data: Mapping[Any, Any], shots: int | None = None) -> Any:
        """The recipe's result on emulated ``data`` (variant -> BasisDistributions), sampled at
        ``shots`` (default the loop's) unless analytic. Counts nothing."""
        exp = self.experiment
        if shots is not None and int(shots) != self.shots:
            exp = replace_experiment(exp, shots=int(shots))
        return run_recipe(
            self.recipe,
            exp,
            data.__getitem__,
            sampled=not self.analytic,
            rng=self.rng,
            calibrator=self.calibrator,
            calibration_record=self.calibration_record,
        )

    def evaluate(self, x: np.ndarray, shots: int) -> Any:
        """The recipe's result at parameters ``x`` and ``shots`` (sampled unless analytic)."""
        return self.score(emulate_points(self, [x])[0], shots)

    def record(self, data: Mapping[Any, Any]) -> float:
        """One counted evaluation on emulated ``data``: its energy (Ha)."""
        if self.exhausted:
            raise BudgetExhaustedError
        known = set(self.calibration_record)
        res = self.score(data)
        new = [self.calibration_record[k][0] for k in self.calibration_record if k not in known]
        calibration_circuits = int(res.details.get("calibration_circuits", 0))
        self.evaluation_shots.append(int(res.shots_total) + int(sum(new)))
        self.circuit_runs += int(res.n_circuits) - calibration_circuits + len(new)
        if self.clock is not None:
            # the result lists the repeat's calibration; it ran once, with the first evaluation
            spent = self.clock(res)
            reused_shots = int(res.details.get("calibration_shots_total", 0)) - int(sum(new))
            self.device_time = self.device_time + DeviceTime(
                spent.shot_seconds
                - reused_shots * calibration_seconds_per_shot(self.experiment.profile),
                spent.circuit_runs - (calibration_circuits - len(new)),
                spent.circuit_overhead_s,
            )
        self.last_energy_ha = float(res.energy_ha)
        return float(res.energy_ha)

    def __call__(self, x: np.ndarray) -> float:
        if self.exhausted:
            raise BudgetExhaustedError
        return self.record(emulate_points(self, [x])[0])


def emulate_points(evaluator: LoopEvaluator, points: Sequence[np.ndarray]) -> list[dict[Any, Any]]:
    """Every variant's distributions at each of ``points``: one emulator call per variant
    (points the evaluator's ``shared`` store already holds are taken from it)."""
    exp = evaluator.experiment
    shared = evaluator.shared
    bases = tuple(exp.measured_bases)
    variants = evaluator.variants()
    out: list[dict[Any, Any]] = [{} for _ in points]
    todo = list(range(len(points)))
    if shared is not None:
        todo = []
        for i, x in enumerate(points):
            known = shared.lookup(x, bases, variants)
            if known is None:
                todo.append(i)
            else:
                out[i] = dict(known)
    if not todo:
        return out
    for v in variants:
        compiled, profile, _ = variant_inputs(exp, v)
        runs = emulate_parameter_sets(
            compiled,
            profile,
            list(bases),
            [points[i] for i in todo],
            method=exp.emulation_method,
            seed=exp.seed,
            num_trajectories=exp.num_trajectories,
            num_batches=exp.num_batches,
            max_density_matrix_qubits=exp.max_density_matrix_qubits,
        )
        for i, run in zip(todo, runs, strict=True):
            out[i][v] = run
    if shared is not None:
        for i in todo:
            shared.keep(points[i], bases, out[i])
    return out


def run_lockstep(
    steps: Sequence[Steps], evaluators: Sequence[LoopEvaluator]
) -> list[OptimizerOutcome]:
    """Drive one optimizer per repeat side by side: the points all repeats ask for next are
    emulated together, then each repeat evaluates its own in order (its random draws in the
    same order as one repeat alone). A repeat out of shots is stopped by its optimizer."""
    outcomes: list[OptimizerOutcome | None] = [None] * len(steps)
    pending: dict[int, list[np.ndarray]] = {}
    for r, s in enumerate(steps):
        try:
            pending[r] = next(s)
        except StopIteration as stop:
            outcomes[r] = stop.value
    while pending:
        order = list(pending)
        flat = [p for r in order for p in pending[r]]
        data = emulate_points(evaluators[order[0]], flat) if flat else []
        at = 0
        for r in order:
            points = pending.pop(r)
            mine = data[at : at + len(points)]
            at += len(points)
            try:
                try:
                    values = [evaluators[r].record(d) for d in mine]
                except BudgetExhaustedError as exc:
                    pending[r] = steps[r].throw(exc)
                    continue
                pending[r] = steps[r].send(values)
            except StopIteration as stop:
                outcomes[r] = stop.value
    return [o for o in outcomes if o is not None]


def trace_hook(
    ev: LoopEvaluator, trace: list[TracePoint], noiseless: Callable[[np.ndarray], float]
) -> Callable[[int, np.ndarray, tuple[float, ...]], None]:
    """After each iteration: shots so far, the measured energy, the iterate's noiseless one."""

    def on_iteration(k: int, x: np.ndarray, values: tuple[float, ...]) -> None:
        measured = float(np.mean(values)) if values else ev.last_energy_ha
        trace.append(TracePoint(ev.shots_spent, measured, noiseless(x)))

    return on_iteration


def with_progress(
    hook: Callable[[int, np.ndarray, tuple[float, ...]], None],
    progress: Callable[[str, int, int], None],
    total: int,
) -> Callable[[int, np.ndarray, tuple[float, ...]], None]:
    """``hook``, then ``progress`` with the iterations done (repeats in lockstep)."""

    def on_iteration(k: int, x: np.ndarray, values: tuple[float, ...]) -> None:
        hook(k, x, values)
        progress("rehearsing the loop (iterations)", k + 1, total)

    return on_iteration
