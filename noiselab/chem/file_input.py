"""Study-relative input files: a path from a study section, resolved and read (bounded)."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

from noiselab.common.errors import input_error, quote
from noiselab.common.reading import read_input_bytes


def resolve_file(value: Any, base: Path, src: str, key: str, what: str) -> tuple[Path, bytes]:
    """(absolute path, bytes) of ``value`` (relative to ``base``), read through
    ``read_input_bytes``; errors name ``src: key: path``."""
    if not isinstance(value, str) or not value.strip():
        raise input_error(src, key, f"{quote(value)} is not a file path", f"the path of {what}")
    path = Path(value).expanduser()
    path = path if path.is_absolute() else base / path
    return path, read_input_bytes(path, what=what, source=f"{src}: {key}: {path}")


def only_key(data: Any, key: str, src: str, section: str) -> Any:
    """``data[key]`` of a section that must be exactly ``{key: FILE}``."""
    if not isinstance(data, dict) or set(data) != {key}:
        shown = sorted(data) if isinstance(data, dict) else type(data).__name__
        raise input_error(src, section, f"got {quote(shown)}", f"{{{key}: FILE}}")
    return data[key]


def read_unchanged(file: str, sha256: str, what: str, where: str) -> bytes:
    """The bytes of an input file the study was validated with; refused in one line when the
    file changed since (its SHA-256 is part of the cache keys)."""
    raw = read_input_bytes(file, what=what, source=where)
    if hashlib.sha256(raw).hexdigest() != sha256:
        raise input_error(
            where,
            None,
            "the file changed after the study was read",
            "an unchanged file (run again)",
        )
    return raw
