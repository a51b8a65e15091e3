"""Mitigation passes by name, and validation of recipe entries."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from pydantic import ValidationError

from noiselab.common.errors import InputError, from_validation_error
from noiselab.mitigate.base import MitigationPass
from noiselab.mitigate.passes.extrapolate import ExtrapolatePass
from noiselab.mitigate.passes.postselect import PostselectPass
from noiselab.mitigate.passes.readout import ReadoutPass

PASSES: dict[str, type[MitigationPass]] = {
    ReadoutPass.name: ReadoutPass,
    PostselectPass.name: PostselectPass,
    ExtrapolatePass.name: ExtrapolatePass,
}


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
        raise InputError(f"{where}.pass: unknown pass {name!r}; allowed: {allowed}")
    cls = PASSES[name]
    options = {k: v for k, v in spec.items() if k != "pass"}
    try:
        opts = cls.Options.model_validate(options)
    except ValidationError as exc:
        raise from_validation_error(exc, None, prefix=where) from None
    return cls(opts)
