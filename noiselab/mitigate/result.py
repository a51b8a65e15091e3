"""The record every recipe returns (numpy only, so reading results back stays cheap)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np

from noiselab.mitigate.reports import PassReport, VariantScore
from noiselab.mitigate.target import LimitedBy

ReportType = TypeVar("ReportType", bound=PassReport)


@dataclass(frozen=True, eq=False)
class RecipeResult:
    """Outcome of one recipe on one experiment (energies in Ha, biases and stds in mHa).

    ``bias_*_mha``: energy - reference (signed). ``std_mha``: standard error at the budget
    (measurement shots and calibration shots). ``shots_total``: the measurement budget (the
    calibration circuits' shots are in ``details["calibration_shots_total"]``).
    ``std_mha`` also holds the uncertainty of the realized noise amplification of an
    extrapolation (``details["std_amplification_mha"]``).
    ``shots_per_circuit``: ``"<variant>|<basis>" -> shots``. ``n_circuits``: distinct circuits
    (variants x bases, plus calibration circuits). ``shots_needed``: measurement shots for
    ``p_within_target >= confidence`` (None when the bias prevents it). ``reaches_target``: the
    one rule of :func:`noiselab.mitigate.target.reaches_target` at the budget.

    Typed fields: ``variants`` (each circuit variant as scored, in the recipe's order) and
    ``reports`` (pass name -> the pass's :class:`PassReport`, in recipe order). ``details`` is
    the JSON built from them (``noiselab.mitigate.steps.details_json``). The record form
    (``dataclasses.asdict``, then JSON) is accepted back for both: they are rebuilt typed.
    """

    recipe: str
    spec: tuple[dict[str, Any], ...]
    energy_ha: float
    bias_exact_mha: float
    bias_ansatz_mha: float
    std_mha: float
    shots_total: int
    shots_per_circuit: dict[str, int]
    n_circuits: int
    engine_seconds: float
    p_within_target: float
    shots_needed: int | None
    limited_by: LimitedBy
    reaches_target: bool = False
    details: dict[str, Any] = field(default_factory=dict)
    sampled: bool = False
    variants: tuple[VariantScore, ...] = ()
    reports: dict[str, PassReport] = field(default_factory=dict)

    def __post_init__(self) -> None:
        variants = tuple(
            v if isinstance(v, VariantScore) else VariantScore(**v) for v in self.variants
        )
        reports = {
            name: r if isinstance(r, PassReport) else PassReport.from_record(name, r)
            for name, r in self.reports.items()
        }
        object.__setattr__(self, "variants", variants)
        object.__setattr__(self, "reports", reports)

    def report(self, cls: type[ReportType]) -> ReportType | None:
        """The report of type ``cls`` (e.g. the extrapolation's), None if no pass gave one."""
        return next((r for r in self.reports.values() if isinstance(r, cls)), None)

    def to_dict(self) -> dict[str, Any]:
        return plain_json(dataclasses.asdict(self))


def plain_json(x: Any) -> Any:
    """Dicts, lists, numpy scalars and arrays as plain JSON values (non-finite floats as None)."""
    if isinstance(x, dict):
        return {str(k): plain_json(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [plain_json(v) for v in x]
    if isinstance(x, np.ndarray):
        return plain_json(x.tolist())
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.floating | float):
        v = float(x)
        return v if math.isfinite(v) else None
    return x
