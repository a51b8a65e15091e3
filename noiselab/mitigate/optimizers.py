"""Optimizers for a variational loop whose every energy evaluation is a noisy, costly estimate.

Each optimizer calls ``objective(x) -> energy`` (one evaluation; the caller counts its shots)
and ``on_iteration(k, x, energies)`` after every iteration. A caller that runs out of budget
raises :class:`BudgetExhaustedError` from the objective; the optimizer then stops and returns its
current iterate. SPSA and parameter-shift descent are also written as steps (``*_steps``:
generators that yield every point one iteration needs and are sent the energies), so a caller
can evaluate those points, and those of other repeats, in one emulator call.

- SPSA: Spall, IEEE Trans. Autom. Control 37, 332 (1992); gains a_k = a / (A + k + 1)^0.602,
  c_k = c / (k + 1)^0.101, A about 10 % of the iterations, ``a`` calibrated from the
  magnitude of the first gradient estimates so the first step has the desired size (Spall,
  IEEE Trans. Aerosp. Electron. Syst. 34, 817 (1998)); the desired size is read from the
  calibration energies themselves (the minimum of the parabola through them along the probed
  directions, capped), not a fixed angle. Two evaluations per iteration.
- Gradient descent with parameter-shift gradients: the general rule for equidistant
  frequencies 1..R (R = 1: [E(x + pi/2) - E(x - pi/2)] / 2, Mitarai et al. 2018; general R:
  Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022)); 2R evaluations per parameter.
- COBYLA and Nelder-Mead through scipy.optimize.minimize.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field
from scipy.optimize import minimize

Objective = Callable[[np.ndarray], float]
IterationHook = Callable[[int, np.ndarray, tuple[float, ...]], None]
#: an optimizer as steps: yields the points it wants evaluated next (a batch that can go to the
#: emulator in one call), is sent their energies, returns its outcome
Steps = Generator[list[np.ndarray], list[float], "OptimizerOutcome"]

OPTIMIZERS = ("spsa", "parameter_shift", "cobyla", "nelder_mead")
OptimizerName = Literal["spsa", "parameter_shift", "cobyla", "nelder_mead"]


class BudgetExhaustedError(Exception):
    """Raised by an objective when the shot cap is reached; the optimizer stops."""


class _Options(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SpsaOptions(_Options):
    """SPSA gains (Spall 1998). ``a`` None: calibrated (Spall's rule) so that the first step
    moves each parameter by the desired first change: with ``first_step_rule`` "curvature" the
    step to the minimum of the parabola through the calibration energies along the probed
    directions (one more evaluation, at the start), at most ``first_step`` (rad); with "fixed"
    ``first_step`` itself. ``stability`` None: 10 % of the iterations."""

    a: float | None = Field(default=None, gt=0, allow_inf_nan=False)
    c: float = Field(default=0.1, gt=0, le=3.2, allow_inf_nan=False)
    stability: float | None = Field(default=None, ge=0, allow_inf_nan=False)
    learning_exponent: float = Field(default=0.602, gt=0, le=1)
    perturbation_exponent: float = Field(default=0.101, gt=0, le=1)
    first_step: float = Field(default=0.2, gt=0, le=3.2, allow_inf_nan=False)
    first_step_rule: Literal["curvature", "fixed"] = "curvature"
    calibration_samples: int = Field(default=3, ge=1, le=100)


class ParameterShiftOptions(_Options):
    """Plain gradient descent x <- x - learning_rate * gradient (gradient in Ha/rad)."""

    learning_rate: float = Field(default=0.5, gt=0, le=100, allow_inf_nan=False)


class CobylaOptions(_Options):
    rhobeg: float = Field(default=0.3, gt=0, le=3.2, allow_inf_nan=False)
    tol: float = Field(default=1e-4, gt=0, le=1, allow_inf_nan=False)


class NelderMeadOptions(_Options):
    initial_step: float = Field(default=0.2, gt=0, le=3.2, allow_inf_nan=False)
    xatol: float = Field(default=1e-4, gt=0, le=1, allow_inf_nan=False)
    fatol: float = Field(default=1e-6, gt=0, le=1, allow_inf_nan=False)


@dataclass(frozen=True)
class OptimizerOutcome:
    """The final iterate, the iterations run and why the optimizer stopped."""

    parameters: np.ndarray
    iterations: int
    stopped: str  # "iterations" | "shot cap" | "converged"


def spsa_gains(options: SpsaOptions, iterations: int, a: float) -> tuple[np.ndarray, np.ndarray]:
    """(a_k, c_k) for k = 0..iterations-1."""
    big_a = options.stability if options.stability is not None else 0.1 * iterations
    k = np.arange(iterations, dtype=float)
    a_k = a / (big_a + k + 1.0) ** options.learning_exponent
    c_k = options.c / (k + 1.0) ** options.perturbation_exponent
    return a_k, c_k


def _perturbations(x: np.ndarray, c: float, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    """A Bernoulli +-1 direction and the two points x +- c delta."""
    delta = rng.choice((-1.0, 1.0), size=x.shape)
    return delta, x + c * delta, x - c * delta


def spsa_steps(
    x0: Sequence[float],
    iterations: int,
    rng: np.random.Generator,
    options: SpsaOptions | None = None,
    on_iteration: IterationHook | None = None,
) -> Steps:
    """Spall's SPSA as steps: yields the points to evaluate (both points of an iteration, or all
    points of the calibration of ``a`` at once), receives their energies. The calibration costs
    2 evaluations per sample (counted)."""
    options = options or SpsaOptions()
    x = np.array(x0, dtype=float)
    k = 0
    try:
        a = options.a
        if a is None:
            a = yield from _calibrate_a(x, iterations, rng, options)
        a_k, c_k = spsa_gains(options, iterations, a)
        for k in range(iterations):
            delta, plus, minus = _perturbations(x, float(c_k[k]), rng)
            y_plus, y_minus = yield [plus, minus]
            x = x - a_k[k] * (y_plus - y_minus) / (2.0 * c_k[k]) * delta
            if on_iteration is not None:
                on_iteration(k, x.copy(), (y_plus, y_minus))
    except BudgetExhaustedError:
        return OptimizerOutcome(x, k, "shot cap")
    return OptimizerOutcome(x, iterations, "iterations")


def _calibrate_a(
    x: np.ndarray, iterations: int, rng: np.random.Generator, options: SpsaOptions
) -> Generator[list[np.ndarray], list[float], float]:
    """Spall's (1998) calibration of ``a``: a / (A + 1)^alpha times the mean magnitude of the
    calibration gradient estimates equals the desired first change of a parameter.

    The desired change ("curvature"): along each probed direction delta the calibration
    evaluates E(x + c delta), E(x - c delta) (and E(x) once), so the parabola through them has
    slope g = (E+ - E-) / (2c) and curvature k = (E+ + E- - 2 E(x)) / c^2 per unit step along
    delta; its minimum lies |g| / k away, which moves every parameter by that much. Means over
    the samples (ratio of means, steadier under shot noise); capped at ``first_step``, which
    is also used when the curvature is not positive ("fixed": always ``first_step``)."""
    c0 = options.c
    pairs = [_perturbations(x, c0, rng) for _ in range(options.calibration_samples)]
    points = [p for _, plus, minus in pairs for p in (plus, minus)]
    curvature = options.first_step_rule == "curvature"
    values = yield ([*points, x.copy()] if curvature else points)
    slopes = [(values[2 * i] - values[2 * i + 1]) / (2.0 * c0) for i in range(len(pairs))]
    mag = max(float(np.mean(np.abs(slopes))), 1e-12)  # |each element of g delta| = |g|
    desired = options.first_step
    if curvature:
        centre = values[-1]
        bends = [
            (values[2 * i] + values[2 * i + 1] - 2.0 * centre) / c0**2 for i in range(len(pairs))
        ]
        bend = float(np.mean(bends))
        if bend > 0.0:
            desired = min(options.first_step, mag / bend)
    big_a = options.stability if options.stability is not None else 0.1 * iterations
    return desired * (big_a + 1.0) ** options.learning_exponent / mag


def drive(steps: Steps, objective: Objective) -> OptimizerOutcome:
    """Run optimizer steps by evaluating their points one by one with ``objective``; a
    :class:`BudgetExhaustedError` from it is passed to the optimizer, which stops."""
    try:
        points = next(steps)
        while True:
            values: list[float] = []
            try:
                for p in points:
                    values.append(float(objective(p)))
            except BudgetExhaustedError as exc:
                points = steps.throw(exc)
                continue
            points = steps.send(values)
    except StopIteration as stop:
        return stop.value


def spsa(
    objective: Objective,
    x0: Sequence[float],
    iterations: int,
    rng: np.random.Generator,
    options: SpsaOptions | None = None,
    on_iteration: IterationHook | None = None,
) -> OptimizerOutcome:
    """Spall's SPSA (:func:`spsa_steps`) on ``objective``, one evaluation at a time."""
    return drive(spsa_steps(x0, iterations, rng, options, on_iteration), objective)


