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

Fits and their zero-noise estimate as a linear functional of the per-scale energies,
E(0) = sum_i w_i E(c_i):
``richardson``: w_i = prod_{j != i} c_j / (c_j - c_i) (Lagrange interpolation at zero);
``linear`` and ``polynomial`` (least squares of the given degree): weights = first row of the
Vandermonde pseudo-inverse; ``exponential``: E(c) = a + b exp(-k c) by scipy curve_fit,
E(0) = a + b, weights from the Gauss-Newton linearization (delta method); when the fit fails,
or gives k <= 0, the linear fit is used and ``fit_warning`` says so. The variance of E(0) is then
sum_i w_i**2 Var(E_i) with each scale's shots (variance amplification).
"""

from __future__ import annotations

import math
import warnings
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator, model_validator
from scipy.optimize import curve_fit

from noiselab.mitigate.base import STAGE_COMBINE, MitigationPass, PassOptions, Workspace
from noiselab.mitigate.estimate import Estimate, linear_combination
from noiselab.mitigate.experiment import actual_scale, realized_scales
from noiselab.mitigate.variants import STRETCH_CHANNELS, CircuitVariant

ChannelName = Literal["relaxation", "single_qubit", "two_qubit", "coherent", "readout"]
MIN_POINTS = {"linear": 2, "richardson": 2, "exponential": 3}
EXP_MAX_DECAY = 4.0  # largest k (c_max - c_min) the exponential fit may reach


class ExtrapolateOptions(PassOptions):
    amplifier: Literal["stretch", "whole_circuit", "two_qubit_gates"] = "stretch"
    scales: tuple[float, ...] = (1.0, 2.0, 3.0)
    fit: Literal["linear", "richardson", "polynomial", "exponential"] = "richardson"
    degree: int | None = Field(default=None, ge=1, description="polynomial fit only")
    channels: tuple[ChannelName, ...] | None = None  # stretch only; None: all but readout
    shot_split: Literal["equal", "weighted"] = "equal"
    scale_axis: Literal["realized", "nominal"] = "realized"  # folding: what the fit runs against

    @field_validator("scales")
    @classmethod
    def _scales(cls, v: tuple[float, ...]) -> tuple[float, ...]:
        if any(not math.isfinite(c) or c < 1.0 for c in v):
            raise ValueError("scale factors must be finite and >= 1 (1 = the device as it is)")
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


def richardson_coefficients(scales: np.ndarray) -> np.ndarray:
    """w_i = prod_{j != i} c_j / (c_j - c_i)."""
    c = np.asarray(scales, dtype=float)
    g = np.ones(len(c))
    for i in range(len(c)):
        for j in range(len(c)):
            if j != i:
                g[i] *= c[j] / (c[j] - c[i])
    return g


def polynomial_coefficients(scales: np.ndarray, degree: int) -> np.ndarray:
    """Least-squares polynomial of ``degree`` through (c_i, E_i), evaluated at 0: weights."""
    c = np.asarray(scales, dtype=float)
    v = np.vander(c, degree + 1, increasing=True)
    return np.linalg.pinv(v)[0]


def _exp_model(c: np.ndarray, a: float, b: float, k: float) -> np.ndarray:
    return a + b * np.exp(-k * c)


def exponential_fit(
    scales: np.ndarray, energies: np.ndarray
) -> tuple[float, np.ndarray, np.ndarray]:
    """(E(0), weights, (a, b, k)) of a least-squares fit E(c) = a + b exp(-k c).

    k is kept in (0, EXP_MAX_DECAY / (c_max - c_min)]: a steeper decay is not resolved by the
    points (the data beyond the first would be flat) and would amplify noise without bound.
    Raises ValueError when the fit fails or k ends on a bound."""
    c = np.asarray(scales, dtype=float)
    y = np.asarray(energies, dtype=float)
    k_max = EXP_MAX_DECAY / float(c.max() - c.min())
    best = None
    for k0 in (0.02, 0.05, 0.1, 0.2, 0.5, 1.0, 2.0):
        k0 = min(k0, 0.5 * k_max)
        basis = np.column_stack([np.ones_like(c), np.exp(-k0 * c)])
        ab, *_ = np.linalg.lstsq(basis, y, rcond=None)
        res = float(np.sum((basis @ ab - y) ** 2))
        if best is None or res < best[0]:
            best = (res, (float(ab[0]), float(ab[1]), k0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            popt, _ = curve_fit(
                _exp_model,
                c,
                y,
                p0=best[1],
                bounds=([-np.inf, -np.inf, 0.0], [np.inf, np.inf, k_max]),
                maxfev=20000,
            )
        except (RuntimeError, ValueError) as exc:
            raise ValueError(f"curve_fit did not converge ({exc})") from exc
    a, b, k = (float(x) for x in popt)
    if not all(math.isfinite(x) for x in popt) or k <= 1e-9:
        raise ValueError(f"fit gave a non-decaying exponential (k = {k:.3g})")
    if k >= 0.999 * k_max:
        raise ValueError(f"the points do not resolve the decay (k = {k:.3g} at its bound)")
    e = np.exp(-k * c)
    jac = np.column_stack([np.ones_like(c), e, -b * c * e])
    if np.linalg.cond(jac) > 1e12:
        raise ValueError("fit is ill-conditioned (the points show no curvature)")
    weights = np.array([1.0, 1.0, 0.0]) @ np.linalg.pinv(jac)
    return a + b, weights, np.array([a, b, k])


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

    def variants(self, ctx) -> tuple[CircuitVariant, ...]:
        o = self.options
        if o.amplifier == "stretch":
            chans = STRETCH_CHANNELS if o.channels is None else o.channels
            off = float(getattr(ctx, "amplification_offset", 0.0))
            emulated = [c if c == 1.0 else c * (1.0 + off) for c in o.scales]
            return tuple(CircuitVariant(noise_scale=c, scaled_channels=chans) for c in emulated)
        # the fold method is named as the amplifier: "whole_circuit" or "two_qubit_gates"
        return tuple(CircuitVariant(fold_method=o.amplifier, fold_scale=c) for c in o.scales)

    def coefficients(
        self, scales: np.ndarray, energies: np.ndarray
    ) -> tuple[float | None, np.ndarray, dict[str, Any]]:
        """(nonlinear value or None, weights, fit details)."""
        o = self.options
        if o.fit == "richardson":
            return None, richardson_coefficients(scales), {}
        if o.fit == "linear":
            g = polynomial_coefficients(scales, 1)
            return None, g, {"poly_coeffs_low_first": _poly(scales, energies, 1)}
        if o.fit == "polynomial":
            g = polynomial_coefficients(scales, o.degree or 1)
            return None, g, {"poly_coeffs_low_first": _poly(scales, energies, o.degree or 1)}
        try:
            value, g, params = exponential_fit(scales, energies)
        except ValueError as exc:
            g = polynomial_coefficients(scales, 1)
            return None, g, {"fit_warning": f"exponential fit failed: {exc}; linear fit used"}
        return value, g, {"exp_a_ha": params[0], "exp_b_ha": params[1], "exp_k": params[2]}

    def scale_sensitivity(
        self, scales: np.ndarray, energies: np.ndarray
    ) -> tuple[np.ndarray, float | None, np.ndarray, dict[str, Any]]:
        """(dE(0)/dc_i at fixed energies (Ha per unit scale), then what :meth:`coefficients`
        returns at ``scales``)."""
        c = np.asarray(scales, dtype=float)
        e = np.asarray(energies, dtype=float)
        value, weights, info = self.coefficients(c, e)
        if "exp_k" in info:  # implicit function theorem at the (Gauss-Newton) optimum
            b, k = info["exp_b_ha"], info["exp_k"]
            return weights * b * k * np.exp(-k * c), value, weights, info
        o = self.options
        if o.fit == "richardson":
            coeffs = richardson_coefficients
        else:
            degree = (o.degree or 1) if o.fit == "polynomial" else 1

            def coeffs(x: np.ndarray) -> np.ndarray:
                return polynomial_coefficients(x, degree)

        sens = np.zeros(len(c))
        for i in range(len(c)):
            h = 1e-6 * max(1.0, abs(c[i]))
            up, down = c.copy(), c.copy()
            up[i] += h
            down[i] -= h
            sens[i] = float((coeffs(up) - coeffs(down)) @ e) / (2.0 * h)
        return sens, value, weights, info

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Estimate:
        o = self.options
        ctx = ws.ctx
        spread = float(getattr(ctx, "amplification_spread", 0.0))
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
        sens, value, weights, info = self.scale_sensitivity(fit_scales, energies)
        amp_std = np.where(amplified, np.abs(sens) * spread * scales, 0.0)
        ws.fixed_variance["amplification"] = float(np.sum(amp_std**2))
        est = linear_combination(list(weights), estimates)
        if value is not None:
            est = Estimate(value, est.influence)
        details: dict[str, Any] = {
            "amplifier": o.amplifier,
            "fit": o.fit,
            "scale_axis": o.scale_axis,
            "scales_requested": [float(c) for c in o.scales],
            "scales": [float(c) for c in scales],
            "scales_nominal": [float(c) for c in nominal],
            "scales_realized": [float(c) for c in realized],
            "energies_ha": [float(e) for e in energies],
            "weights": [float(g) for g in weights],
            "variance_amplification": float(np.sum(weights**2)),
            "amplification_spread": spread,
            "scale_sensitivity_ha": [float(x) for x in sens],
            "amplification_stds_mha": [float(x) * 1000.0 for x in amp_std],
            **{k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in info.items()},
        }
        if stretch:
            details["amplification_offset"] = float(getattr(ctx, "amplification_offset", 0.0))
        else:
            details["realized_by_kind"] = by_kind
        ws.details["extrapolation"] = details
        return est


def _poly(scales: np.ndarray, energies: np.ndarray, degree: int) -> list[float]:
    v = np.vander(np.asarray(scales, dtype=float), degree + 1, increasing=True)
    return [float(x) for x in np.linalg.pinv(v) @ np.asarray(energies, dtype=float)]
