"""Atomic file writes (a temporary file beside the target, then a rename) and a job's output
set (written into a staging folder, then moved into place)."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Iterable, Iterator, Sequence
from pathlib import Path

from noiselab.common.errors import InputError, arg

#: The output folder's argument (the command line shows ``--out``).
OUT = arg("out")


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


# ---------------------------------------------------------------- a job's output set

#: Prefix of the hidden folder a job's files are written into before they move into place.
STAGING_PREFIX = ".noiselab-staging-"


def check_output_dir(out: str | Path | None, names: Iterable[str] = ()) -> Path | None:
    """The ``--out`` folder as a Path, refused in one line (before any work) when it cannot
    receive the files ``names``: an empty path, a file, a folder that is not writable, a
    parent that is a file, or a folder where one of the files goes. Creates nothing."""
    if out is None:
        return None
    text = str(out)
    if not text.strip():
        raise InputError(f"{OUT}: empty path; allowed: a folder path (new or existing)")
    p = Path(text).expanduser()
    if p.exists():
        if not p.is_dir():
            raise InputError(f"{OUT}: {p} is a file; allowed: a folder path (new or existing)")
        if not os.access(p, os.W_OK | os.X_OK):
            raise InputError(f"{OUT}: {p} is not writable; allowed: a writable folder")
        for name in names:
            if (p / name).is_dir():
                raise InputError(
                    f"{OUT}: {p / name} is a folder where the file {name} goes; "
                    "allowed: a folder without it"
                )
        return p
    parent = p.absolute().parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        raise InputError(f"{OUT}: {parent} is a file, so {p} cannot be created; allowed: a folder")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"{OUT}: {p} cannot be created in {parent} (not writable)")
    return p


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True  # someone else's process: leave its folder alone
    return True


def remove_stale_staging(folder: Path) -> None:
    """Remove staging folders in ``folder`` left by killed runs (their process is gone)."""
    import shutil

    try:
        entries = list(folder.iterdir())
    except OSError:
        return
    for entry in entries:
        if not entry.name.startswith(STAGING_PREFIX):
            continue
        pid_text = entry.name.removeprefix(STAGING_PREFIX).split("-", 1)[0]
        if pid_text.isdigit() and _pid_alive(int(pid_text)):
            continue
        shutil.rmtree(entry, ignore_errors=True)


def write_output_set(out: str | Path, write: Callable[[Path], Sequence[Path]]) -> list[Path]:
    """Write a job's files as a set: ``write(stage)`` writes them into a hidden staging folder
    inside ``out``; then each moves into ``out`` (a rename on one file system), and the
    staging folder goes. A run killed while writing leaves only its staging folder, which the
    next run into ``out`` removes; ``out`` never holds a half-written file. Returns the paths."""
    import shutil

    folder = Path(out)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        remove_stale_staging(folder)
        stage = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{os.getpid()}-", dir=folder))
    except OSError as exc:
        raise InputError(
            f"{OUT}: {folder}: cannot write here ({exc.strerror or exc}); allowed: a writable "
            "folder"
        ) from None
    try:
        staged = list(write(stage))
        final = []
        for path in staged:
            target = folder / Path(path).name
            try:
                os.replace(path, target)
            except OSError as exc:
                raise InputError(
                    f"{OUT}: {target}: cannot write ({exc.strerror or exc}); allowed: a "
                    "writable file path"
                ) from None
            final.append(target)
        return final
    finally:
        shutil.rmtree(stage, ignore_errors=True)