@dataclass(frozen=True)
class ShiftRule:
    """Frequencies of E along one parameter: multiples 1..order of ``base`` (rad^-1)."""

    base: float
    order: int

    def shifts_and_weights(self) -> tuple[np.ndarray, np.ndarray]:
        """dE/dx = sum_mu w_mu E(x + s_mu) (Wierichs et al. 2022, equidistant frequencies)."""
        r = self.order
        mu = np.arange(1, 2 * r + 1, dtype=float)
        t = (2.0 * mu - 1.0) * math.pi / (2.0 * r)
        w = (-1.0) ** (mu - 1.0) / (4.0 * r * np.sin(t / 2.0) ** 2)
        return t / self.base, w * self.base


def shift_points(x: np.ndarray, rules: Sequence[ShiftRule]) -> tuple[list[np.ndarray], np.ndarray]:
    """Every shifted point of the parameter-shift gradient at ``x`` and the matrix W with
    gradient = W @ energies (one row per parameter)."""
    points: list[np.ndarray] = []
    rows: list[tuple[int, float]] = []
    for i, rule in enumerate(rules):
        shifts, weights = rule.shifts_and_weights()
        for s, w in zip(shifts, weights, strict=True):
            e = np.array(x, dtype=float)
            e[i] += s
            points.append(e)
            rows.append((i, float(w)))
    mat = np.zeros((len(x), len(points)))
    for j, (i, w) in enumerate(rows):
        mat[i, j] = w
    return points, mat


