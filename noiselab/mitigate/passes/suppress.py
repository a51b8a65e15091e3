"""Suppression passes: ``twirl``, ``decouple``, ``measure_twirl``.

Each adds a circuit transform (``noiselab.device.suppression``) to every circuit variant the
recipe runs (after the combination pass's own transforms, so folded circuits are decoupled
after re-scheduling), and leaves the data unchanged: they compose with readout correction,
post-selection and extrapolation. They sit with the correction passes (first in a recipe).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar, Literal

from pydantic import Field

from noiselab.device.suppression import Decouple, MeasureTwirl, PauliTwirl
from noiselab.device.transforms import CircuitTransform
from noiselab.mitigate.base import (
    STAGE_CORRECT,
    Corrected,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
)
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant


class TwirlOptions(PassOptions):
    gates: Literal["two_qubit"] = "two_qubit"  # which gates are twirled (two-qubit gates only)


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

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        return (PauliTwirl(),)


class DecouplePass(_SuppressPass):
    """Dynamical decoupling (X-X or XY4) in idle windows."""

    name: ClassVar[str] = "decouple"
    Options: ClassVar[type[PassOptions]] = DecoupleOptions
    options: DecoupleOptions

    def describe(self) -> str:
        return f"decouple({self.options.sequence})"

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        return (Decouple(self.options.sequence, self.options.min_window_ns),)


class MeasureTwirlPass(_SuppressPass):
    """Measurement twirling: symmetric readout assignment (calibration twirled alike)."""

    name: ClassVar[str] = "measure_twirl"
    Options: ClassVar[type[PassOptions]] = MeasureTwirlOptions

    def transforms(self, ctx: ExperimentContext) -> tuple[CircuitTransform, ...]:
        return (MeasureTwirl(),)
