"""Clifford data regression (Czarnik, Arrasmith, Coles and Cincio, Quantum 5, 592 (2021)); with
several noise levels the variable-noise form (Lowe et al., Phys. Rev. Research 3, 033098 (2021)).

Training circuits are the compiled circuit with a share (``replaced_share``) of its non-Clifford
rotations rounded to the nearest multiple of pi/2 (``device.clifford_substitute``); which ones
is a seeded random choice (``choice_seed``). Their exact energies are computed classically
(statevector of the compiled circuit, delays dropped); their noisy energies are emulated with the
device's noise, on the same correction and estimator passes as the target. Per training set the
least-squares fit E_exact = b + sum_j a_j E_noisy(c_j) over the ``noise_levels`` c_j (stretched
circuit noise; (1,) is plain regression) is applied to the target's noisy energies.

Randomness, kept apart as everywhere: the training circuits' shots make the fit uncertain. The
fit is not linear in the noisy energies (errors in the abscissae flatten a least-squares slope),
so on exact inputs the pass computes the mean and spread of its value under the shot noise at
the shots the budget gives (the allocation ``run_recipe`` makes next), by a deterministic
quadrature (scrambled Sobol points, fixed seed): the mean is the energy (bias = expectation at
the budget, ``shot_shift_mha`` away from the infinite-shot fit), and the delta-method influence
(gradient of the fitted value with respect to every training and target estimate, which sets
the allocation and the shots needed) is scaled to the spread (``error_bar_scale``; readout
calibration noise enters linearly). The random choice of the replaced rotations is a second
random part no shot count shrinks. ``training_sets`` (>= 2)
independent training sets are drawn; the energy is the mean of their fitted values, and the
variance of that mean over choices, (sample variance of the sets' values) / K, enters the error
bar as ``std_training_choice_mha`` (sampled evaluations draw it). Every training circuit is run
and costs shots from the one budget.

A compiled circuit without a non-Clifford rotation is simulable classically: the pass returns its
exact energy, with no training circuits and no shot noise.

(Over 400 lines: options, report and pass stay in one module as for the other passes; the
numerics live in ``noiselab.mitigate.regression_fit``.)
"""

from __future__ import annotations

import math
import weakref
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator, model_validator

from noiselab.common.counts import MAX_SEED, Count
from noiselab.common.errors import InputError, NoiselabError, ProblemTooLargeError
from noiselab.common.units import HA_TO_MHA
from noiselab.device.clifford_substitute import CliffordSubstitution, non_clifford_rotations
from noiselab.mitigate.base import (
    STAGE_COMBINE,
    Combined,
    MitigationPass,
    PassOptions,
    Workspace,
    meas_key,
    plan_estimate,
    raw_distribution,
)
from noiselab.mitigate.estimate import Estimate, linear_combination, single_shot_variance
from noiselab.mitigate.plan import allocate_shots
from noiselab.mitigate.regression_fit import (
    fit_and_gradient,
    fit_under_shot_noise,
    noiseless_distributions,
)
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import STRETCH_CHANNELS, CircuitVariant, stretched

#: Most training circuits per set: each is a full emulation (at every noise level).
MAX_TRAINING_SIZE = 64
#: Most training sets (each adds training_size circuits).
MAX_TRAINING_SETS = 8
#: Most noise levels of the variable-noise fit, and the largest level (as extrapolate's bound).
MAX_NOISE_LEVELS = 4
MAX_NOISE_LEVEL = 10.0
#: Per experiment context (dropped with it): noiseless training energies, and the choice
#: variance of each exact evaluation (what sampled evaluations draw).
_IDEAL_MEMO: weakref.WeakKeyDictionary[Any, dict[tuple[Any, ...], float]] = (
    weakref.WeakKeyDictionary()
)
#: Exact training energies come from a statevector of the compiled circuit's width.
MAX_STATEVECTOR_QUBITS = 24


#: Said with every result: a modelling choice that favours the experiment.
ASSUMPTION = (
    "training circuits run under the target's noise, unchanged between runs (no drift); "
    "a drifting device fits worse"
)


