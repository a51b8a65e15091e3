"""Where a result came from: noiselab's version, the date, the input files' SHA-256, the
libraries' versions, the seed and the machine (the ``provenance`` block of reports and JSON).

The block changes from run to run (date, machine), so it is kept out of the results' own JSON
(``to_json``) and the golden files: it is added where a file is written.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import os
import platform
from collections.abc import Mapping
from importlib import metadata
from pathlib import Path
from typing import Any

#: The libraries whose versions can change a number (distribution names).
LIBRARIES = (
    "numpy",
    "scipy",
    "qiskit",
    "qiskit-aer",
    "pyscf",
    "pydantic",
    "matplotlib",
)


def file_sha256(path: str | Path) -> str | None:
    """SHA-256 (hex) of a file's bytes; None when it cannot be read (an inline profile)."""
    try:
        return hashlib.sha256(Path(path).read_bytes()).hexdigest()
    except OSError:
        return None


def library_versions(names: tuple[str, ...] = LIBRARIES) -> dict[str, str]:
    """Installed version of each library ("not installed" when absent)."""
    out = {}
    for name in names:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def noiselab_version() -> str:
    try:
        return metadata.version("noiselab")
    except metadata.PackageNotFoundError:
        return "unknown"


def provenance(
    files: Mapping[str, str | Path | None], seed: int | None, now: _dt.datetime | None = None
) -> dict[str, Any]:
    """The provenance block: ``files`` maps a role ("study", "profile") to a path (None or a
    word such as "<inline>" for a profile written inside the study)."""
    when = now or _dt.datetime.now(_dt.UTC)
    entries = {}
    for role, path in files.items():
        if path is None or str(path).startswith("<"):
            entries[role] = {"path": str(path) if path else None, "sha256": None}
        else:
            entries[role] = {"path": str(path), "sha256": file_sha256(path)}
    return {
        "noiselab_version": noiselab_version(),
        "date_utc": when.replace(microsecond=0).isoformat(),
        "files": entries,
        "libraries": {"python": platform.python_version(), **library_versions()},
        "seed": seed,
        "machine": {
            "platform": platform.platform(),
            "processor": platform.machine(),
            "cpus": os.cpu_count(),
        },
    }
