"""Zero-noise extrapolation (Temme, Bravyi and Gambetta, PRL 119, 180509 (2017); Li and Benjamin,
PRX 7, 021050 (2017)).

Noise amplifiers: ``stretch`` scales the device profile's channels by each factor (pulse
stretching, Kandala et al., Nature 567, 491 (2019); readout is not stretched unless ``channels``
says so); ``whole_circuit`` folds the whole compiled circuit, ``two_qubit_gates`` folds only its
two-qubit gates (unitary folding, Giurgica-Tiron et al., arXiv:2005.10921).

Realistic amplification. Folding does not scale every error alike (single-qubit gates are not
folded by ``two_qubit_gates``, idle time grows differently): the *realized* noise scale of a
folded circuit is the ratio of its estimated error (sum of the operations' average
infidelities, ``device.compile.estimate_error_budget``) to the unfolded circuit's, and the fit
runs against it (``scale_axis: realized``, default) or against the gate-count scale
(``nominal``). Stretching is taken at its stretch factor c; the context's
``amplification_offset`` emulates each stretched point at c (1 + offset) while the fit still
assumes c (a systematic error: it enters the bias). The context's ``amplification_spread`` is the
relative standard deviation of each amplified point's realized scale; it enters the standard
error as sum_i (dE(0)/dc_i * spread * c_i)**2 over the amplified points, with dE(0)/dc_i the
fit's sensitivity to its i-th abscissa at fixed energies (central differences of the linear
coefficients; for the exponential fit w_i times the fitted slope at c_i). Sampled evaluations
draw the realized scales instead.

Fits (:mod:`noiselab.mitigate.fits`): ``richardson``, ``linear``, ``polynomial`` (of
``degree``), ``exponential`` (the linear fit when it fails, with ``fit_warning``); each gives
E(0) = sum_i w_i E(c_i), so the variance of E(0) is sum_i w_i**2 Var(E_i) with each scale's
shots (variance amplification).

The pass reports an :class:`ExtrapolationReport`: the scales (requested, nominal, realized and
those fitted against), the energies, the weights, the amplification terms and the fitted curve
E(c) sampled on [0, largest scale] (what a figure draws).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator, model_validator

from noiselab.common.counts import Count
from noiselab.common.units import HA_TO_MHA
from noiselab.device.channel_registry import CHANNELS
from noiselab.mitigate.base import STAGE_COMBINE, Combined, MitigationPass, PassOptions, Workspace
from noiselab.mitigate.estimate import Estimate
from noiselab.mitigate.experiment import actual_scale, realized_scales
from noiselab.mitigate.fits import ZeroNoiseFit, fit_through, scale_sensitivity
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import STRETCH_CHANNELS, CircuitVariant, folded, stretched

ChannelName = Literal[CHANNELS]  # type: ignore[valid-type]  # the device registry's names
MIN_POINTS = {"linear": 2, "richardson": 2, "exponential": 3}
CURVE_POINTS = 91  # samples of the reported fitted curve on [0, largest scale]
#: Largest noise scale factor: beyond about 100 x the device's noise every circuit is close to
#: fully depolarized, nothing is left to extrapolate from (and a folded circuit is 100 x long).
MAX_SCALE_FACTOR = 100.0
#: Most scale factors of one extrapolation (each is a full set of simulations).
MAX_SCALES = 20


class ExtrapolateOptions(PassOptions):
    amplifier: Literal["stretch", "whole_circuit", "two_qubit_gates"] = "stretch"
    scales: tuple[float, ...] = Field(default=(1.0, 2.0, 3.0), max_length=MAX_SCALES)
    fit: Literal["linear", "richardson", "polynomial", "exponential"] = "richardson"
    degree: Count | None = Field(
        default=None, ge=1, le=MAX_SCALES - 1, description="polynomial fit only"
    )
    channels: tuple[ChannelName, ...] | None = None  # stretch only; None: all but readout
    shot_split: Literal["equal", "weighted"] = "equal"
    scale_axis: Literal["realized", "nominal"] = "realized"  # folding: what the fit runs against

    @field_validator("scales")
    @classmethod
    def _scales(cls, v: tuple[float, ...]) -> tuple[float, ...]:
        if any(not math.isfinite(c) or c < 1.0 for c in v):
            raise ValueError("scale factors must be finite and >= 1 (1 = the device as it is)")
        if any(c > MAX_SCALE_FACTOR for c in v):
            raise ValueError(
                f"scale factors must be at most {MAX_SCALE_FACTOR:g} (beyond, every circuit is "
                "close to fully depolarized: nothing left to extrapolate from)"
            )
        if len(set(v)) != len(v):
            raise ValueError("scale factors must be distinct")
        return tuple(float(c) for c in v)

    @model_validator(mode="after")
    def _points(self) -> ExtrapolateOptions:
        if self.fit == "polynomial":
            if self.degree is None:
                raise ValueError("degree: the polynomial fit needs a degree (>= 1)")
            need = self.degree + 1
        else:
            if self.degree is not None:
                raise ValueError("degree: only used by fit 'polynomial'")
            need = MIN_POINTS[self.fit]
        if len(self.scales) < need:
            raise ValueError(
                f"scales: fit {self.fit!r} needs at least {need} scale factors, "
                f"got {len(self.scales)}"
            )
        if self.channels is not None and self.amplifier != "stretch":
            raise ValueError("channels: only used by amplifier 'stretch'")
        if self.channels is not None and len(self.channels) == 0:
            raise ValueError(
                "channels: empty; allowed: relaxation, single_qubit, two_qubit, coherent, readout"
            )
        return self


@dataclass(frozen=True)
class ExtrapolationReport(PassReport):
    """What an extrapolation did, in the order of its circuit ``variants`` (labels).

    Scales: requested (the options), ``scales`` (the abscissae of the fit: realized or nominal by
    ``scale_axis``), nominal (gate-count scale of a fold, stretch factor) and realized (from the
    compiled circuits' error budget). ``energies_ha`` per scale, ``weights`` (E(0) =
    sum_i w_i E_i), the fit's sensitivity to each abscissa and the standard deviation each
    amplified point's random realized scale adds (Ha). ``curve_scales`` / ``curve_energies_ha``:
    the fitted curve sampled on [0, largest scale]. Stretch reports its ``amplification_offset``,
    folding the realized scale per error kind (``realized_by_kind``).
    """

    kind: ClassVar[str] = "extrapolate"
    amplifier: str
    fit: str
    scale_axis: str
    variants: tuple[str, ...]
    scales_requested: tuple[float, ...]
    scales: tuple[float, ...]
    scales_nominal: tuple[float, ...]
    scales_realized: tuple[float, ...]
    energies_ha: tuple[float, ...]
    weights: tuple[float, ...]
    scale_sensitivity_ha: tuple[float, ...]
    amplification_spread: float
    amplification_stds_ha: tuple[float, ...]
    curve_scales: tuple[float, ...]
    curve_energies_ha: tuple[float, ...]
    amplification_offset: float | None = None
    realized_by_kind: tuple[Mapping[str, float], ...] | None = None
    poly_coeffs_low_first: tuple[float, ...] | None = None
    exp_params: tuple[float, float, float] | None = None
    fit_warning: str | None = None

    @property
    def variance_amplification(self) -> float:
        """sum_i w_i**2: the factor the extrapolation multiplies a per-point variance by."""
        return float(np.sum(np.array(self.weights) ** 2))

    def details(self, run: ScoredRun) -> dict[str, Any]:
        by_label = {v.label: v for v in run.variants}
        scored = [by_label[label] for label in self.variants]
        out: dict[str, Any] = {
            "amplifier": self.amplifier,
            "fit": self.fit,
            "scale_axis": self.scale_axis,
            "scales_requested": list(self.scales_requested),
            "scales": list(self.scales),
            "scales_nominal": list(self.scales_nominal),
            "scales_realized": list(self.scales_realized),
            "energies_ha": list(self.energies_ha),
            "weights": list(self.weights),
            "variance_amplification": self.variance_amplification,
            "amplification_spread": self.amplification_spread,
            "scale_sensitivity_ha": list(self.scale_sensitivity_ha),
            "amplification_stds_mha": [x * HA_TO_MHA for x in self.amplification_stds_ha],
            "stds_mha": [v.std_mha for v in scored],
            "engine_seconds": [v.engine_seconds for v in scored],
            "two_qubit_counts": [v.two_qubit_count for v in scored],
        }
        if self.poly_coeffs_low_first is not None:
            out["poly_coeffs_low_first"] = list(self.poly_coeffs_low_first)
        if self.exp_params is not None:
            out.update(zip(("exp_a_ha", "exp_b_ha", "exp_k"), self.exp_params, strict=True))
        if self.fit_warning is not None:
            out["fit_warning"] = self.fit_warning
        if self.amplification_offset is not None:
            out["amplification_offset"] = self.amplification_offset
        if self.realized_by_kind is not None:
            out["realized_by_kind"] = [dict(r) for r in self.realized_by_kind]
        return {"extrapolation": out}


def _floats(values: Any) -> tuple[float, ...]:
    return tuple(float(x) for x in values)


class ExtrapolatePass(MitigationPass):
    """Zero-noise extrapolation over amplified circuit variants."""

    name: ClassVar[str] = "extrapolate"
    stage: ClassVar[int] = STAGE_COMBINE
    Options: ClassVar[type[PassOptions]] = ExtrapolateOptions
    options: ExtrapolateOptions

    def describe(self) -> str:
        o = self.options
        fit = f"polynomial{o.degree}" if o.fit == "polynomial" else o.fit
        return f"extrapolate({o.amplifier},{fit},{'/'.join(f'{c:g}' for c in o.scales)})"

    def check(self, ctx, where: str) -> None:
        """Refuse folding that would make a circuit too long to schedule and emulate."""
        from noiselab.common.errors import ProblemTooLargeError
        from noiselab.device.folding import MAX_FOLDED_GATES, folded_gate_count

        o = self.options
        if o.amplifier == "stretch":
            return
        method = o.amplifier
        scale = max(o.scales)
        gates = folded_gate_count(ctx.compiled.circuit, method, scale)
        if gates > MAX_FOLDED_GATES:
            raise ProblemTooLargeError(
                f"{where}.scales: folding to {scale:g} gives a circuit of {gates} gates; "
                f"allowed: at most {MAX_FOLDED_GATES} gates (smaller scales, or amplifier "
                "'stretch', which does not lengthen the circuit)"
            )

    def variants(self, ctx) -> tuple[CircuitVariant, ...]:
        o = self.options
        if o.amplifier == "stretch":
            chans = STRETCH_CHANNELS if o.channels is None else o.channels
            off = float(getattr(ctx, "amplification_offset", 0.0))
            emulated = [c if c == 1.0 else c * (1.0 + off) for c in o.scales]
            return tuple(stretched(c, chans) for c in emulated)
        # the fold method is named as the amplifier: "whole_circuit" or "two_qubit_gates"
        return tuple(folded(o.amplifier, c) for c in o.scales)

    def shot_split(self) -> Literal["equal", "weighted"]:
        return self.options.shot_split

    def scale_sensitivity(
        self, scales: np.ndarray, energies: np.ndarray
    ) -> tuple[np.ndarray, ZeroNoiseFit]:
        """(dE(0)/dc_i at fixed energies (Ha per unit scale), the fit at ``scales``)."""
        fit = fit_through(self.options.fit, self.options.degree, scales, energies)
        return scale_sensitivity(fit, self.options.degree), fit

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Combined:
        o = self.options
        ctx = ws.ctx
        spread = float(ctx.amplification_spread)
        stretch = o.amplifier == "stretch"
        if stretch:  # the fit knows the stretch factors (an offset is unknown to it)
            nominal = np.array(o.scales, dtype=float)
            realized = nominal.copy()
            by_kind: list[dict[str, float]] = []
        else:
            nominal = np.array([actual_scale(ctx, v) for v in variants])
            by_kind = [realized_scales(ctx, v) for v in variants]
            realized = np.array([r["total"] for r in by_kind])
        scales = realized if o.scale_axis == "realized" else nominal
        amplified = np.array([c != 1.0 for c in o.scales])
        fit_scales = scales
        if ws.rng is not None and spread > 0.0:  # sampled: draw the realized scales
            draw = ws.rng.normal(0.0, spread, size=len(scales))
            fit_scales = scales * (1.0 + np.where(amplified, draw, 0.0))
        energies = np.array([e.value for e in estimates])
        sens, fit = self.scale_sensitivity(fit_scales, energies)
        amp_std = np.where(amplified, np.abs(sens) * spread * scales, 0.0)
        # E(0) = sum_i w_i E(c_i); the exponential fit's own E(0) keeps the linearized influence
        est = sum(float(w) * e for w, e in zip(fit.weights, estimates, strict=True))
        if fit.value is not None:
            est = Estimate(fit.value, est.influence)
        xs = np.linspace(0.0, float(np.max(fit_scales)), CURVE_POINTS)
        polynomial = o.fit in ("linear", "polynomial")  # (not the exponential's fallback)
        report = ExtrapolationReport(
            amplifier=o.amplifier,
            fit=o.fit,
            scale_axis=o.scale_axis,
            variants=tuple(v.label() for v in variants),
            scales_requested=_floats(o.scales),
            scales=_floats(scales),
            scales_nominal=_floats(nominal),
            scales_realized=_floats(realized),
            energies_ha=_floats(energies),
            weights=_floats(fit.weights),
            scale_sensitivity_ha=_floats(sens),
            amplification_spread=spread,
            amplification_stds_ha=_floats(amp_std),
            curve_scales=_floats(xs),
            curve_energies_ha=_floats(fit.curve(xs)),
            amplification_offset=float(ctx.amplification_offset) if stretch else None,
            realized_by_kind=None if stretch else tuple(by_kind),
            poly_coeffs_low_first=_floats(fit.poly_coeffs_low_first) if polynomial else None,
            exp_params=None if fit.exp_params is None else _floats(fit.exp_params),
            fit_warning=fit.warning,
        )
        return Combined(est, report, {"amplification": float(np.sum(amp_std**2))})
