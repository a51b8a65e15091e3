"""Bounded reading of input files: regular files only, never more than a size limit.

Every file noiselab reads from the user (profiles, studies, a study's device file, and the
bytes that go into a job's cache key) goes through :func:`read_input_bytes`. Symlinks are
resolved first and the target must be a regular file, so a named pipe or a device node (or a
symlink to one) is refused at once instead of blocking or streaming forever; the file is then
opened non-blocking and read up to ``limit + 1`` bytes, so a file that grows after the check
still cannot make the read unbounded.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from noiselab.common.errors import input_error

#: Largest input file (bytes). Shipped profiles and studies are a few kB.
MAX_INPUT_BYTES = 2_000_000

_KINDS = (
    (stat.S_ISDIR, "a directory"),
    (stat.S_ISFIFO, "a named pipe"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


def _kind(mode: int) -> str:
    for test, name in _KINDS:
        if test(mode):
            return name
    return "not a regular file"


def read_input_bytes(
    path: str | Path, what: str = "file", limit: int = MAX_INPUT_BYTES, source: str | None = None
) -> bytes:
    """The bytes of the regular file ``path`` (after resolving symlinks), at most ``limit``.

    Raises a one-line :class:`~noiselab.common.errors.InputError` naming ``source`` (default:
    the path) for a missing file, anything that is not a regular file, an unreadable file and
    a file larger than ``limit`` bytes.
    """
    p = Path(path)
    src = source or str(p)
    try:
        real = p.resolve(strict=True)
        st = os.stat(real)
    except FileNotFoundError:
        raise input_error(src, None, f"{what} not found") from None
    except (OSError, RuntimeError) as exc:  # RuntimeError: a symlink loop (older Pythons)
        raise input_error(src, None, f"{what} cannot be opened ({_reason(exc)})") from None
    if not stat.S_ISREG(st.st_mode):
        target = "" if real == p.absolute() else f" (resolves to {real})"
        raise input_error(
            src, None, f"is {_kind(st.st_mode)}{target}", f"a regular {what} (YAML text)"
        )
    if st.st_size > limit:
        raise input_error(src, None, f"{what} is {st.st_size} bytes", f"at most {limit} bytes")
    try:
        fd = os.open(real, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0))
    except OSError as exc:
        raise input_error(src, None, f"{what} cannot be opened ({_reason(exc)})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):  # swapped between stat and open
            raise input_error(src, None, "is not a regular file", f"a regular {what}")
        chunks: list[bytes] = []
        left = limit + 1
        while left > 0:
            chunk = os.read(fd, min(left, 1 << 16))
            if not chunk:
                break
            chunks.append(chunk)
            left -= len(chunk)
    except OSError as exc:
        raise input_error(src, None, f"{what} cannot be read ({_reason(exc)})") from None
    finally:
        os.close(fd)
    data = b"".join(chunks)
    if len(data) > limit:
        raise input_error(src, None, f"{what} is larger than {limit} bytes", f"at most {limit}")
    return data


def read_input_text(
    path: str | Path, what: str = "file", limit: int = MAX_INPUT_BYTES, source: str | None = None
) -> str:
    """:func:`read_input_bytes` decoded as UTF-8 (one-line error when it is not)."""
    data = read_input_bytes(path, what, limit, source)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise input_error(
            source or str(path), None, f"not UTF-8 text (byte {exc.start})", "UTF-8 YAML text"
        ) from None


def _reason(exc: BaseException) -> str:
    return getattr(exc, "strerror", None) or type(exc).__name__
