"""Zero-noise fits: E(c) through the energies at the noise scales, and E(0) as a linear
functional of the energies, E(0) = sum_i w_i E(c_i) (to first order for the exponential fit).

``richardson``: w_i = prod_{j != i} c_j / (c_j - c_i) (Lagrange interpolation at zero);
``linear`` and ``polynomial`` (least squares of the given degree): weights = first row of the
Vandermonde pseudo-inverse; ``exponential``: E(c) = a + b exp(-k c) by scipy curve_fit,
E(0) = a + b, weights from the Gauss-Newton linearization (delta method); when that fit fails the
linear fit is used and the fit says why. Used by :mod:`noiselab.mitigate.passes.extrapolate`.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.optimize import curve_fit

EXP_MAX_DECAY = 4.0  # largest k (c_max - c_min) the exponential fit may reach


def richardson_coefficients(scales: np.ndarray, at: float = 0.0) -> np.ndarray:
    """Lagrange weights at ``at``: w_i = prod_{j != i} (c_j - at) / (c_j - c_i) (at 0: the
    Richardson weights prod_{j != i} c_j / (c_j - c_i))."""
    c = np.asarray(scales, dtype=float)
    g = np.ones(len(c))
    for i in range(len(c)):
        for j in range(len(c)):
            if j != i:
                g[i] *= (c[j] - at) / (c[j] - c[i])
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


@dataclass(frozen=True, eq=False)
class ZeroNoiseFit:
    """A fit of E(c) through (scales, energies) and its zero-noise value E(0).

    ``weights``: E(0) = weights . energies (to first order for the exponential fit, whose exact
    E(0) is ``value``; None for the linear fits). ``poly_coeffs_low_first``: the least-squares
    polynomial (linear, polynomial fits); ``exp_params``: (a, b, k) of E = a + b exp(-k c);
    ``warning``: why the exponential fit fell back to the linear one.
    """

    fit: str
    scales: np.ndarray
    energies: np.ndarray
    weights: np.ndarray
    value: float | None = None
    poly_coeffs_low_first: np.ndarray | None = None
    exp_params: np.ndarray | None = None
    warning: str | None = None

    def curve(self, xs: np.ndarray) -> np.ndarray:
        """E(c) of this fit at the scales ``xs`` (Ha)."""
        xs = np.asarray(xs, dtype=float)
        if self.exp_params is not None:
            a, b, k = self.exp_params
            return a + b * np.exp(-k * xs)
        if self.poly_coeffs_low_first is not None:
            return np.polynomial.polynomial.polyval(xs, self.poly_coeffs_low_first)
        # Richardson: the interpolating polynomial through the points, in Lagrange form
        return np.array([richardson_coefficients(self.scales, x) @ self.energies for x in xs])


def poly_fit(scales: np.ndarray, energies: np.ndarray, degree: int) -> np.ndarray:
    """Coefficients (lowest degree first) of the least-squares polynomial through the points."""
    v = np.vander(np.asarray(scales, dtype=float), degree + 1, increasing=True)
    return np.linalg.pinv(v) @ np.asarray(energies, dtype=float)


def fit_through(
    fit: str, degree: int | None, scales: np.ndarray, energies: np.ndarray
) -> ZeroNoiseFit:
    """The ``fit`` ("richardson", "linear", "polynomial" of ``degree``, "exponential") through
    the points (c_i, E_i)."""
    c = np.asarray(scales, dtype=float)
    e = np.asarray(energies, dtype=float)
    if fit == "richardson":
        return ZeroNoiseFit(fit, c, e, richardson_coefficients(c))
    if fit in ("linear", "polynomial"):
        deg = (degree or 1) if fit == "polynomial" else 1
        return ZeroNoiseFit(fit, c, e, polynomial_coefficients(c, deg), None, poly_fit(c, e, deg))
    try:
        value, g, params = exponential_fit(c, e)
    except ValueError as exc:
        warning = f"exponential fit failed: {exc}; linear fit used"
        g = polynomial_coefficients(c, 1)
        return ZeroNoiseFit(fit, c, e, g, None, poly_fit(c, e, 1), warning=warning)
    return ZeroNoiseFit(fit, c, e, g, value, exp_params=params)


def scale_sensitivity(fit: ZeroNoiseFit, degree: int | None) -> np.ndarray:
    """dE(0)/dc_i at fixed energies (Ha per unit scale) of a fit: for the exponential fit w_i
    times the fitted slope at c_i (implicit function theorem at the Gauss-Newton optimum), else
    central differences of the linear coefficients."""
    c, e = fit.scales, fit.energies
    if fit.exp_params is not None:
        b, k = fit.exp_params[1], fit.exp_params[2]
        return fit.weights * b * k * np.exp(-k * c)
    if fit.fit == "richardson":
        coeffs = richardson_coefficients
    else:
        deg = (degree or 1) if fit.fit == "polynomial" else 1

        def coeffs(x: np.ndarray) -> np.ndarray:
            return polynomial_coefficients(x, deg)

    sens = np.zeros(len(c))
    for i in range(len(c)):
        h = 1e-6 * max(1.0, abs(c[i]))
        up, down = c.copy(), c.copy()
        up[i] += h
        down[i] -= h
        sens[i] = float((coeffs(up) - coeffs(down)) @ e) / (2.0 * h)
    return sens
