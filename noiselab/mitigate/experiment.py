"""The experiment context of a recipe run and the circuit variants it simulates.

An :class:`ExperimentContext` holds everything fixed across the recipes of one experiment
(problem, compiled circuit, device profile, measurement plan, shot budget, target). A
:class:`~noiselab.mitigate.variants.CircuitVariant` becomes a (folded, re-scheduled circuit,
scaled profile) pair through :func:`variant_inputs`; :func:`make_runner` and
:func:`make_calibrator` emulate it, and :func:`variant_key_material` describes it for a cache key.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import io
import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from qiskit import qpy

from noiselab.common.errors import InputError
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.device.transforms import TransformRealizer
from noiselab.emulate.calibration import calibration_distributions
from noiselab.emulate.engine import choose_method, emulate_bases
from noiselab.mitigate import symmetry
from noiselab.mitigate.batch_spec import batch_value_spec, value_masks
from noiselab.mitigate.plan import MeasurementPlan, build_plan
from noiselab.mitigate.variants import DEFAULT_AMPLIFICATION_SPREAD, CircuitVariant

Runner = Callable[[CircuitVariant], Any]  # -> BasisDistributions over ctx.measured_bases
Calibrator = Callable[[CircuitVariant, tuple[int, ...]], np.ndarray]
Allocation = Literal["uniform", "by_deviation"]


# ---- context ----------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ExperimentContext:
    """Everything fixed across the recipes of one experiment.

    ``compiled``: the CompiledCircuit bound at the optimized parameters; ``shots``: the
    measurement budget of one energy estimate, all circuits and noise scales together;
    ``allocation``: how a circuit's shots are split over its bases ("uniform", or
    "by_deviation": proportional to each basis' single-shot standard deviation, computed from the
    exact emulated distributions, i.e. the allocation a good pilot run would give).
    ``emulation_method``: passed to ``emulate_bases``, with ``num_trajectories``,
    ``num_batches`` (trajectory method) and ``max_density_matrix_qubits`` (None: memory guard only).
    ``verification_bases``: measure the extra bases symmetry verification needs (a recipe with
    ``postselect`` mode ``verify`` is refused without them). True by default, so a context built
    by hand serves every recipe; the study layer turns it off when no recipe of the job
    verifies (at 12 qubits the extra bases are most of the measured ones).
    ``amplification_spread``: relative standard deviation of the realized noise scale of every
    amplified point of an extrapolation (enters ``std_mha``; 0: ideal amplification).
    ``amplification_offset``: relative, systematic error of the stretch amplifier (each stretched
    point is emulated at c (1 + offset) while the fit assumes c: enters the bias).
    ``trajectory_values``: a trajectory run keeps per-batch estimator values
    (:func:`noiselab.mitigate.batch_spec.batch_value_spec`) instead of per-batch distributions;
    only for recipes that read term parities alone (``batch_spec.needs_distributions``).
    """

    problem: Any
    compiled: Any
    profile: Any
    plan: MeasurementPlan
    exact_energy_ha: float
    ansatz_energy_ha: float
    shots: int
    target_mha: float = CHEMICAL_ACCURACY_MHA
    confidence: float = 0.95
    seed: int = 0
    allocation: Allocation = "by_deviation"
    emulation_method: str = "auto"
    num_trajectories: int = 256
    num_batches: int = 16
    max_density_matrix_qubits: int | None = None
    verification_bases: bool = True
    amplification_spread: float = DEFAULT_AMPLIFICATION_SPREAD
    amplification_offset: float = 0.0
    trajectory_values: bool = False

    def __post_init__(self) -> None:
        if int(self.shots) < 1:
            raise InputError(f"shots: {self.shots}; allowed: a positive integer")
        if not 0.0 < float(self.confidence) < 1.0:
            raise InputError(f"confidence: {self.confidence}; allowed: strictly between 0 and 1")
        if not float(self.target_mha) > 0.0:
            raise InputError(f"target_mha: {self.target_mha}; allowed: a positive number (mHa)")
        if self.allocation not in ("uniform", "by_deviation"):
            raise InputError(f"allocation: {self.allocation!r}; allowed: uniform, by_deviation")
        if not 0.0 <= float(self.amplification_spread) < 1.0:
            raise InputError(
                f"amplification_spread: {self.amplification_spread}; allowed: 0 <= value < 1"
            )
        if not -0.5 <= float(self.amplification_offset) <= 1.0:
            raise InputError(
                f"amplification_offset: {self.amplification_offset}; allowed: -0.5 to 1"
            )

    @functools.cached_property
    def measured_bases(self) -> tuple[str, ...]:
        """Every basis the runner measures: the plan's, then (with ``verification_bases``) the
        extra ones symmetry verification needs (for any subset of the symmetries), so that all
        recipes share the same simulations."""
        wanted = self.verification_bases and _has_symmetries(self.problem)
        extra = symmetry.verification_bases(self.plan, self.problem) if wanted else ()
        plan_bases = tuple(self.plan.bases)
        return plan_bases + tuple(b for b in extra if b not in plan_bases)

    @functools.cached_property
    def realizer(self) -> TransformRealizer:
        """Applies circuit variants' transforms and keeps what it realized, for the lifetime of
        this context (a copy made by ``dataclasses.replace`` or pickling starts empty)."""
        return TransformRealizer(self.compiled, self.profile)

    @functools.cached_property
    def calibrator(self) -> Calibrator:
        """The context's :func:`make_calibrator`, shared by every recipe run on it."""
        return make_calibrator(self)

    def __getstate__(self) -> dict[str, Any]:
        # the memo of realized circuits and calibrations stays with this process
        return {k: v for k, v in self.__dict__.items() if k not in ("realizer", "calibrator")}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.__dict__.update(state)


