"""Safe YAML loading with one-line errors naming the file."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from noiselab.common.errors import input_error

MAX_YAML_BYTES = 2_000_000


def load_yaml_mapping(path: str | Path, what: str = "file") -> dict[str, Any]:
    """Read ``path`` with ``yaml.safe_load`` and return the top-level mapping.

    Raises :class:`~noiselab.common.errors.InputError` for a missing file, a directory,
    non-UTF-8 bytes, invalid YAML, tags that construct Python objects, an empty file or a
    top level that is not a mapping.
    """

    p = Path(path)
    src = str(p)
    if not p.exists():
        raise input_error(src, None, f"{what} not found")
    if p.is_dir():
        raise input_error(src, None, f"is a directory, expected a YAML {what}")
    if p.stat().st_size > MAX_YAML_BYTES:
        raise input_error(src, None, f"{what} is larger than {MAX_YAML_BYTES // 1_000_000} MB")
    try:
        text = p.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise input_error(src, None, "not UTF-8 text") from None
    except OSError as exc:
        raise input_error(src, None, f"cannot be read ({exc.strerror})") from None
    return parse_yaml_mapping(text, src, what)


def parse_yaml_mapping(text: str, source: str, what: str = "file") -> dict[str, Any]:
    """Parse YAML text (safe loader only) and require a mapping at the top level."""
    try:
        data = yaml.safe_load(text)
    except yaml.constructor.ConstructorError as exc:
        tag = getattr(exc, "problem", "") or "unsupported tag"
        line = f" (line {exc.problem_mark.line + 1})" if getattr(exc, "problem_mark", None) else ""
        raise input_error(
            source, None, f"YAML tag not allowed{line}: {tag}", "plain YAML"
        ) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or "syntax error"
        raise input_error(source, None, f"not valid YAML{where}: {problem}") from None
    except RecursionError:
        raise input_error(source, None, "YAML nested too deeply") from None
    if data is None:
        raise input_error(source, None, f"{what} is empty", "a YAML mapping of keys")
    if not isinstance(data, dict):
        raise input_error(
            source,
            None,
            f"top level is a {type(data).__name__}, not a mapping",
            "a YAML mapping of keys",
        )
    bad = [k for k in data if not isinstance(k, str)]
    if bad:
        raise input_error(source, repr(bad[0]), "keys must be strings")
    return data
