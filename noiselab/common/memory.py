"""Memory actually available to this process, and the share of it noiselab lets a job use.

Available memory is the smallest of: ``MemAvailable`` of ``/proc/meminfo`` (else
``os.sysconf``), the room left under this process's cgroup limit (v2 ``memory.max`` of its own
cgroup and of every parent, or v1 ``memory.limit_in_bytes``), and the room left under the
address-space limit (``ulimit -v``, ``RLIMIT_AS``) given the current virtual size. A job may
plan to use :data:`MEMORY_SHARE` of it (the rest stays for the interpreter's own growth, the
page cache and the other programs of the machine). ``$NOISELAB_MEMORY_LIMIT_BYTES`` replaces
the whole computation (tests): it is the memory the job may use.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from pathlib import Path

from noiselab.common.errors import ProblemTooLargeError

#: Environment variable that overrides the usable memory (bytes); used by tests.
MEMORY_LIMIT_ENV = "NOISELAB_MEMORY_LIMIT_BYTES"
#: Share of the available memory one job may plan to use.
MEMORY_SHARE = 0.8
GIB = float(2**30)


def format_bytes(n: float) -> str:
    """``n`` bytes for a message: '1.5 GiB', '300 MiB', '1000 bytes'."""
    for unit, size in (("TiB", 2.0**40), ("GiB", 2.0**30), ("MiB", 2.0**20), ("KiB", 2.0**10)):
        if n >= size:
            return f"{n / size:.3g} {unit}"
    return f"{int(n)} bytes"


@dataclass(frozen=True)
class MemoryBudget:
    """What a job may use (``usable``) and where that number comes from (for messages)."""

    usable: int
    available: int
    limited_by: str

    def describe(self) -> str:
        """E.g. '9.6 GiB usable (80% of the 12.0 GiB available, limited by cgroup memory.max)'."""
        if self.limited_by == MEMORY_LIMIT_ENV:
            return f"{format_bytes(self.usable)} usable (set by ${MEMORY_LIMIT_ENV})"
        return (
            f"{format_bytes(self.usable)} usable ({MEMORY_SHARE:.0%} of the "
            f"{format_bytes(self.available)} available, limited by {self.limited_by})"
        )


def _read_text(path: Path) -> str | None:
    try:
        return path.read_text()
    except (OSError, UnicodeDecodeError):
        return None


def _meminfo_bytes(key: str) -> int | None:
    text = _read_text(Path("/proc/meminfo"))
    for line in (text or "").splitlines():
        if line.startswith(key + ":"):
            try:
                return int(line.split()[1]) * 1024
            except (IndexError, ValueError):
                return None
    return None


def _cgroup_room_bytes() -> int | None:
    """Room left under this process's cgroup memory limits (None: no limit found)."""
    rooms: list[int] = []
    root = Path("/sys/fs/cgroup")
    own = _read_text(Path("/proc/self/cgroup")) or ""
    v2 = next((line[3:] for line in own.splitlines() if line.startswith("0::")), None)
    if v2 is not None:
        folder = (root / v2.strip().lstrip("/")).resolve()
        while True:
            limit = (_read_text(folder / "memory.max") or "").strip()
            current = (_read_text(folder / "memory.current") or "").strip()
            if limit and limit != "max" and current:
                with contextlib.suppress(ValueError):
                    rooms.append(max(0, int(limit) - int(current)))
            if folder == root or root not in folder.parents:
                break
            folder = folder.parent
    v1 = root / "memory"
    limit = (_read_text(v1 / "memory.limit_in_bytes") or "").strip()
    usage = (_read_text(v1 / "memory.usage_in_bytes") or "").strip()
    if limit and usage:
        try:
            if int(limit) < 2**60:  # "no limit" reads as a huge number
                rooms.append(max(0, int(limit) - int(usage)))
        except ValueError:
            pass
    return min(rooms) if rooms else None


def _address_space_room_bytes() -> int | None:
    """Room left under RLIMIT_AS (ulimit -v) given the current virtual size, or None."""
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    except (ImportError, OSError, ValueError, AttributeError):
        return None
    if soft == resource.RLIM_INFINITY or soft < 0:
        return None
    size = 0
    for line in (_read_text(Path("/proc/self/status")) or "").splitlines():
        if line.startswith("VmSize:"):
            try:
                size = int(line.split()[1]) * 1024
            except (IndexError, ValueError):
                size = 0
    return max(0, int(soft) - size)


def memory_budget() -> MemoryBudget:
    """The memory this process may plan to use, and why (see the module docstring)."""
    override = os.environ.get(MEMORY_LIMIT_ENV)
    if override:
        try:
            value = int(float(override))
        except (ValueError, OverflowError) as exc:
            raise ProblemTooLargeError(
                f"${MEMORY_LIMIT_ENV}: {override[:40]!r} is not a number; allowed: bytes, e.g. 8e9"
            ) from exc
        return MemoryBudget(usable=value, available=value, limited_by=MEMORY_LIMIT_ENV)
    candidates: list[tuple[int, str]] = []
    avail = _meminfo_bytes("MemAvailable")
    if avail is None:
        try:
            avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            avail = 8 * 2**30  # unknown platform: assume a modest laptop
    candidates.append((int(avail), "the machine's free memory"))
    cgroup = _cgroup_room_bytes()
    if cgroup is not None:
        candidates.append((cgroup, "the cgroup memory limit"))
    address = _address_space_room_bytes()
    if address is not None:
        candidates.append((address, "the address-space limit (ulimit -v)"))
    available, why = min(candidates)
    return MemoryBudget(usable=int(available * MEMORY_SHARE), available=available, limited_by=why)


def available_memory_bytes() -> int:
    """Memory a job may plan to use, in bytes (:func:`memory_budget`'s ``usable``)."""
    return memory_budget().usable
