"""The axes of the tune grid: built-in defaults and the checks of values given on any axis.

Below :mod:`noiselab.study.spec` (which checks a study file's ``tune:`` section at load) and
:mod:`noiselab.study.tune` (which builds and ranks the settings).
"""

from __future__ import annotations

import dataclasses
import itertools
from typing import Any

from noiselab.common.errors import InputError
from noiselab.mitigate.passes.extrapolate import ExtrapolateOptions
from noiselab.mitigate.passes.postselect import PostselectOptions
from noiselab.mitigate.passes.readout import ReadoutOptions

NONE = "none"
#: The amplifier axis also offers Clifford data regression (default options) in place of
#: an extrapolation: the other combination of the grid, with no scale set or fit of its own.
REGRESSION = "clifford_regression"
DEFAULT_READOUT = (NONE, "per_qubit_inverse", "full_inverse", "nearest_probability")
DEFAULT_POSTSELECT = (NONE, "discard", "verify")
DEFAULT_AMPLIFIER = (NONE, "stretch", "whole_circuit", "two_qubit_gates", REGRESSION)
DEFAULT_SCALES: tuple[tuple[float, ...], ...] = ((1.0, 2.0, 3.0), (1.0, 3.0, 5.0))
DEFAULT_FIT = ("linear", "richardson")
#: Mitigation families besides the stack above: none, or one whole-circuit method.
FAMILIES = (NONE, "error_cancellation", "distillation")
DEFAULT_FAMILY = FAMILIES
#: Suppression passes (circuit transforms, first in a recipe); an axis value is "none" or their
#: names joined by "+" in this order ("twirl+decouple").
SUPPRESSION_PASSES = ("twirl", "decouple", "measure_twirl")
#: measure_twirl only where readout correction is on (see ``noiselab.study.tune``)
DEFAULT_SUPPRESS = (NONE, "twirl", "decouple", "twirl+decouple", "measure_twirl")
#: The built-in default of every axis, in the grid's axis order.
DEFAULT_AXES: dict[str, tuple[Any, ...]] = {
    "readout": DEFAULT_READOUT,
    "postselect": DEFAULT_POSTSELECT,
    "amplifier": DEFAULT_AMPLIFIER,
    "scales": DEFAULT_SCALES,
    "fit": DEFAULT_FIT,
    "family": DEFAULT_FAMILY,
    "suppress": DEFAULT_SUPPRESS,
}


@dataclasses.dataclass(frozen=True)
class Grid:
    """The resolved axes of a tune grid."""

    readout: tuple[str, ...]
    postselect: tuple[str, ...]
    amplifier: tuple[str, ...]
    scales: tuple[tuple[float, ...], ...]
    fit: tuple[str, ...]
    family: tuple[str, ...] = (NONE,)
    suppress: tuple[str, ...] = (NONE,)


def check_tune_section(section: Any, source: str) -> None:
    """Refuse unknown values in a study's ``tune:`` section (errors name tune.<axis>[i]).

    ``section``: a :class:`noiselab.study.spec.TuneGrid` (axes left ``None`` take the defaults).
    """
    defaults = DEFAULT_AXES
    values = {a: getattr(section, a) or d for a, d in defaults.items()}
    grid = Grid(
        readout=tuple(values["readout"]),
        postselect=tuple(values["postselect"]),
        amplifier=tuple(values["amplifier"]),
        scales=tuple(tuple(float(x) for x in sc) for sc in values["scales"]),
        fit=tuple(values["fit"]),
        family=tuple(values["family"]),
        suppress=tuple(values["suppress"]),
    )
    check_axes(grid, {a: f"{source}: tune.{a}" for a in defaults})


def axis_values() -> dict[str, tuple[str, ...]]:
    """The names each named axis of the grid accepts (from the pass options' models)."""

    def allowed(model: Any, field: str) -> tuple[str, ...]:
        return tuple(model.model_fields[field].annotation.__args__)

    return {
        "readout": (NONE, *allowed(ReadoutOptions, "method")),
        "postselect": (NONE, *allowed(PostselectOptions, "mode")),
        "amplifier": (NONE, *allowed(ExtrapolateOptions, "amplifier"), REGRESSION),
        "fit": tuple(f for f in allowed(ExtrapolateOptions, "fit") if f != "polynomial"),
        "family": FAMILIES,
        "suppress": suppression_values(),
    }


def suppression_values() -> tuple[str, ...]:
    """Every value of the suppress axis: none, or a non-empty subset of the suppression passes
    joined by "+" in :data:`SUPPRESSION_PASSES` order (smaller subsets first)."""
    subsets = (
        "+".join(c)
        for k in range(1, len(SUPPRESSION_PASSES) + 1)
        for c in itertools.combinations(SUPPRESSION_PASSES, k)
    )
    return (NONE, *subsets)


def check_axes(grid: Grid, origin: dict[str, str]) -> None:
    """Refuse unknown names on an axis, naming the axis and what is allowed."""
    checks = axis_values()
    for axis, ok in checks.items():
        for i, value in enumerate(getattr(grid, axis)):
            if value not in ok:
                where = origin[axis]
                where = f"{where}[{i}]" if "tune." in where else where
                raise InputError(f"{where}: unknown value {value!r}; allowed: {', '.join(ok)}")
    for i, scales in enumerate(grid.scales):
        bad = len(scales) < 2 or any(s < 1.0 for s in scales) or len(set(scales)) != len(scales)
        if bad:
            raise InputError(
                f"{origin['scales']}: scale set {i} = {list(scales)}; "
                "allowed: at least 2 distinct factors >= 1, e.g. 1,2,3"
            )
