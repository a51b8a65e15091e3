"""Error types with the exit codes the command line uses.

Every message is one line: ``<source>: <key.path>: <what is wrong>; allowed: <what is allowed>``.

A message about a function's argument marks the argument with :func:`arg`: raised from Python
it names the argument (``points``); the command line names its option instead (``--points``,
:meth:`NoiselabError.with_options`).
"""

from __future__ import annotations

import copy
import difflib
import re
import types
import typing
from collections.abc import Callable, Sequence
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


_ARG = re.compile("\x1e([A-Za-z_][A-Za-z0-9_]*)\x1f")


def arg(name: str) -> str:
    """``name`` marked as an argument in a message: shown as ``name``; the command line shows
    its option instead (see :meth:`NoiselabError.with_options`)."""
    return f"\x1e{name}\x1f"


def _render(text: str, option_of: Callable[[str], str] | None = None) -> str:
    return _ARG.sub(lambda m: option_of(m.group(1)) if option_of else m.group(1), text)


class NoiselabError(Exception):
    """A failure noiselab reports as one line (exit code 1)."""

    exit_code = 1

    def __init__(self, message: str) -> None:
        text = str(message)
        #: the message with its arguments still marked (None: it marks none)
        self.template = text if _ARG.search(text) else None
        super().__init__(one_line(_render(text)))

    def with_options(self, option_of: Callable[[str], str]) -> NoiselabError:
        """The same error with each marked argument named by ``option_of(name)`` (the command
        line's option, e.g. ``--points``); itself when it marks none."""
        if self.template is None:
            return self
        out = copy.copy(self)
        out.args = (one_line(_render(self.template, option_of)),)
        out.template = None  # its names are final
        return out

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


#: File keys renamed so that a file, the command line and the results use one word (the tune
#: axis ``amplification`` is ``amplifier`` like the recipes' option; ``sweep.vary`` is
#: ``sweep.knob`` like the sweep's results; the truncation estimate's ``check_factor`` gave way
#: to ``keep_factor``): the former name suggests the present one.
FORMER_KEYS = {"amplification": "amplifier", "vary": "knob", "check_factor": "keep_factor"}


def closest_key(key: str, allowed: Sequence[str]) -> str | None:
    """The allowed key closest to ``key`` (a former name: its present one; else case ignored,
    difflib ratio >= 0.6), or None."""
    if FORMER_KEYS.get(key) in allowed:
        return FORMER_KEYS[key]
    by_lower = {a.lower(): a for a in allowed}
    if key.lower() in by_lower:
        return by_lower[key.lower()]
    found = difflib.get_close_matches(key.lower(), list(by_lower), n=1, cutoff=0.6)
    return by_lower[found[0]] if found else None


def did_you_mean(key: str, allowed: Sequence[str]) -> str:
    """' (did you mean `x`?)' for the closest allowed key, or ''."""
    near = closest_key(key, allowed)
    return f" (did you mean `{near}`?)" if near else ""


def _unwrap(tp: Any) -> list[Any]:
    """The types inside Annotated / Optional / unions."""
    while typing.get_origin(tp) is typing.Annotated:
        tp = typing.get_args(tp)[0]
    if typing.get_origin(tp) in (typing.Union, types.UnionType):
        return [t for a in typing.get_args(tp) for t in _unwrap(a)]
    return [tp]


def _model_at(model: Any, loc: Sequence[Any]) -> Any:
    """The pydantic model class that holds the key at ``loc`` (walking field types through
    lists, tuples, mappings and optionals), or None."""
    current = [model]
    for item in loc:
        nxt: list[Any] = []
        for tp in current:
            fields = getattr(tp, "model_fields", None)
            if isinstance(fields, dict) and isinstance(item, str) and item in fields:
                nxt += _unwrap(fields[item].annotation)
                continue
            origin = typing.get_origin(tp)
            args = typing.get_args(tp)
            if origin in (list, tuple) and args:
                nxt += _unwrap(args[0])
            elif origin is dict and len(args) == 2:
                nxt += _unwrap(args[1])
        current = [t for t in nxt if t is not None]
    for tp in current:
        if isinstance(getattr(tp, "model_fields", None), dict):
            return tp
    return None


def _allowed_keys(model: Any, loc: Sequence[Any]) -> list[str]:
    holder = _model_at(model, loc) if model is not None else None
    return list(holder.model_fields) if holder is not None else []


def _join(prefix: str, path: str) -> str:
    if not prefix:
        return path
    return prefix if path == "(top level)" else f"{prefix}.{path}"


def from_validation_error(
    exc: Any, source: str | None, prefix: str = "", model: Any = None
) -> InputError:
    """Turn a ``pydantic.ValidationError`` into a one-line :class:`InputError`.

    Only the first error is reported (fix one thing at a time); the count of others is appended.
    ``prefix`` is prepended to the key path (e.g. ``"molecule"`` when validating an embedded model).
    ``model`` (the validated pydantic model class): an unknown key then gets the closest
    allowed key ("did you mean") and the keys allowed at its level, and a required key reported
    missing beside an unknown key that resembles it is reported as that misspelt key.
    """
    errors = exc.errors(include_url=False)
    first = errors[0]
    if first.get("type") == "missing":
        misspelt = _misspelt_for(first, errors)
        if misspelt is not None:
            first = misspelt
    loc = tuple(first.get("loc", ()))
    path = _join(prefix, _loc_to_path(loc))
    msg = str(first.get("msg", "invalid value"))
    msg = msg.removeprefix("Value error, ").removeprefix("Assertion failed, ")
    if first.get("type") == "extra_forbidden":
        key = str(loc[-1]) if loc else ""
        allowed = _allowed_keys(model, loc[:-1]) if model is not None else []
        near = did_you_mean(key, allowed) if allowed else ""
        missing = [
            str(e["loc"][-1])
            for e in errors
            if e.get("type") == "missing" and tuple(e.get("loc", ()))[:-1] == loc[:-1]
        ]
        msg = f"unknown key{near}" if near else "unknown key (check the spelling)"
        near_key = closest_key(key, allowed) if allowed else None
        if near_key is not None and near_key in missing:
            msg = f"unknown key; the required key `{near_key}` is missing: `{key}` looks misspelt"
            errors = [e for e in errors if tuple(e.get("loc", ())) != (*loc[:-1], near_key)]
        if allowed:
            msg += f"; allowed: {', '.join(allowed)}"
    elif first.get("type") == "missing":
        msg = "required key is missing"
    more = (
        f" (and {len(errors) - 1} more problem{'s' if len(errors) > 2 else ''})"
        if len(errors) > 1
        else ""
    )
    if "; allowed: " in msg and more:  # keep "allowed" last
        head, allowed_text = msg.split("; allowed: ", 1)
        return InputError(
            f"{': '.join(p for p in (source, path) if p)}: {head}{more}; allowed: {allowed_text}"
        )
    return InputError(f"{': '.join(p for p in (source, path) if p)}: {msg}{more}")


def _misspelt_for(missing: dict[str, Any], errors: Sequence[dict[str, Any]]) -> Any:
    """The unknown-key error at the same level as ``missing`` whose key resembles it, or None."""
    loc = tuple(missing.get("loc", ()))
    if not loc:
        return None
    for e in errors:
        eloc = tuple(e.get("loc", ()))
        if (
            e.get("type") == "extra_forbidden"
            and eloc
            and eloc[:-1] == loc[:-1]
            and closest_key(str(eloc[-1]), [str(loc[-1])]) is not None
        ):
            return e
    return None