class CliffordRegressionOptions(PassOptions):
    training_size: Count = Field(
        default=4, ge=3, le=MAX_TRAINING_SIZE, description="training circuits per set"
    )
    training_sets: Count = Field(
        default=4,
        ge=2,
        le=MAX_TRAINING_SETS,
        description="independent training sets (>= 2: their spread is the choice's error bar)",
    )
    replaced_share: float = Field(
        default=0.5, allow_inf_nan=False, description="share of non-Clifford rotations replaced"
    )
    noise_levels: tuple[float, ...] = Field(default=(1.0,), min_length=1, max_length=4)
    choice_seed: Count = Field(default=0, ge=0, le=MAX_SEED)
    intercept: Literal["mixed_state", "fitted"] = "mixed_state"
    shot_split: Literal["equal", "weighted"] = "weighted"

    @field_validator("replaced_share")
    @classmethod
    def _share(cls, v: float) -> float:
        if not 0.0 < v < 1.0:
            raise ValueError(
                "must be strictly between 0 and 1 (0 replaces nothing; 1 makes every training "
                "circuit the same Clifford circuit)"
            )
        return float(v)

    @field_validator("noise_levels")
    @classmethod
    def _levels(cls, v: tuple[float, ...]) -> tuple[float, ...]:
        if any(not math.isfinite(c) or c < 1.0 or c > MAX_NOISE_LEVEL for c in v):
            raise ValueError(f"noise levels must be finite, from 1 to {MAX_NOISE_LEVEL:g}")
        if v[0] != 1.0 or len(set(v)) != len(v):
            raise ValueError("noise levels must be distinct and start with 1 (the device as is)")
        return tuple(float(c) for c in v)

    @model_validator(mode="after")
    def _enough(self) -> CliffordRegressionOptions:
        need = len(self.noise_levels) + 2
        if self.training_size < need:
            raise ValueError(
                f"training_size: a fit over {len(self.noise_levels)} noise level(s) needs at "
                f"least {need} training circuits per set, got {self.training_size}"
            )
        return self


@dataclass(frozen=True)
class CliffordRegressionReport(PassReport):
    """What the regression did: the non-Clifford rotations of the target and how many each
    training circuit replaces; per training set the fitted coefficients (intercept first, Ha and
    one slope per noise level), the fitted target energy, and each training circuit's exact and
    noisy energies (Ha, noisy per noise level); the choice spread (Ha)."""

    kind: ClassVar[str] = "clifford_regression"
    noise_levels: tuple[float, ...]
    rotations: int
    replaced: int
    training_variants: tuple[tuple[str, ...], ...]
    coefficients: tuple[tuple[float, ...], ...]
    set_energies_ha: tuple[float, ...]
    exact_energies_ha: tuple[tuple[float, ...], ...]
    noisy_energies_ha: tuple[tuple[tuple[float, ...], ...], ...]
    target_noisy_ha: tuple[float, ...]
    choice_std_ha: float
    shot_shift_ha: float = 0.0
    error_bar_scale: float = 1.0
    classical: bool = False

    def details(self, run: ScoredRun) -> dict[str, Any]:
        labels = {lab for labs in self.training_variants for lab in labs}
        training_shots = sum(n for (label, _), n in run.shots.items() if label in labels)
        return {
            "clifford_regression": {
                "noise_levels": list(self.noise_levels),
                "non_clifford_rotations": self.rotations,
                "replaced_per_circuit": self.replaced,
                "training_circuits": len(labels),
                "training_shots": int(training_shots),
                "coefficients": [list(c) for c in self.coefficients],
                "set_energies_ha": list(self.set_energies_ha),
                "target_noisy_ha": list(self.target_noisy_ha),
                "choice_std_mha": self.choice_std_ha * HA_TO_MHA,
                "shot_shift_mha": self.shot_shift_ha * HA_TO_MHA,
                "error_bar_scale": self.error_bar_scale,
                "classical": self.classical,
                "assumption": ASSUMPTION,
            }
        }


