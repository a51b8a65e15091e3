"""Suppression passes: ``twirl``, ``decouple``, ``measure_twirl``.

Each adds a circuit transform (``noiselab.device.suppression``) to every circuit variant the
recipe runs (after the combination pass's own transforms, so folded circuits are decoupled
after re-scheduling), and leaves the data unchanged: they compose with readout correction,
post-selection and extrapolation. They sit with the correction passes (first in a recipe).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator
from qiskit.quantum_info import SuperOp

from noiselab.common.errors import InputError
from noiselab.device.evolution import evolution_spec
from noiselab.device.noise import gate_channel, noise_spec, pauli_twirl
from noiselab.device.suppression import (
    Decouple,
    MeasureTwirl,
    PauliTwirl,
    TwirlDraw,
    decouple_circuit,
)
from noiselab.device.transforms import CircuitTransform
from noiselab.mitigate.base import (
    STAGE_CORRECT,
    Corrected,
    InstanceTerm,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
)
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant

#: most random twirl instances a recipe may ask for (each is one more simulation per variant)
MAX_TWIRL_DRAWS = 256


class TwirlOptions(PassOptions):
    gates: Literal["two_qubit"] = "two_qubit"  # which gates are twirled (two-qubit gates only)
    draws: int = Field(
        default=0,
        ge=0,
        le=MAX_TWIRL_DRAWS,
        description="random twirl instances a run averages (0: the exact average over the "
        "Pauli group; otherwise at least 2, their spread enters the error bar)",
    )

    @field_validator("draws")
    @classmethod
    def _two_or_none(cls, value: int) -> int:
        if value == 1:
            raise ValueError("1; allowed: 0 (exact average) or 2 to 256 (a spread needs two)")
        return value


class MeasureTwirlOptions(PassOptions):
    qubits: Literal["measured"] = "measured"  # which qubits are twirled (every measured one)


class DecoupleOptions(PassOptions):
    sequence: Literal["x_x", "xy4"] = "xy4"
    min_window_ns: float = Field(
        default=0.0, ge=0.0, le=1e6, allow_inf_nan=False, description="shortest window filled"
    )


#: modelling choices in the experiment's favour, stated in each pass's details
ASSUMPTIONS = {
    "twirl": "twirling Paulis merged into neighbouring single-qubit gates at no cost; "
    "always-on ZZ and detuning not twirled",
    "decouple": "always-on terms absent during the measurement basis change",
    "measure_twirl": "the twirling X pulse's own gate error (half the shots) left out",
}


@dataclass(frozen=True)
class TwirlReport(PassReport):
    kind: ClassVar[str] = "twirl"
    assumption: str

    def details(self, run: ScoredRun) -> dict[str, Any]:
        return {f"{self.kind}_assumption": self.assumption}


@dataclass(frozen=True)
class DecoupleReport(TwirlReport):
    kind: ClassVar[str] = "decouple"


@dataclass(frozen=True)
class MeasureTwirlReport(TwirlReport):
    kind: ClassVar[str] = "measure_twirl"


_REPORTS: dict[str, type[TwirlReport]] = {
    "twirl": TwirlReport,
    "decouple": DecoupleReport,
    "measure_twirl": MeasureTwirlReport,
}


class _SuppressPass(MitigationPass):
    stage: ClassVar[int] = STAGE_CORRECT

    def correct(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Corrected:
        return Corrected(data, _REPORTS[self.name](ASSUMPTIONS[self.name]))


class TwirlPass(_SuppressPass):
    """Pauli twirling of every two-qubit gate, emulated exactly (the twirl average)."""

    name: ClassVar[str] = "twirl"
    Options: ClassVar[type[PassOptions]] = TwirlOptions
    options: TwirlOptions

    def __init__(self, options: PassOptions, instance: tuple[int, int] | None = None) -> None:
        super().__init__(options)
        self.instance = instance  # (seed, index): one random instance, not the average

    def describe(self) -> str:
        return f"twirl({self.options.draws})" if self.options.draws else "twirl"

    def cache_key(self) -> str:
        base = super().cache_key()
        return base if self.instance is None else f"{base}:{self.instance[0]}:{self.instance[1]}"

    def check(self, ctx: ExperimentContext, where: str) -> None:
        if self.options.draws and ctx.compiled is not None:
            spec = evolution_spec(ctx.profile, tuple(ctx.compiled.patch))
            if spec is not None and not spec.is_empty:
                raise InputError(
                    f"{where}.draws: {self.options.draws} random twirls on a device with "
                    "always-on terms (zz_rate_khz, spectator_phase_rad, detuning_std_khz) are not "
                    "emulated yet; allowed: 0 (the exact twirl average)"
                )

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        if self.instance is not None:
            return (TwirlDraw(*self.instance),)
        return (PauliTwirl(),)

    def instance_term(self, ctx: ExperimentContext) -> InstanceTerm | None:
        """With ``draws`` N > 0: the N random instances, seeded from the study's seed."""
        n = self.options.draws
        if not n or self.instance is not None:
            return None
        seed = int(ctx.seed)
        return InstanceTerm(
            "twirl", tuple(TwirlPass(self.options, (seed, i)) for i in range(n))
        )

    def no_op(self, ctx: ExperimentContext) -> str | None:
        """Twirling changes nothing when every two-qubit gate channel on the patch is Pauli
        diagonal already (depolarizing and pure dephasing only: no amplitude damping, i.e. T1
        infinite, and no coherent ZZ angle). Stretching scales rates, keeping it so."""
        if ctx.compiled is None:
            return None
        profile, patch = ctx.profile, tuple(ctx.compiled.patch)
        for rule in noise_spec(profile, patch).gates:
            if len(rule.qubits) != 2:
                continue
            chan = SuperOp(gate_channel(profile, rule.gate, rule.noise.qubits).to_quantumchannel())
            if not np.allclose(chan.data, pauli_twirl(chan).data, rtol=0.0, atol=1e-12):
                return None
        return "the two-qubit gate errors are Pauli-diagonal already (no T1, no ZZ angle)"


