"""Whole-number counts (shots, points, seeds, trajectories, ...) as people type them.

``Count`` is the one integer type every count of a file and of the command line uses:
``1000000``, ``1e6``, ``1.0e+6`` (YAML reads that as a float) and ``"1e6"`` (the command line,
or YAML's reading of ``1e6``) are all one million; ``2.5``, ``true``, ``nan`` and ``"ten"`` are
refused with a message naming the value. Bounds stay with each field (``Field(ge=..., le=...)``).
"""

from __future__ import annotations

import math
from decimal import Decimal, InvalidOperation
from typing import Annotated, Any

from pydantic import BeforeValidator, StrictInt

from noiselab.common.errors import quote

#: Largest total shot budget anywhere (per estimate, per calibration circuit).
MAX_SHOTS = 10**12
#: Seeds are 32-bit (numpy and qiskit both accept them).
MAX_SEED = 2**32 - 1
#: Past this magnitude no count is meant (and converting it would cost time and memory).
_MAX_MAGNITUDE_DIGITS = 30


def whole_number(value: Any) -> Any:
    """``value`` as an int when it is a whole number in any notation; other types unchanged
    (the strict int check then refuses them)."""
    if isinstance(value, bool):
        raise ValueError(f"expected a whole number, got {str(value).lower()}")
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"{value} is not a whole number")
        if not value.is_integer():
            raise ValueError(f"{value:g} is not a whole number")
        if abs(value) >= 10.0**_MAX_MAGNITUDE_DIGITS:
            raise ValueError(f"{value:g} is far too large for a count")
        return int(value)
    if isinstance(value, str):
        text = value.strip().replace("_", "")
        if not text or len(text) > 40:
            raise ValueError(f"{quote(value)} is not a whole number")
        try:
            number = Decimal(text)
        except InvalidOperation:
            raise ValueError(f"{quote(value)} is not a whole number") from None
        if not number.is_finite():
            raise ValueError(f"{quote(value)} is not a whole number")
        if number != 0 and number.adjusted() >= _MAX_MAGNITUDE_DIGITS:
            raise ValueError(f"{quote(value)} is far too large for a count")
        if number != number.to_integral_value():
            raise ValueError(f"{quote(value)} is not a whole number")
        return int(number)
    return value


#: A whole number in any notation (``1e6``, ``1.0e+6``, ``"1e6"``); bounds go with the field.
Count = Annotated[StrictInt, BeforeValidator(whole_number)]


def parse_count(value: Any, option: str, lo: int, hi: int, why: str = "") -> int:
    """A command-line count that is no file key (``--workers``, ``--top``) as an int in
    ``lo..hi``; one-line InputError naming ``option`` otherwise (``why``: the reason for hi)."""
    from noiselab.common.errors import InputError

    try:
        number = whole_number(value)
    except ValueError as exc:
        raise InputError(f"{option}: {exc}; allowed: a whole number from {lo} to {hi}") from None
    if not isinstance(number, int):
        raise InputError(f"{option}: {quote(value)}; allowed: a whole number from {lo} to {hi}")
    if not lo <= number <= hi:
        reason = f" ({why})" if why else ""
        raise InputError(f"{option}: {number}; allowed: a whole number from {lo} to {hi}{reason}")
    return number
