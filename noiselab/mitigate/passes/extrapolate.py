"""Zero-noise extrapolation (Temme, Bravyi and Gambetta, PRL 119, 180509 (2017); Li and Benjamin,
PRX 7, 021050 (2017)).

Noise amplifiers: ``stretch`` scales the device profile's channels by each factor (pulse
stretching, Kandala et al., Nature 567, 491 (2019); readout is not stretched unless ``channels``
says so); ``whole_circuit`` folds the whole compiled circuit, ``two_qubit_gates`` folds only its
two-qubit gates (unitary folding, Giurgica-Tiron et al., arXiv:2005.10921). Folded circuits use
the scale factor actually reached (gate counts are integers).

Fits and their zero-noise estimate as a linear functional of the per-scale energies,
E(0) = sum_i gamma_i E(c_i):
``richardson``: gamma_i = prod_{j != i} c_j / (c_j - c_i) (Lagrange interpolation at zero);
``linear`` and ``polynomial`` (least squares of the given degree): gamma = first row of the
Vandermonde pseudo-inverse; ``exponential``: E(c) = a + b exp(-k c) by scipy curve_fit,
E(0) = a + b, gamma from the Gauss-Newton linearization (delta method); when the fit fails,
or gives k <= 0, the linear fit is used and ``fit_warning`` says so. The variance of E(0) is then
sum_i gamma_i**2 Var(E_i) with each scale's shots (variance amplification).
"""

from __future__ import annotations

import math
import warnings
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, field_validator, model_validator

from noiselab.common.counts import Count
from noiselab.mitigate.base import STAGE_COMBINE, MitigationPass, PassOptions, Workspace
from noiselab.mitigate.estimate import Estimate, linear_combination
from noiselab.mitigate.variants import STRETCH_CHANNELS, CircuitVariant

ChannelName = Literal["relaxation", "single_qubit", "two_qubit", "coherent", "readout"]
MIN_POINTS = {"linear": 2, "richardson": 2, "exponential": 3}
EXP_MAX_DECAY = 4.0  # largest k (c_max - c_min) the exponential fit may reach
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


def richardson_coefficients(scales: np.ndarray) -> np.ndarray:
    """gamma_i = prod_{j != i} c_j / (c_j - c_i)."""
    c = np.asarray(scales, dtype=float)
    g = np.ones(len(c))
    for i in range(len(c)):
        for j in range(len(c)):
            if j != i:
                g[i] *= c[j] / (c[j] - c[i])
    return g


def polynomial_coefficients(scales: np.ndarray, degree: int) -> np.ndarray:
    """Least-squares polynomial of ``degree`` through (c_i, E_i), evaluated at 0: gamma."""
    c = np.asarray(scales, dtype=float)
    v = np.vander(c, degree + 1, increasing=True)
    return np.linalg.pinv(v)[0]


def _exp_model(c: np.ndarray, a: float, b: float, k: float) -> np.ndarray:
    return a + b * np.exp(-k * c)


def exponential_fit(
    scales: np.ndarray, energies: np.ndarray
) -> tuple[float, np.ndarray, np.ndarray]:
    """(E(0), gamma, (a, b, k)) of a least-squares fit E(c) = a + b exp(-k c).

    k is kept in (0, EXP_MAX_DECAY / (c_max - c_min)]: a steeper decay is not resolved by the
    points (the data beyond the first would be flat) and would amplify noise without bound.
    Raises ValueError when the fit fails or k ends on a bound."""
    from scipy.optimize import curve_fit

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
    gamma = np.array([1.0, 1.0, 0.0]) @ np.linalg.pinv(jac)
    return a + b, gamma, np.array([a, b, k])


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
        from noiselab.mitigate.folding import MAX_FOLDED_GATES, folded_gate_count

        o = self.options
        if o.amplifier == "stretch":
            return
        method = "global" if o.amplifier == "whole_circuit" else "two_qubit"
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
            return tuple(CircuitVariant(noise_scale=c, scaled_channels=chans) for c in o.scales)
        method = "global" if o.amplifier == "whole_circuit" else "two_qubit"
        return tuple(CircuitVariant(fold_method=method, fold_scale=c) for c in o.scales)

    def coefficients(
        self, scales: np.ndarray, energies: np.ndarray
    ) -> tuple[float | None, np.ndarray, dict[str, Any]]:
        """(nonlinear value or None, gamma, fit details)."""
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

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Estimate:
        from noiselab.mitigate.recipe import actual_scale

        scales = np.array([actual_scale(ws.ctx, v) for v in variants])
        energies = np.array([e.value for e in estimates])
        value, gamma, info = self.coefficients(scales, energies)
        est = linear_combination(list(gamma), estimates)
        if value is not None:
            est = Estimate(value, est.influence)
        ws.details["extrapolation"] = {
            "amplifier": self.options.amplifier,
            "fit": self.options.fit,
            "scales_requested": [float(c) for c in self.options.scales],
            "scales": [float(c) for c in scales],
            "energies_ha": [float(e) for e in energies],
            "gamma": [float(g) for g in gamma],
            "variance_amplification": float(np.sum(gamma**2)),
            **{k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in info.items()},
        }
        return est


def _poly(scales: np.ndarray, energies: np.ndarray, degree: int) -> list[float]:
    v = np.vander(np.asarray(scales, dtype=float), degree + 1, increasing=True)
    return [float(x) for x in np.linalg.pinv(v) @ np.asarray(energies, dtype=float)]
