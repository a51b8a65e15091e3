"""The shared interface of mitigation passes.

A recipe runs in three stages, each pass belonging to one:

* ``STAGE_CORRECT`` (per circuit variant, per measured basis): turns measured distributions into
  corrected (quasi-)distributions, e.g. readout correction;
* ``STAGE_ESTIMATE`` (per circuit variant): turns corrected distributions into one energy estimate,
  e.g. symmetry post-selection; without such a pass the plain plan estimator is used;
* ``STAGE_COMBINE`` (across variants): declares the circuit variants it needs and combines their
  estimates, e.g. zero-noise extrapolation; without it only the base variant is run.

Every corrected distribution carries a ``pullback``: given a weight vector u on the corrected
distribution it returns the gradient of ``u . q`` with respect to each raw data source (the raw
measured distribution and any calibration circuit), which is what the variance needs.
"""

from __future__ import annotations

import hashlib
import json
from abc import ABC
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np
from pydantic import BaseModel, ConfigDict

from noiselab.mitigate.estimate import Estimate, SourceKey, linear_combination
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.variants import CircuitVariant

STAGE_CORRECT = 0
STAGE_ESTIMATE = 1
STAGE_COMBINE = 2
STAGE_NAMES = {
    STAGE_CORRECT: "correction",
    STAGE_ESTIMATE: "estimator",
    STAGE_COMBINE: "combination",
}

Pullback = Callable[[np.ndarray], dict[SourceKey, np.ndarray]]


class PassOptions(BaseModel):
    """Base of every pass's options model: unknown keys refused, values frozen."""

    model_config = ConfigDict(extra="forbid", frozen=True)


@dataclass(frozen=True, eq=False)
class CorrectedDistribution:
    """A (quasi-)probability vector; ``pullback`` maps weights on it to raw sources."""

    probs: np.ndarray
    pullback: Pullback

    def estimate(self, weights: np.ndarray, offset: float = 0.0) -> Estimate:
        """offset + weights . probs with its influence."""
        return Estimate(offset + float(np.dot(weights, self.probs)), self.pullback(weights))


def raw_distribution(key: SourceKey, probs: np.ndarray) -> CorrectedDistribution:
    """An uncorrected distribution: its own source, identity pullback."""
    return CorrectedDistribution(np.asarray(probs, dtype=float), lambda u: {key: np.asarray(u)})


VariantData = Mapping[str, CorrectedDistribution]


def meas_key(variant: CircuitVariant, basis: str) -> tuple:
    return ("meas", variant, basis)


def cal_key(variant: CircuitVariant, state: int) -> tuple:
    return ("cal", variant.calibration_variant(), int(state))


@dataclass(eq=False)
class Workspace:
    """Mutable state of one evaluation of a recipe (internal to ``run_recipe``).

    ``measured[(variant)][basis]`` is the raw measured distribution (exact or empirical);
    ``calibration(variant, states, shots)`` returns distributions (n_states, 2**n) of the
    calibration circuits preparing the computational states ``states`` (ints, logical bit order)
    under the variant's readout, registering them as sources with their shot counts.
    A pass whose result has a random part that does not shrink with shots records its variance in
    ``fixed_variance`` and, on sampled evaluations (``rng`` set), draws it.
    """

    ctx: ExperimentContext
    measured: Mapping[CircuitVariant, Mapping[str, np.ndarray]]
    calibration: Callable[[CircuitVariant, tuple[int, ...], int | None], np.ndarray]
    details: dict[str, Any] = field(default_factory=dict)
    #: random parts that no shot count shrinks, by name (Ha**2), e.g. "amplification"
    fixed_variance: dict[str, float] = field(default_factory=dict)
    #: set on sampled evaluations only: passes draw their own random parts from it
    rng: np.random.Generator | None = None


class MitigationPass(ABC):
    """A pass: options, a stage, and the hooks of its stage."""

    name: ClassVar[str]
    stage: ClassVar[int]
    Options: ClassVar[type[PassOptions]]

    def __init__(self, options: PassOptions) -> None:
        self.options = options

    def spec(self) -> dict[str, Any]:
        """The pass as a recipe entry (all options, defaults filled in)."""
        return {"pass": self.name, **self.options.model_dump(mode="json")}

    def cache_key(self) -> str:
        """Stable key of the pass and its options: SHA-256 of :meth:`spec` as sorted JSON.

        Equal for equal options however they were written (defaults filled in, key order); the
        same in every process and session.
        """
        text = json.dumps(self.spec(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def describe(self) -> str:
        """Short label for the recipe name."""
        return self.name

    def check(self, ctx: ExperimentContext, where: str) -> None:  # noqa: B027 (optional hook)
        """Refuse options that do not fit this experiment (InputError naming ``where``.option)."""

    # STAGE_COMBINE
    def variants(self, ctx: ExperimentContext) -> tuple[CircuitVariant, ...]:
        """Circuit variants this pass needs (combination passes only)."""
        return (CircuitVariant(),)

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Estimate:
        raise NotImplementedError

    # STAGE_ESTIMATE
    def bases(self, ctx: ExperimentContext) -> tuple[str, ...]:
        """Measurement bases this estimator reads (default: the plan's)."""
        return ctx.plan.bases

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimate:
        raise NotImplementedError

    # STAGE_CORRECT
    def correct(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> VariantData:
        raise NotImplementedError


def plan_estimate(ctx: ExperimentContext, data: VariantData) -> Estimate:
    """The plain estimator: constant + sum_g w_g . q_g."""
    parts = [data[g.basis].estimate(g.weights) for g in ctx.plan.groups]
    est = linear_combination([1.0] * len(parts), parts)
    return Estimate(est.value + ctx.plan.constant, est.influence)