def mixed_state_energy_ha(ws: Workspace) -> float:
    """The recipe's estimator on the maximally mixed state (uniform distributions in every
    basis), Ha: where fully depolarizing noise takes every circuit."""
    ctx = ws.ctx
    bases = tuple(ws.estimator.bases(ctx)) if ws.estimator is not None else tuple(ctx.plan.bases)
    uniform = np.full(2**ctx.plan.num_qubits, 2.0**-ctx.plan.num_qubits)
    return _estimator_value(ws, CircuitVariant(), {b: uniform for b in bases})


def _no_calibration(*_: Any) -> np.ndarray:
    raise NoiselabError("clifford_regression: a noiseless estimate reads no readout calibration")


def ideal_energy_ha(ws: Workspace, variant: CircuitVariant, compiled: Any) -> float:
    """The recipe's estimator (ws.estimator, or the plan estimate) on the noiseless, perfectly
    read distributions of ``compiled`` (Ha): what the estimate would be without any noise (e.g.
    the symmetry-projected energy under post-selection). Correction passes only undo readout
    error and have nothing to undo here."""
    ctx = ws.ctx
    bases = tuple(ws.estimator.bases(ctx)) if ws.estimator is not None else tuple(ctx.plan.bases)
    return _estimator_value(ws, variant, noiseless_distributions(compiled, bases))


def _estimator_value(
    ws: Workspace, variant: CircuitVariant, probs: Mapping[str, np.ndarray]
) -> float:
    ctx = ws.ctx
    data = {b: raw_distribution(meas_key(variant, b), p) for b, p in probs.items()}
    if ws.estimator is None:
        return float(plan_estimate(ctx, data).value)
    sub = Workspace(ctx=ctx, measured={variant: probs}, calibration=_no_calibration)
    return float(ws.estimator.estimate(variant, data, sub).estimate.value)


def _shot_variances(
    ws: Workspace,
    split: str,
    influence: Mapping[Any, np.ndarray],
    by_variant: Mapping[CircuitVariant, Estimate],
) -> dict[CircuitVariant, float]:
    """Variance (Ha^2) of each variant's estimate at the shots the recipe will allocate: the
    allocation of ``noiselab.mitigate.plan.allocate_shots`` from the combined estimate's
    influence (what ``run_recipe`` does next), then Var_p(u) / N per measured basis."""
    ctx = ws.ctx
    bases = tuple(ws.estimator.bases(ctx)) if ws.estimator is not None else tuple(ctx.plan.bases)
    variants = list(by_variant)
    zeros = np.zeros(2**ctx.plan.num_qubits)
    sigmas = np.array(
        [
            [
                math.sqrt(
                    single_shot_variance(
                        ws.measured[v][b], np.asarray(influence.get(meas_key(v, b), zeros))
                    )
                )
                for b in bases
            ]
            for v in variants
        ]
    )
    shots = allocate_shots(sigmas, int(ctx.shots), ctx.allocation, split)
    out = {}
    for i, v in enumerate(variants):
        own = by_variant[v].influence
        out[v] = sum(
            single_shot_variance(ws.measured[v][b], np.asarray(own[meas_key(v, b)])) / shots[i, j]
            for j, b in enumerate(bases)
            if meas_key(v, b) in own
        )
    return out


