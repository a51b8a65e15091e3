"""Circuit variants: the noise-amplified versions of one experiment that passes may ask for."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

FoldMethod = Literal["none", "whole_circuit", "two_qubit_gates"]

# every channel group scale_profile knows (device layer contract)
ALL_CHANNELS: tuple[str, ...] = ("relaxation", "single_qubit", "two_qubit", "coherent", "readout")
# pulse stretching slows the gates, not the measurement: readout stays as calibrated
STRETCH_CHANNELS: tuple[str, ...] = ("relaxation", "single_qubit", "two_qubit", "coherent")
#: Relative standard deviation of the realized noise scale of each amplified point (zero-noise
#: extrapolation). Common practice, no source: stretched pulses are recalibrated and folded
#: gates do not scale every error alike, so the realized amplification is known to a few
#: percent at best; 2 % is a mild, stated assumption. 0 reproduces ideal amplification.
DEFAULT_AMPLIFICATION_SPREAD = 0.02


@dataclass(frozen=True)
class CircuitVariant:
    """One circuit to emulate: the device profile scaled by ``noise_scale`` on ``scaled_channels``
    (None: all channels) and the compiled circuit folded by ``fold_method`` to ``fold_scale``."""

    noise_scale: float = 1.0
    scaled_channels: tuple[str, ...] | None = None
    fold_method: FoldMethod = "none"
    fold_scale: float = 1.0

    def __post_init__(self) -> None:
        # normalize so that equal simulations compare (and hash) equal
        object.__setattr__(self, "noise_scale", float(self.noise_scale))
        object.__setattr__(self, "fold_scale", float(self.fold_scale))
        if self.scaled_channels is not None:
            chans = tuple(sorted(set(self.scaled_channels)))
            if chans == tuple(sorted(ALL_CHANNELS)):
                chans = None
            object.__setattr__(self, "scaled_channels", chans)
        if self.noise_scale == 1.0:
            object.__setattr__(self, "scaled_channels", None)
        if self.fold_method == "none":
            object.__setattr__(self, "fold_scale", 1.0)
        elif self.fold_scale == 1.0:
            object.__setattr__(self, "fold_method", "none")

    @property
    def is_base(self) -> bool:
        return self.noise_scale == 1.0 and self.fold_method == "none"

    @property
    def scales_readout(self) -> bool:
        if self.noise_scale == 1.0:
            return False
        return self.scaled_channels is None or "readout" in self.scaled_channels

    def calibration_variant(self) -> CircuitVariant:
        """The variant whose readout calibration circuits see (folding never touches readout)."""
        if self.scales_readout:
            return CircuitVariant(noise_scale=self.noise_scale, scaled_channels=("readout",))
        return CircuitVariant()

    def label(self) -> str:
        """Short, stable text for tables and keys."""
        parts = []
        if self.noise_scale != 1.0:
            chans = "all" if self.scaled_channels is None else "+".join(self.scaled_channels)
            parts.append(f"stretch={self.noise_scale:g}[{chans}]")
        if self.fold_method != "none":
            parts.append(f"folded_{self.fold_method}={self.fold_scale:g}")
        return ",".join(parts) or "base"

    def as_dict(self) -> dict:
        return {
            "noise_scale": self.noise_scale,
            "scaled_channels": None if self.scaled_channels is None else list(self.scaled_channels),
            "fold_method": self.fold_method,
            "fold_scale": self.fold_scale,
        }