class DecouplePass(_SuppressPass):
    """Dynamical decoupling (X-X or XY4) in idle windows."""

    name: ClassVar[str] = "decouple"
    Options: ClassVar[type[PassOptions]] = DecoupleOptions
    options: DecoupleOptions

    def describe(self) -> str:
        return f"decouple({self.options.sequence})"

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        return (Decouple(self.options.sequence, self.options.min_window_ns),)

    def no_op(self, ctx: ExperimentContext) -> str | None:
        """Decoupling changes nothing when no idle window of the compiled circuit takes a pulse
        (a folded variant may have windows the compiled circuit lacks: left out all the same).
        Where pulses go in it is never a no-op, even without always-on terms or detuning: the
        pulses add gate error and echo the non-unital part of T1 decay."""
        if ctx.compiled is None:
            return None
        circ = ctx.compiled.circuit
        out = decouple_circuit(
            circ,
            ctx.profile,
            tuple(ctx.compiled.patch),
            self.options.sequence,
            self.options.min_window_ns,
        )
        if len(out.data) > len(circ.data):
            return None
        return "no idle window of the compiled circuit is long enough for a pulse sequence"


class MeasureTwirlPass(_SuppressPass):
    """Measurement twirling: symmetric readout assignment (calibration twirled alike)."""

    name: ClassVar[str] = "measure_twirl"
    Options: ClassVar[type[PassOptions]] = MeasureTwirlOptions

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        return (MeasureTwirl(),)

    def no_op(self, ctx: ExperimentContext) -> str | None:
        """Measurement twirling changes nothing when every measured qubit's assignment is
        symmetric already (P(1|0) = P(0|1)) and no outcome-dependent flip joins two measured
        qubits (the joint flips are symmetric)."""
        if ctx.compiled is None:
            return None
        patch = tuple(ctx.compiled.patch)
        measured = {patch[c] for c in ctx.compiled.logical_to_circuit}
        for q in measured:
            qp = ctx.profile.qubit(q)
            if qp.flip_0to1 != qp.flip_1to0:
                return None
        for e in ctx.profile.readout_crosstalk:
            conditional = e.flip_a_if_b_reads_1 > 0.0 or e.flip_b_if_a_reads_1 > 0.0
            if conditional and set(e.pair) <= measured:
                return None
        return "every measured qubit's readout error is symmetric already"