def shift_gradient(objective: Objective, x: np.ndarray, rules: Sequence[ShiftRule]) -> np.ndarray:
    """The parameter-shift gradient: each shifted point is one evaluation."""
    points, mat = shift_points(np.asarray(x, dtype=float), rules)
    return mat @ np.array([objective(p) for p in points])


def parameter_shift_steps(
    x0: Sequence[float],
    iterations: int,
    rules: Sequence[ShiftRule],
    options: ParameterShiftOptions | None = None,
    on_iteration: IterationHook | None = None,
) -> Steps:
    """Gradient descent with parameter-shift gradients as steps: every shifted point of one
    gradient is yielded at once."""
    options = options or ParameterShiftOptions()
    x = np.array(x0, dtype=float)
    k = 0
    try:
        for k in range(iterations):
            points, mat = shift_points(x, rules)
            values = yield points
            x = x - options.learning_rate * (mat @ np.asarray(values, dtype=float))
            if on_iteration is not None:
                on_iteration(k, x.copy(), ())
    except BudgetExhaustedError:
        return OptimizerOutcome(x, k, "shot cap")
    return OptimizerOutcome(x, iterations, "iterations")


def parameter_shift_descent(
    objective: Objective,
    x0: Sequence[float],
    iterations: int,
    rules: Sequence[ShiftRule],
    options: ParameterShiftOptions | None = None,
    on_iteration: IterationHook | None = None,
) -> OptimizerOutcome:
    """Gradient descent with parameter-shift gradients, one evaluation at a time."""
    steps = parameter_shift_steps(x0, iterations, rules, options, on_iteration)
    return drive(steps, objective)


def scipy_minimize(
    objective: Objective,
    x0: Sequence[float],
    iterations: int,
    method: Literal["cobyla", "nelder_mead"],
    options: CobylaOptions | NelderMeadOptions | None = None,
    on_iteration: IterationHook | None = None,
) -> OptimizerOutcome:
    """COBYLA or Nelder-Mead (scipy); ``iterations`` caps the evaluations. On a shot cap the
    point with the lowest measured energy so far is returned."""
    x0 = np.array(x0, dtype=float)
    seen: list[tuple[float, np.ndarray]] = []

    def f(x: np.ndarray) -> float:
        value = float(objective(np.array(x, dtype=float)))
        seen.append((value, np.array(x, dtype=float)))
        if on_iteration is not None:
            on_iteration(len(seen) - 1, np.array(x, dtype=float), (value,))
        return value

    try:
        if method == "cobyla":
            opts = options if isinstance(options, CobylaOptions) else CobylaOptions()
            res = minimize(
                f, x0, method="COBYLA", tol=opts.tol,
                options={"rhobeg": opts.rhobeg, "maxiter": int(iterations)},
            )  # fmt: skip
        else:
            nm = options if isinstance(options, NelderMeadOptions) else NelderMeadOptions()
            simplex = np.vstack([x0, x0 + nm.initial_step * np.eye(len(x0))])
            res = minimize(
                f, x0, method="Nelder-Mead",
                options={"maxfev": int(iterations), "initial_simplex": simplex,
                         "xatol": nm.xatol, "fatol": nm.fatol},
            )  # fmt: skip
    except BudgetExhaustedError:
        best = min(seen, key=lambda t: t[0])[1] if seen else x0
        return OptimizerOutcome(best, len(seen), "shot cap")
    stopped = "converged" if len(seen) < iterations else "iterations"
    return OptimizerOutcome(np.array(res.x, dtype=float), len(seen), stopped)
