"""Mitigation passes by name, and validation of recipe entries.

The registry is open: ``register_pass(cls)`` adds a pass class (the three built-in passes are
registered the same way), after which recipes, study files and every job accept its name.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, TypeVar

from pydantic import ValidationError

from noiselab.common.errors import InputError, did_you_mean, from_validation_error
from noiselab.mitigate.base import STAGE_NAMES, MitigationPass, PassOptions
from noiselab.mitigate.passes.cancellation import ErrorCancellationPass
from noiselab.mitigate.passes.clifford_regression import CliffordRegressionPass
from noiselab.mitigate.passes.distillation import DistillationPass
from noiselab.mitigate.passes.extrapolate import ExtrapolatePass
from noiselab.mitigate.passes.postselect import PostselectPass
from noiselab.mitigate.passes.readout import ReadoutPass
from noiselab.mitigate.passes.suppress import DecouplePass, MeasureTwirlPass, TwirlPass

PASSES: dict[str, type[MitigationPass]] = {}

PassClass = TypeVar("PassClass", bound=type[MitigationPass])


def register_pass(cls: PassClass, *, replace: bool = False) -> PassClass:
    """Add the pass class ``cls`` to :data:`PASSES` under ``cls.name``; returns ``cls`` (so it
    also works as a class decorator).

    Checks the interface first: a :class:`MitigationPass` subclass with a name (letters, digits,
    ``_``; not taken unless ``replace``), one of the three stages, and an ``Options`` model
    derived from :class:`PassOptions` that refuses unknown keys. Raises TypeError / ValueError
    (a programming error, not bad input).
    """
    if not (isinstance(cls, type) and issubclass(cls, MitigationPass)):
        raise TypeError(f"register_pass: {cls!r} is not a MitigationPass subclass")
    name = getattr(cls, "name", None)
    if not isinstance(name, str) or not name.replace("_", "").isalnum():
        raise ValueError(f"register_pass: {cls.__name__}.name {name!r} is not a pass name")
    if name in PASSES and PASSES[name] is not cls and not replace:
        raise ValueError(f"register_pass: the name {name!r} is taken by {PASSES[name].__name__}")
    if getattr(cls, "stage", None) not in STAGE_NAMES:
        raise ValueError(f"register_pass: {cls.__name__}.stage must be one of {list(STAGE_NAMES)}")
    options = getattr(cls, "Options", None)
    if not (isinstance(options, type) and issubclass(options, PassOptions)):
        raise TypeError(f"register_pass: {cls.__name__}.Options must subclass PassOptions")
    if options.model_config.get("extra") != "forbid":
        raise ValueError(f"register_pass: {cls.__name__}.Options must refuse unknown keys")
    PASSES[name] = cls
    return cls


for _builtin in (
    TwirlPass,
    DecouplePass,
    MeasureTwirlPass,
    ReadoutPass,
    PostselectPass,
    ExtrapolatePass,
    ErrorCancellationPass,
    DistillationPass,
    CliffordRegressionPass,
):
    register_pass(_builtin)


def make_pass(spec: Mapping[str, Any], where: str = "recipe[0]") -> MitigationPass:
    """Validate one recipe entry ``{"pass": name, **options}`` and build the pass.

    Raises a one-line InputError naming ``where.pass`` or ``where.<option>``.
    """
    allowed = ", ".join(PASSES)
    if not isinstance(spec, Mapping):
        raise InputError(
            f"{where}: expected a mapping {{pass: name, options...}}, got {type(spec).__name__}; "
            f"allowed passes: {allowed}"
        )
    if "pass" not in spec:
        raise InputError(f"{where}.pass: required key is missing; allowed: {allowed}")
    name = spec["pass"]
    if not isinstance(name, str) or name not in PASSES:
        near = did_you_mean(name, list(PASSES)) if isinstance(name, str) else ""
        raise InputError(f"{where}.pass: unknown pass {name!r}{near}; allowed: {allowed}")
    cls = PASSES[name]
    options = {k: v for k, v in spec.items() if k != "pass"}
    try:
        opts = cls.Options.model_validate(options)
    except ValidationError as exc:
        raise from_validation_error(exc, None, prefix=where, model=cls.Options) from None
    return cls(opts)
