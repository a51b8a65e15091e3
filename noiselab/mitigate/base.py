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

Each hook returns a typed output: :class:`Corrected` (the corrected data), :class:`Estimated`
(an estimate), :class:`Combined` (an estimate and the variances no shot count shrinks), each
with the pass's :class:`~noiselab.mitigate.reports.PassReport` of that call (or None).
"""

from __future__ import annotations

import hashlib
import json
from abc import ABC
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict

from noiselab.mitigate.estimate import Estimate, SourceKey, total
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.reports import PassReport
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


@dataclass(frozen=True, eq=False)
class Workspace:
    """What a pass may read during one evaluation of a recipe (built by ``evaluate``).

    ``measured[(variant)][basis]`` is the raw measured distribution (exact or empirical);
    ``calibration(variant, states, shots)`` returns distributions (n_states, 2**n) of the
    calibration circuits preparing the computational states ``states`` (ints, logical bit order)
    under the variant's readout, registering them as sources with their shot counts. ``rng`` is
    set on sampled evaluations only: a pass draws its own random parts from it (those no shot
    count shrinks, reported as :attr:`Combined.fixed_variance`). ``estimator``: the recipe's
    estimator pass (None: the plan estimate), for a combination pass that needs the noiseless
    value of the same estimator (``clifford_regression``'s training energies); ``corrections``:
    the recipe's correction passes.
    """

    ctx: ExperimentContext
    measured: Mapping[CircuitVariant, Mapping[str, np.ndarray]]
    calibration: Callable[[CircuitVariant, tuple[int, ...], int | None], np.ndarray]
    rng: np.random.Generator | None = None
    estimator: MitigationPass | None = None
    corrections: tuple[MitigationPass, ...] = ()


@dataclass(frozen=True, eq=False)
class Corrected:
    """Output of ``correct``: the corrected distributions of one variant, and the report."""

    data: VariantData
    report: PassReport | None = None


@dataclass(frozen=True, eq=False)
class Estimated:
    """Output of ``estimate``: one variant's energy estimate (Ha), and the report."""

    estimate: Estimate
    report: PassReport | None = None


@dataclass(frozen=True, eq=False)
class Combined:
    """Output of ``combine``: the recipe's estimate (Ha), the report, and the variances (Ha**2)
    of random parts that no shot count shrinks, by name (e.g. ``"amplification"``): each is
    added to ``std_mha``, counted as fixed by the target assessment, and shown in the details
    as ``std_<name>_mha``."""

    estimate: Estimate
    report: PassReport | None = None
    fixed_variance: Mapping[str, float] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class SpreadTerm:
    """A random part no shot count shrinks that a pass models by one of its options: the option's
    value in a real run has standard deviation ``std`` (option units) around the one used. The
    recipe is evaluated exactly with the pass replaced by ``minus`` and ``plus`` (the option
    ``step`` below and above); the central difference times ``std`` enters ``std_mha`` as the
    fixed variance ``name`` (``std_<name>_mha``; also written into the pass's own details under
    ``details_key``, with the sensitivity ``<name>_sensitivity_mha`` per unit of the option)."""

    name: str
    minus: MitigationPass
    plus: MitigationPass
    step: float
    std: float
    details_key: str


@dataclass(frozen=True, eq=False)
class InstanceTerm:
    """A random part no shot count shrinks that a pass realizes as a finite number of random
    instances (e.g. ``twirl`` with ``draws``: randomly twirled copies of every circuit): a real
    run averages the recipe over its instances. The exact energy (the bias) stays the pass as it
    is, their expectation. The recipe is evaluated exactly with the pass replaced by each of
    ``instances`` (its realized instances, seeded from the study's seed); the variance of their
    mean, sample variance / n, enters ``std_mha`` as the fixed variance ``name``
    (``std_<name>_mha`` in the details, with ``<name>_mean_offset_mha``: the instances' mean
    minus the exact energy, and ``<name>_instances``), and a sampled evaluation reports their
    mean (the shot noise on top)."""

    name: str
    instances: tuple[MitigationPass, ...]


class MitigationPass(ABC):
    """A pass: options, a stage, and the hooks of its stage."""

    name: ClassVar[str]
    stage: ClassVar[int]
    Options: ClassVar[type[PassOptions]]
    #: passes this one cannot share a recipe with: their name -> why (one line)
    incompatible: ClassVar[Mapping[str, str]] = {}
    #: passes that, when in the recipe, must come after this one
    runs_before: ClassVar[tuple[str, ...]] = ()

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

    def spread_terms(self, ctx: ExperimentContext) -> tuple[SpreadTerm, ...]:
        """Options of this pass whose real-run value is random (:class:`SpreadTerm`; default
        none)."""
        return ()

    def instance_term(self, ctx: ExperimentContext) -> InstanceTerm | None:
        """The random instances a real run of this pass averages (:class:`InstanceTerm`;
        default None: the pass is exact)."""
        return None

    def no_op(self, ctx: ExperimentContext) -> str | None:
        """Why this pass changes nothing on this experiment (one line), or None (default: it
        may change something). ``tune`` leaves out settings that differ only by a no-op."""
        return None

    def transforms(self, ctx: ExperimentContext) -> tuple[Any, ...]:
        """Circuit transforms a correction or estimator pass adds to every circuit variant of its
        recipe (``noiselab.device.transforms.CircuitTransform``; default none)."""
        return ()

    # STAGE_COMBINE
    def variants(self, ctx: ExperimentContext) -> tuple[CircuitVariant, ...]:
        """Circuit variants this pass needs (combination passes only)."""
        return (CircuitVariant(),)

    def shot_split(self) -> Literal["equal", "weighted"]:
        """How the budget is split across the variants (``noiselab.mitigate.plan.allocate_shots``):
        equal shares, or weighted by each variant's part of the variance."""
        return "equal"

    def combine(
        self, variants: tuple[CircuitVariant, ...], estimates: list[Estimate], ws: Workspace
    ) -> Combined:
        raise NotImplementedError

    # STAGE_ESTIMATE
    def bases(self, ctx: ExperimentContext) -> tuple[str, ...]:
        """Measurement bases this estimator reads (default: the plan's)."""
        return ctx.plan.bases

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimated:
        raise NotImplementedError

    # STAGE_CORRECT
    def correct(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Corrected:
        raise NotImplementedError


def plan_estimate(ctx: ExperimentContext, data: VariantData) -> Estimate:
    """The plain estimator: constant + sum_g w_g . q_g."""
    return total([data[g.basis].estimate(g.weights) for g in ctx.plan.groups]) + ctx.plan.constant