def _has_symmetries(problem: Any) -> bool:
    return bool(getattr(problem, "symmetries", None))


def build_context(
    problem: Any,
    compiled: Any,
    profile: Any,
    *,
    ansatz_energy_ha: float,
    shots: int,
    **kwargs: Any,
) -> ExperimentContext:
    """Context with the measurement plan of ``problem.hamiltonian`` (other fields as keywords)."""
    return ExperimentContext(
        problem=problem,
        compiled=compiled,
        profile=profile,
        plan=build_plan(problem.hamiltonian),
        exact_energy_ha=float(problem.exact_energy_ha),
        ansatz_energy_ha=float(ansatz_energy_ha),
        shots=int(shots),
        **kwargs,
    )


# ---- circuit variants: transformed inputs, runner, cache keys ---------------------------------


def variant_inputs(ctx: ExperimentContext, variant: CircuitVariant) -> tuple[Any, Any, float]:
    """(CompiledCircuit, DeviceProfile, scale factor reached) that simulate ``variant``."""
    real = ctx.realizer.realize(variant.transforms)
    return real.compiled, real.profile, real.scale


def actual_scale(ctx: ExperimentContext, variant: CircuitVariant) -> float:
    """Noise scale factor of a variant as reached (folded gate counts are integers)."""
    return ctx.realizer.realize(variant.transforms).scale


def realized_scales(ctx: ExperimentContext, variant: CircuitVariant) -> dict[str, float]:
    """The noise scale a variant realizes relative to the base circuit
    (``TransformRealizer.realized_scales``): ``"total"`` and one entry per kind of operation."""
    return ctx.realizer.realized_scales(variant.transforms)


def variant_key_material(ctx: ExperimentContext, variant: CircuitVariant) -> dict[str, Any]:
    """JSON-serializable description of everything that determines ``runner(variant)``.

    Hash ``json.dumps(material, sort_keys=True)`` for a cache key. The circuit enters as the
    SHA-256 of its QPY serialization (exact parameters), independent of the circuit's name.
    """
    compiled, profile, _ = variant_inputs(ctx, variant)
    # qiskit names new circuits from a process-wide counter ("circuit-43") and QPY stores the
    # name: hash a copy under a fixed name so equal circuits give equal keys in any process.
    circuit = compiled.circuit.copy()
    circuit.name = "noiselab"
    circuit.metadata = {}
    buf = io.BytesIO()
    qpy.dump(circuit, buf)
    method = ctx.emulation_method
    with contextlib.suppress(InputError):
        method = choose_method(
            compiled.circuit.num_qubits,
            method,
            max_density_matrix_qubits=ctx.max_density_matrix_qubits,
        )[0]
    material: dict[str, Any] = {
        "variant": variant.as_dict(),
        "circuit_qpy_sha256": hashlib.sha256(buf.getvalue()).hexdigest(),
        "patch": list(compiled.patch),
        "logical_to_circuit": list(compiled.logical_to_circuit),
        "profile": json.loads(profile.model_dump_json()),
        "bases": list(ctx.measured_bases),
        "method": method,
        # density-matrix results do not depend on the seed; trajectories do
        "seed": ctx.seed if method != "density_matrix" else None,
    }
    if method != "density_matrix":
        material["trajectories"] = [int(ctx.num_trajectories), int(ctx.num_batches)]
        if ctx.trajectory_values:  # which values: the masks per basis (the transforms follow
            # from the profile, already in the key)
            h = hashlib.sha256()
            for m in value_masks(ctx):
                h.update(np.asarray(m, dtype=np.uint64).tobytes() + b"|")
            material["kept"] = f"per-batch values {h.hexdigest()}"
    return material


def make_runner(ctx: ExperimentContext) -> Runner:
    """Default runner: emulate_bases over ``ctx.measured_bases``, memoized in-process by variant."""
    memo: dict[CircuitVariant, Any] = {}

    def runner(variant: CircuitVariant) -> Any:
        if variant not in memo:
            compiled, profile, _ = variant_inputs(ctx, variant)
            # a transform that replaces the emulation (e.g. a sign-flagged or two-copy circuit)
            own = next((t for t in variant.transforms if hasattr(t, "emulate_variant")), None)
            if own is not None:
                memo[variant] = own.emulate_variant(ctx, compiled, profile)
                return memo[variant]
            values = None
            if ctx.trajectory_values and ctx.emulation_method != "density_matrix":
                values = batch_value_spec(ctx, variant)
            memo[variant] = emulate_bases(
                compiled,
                profile,
                list(ctx.measured_bases),
                batch_values=values,
                method=ctx.emulation_method,
                seed=ctx.seed,
                num_trajectories=ctx.num_trajectories,
                num_batches=ctx.num_batches,
                max_density_matrix_qubits=ctx.max_density_matrix_qubits,
            )
        return memo[variant]

    return runner


def make_calibrator(ctx: ExperimentContext, written: Any = None) -> Calibrator:
    """Exact readout-calibration distributions (n_states, 2**n) over the logical qubits.

    ``written(profile)``: numpy channels of a profile on the patch
    (``emulate.written.WrittenNoise``) to use instead of a qiskit-aer noise model."""
    memo: dict[tuple[CircuitVariant, tuple[int, ...]], np.ndarray] = {}

    def calibrator(variant: CircuitVariant, states: tuple[int, ...]) -> np.ndarray:
        key = (variant, tuple(states))
        if key not in memo:
            _, profile, _ = variant_inputs(ctx, variant)
            cal = calibration_distributions(
                profile,
                ctx.compiled.patch,
                list(states),
                measured=list(ctx.compiled.logical_to_circuit),
                written=None if written is None else written(profile),
            )
            memo[key] = np.asarray(cal.probs, dtype=float)
        return memo[key]

    return calibrator
