"""Where the shipped device profiles and studies are, in a source tree and in an installed wheel.

The single source of truth is the repository's top-level ``configs/`` folder. A wheel carries a
copy of it as ``noiselab/shipped/`` (copied by the build step in ``setup.py``); an editable
install and a source checkout read ``configs/`` itself.
"""

from __future__ import annotations

import re
from pathlib import Path

from noiselab.common.errors import InputError

KINDS = ("devices", "studies")

#: a name, not a path: letters, digits, '-', '_' and '.', no folder separator, no YAML suffix
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def shipped_root() -> Path | None:
    """The folder holding ``devices/`` and ``studies/``, or None if neither copy is found."""
    package = Path(__file__).resolve().parents[1]
    for root in (package / "shipped", package.parent / "configs"):
        if (root / "devices").is_dir() and (root / "studies").is_dir():
            return root
    return None


def shipped_files(kind: str) -> list[Path]:
    """The shipped YAML files of one kind ("devices" or "studies"), sorted by name."""
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}, not {kind!r}")
    root = shipped_root()
    return sorted((root / kind).glob("*.yaml")) if root is not None else []


def looks_like_name(value: str) -> bool:
    """True for a bare shipped name such as ``cobaltgrid-12`` (no folder, no .yaml suffix)."""
    return bool(_NAME.match(value)) and not value.lower().endswith((".yaml", ".yml"))


def shipped_path(kind: str, name: str, source: str, key: str) -> Path:
    """The shipped file called ``name``; a one-line InputError naming ``source`` and ``key``
    with the shipped names otherwise."""
    files = {p.stem: p for p in shipped_files(kind)}
    if name in files:
        return files[name]
    allowed = ", ".join(files) or "none found in this installation"
    what = "device profile" if kind == "devices" else "study"
    raise InputError(
        f"{source}: {key}: no shipped {what} named {name!r} and no such file; "
        f"allowed: a path to a YAML file, or a shipped name ({allowed})"
    )
