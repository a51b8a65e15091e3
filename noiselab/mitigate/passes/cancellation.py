"""Probabilistic error cancellation from a learned Pauli noise model (Temme, Bravyi and Gambetta,
PRL 119, 180509 (2017); learned-model variant: van den Berg, Minev, Kandala and Temme, Nat. Phys.
19, 1116 (2023)).

The *learned model* of each noisy operation is the Pauli twirl of the profile's channel for it
(every native gate on its qubits, and with ``idle`` the relaxation over every scheduled delay),
restricted to the channel parts in ``learned``, with every error rate off by the relative
``learning_error`` (systematic: in the bias). ``learning_spread`` is the random relative error of
the learned rates in a real run: a :class:`~noiselab.mitigate.base.SpreadTerm` whose
``std_learning_mha`` (the energy's central difference at ``learning_error`` -+ ``LEARNING_STEP``,
two more exact emulations, times the spread) enters ``std_mha``; limited_by "learning" when it
keeps P low. Over a gate's own qubits this is the sparse Pauli-Lindblad model of van den
Berg et al. with all its generators, without crosstalk between gates. Its inverse is a
quasi-probability distribution q over Pauli corrections after the operation
(:mod:`noiselab.mitigate.pauli_model`), whose 1-norm C = sum |q| is its sampling cost (written
with a Greek letter in Temme et al.); the circuit's C is the product over its operations.

Emulation, exactly: the circuit gets one classical flag qubit. After each corrected operation a
CPTP instruction applies correction P with probability |q_P| / C and flips the flag where
q_P < 0 (sampling the corrections and recording their sign, as on a device). The emulator reads
the flag without error (:func:`noiselab.emulate.engine.emulate_flagged_bases`), so each measured
row has 2 x 2**n entries (outcome, sign). The pass turns it into the quasi-distribution
C (p(k, +) - p(k, -)), whose expectation is the mitigated one; a weight u on it pulls back
to C (u, -u) on the raw row, so the variance is C**2 E[w**2] - E**2 per shot: the
sampling overhead of PEC, exact, with nothing assumed.

What stays out of the model enters the bias, as on a device: the non-Pauli part of every channel
(coherent rotations, the non-Pauli part of amplitude damping: the emulated circuit is not
twirled), the parts not in ``learned``, the noisy measurement-basis layer and readout (add the
``readout`` pass, which runs after this one).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator
from qiskit import QuantumCircuit
from qiskit.quantum_info import Kraus

from noiselab.common.errors import InputError, NoiselabError
from noiselab.device.evolution import evolution_spec
from noiselab.device.noise import delay_seconds, gate_channel, relaxation_error
from noiselab.device.profile import VIRTUAL_GATES
from noiselab.device.transforms import Applied, CircuitTransform, register_transform
from noiselab.emulate.engine import choose_method, emulate_flagged_bases
from noiselab.mitigate.base import (
    STAGE_CORRECT,
    Corrected,
    CorrectedDistribution,
    MitigationPass,
    PassOptions,
    SpreadTerm,
    VariantData,
    Workspace,
)
from noiselab.mitigate.estimate import SourceKey
from noiselab.mitigate.experiment import variant_inputs
from noiselab.mitigate.pauli_model import Inverse, learned_rates, pauli_inverse, twirled_rates
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant

ChannelPart = Literal["relaxation", "depolarizing", "coherent"]
ALL_PARTS: tuple[str, ...] = ("relaxation", "depolarizing", "coherent")
#: Largest relative learning error (10 = rates learned 11 x too large).
MAX_LEARNING_ERROR = 10.0
#: Default relative standard deviation of the learned rates in a real run (common practice, no
#: source: a learned Pauli model's rates are known to a few per cent from its fits).
DEFAULT_LEARNING_SPREAD = 0.05
#: Relative learning-error step of the central difference behind ``std_learning_mha``.
LEARNING_STEP = 0.05


class CancellationOptions(PassOptions):
    learning_error: float = Field(
        default=0.0,
        ge=-0.9,
        le=MAX_LEARNING_ERROR,
        allow_inf_nan=False,
        description="relative error of every learned Pauli error rate (0: exact model)",
    )
    learning_spread: float = Field(
        default=DEFAULT_LEARNING_SPREAD,
        ge=0.0,
        lt=1.0,
        allow_inf_nan=False,
        description="relative standard deviation of the learned rates in a real run (random: "
        "enters std_mha as std_learning_mha; 0: a model learned exactly)",
    )
    learned: tuple[ChannelPart, ...] = Field(
        default=ALL_PARTS, description="parts of each gate's channel in the learned model"
    )
    idle: bool = True  # relaxation over scheduled delays in the learned model

    @field_validator("learned")
    @classmethod
    def _distinct(cls, v: tuple[str, ...]) -> tuple[str, ...]:
        if len(set(v)) != len(v):
            raise ValueError("channel parts must be distinct")
        return tuple(p for p in ALL_PARTS if p in v)  # one order: equal models, equal keys


@dataclass(frozen=True, eq=False)
class CorrectionPlan:
    """The corrected circuit (one flag qubit more), the circuit's 1-norm C, the number
    of corrected operations and the product of the norms by kind ("gates", "idle")."""

    circuit: Any
    norm: float
    corrections: int
    norm_by_kind: Mapping[str, float]


@dataclass(frozen=True)
class PauliCancellation(CircuitTransform):
    """The circuit with the learned model's inverse after every noisy operation (sign-flagged).
    Emulated by :meth:`emulate_variant` (the runner calls it instead of the plain emulator)."""

    kind: ClassVar[str] = "pauli_cancellation"
    learning_error: float = 0.0
    learned: tuple[str, ...] = ALL_PARTS
    idle: bool = True
    #: fingerprint of the profile the model is learned on (the experiment's; a stretched or
    #: drifted variant is emulated on another): part of the cache key
    learned_on: str = ""

    def label(self) -> str:
        parts = "+".join(self.learned) or "nothing"
        return f"pec[{parts}{',idle' if self.idle else ''},e={self.learning_error:g}]"

    def apply(self, compiled: Any, profile: Any, tools: Any) -> Applied:
        return Applied(compiled, profile, 1.0)

    def emulate_variant(self, ctx: Any, compiled: Any, profile: Any) -> Any:
        """Distributions of (outcome, sign) rows: the model learned on ``ctx.profile``, the
        noise of ``profile`` (the variant's)."""
        plan = correction_plan(compiled, ctx.profile, self)
        return emulate_flagged_bases(compiled, profile, plan.circuit, ctx.measured_bases)


register_transform(PauliCancellation)


def _inverse(kraus: list[np.ndarray], learning_error: float) -> Inverse:
    return pauli_inverse(learned_rates(twirled_rates(kraus), learning_error))


def correction_plan(compiled: Any, learn_profile: Any, model: PauliCancellation) -> CorrectionPlan:
    """Insert the model's inverse after each noisy operation of ``compiled.circuit``.

    ValueError when a model channel is not invertible (a Pauli fidelity <= 0).
    """
    circ = compiled.circuit
    k = circ.num_qubits
    flag = k
    patch = tuple(compiled.patch)
    out = QuantumCircuit(k + 1, global_phase=circ.global_phase)
    memo: dict[tuple, Inverse | None] = {}
    norm = {"gates": 1.0, "idle": 1.0}
    count = 0

    def add(inv: Inverse | None, qubits: list[int], kind: str) -> None:
        nonlocal count
        if inv is None or inv.norm <= 1.0 + 1e-15:
            return
        out.append(Kraus(inv.signed_kraus()).to_instruction(), [*qubits, flag])
        norm[kind] *= inv.norm
        count += 1

    for inst in circ.data:
        op = inst.operation
        qs = [circ.find_bit(q).index for q in inst.qubits]
        out.append(op, qs)
        name = op.name
        if name == "delay":
            if not model.idle:
                continue
            t_ns = delay_seconds(op) * 1e9
            for q in qs:
                key = ("delay", patch[q], round(t_ns, 9))
                if key not in memo:
                    qp = learn_profile.qubit(patch[q])
                    err = relaxation_error(t_ns, qp.t1_us, qp.t2_us)
                    memo[key] = None
                    if err is not None and "relaxation" in model.learned:
                        kraus = Kraus(err.to_quantumchannel()).data
                        memo[key] = _inverse(kraus, model.learning_error)
                add(memo[key], [q], "idle")
            continue
        if name == "barrier" or name in VIRTUAL_GATES or not model.learned:
            continue
        phys = tuple(patch[q] for q in qs)
        key = (name, phys)
        if key not in memo:
            err = gate_channel(learn_profile, name, phys, model.learned)
            memo[key] = None
            if not err.ideal():
                kraus = Kraus(err.to_quantumchannel()).data
                memo[key] = _inverse(kraus, model.learning_error)
        add(memo[key], qs, "gates")
    total = norm["gates"] * norm["idle"]
    return CorrectionPlan(out, total, count, dict(norm))


@dataclass(frozen=True)
class CancellationReport(PassReport):
    """Per variant label: the circuit's 1-norm C, the number of corrected operations and C
    of the gates and of the idle periods; the model's options and what it leaves out."""

    kind: ClassVar[str] = "error_cancellation"
    quasi_norm: Mapping[str, float]
    corrections: Mapping[str, int]
    quasi_norm_gates: Mapping[str, float]
    quasi_norm_idle: Mapping[str, float]
    learning_error: float
    learned: tuple[str, ...]
    idle: bool
    learning_spread: float = 0.0

    def out_of_model(self) -> list[str]:
        out = ["non-Pauli part of every channel (coherent rotations, amplitude damping)"]
        out += [f"{p} part of the gate channels" for p in ALL_PARTS if p not in self.learned]
        if not self.idle:
            out.append("relaxation of idle qubits")
        if self.learning_error:
            out.append(f"learning error {self.learning_error:+g} on every rate")
        out.append("measurement-basis layer and readout (the readout pass corrects readout)")
        return out

    def details(self, run: ScoredRun) -> dict[str, Any]:
        return {
            "error_cancellation": {
                "quasi_norm": dict(self.quasi_norm),
                "sampling_overhead": {k: g * g for k, g in self.quasi_norm.items()},
                "quasi_norm_gates": dict(self.quasi_norm_gates),
                "quasi_norm_idle": dict(self.quasi_norm_idle),
                "corrections": dict(self.corrections),
                "learning_error": self.learning_error,
                "learning_spread": self.learning_spread,
                "learned": list(self.learned),
                "idle": self.idle,
                "out_of_model": self.out_of_model(),
            }
        }


class ErrorCancellationPass(MitigationPass):
    """Probabilistic error cancellation with a learned Pauli model (see the module docstring)."""

    name: ClassVar[str] = "error_cancellation"
    stage: ClassVar[int] = STAGE_CORRECT
    Options: ClassVar[type[PassOptions]] = CancellationOptions
    options: CancellationOptions
    incompatible: ClassVar[Mapping[str, str]] = {
        "distillation": "both replace the emulated circuit (sign flag against a second copy)"
    }
    runs_before: ClassVar[tuple[str, ...]] = ("readout",)

    def describe(self) -> str:
        o = self.options
        return "error_cancellation" + (f"(e={o.learning_error:g})" if o.learning_error else "")

    def model(self, ctx: Any) -> PauliCancellation:
        o = self.options
        fingerprint = str(getattr(ctx.profile, "fingerprint", ""))
        return PauliCancellation(
            float(o.learning_error), tuple(o.learned), bool(o.idle), fingerprint
        )

    def transforms(self, ctx: Any) -> tuple[CircuitTransform, ...]:
        return (self.model(ctx),)

    def spread_terms(self, ctx: Any) -> tuple[SpreadTerm, ...]:
        """The learned rates' random relative error ``learning_spread``: as a learning error,
        (1 + e)(1 + d) - 1 with d ~ N(0, spread), i.e. a standard deviation spread (1 + e)."""
        o = self.options
        e = float(o.learning_error)
        lo, hi = max(e - LEARNING_STEP, -0.9), min(e + LEARNING_STEP, MAX_LEARNING_ERROR)
        base = o.model_dump()

        def at(value: float) -> ErrorCancellationPass:
            return ErrorCancellationPass(CancellationOptions(**{**base, "learning_error": value}))

        std = float(o.learning_spread) * (1.0 + e)
        return (SpreadTerm("learning", at(lo), at(hi), (hi - lo) / 2.0, std, self.name),)

    def check(self, ctx: Any, where: str) -> None:
        k = ctx.compiled.circuit.num_qubits + 1
        method, _ = choose_method(
            k, ctx.emulation_method, max_density_matrix_qubits=ctx.max_density_matrix_qubits
        )
        if evolution_spec(ctx.profile, tuple(ctx.compiled.patch)) is not None:
            raise InputError(
                f"{where}.pass: error_cancellation does not model the device's always-on terms "
                "(zz_rate_khz, spectator_phase_rad, detuning_std_khz) in its flagged circuits; "
                "allowed: a device without them for this pass"
            )
        if method != "density_matrix":
            raise InputError(
                f"{where}.pass: error_cancellation needs the density-matrix method for {k} "
                "qubits (the circuit and its sign flag), which this experiment does not use; "
                "allowed: emulation method auto or density_matrix on a smaller problem"
            )
        try:
            self.plan(ctx, CircuitVariant((self.model(ctx),)))
        except ValueError as exc:
            raise InputError(f"{where}.learning_error: {exc}; allowed: a smaller error") from None

    def plan(self, ctx: Any, variant: CircuitVariant) -> CorrectionPlan:
        """The correction plan of ``variant`` (memoized per context and variant)."""
        cache = self.__dict__.setdefault("_plans", {})
        key = (id(ctx), variant)
        hit = cache.get(key)
        if hit is None or hit[0] is not ctx:
            compiled = variant_inputs(ctx, variant)[0]
            hit = (ctx, correction_plan(compiled, ctx.profile, self.model(ctx)))
            cache[key] = hit
        return hit[1]

    def correct(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Corrected:
        n = ws.ctx.plan.num_qubits
        plan = self.plan(ws.ctx, variant)
        out = {b: _fold(d, plan.norm, 2**n, b) for b, d in data.items()}
        label = variant.label()
        report = CancellationReport(
            quasi_norm={label: plan.norm},
            corrections={label: plan.corrections},
            quasi_norm_gates={label: plan.norm_by_kind["gates"]},
            quasi_norm_idle={label: plan.norm_by_kind["idle"]},
            learning_error=float(self.options.learning_error),
            learned=tuple(self.options.learned),
            idle=bool(self.options.idle),
            learning_spread=float(self.options.learning_spread),
        )
        return Corrected(out, report)


def _fold(d: CorrectedDistribution, norm: float, dim: int, basis: str) -> CorrectedDistribution:
    """C (p(k, +) - p(k, -)) from a (outcome, sign) row; weights pull back as C (u, -u)."""
    p = np.asarray(d.probs, dtype=float)
    if len(p) != 2 * dim:
        raise NoiselabError(
            f"error_cancellation: basis {basis}: expected {2 * dim} (outcome, sign) entries, got "
            f"{len(p)}; the pass must see the rows of its own sign-flagged circuit first"
        )
    q = norm * (p[:dim] - p[dim:])

    def pullback(u: np.ndarray) -> dict[SourceKey, np.ndarray]:
        return d.pullback(norm * np.concatenate([u, -u]))

    return CorrectedDistribution(q, pullback)
