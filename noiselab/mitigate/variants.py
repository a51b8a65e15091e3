"""Circuit variants: the transformed versions of one experiment that passes may ask for.

A :class:`CircuitVariant` is a tuple of circuit transforms (``noiselab.device.transforms``),
applied in order to the experiment's compiled circuit and profile. The transforms are an open
set: ``CircuitVariant((MyTransform(...),))`` works for any registered transform.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from noiselab.device.transforms import (
    STRETCH_CHANNELS,
    CircuitTransform,
    GateFolding,
    NoiseStretch,
    untransformed_key,
)

__all__ = [
    "DEFAULT_AMPLIFICATION_SPREAD",
    "STRETCH_CHANNELS",
    "CircuitVariant",
    "folded",
    "stretched",
]

#: Relative standard deviation of the realized noise scale of each amplified point (zero-noise
#: extrapolation). Common practice, no source: stretched pulses are recalibrated and folded
#: gates do not scale every error alike, so the realized amplification is known to a few
#: percent at best; 2 % is a mild, stated assumption. 0 reproduces ideal amplification.
DEFAULT_AMPLIFICATION_SPREAD = 0.02


@dataclass(frozen=True)
class CircuitVariant:
    """One circuit to emulate: the experiment with ``transforms`` applied in order (identity
    transforms are dropped, so that equal simulations compare and hash equal)."""

    transforms: tuple[CircuitTransform, ...] = ()

    def __post_init__(self) -> None:
        kept = tuple(t for t in self.transforms if not t.is_identity)
        object.__setattr__(self, "transforms", kept)

    @property
    def is_base(self) -> bool:
        return not self.transforms

    @property
    def nominal_scale(self) -> float:
        """The product of the transforms' nominal noise scales."""
        scale = 1.0
        for t in self.transforms:
            scale *= t.nominal_scale
        return scale

    def calibration_variant(self) -> CircuitVariant:
        """The variant whose readout calibration circuits see (folding never touches readout)."""
        seen = (t.calibration() for t in self.transforms)
        return CircuitVariant(tuple(t for t in seen if t is not None))

    def label(self) -> str:
        """Short, stable text for tables and keys."""
        return ",".join(t.label() for t in self.transforms) or "base"

    def as_dict(self) -> dict[str, Any]:
        """Cache-key material: the untransformed fields, updated by each transform's; with
        several transforms also their sequence (order and repeats matter)."""
        out = untransformed_key()
        for t in self.transforms:
            out.update(t.key_fields())
        if len(self.transforms) > 1:
            out["sequence"] = [t.key_fields() for t in self.transforms]
        return out


def stretched(scale: float, channels: Sequence[str] | None = None) -> CircuitVariant:
    """The device's noise scaled by ``scale`` on ``channels`` (None: all)."""
    chans = None if channels is None else tuple(channels)
    return CircuitVariant((NoiseStretch(scale, chans),))


def folded(method: str, scale: float) -> CircuitVariant:
    """The circuit folded by ``method`` ("whole_circuit" | "two_qubit_gates") to ``scale``."""
    return CircuitVariant((GateFolding(method, scale),))
