"""Probability of landing within the target, the one rule for reaching it, and the shots needed.

The rule, defined here and nowhere else: a recipe *reaches* the target at a budget when
P(|E - E_exact| <= target) >= confidence, with P from the bias and the full standard error
(:func:`reaches_target`). assess, tune, sweep, budget, the verdict sentences and the figures all
use it.

An experiment's estimate is modelled as bias b plus Gaussian noise of standard deviation s:
P(|E - E_exact| < t) = Phi((t - b)/s) - Phi((-t - b)/s). With a measurement budget of N shots,
s(N)**2 = A / N + C: A the single-shot-normalized measurement variance (the allocation's
proportions held fixed as N changes) and C the variance that does not shrink with N (readout
calibration with its own fixed shot count).

``limited_by``: "bias" when no measurement budget reaches the confidence because of the bias
(|b| >= t, or b alone too close to t); "calibration" (or "amplification") when |b| < t but the
fixed variance C keeps the probability below the confidence at any measurement budget, C being
mostly readout-calibration noise (more calibration shots would help), the uncertainty of the
realized noise amplification of an extrapolation, ("learning") that of the learned noise
model of error cancellation, or ("twirl") the spread between a finite number of random Pauli
twirls; "shots" when the confidence needs more shots
than the budget; "none" when the budget suffices.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from scipy.optimize import brentq
from scipy.special import ndtr

LimitedBy = Literal[
    "bias", "calibration", "amplification", "learning", "twirl", "truncation", "shots", "none"
]
MAX_SHOTS = 10**15
#: how a note names the fixed part of the variance that keeps P low
FIXED_WORDS = {
    "calibration": "the fixed readout-calibration noise",
    "amplification": "the uncertainty of the realized noise amplification",
    "learning": "the uncertainty of the learned noise model",
    "twirl": "the spread between the finite number of random twirls",
    "truncation": "the uncertainty of the truncation estimate",
}


def p_within(bias_mha: float, std_mha: float, target_mha: float) -> float:
    """Phi((t - b)/s) - Phi((-t - b)/s); a step function when s = 0.

    Phi is ``scipy.special.ndtr`` (what ``scipy.stats.norm.cdf`` calls; importing scipy.stats
    would add 0.3 s to every command, the memory guard's refusals included)."""
    b, s, t = float(bias_mha), float(std_mha), float(target_mha)
    if not math.isfinite(b) or not math.isfinite(s):
        return 0.0
    if s <= 0.0:
        return 1.0 if abs(b) < t else 0.0
    return float(ndtr((t - b) / s) - ndtr((-t - b) / s))


def reaches_target(p_within_target: float, confidence: float) -> bool:
    """The rule: P(|E - E_exact| <= target) >= confidence (P from bias and full std error)."""
    return bool(float(p_within_target) >= float(confidence))


@dataclass(frozen=True)
class TargetAssessment:
    """Probability at the budget, shots needed (None when unreachable) and what limits."""

    p_within_target: float
    shots_needed: int | None
    limited_by: LimitedBy
    note: str
    reaches_target: bool = False


def assess_target(
    bias_mha: float,
    var_per_shot_mha2: float,
    var_fixed_mha2: float,
    budget: int,
    target_mha: float,
    confidence: float,
    fixed_source: str = "calibration",
) -> TargetAssessment:
    """``var_per_shot_mha2`` = A (so that the measurement variance at N shots is A / N);
    ``fixed_source``: what most of C is (named by ``limited_by`` when C alone keeps P low:
    "calibration", "amplification", "learning", or the name a pass gives its fixed variance)."""
    b, t = float(bias_mha), float(target_mha)
    a, c = max(float(var_per_shot_mha2), 0.0), max(float(var_fixed_mha2), 0.0)

    def p_at(n: float) -> float:
        return p_within(b, math.sqrt(a / n + c), t)

    p_budget = p_at(budget)
    hit = reaches_target(p_budget, confidence)
    if abs(b) >= t:
        return TargetAssessment(p_budget, None, "bias", "|bias| >= target", hit)
    p_inf = p_within(b, math.sqrt(c), t)
    if p_inf < confidence:
        if c > 0:
            what = FIXED_WORDS.get(fixed_source, f"the fixed {fixed_source} noise")
            return TargetAssessment(
                p_budget, None, fixed_source, f"{what} keeps P below the confidence", hit
            )
        return TargetAssessment(p_budget, None, "bias", "bias keeps P below the confidence", hit)
    if p_at(1.0) >= confidence:
        n_needed = 1
    elif p_at(MAX_SHOTS) < confidence:
        return TargetAssessment(p_budget, None, "shots", "needs more than 1e15 shots", hit)
    else:
        root = brentq(
            lambda x: p_at(math.exp(x)) - confidence, 0.0, math.log(MAX_SHOTS), xtol=1e-10
        )
        n_needed = math.ceil(math.exp(root) * (1 - 1e-12))
        while n_needed > 1 and p_at(n_needed - 1) >= confidence:
            n_needed -= 1
        while p_at(n_needed) < confidence:
            n_needed += 1
    limited: LimitedBy = "none" if n_needed <= budget else "shots"
    return TargetAssessment(p_budget, n_needed, limited, "", hit)