class CliffordRegressionPass(MitigationPass):
    """Clifford data regression over seeded near-Clifford training circuits."""

    name: ClassVar[str] = "clifford_regression"
    stage: ClassVar[int] = STAGE_COMBINE
    Options: ClassVar[type[PassOptions]] = CliffordRegressionOptions
    options: CliffordRegressionOptions
    # the training circuits are substituted in the compiled circuit; suppression transforms on
    # every variant would change the circuits the fit pairs up (not built yet)
    incompatible: ClassVar[Mapping[str, str]] = {
        name: "suppression transforms are not applied to the training circuits yet"
        for name in ("twirl", "decouple", "measure_twirl")
    }

    def describe(self) -> str:
        o = self.options
        levels = "/".join(f"{c:g}" for c in o.noise_levels)
        size = f"{o.training_sets}x{o.training_size}"
        return f"clifford_regression({size},{o.replaced_share:g},{levels},{o.intercept})"

    def shot_split(self) -> Literal["equal", "weighted"]:
        return self.options.shot_split

    def _rotations(self, ctx: Any) -> tuple[int, ...]:
        if ctx.compiled is None:
            return ()
        return non_clifford_rotations(ctx.compiled.circuit)

    def _replaced(self, n: int) -> int:
        return min(max(1, round(self.options.replaced_share * n)), max(n - 1, 1))

    def check(self, ctx: Any, where: str) -> None:
        """Refuse too few distinct training circuits, or a circuit too wide for a statevector."""
        if ctx.compiled is None:
            return
        width = ctx.compiled.circuit.num_qubits
        if width > MAX_STATEVECTOR_QUBITS:
            raise ProblemTooLargeError(
                f"{where}.pass: exact training energies need a statevector of {width} qubits; "
                f"allowed: at most {MAX_STATEVECTOR_QUBITS}"
            )
        n = len(self._rotations(ctx))
        if n == 0:
            return
        o = self.options
        distinct = math.comb(n, self._replaced(n))
        if distinct < o.training_size * o.training_sets:
            raise InputError(
                f"{where}.training_size: replacing {self._replaced(n)} of the circuit's {n} "
                f"non-Clifford rotations gives {distinct} distinct training circuits, "
                f"{o.training_sets} x {o.training_size} asked for; allowed: at most {distinct} "
                "in all (fewer, or another replaced_share)"
            )

    def training_choice(self, ctx: Any) -> tuple[tuple[CliffordSubstitution, ...], ...]:
        """Per training set, its training circuits' substitutions (all distinct; seeded)."""
        pos = self._rotations(ctx)
        n = len(pos)
        if n == 0:
            return ()
        o = self.options
        k = self._replaced(n)
        rng = np.random.default_rng(o.choice_seed)
        seen: set[tuple[int, ...]] = set()
        sets = []
        for _ in range(o.training_sets):
            members = []
            while len(members) < o.training_size:
                chosen = tuple(sorted(pos[j] for j in rng.choice(n, size=k, replace=False)))
                if chosen not in seen:
                    seen.add(chosen)
                    members.append(CliffordSubstitution(chosen))
            sets.append(tuple(members))
        return tuple(sets)

    def _level(self, base: tuple, c: float) -> CircuitVariant:
        return CircuitVariant(base + stretched(c, STRETCH_CHANNELS).transforms)

    def variants(self, ctx: Any) -> tuple[CircuitVariant, ...]:
        levels = self.options.noise_levels
        out = [self._level((), c) for c in levels]
        for members in self.training_choice(ctx):
            for sub in members:
                out += [self._level((sub,), c) for c in levels]
        return tuple(out)

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Combined:
        ctx = ws.ctx
        o = self.options
        levels = o.noise_levels
        by_variant = dict(zip(variants, estimates, strict=True))
        target = [by_variant[self._level((), c)] for c in levels]
        rotations = self._rotations(ctx)
        if not rotations:
            value = ideal_energy_ha(ws, variants[0], ctx.compiled)
            report = CliffordRegressionReport(
                levels,
                0,
                0,
                (),
                (),
                (value,),
                (),
                (),
                tuple(e.value for e in target),
                0.0,
                classical=True,
            )
            return Combined(Estimate(value, {}), report, {"training_choice": 0.0})
        tx = np.array([e.value for e in target])
        anchor = None if o.intercept == "fitted" else mixed_state_energy_ha(ws)
        fits, parts, train_sets, grads = [], [], [], []
        for members in self.training_choice(ctx):
            train = [[by_variant[self._level((s,), c)] for c in levels] for s in members]
            x = np.array([[e.value for e in row] for row in train])
            y = np.array([self._exact(ws, s) for s in members])
            f, beta, dx, dt = fit_and_gradient(x, y, tx, anchor)
            flat = [e for row in train for e in row] + target
            parts.append(Estimate(f, linear_combination([*dx.ravel(), *dt], flat).influence))
            fits.append((f, beta, x, y))
            train_sets.append((members, train))
            grads.append((dx, dt))
        k = len(fits)
        set_values = [f for f, _, _, _ in fits]
        value = float(np.mean(set_values))
        influence = linear_combination([1.0 / k] * k, parts).influence
        choice_var = float(np.var(set_values, ddof=1)) / k
        memo = _IDEAL_MEMO.setdefault(ctx, {})
        recipe = [*ws.corrections, *([ws.estimator] if ws.estimator is not None else []), self]
        run_key = tuple(p.cache_key() for p in recipe)
        shift, scale = 0.0, 1.0
        if ws.rng is not None:
            # sampled: the sets' values also differ by shot noise here; the choice's spread and
            # the error-bar scale are those of the exact evaluation (run first by every recipe)
            choice_var, scale = memo.get(run_key, (choice_var, 1.0))
            if choice_var > 0.0:  # draw the training choice
                value += float(ws.rng.normal(0.0, math.sqrt(choice_var)))
        else:
            # exact inputs: mean and spread of the fit at the shots the budget gives
            var_x = _shot_variances(ws, self.options.shot_split, influence, by_variant)
            sd_t = np.sqrt([var_x[self._level((), c)] for c in levels])
            noisy_sets, linear_var = [], 0.0
            for (_, _, x, y), (members, _), (dx, _) in zip(fits, train_sets, grads, strict=True):
                v = np.array([[var_x[self._level((s,), c)] for c in levels] for s in members])
                noisy_sets.append((x, y, np.sqrt(v)))
                linear_var += float(np.sum((dx / k) ** 2 * v))
            dt_mean = sum(dt for _, dt in grads) / k
            linear_var += float(np.sum(dt_mean**2 * sd_t**2))
            mean, var = fit_under_shot_noise(noisy_sets, tx, sd_t, anchor)
            shift = mean - value
            value = mean
            if linear_var > 0.0 and var > 0.0:
                scale = math.sqrt(var / linear_var)
            memo[run_key] = (choice_var, scale)
        if scale != 1.0:
            influence = {key: u * scale for key, u in influence.items()}
        report = CliffordRegressionReport(
            noise_levels=levels,
            rotations=len(rotations),
            replaced=self._replaced(len(rotations)),
            training_variants=tuple(
                tuple(self._level((s,), c).label() for s in members for c in levels)
                for members, _ in train_sets
            ),
            coefficients=tuple(tuple(float(b) for b in beta) for _, beta, _, _ in fits),
            set_energies_ha=tuple(float(v) for v in set_values),
            exact_energies_ha=tuple(tuple(float(v) for v in y) for _, _, _, y in fits),
            noisy_energies_ha=tuple(
                tuple(tuple(float(v) for v in row) for row in x) for _, _, x, _ in fits
            ),
            target_noisy_ha=tuple(float(e.value) for e in target),
            choice_std_ha=math.sqrt(choice_var),
            shot_shift_ha=shift,
            error_bar_scale=scale,
        )
        return Combined(Estimate(value, influence), report, {"training_choice": choice_var})

    @staticmethod
    def _estimator_key(ws: Workspace) -> str | None:
        return None if ws.estimator is None else ws.estimator.cache_key()

    def _exact(self, ws: Workspace, sub: CliffordSubstitution) -> float:
        """The training circuit's noiseless energy, as the recipe's estimator reads it (Ha);
        kept per experiment context (sampled evaluations ask again)."""
        memo = _IDEAL_MEMO.setdefault(ws.ctx, {})
        key = (self._estimator_key(ws), sub)
        if key not in memo:
            compiled = ws.ctx.realizer.realize((sub,)).compiled
            memo[key] = ideal_energy_ha(ws, CircuitVariant((sub,)), compiled)
        return memo[key]
