"""Error types with the exit codes the command line uses.

Every message is one line: ``<source>: <key.path>: <what is wrong>; allowed: <what is allowed>``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

#: Longest one-line message; a longer one keeps its start (file, key) and end (what is allowed).
MAX_MESSAGE_CHARS = 600
#: Longest quoted user value in a message.
MAX_QUOTED_CHARS = 60


def quote(value: Any, limit: int = MAX_QUOTED_CHARS) -> str:
    """``repr(value)`` cut to ``limit`` characters (user values in messages stay short)."""
    try:
        text = repr(value) if not isinstance(value, str) else repr(value[: limit + 1])
    except Exception:  # a value whose repr fails (or recurses) still gets a message
        text = f"<{type(value).__name__}>"
    if len(text) > limit:
        size = f"{len(value)} characters" if isinstance(value, str) else type(value).__name__
        text = f"{text[: limit - 3]}... ({size})"
    return text


def one_line(message: str, limit: int = MAX_MESSAGE_CHARS) -> str:
    """``message`` on one line with runs of whitespace collapsed, at most ``limit`` characters."""
    text = " ".join(str(message).split())
    if len(text) > limit:
        head = limit * 2 // 3
        text = f"{text[:head]} [...] {text[-(limit - head - 7) :]}"
    return text


class NoiselabError(Exception):
    """A failure noiselab reports as one line (exit code 1)."""

    exit_code = 1

    def __init__(self, message: str) -> None:
        super().__init__(one_line(message))

    @property
    def message(self) -> str:
        return str(self)


class InputError(NoiselabError):
    """Bad input: malformed file, impossible parameter, missing file (exit code 2)."""

    exit_code = 2


class ProblemTooLargeError(InputError):
    """The requested emulation does not fit this machine (exit code 2)."""


def input_error(
    source: str | None, key: str | None, problem: str, allowed: str | None = None
) -> InputError:
    """Build an :class:`InputError` with the standard one-line layout."""
    parts = [p for p in (source, key) if p]
    text = ": ".join([*parts, problem])
    if allowed:
        text += f"; allowed: {allowed}"
    return InputError(text)


def _loc_to_path(loc: Sequence[Any]) -> str:
    out = ""
    for item in loc:
        if isinstance(item, int):
            out += f"[{item}]"
        else:
            # pydantic puts validator/union tags in loc; skip the noise it adds
            s = str(item)
            if s.startswith("function-") or s in {"tagged-union", "union"}:
                continue
            if len(s) > MAX_QUOTED_CHARS:
                s = quote(s)
            out += ("." if out else "") + s
    return out or "(top level)"


def from_validation_error(exc: Any, source: str | None, prefix: str = "") -> InputError:
    """Turn a ``pydantic.ValidationError`` into a one-line :class:`InputError`.

    Only the first error is reported (fix one thing at a time); the count of others is appended.
    ``prefix`` is prepended to the key path (e.g. ``"molecule"`` when validating an embedded model).
    """
    errors = exc.errors(include_url=False)
    first = errors[0]
    path = _loc_to_path(first.get("loc", ()))
    if prefix:
        path = prefix if path == "(top level)" else f"{prefix}.{path}"
    msg = str(first.get("msg", "invalid value"))
    msg = msg.removeprefix("Value error, ").removeprefix("Assertion failed, ")
    if first.get("type") == "extra_forbidden":
        msg = "unknown key (check the spelling)"
    elif first.get("type") == "missing":
        msg = "required key is missing"
    more = (
        f" (and {len(errors) - 1} more problem{'s' if len(errors) > 2 else ''})"
        if len(errors) > 1
        else ""
    )
    return InputError(f"{': '.join(p for p in (source, path) if p)}: {msg}{more}")
