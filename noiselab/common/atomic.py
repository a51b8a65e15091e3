"""Atomic file writes: write to a temporary file beside the target, then rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from noiselab.common.errors import InputError


@contextlib.contextmanager
def atomic_path(target: str | Path) -> Iterator[Path]:
    """Yield a temporary path in the target's folder; on success rename it over ``target``.

    On an exception the temporary file is removed and ``target`` is left as it was.
    Use for writers that need a file name (matplotlib ``savefig``).
    """
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(
            prefix=f".{target.name}.", suffix=".tmp" + target.suffix, dir=target.parent
        )
    except OSError as exc:
        raise InputError(
            f"{target}: cannot write here ({exc.strerror or exc}); allowed: a writable folder"
        ) from None
    os.close(fd)
    tmp_path = Path(tmp)
    # mkstemp creates 0600; give the final file the permissions an ordinary open() would.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp_path, 0o666 & ~umask)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()


def write_text_atomic(target: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``target`` atomically; return the path."""
    with atomic_path(target) as tmp, open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())
    return Path(target)
