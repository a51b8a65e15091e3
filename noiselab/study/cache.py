"""Results cache: emulated measurement data and expensive context steps in one SQLite file.

One file (WAL mode) in the user cache folder, shared by every process: each process (and thread)
opens its own connection, waits on a busy timeout, and writes one entry per transaction, so a
reader never sees a half-written entry. Keys are SHA-256 digests of everything that determines
the stored value, including the versions of the packages that computed it.

Over 400 lines: the SQLite store, the record packing it stores, the job keys and the
``CachingRunner`` that reads and writes through it share the key and packing rules; the
runner is the store's only simulation client.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import io
import json
import os
import sqlite3
import threading
import time
from collections.abc import Iterator
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import platformdirs

from noiselab.common.errors import InputError, arg
from noiselab.common.reading import read_input_bytes
from noiselab.common.yamlio import parse_yaml_mapping
from noiselab.emulate.engine import BasisDistributions, with_readout
from noiselab.mitigate.experiment import make_runner, variant_inputs, variant_key_material
from noiselab.mitigate.variants import CircuitVariant
from noiselab.study.spec import device_profile_path

CACHE_FILE_NAME = "results-v1.sqlite"
BUSY_TIMEOUT_S = 60.0
_SCHEMA = (
    "CREATE TABLE IF NOT EXISTS entries ("
    " kind TEXT NOT NULL, key TEXT NOT NULL, payload BLOB NOT NULL,"
    " engine_seconds REAL NOT NULL DEFAULT 0, created_unix REAL NOT NULL,"
    " PRIMARY KEY (kind, key))"
)


def default_cache_path() -> Path:
    """The cache file in the user cache folder (``platformdirs.user_cache_dir('noiselab')``)."""
    env = os.environ.get("NOISELAB_CACHE")
    if env:
        return Path(env)

    return Path(platformdirs.user_cache_dir("noiselab")) / CACHE_FILE_NAME


@dataclasses.dataclass(frozen=True)
class Versions:
    """Versions of the packages whose output the cache stores."""

    items: tuple[tuple[str, str], ...]

    def as_text(self) -> str:
        return ";".join(f"{k}={v}" for k, v in self.items)


_VERSIONS: Versions | None = None


def package_versions() -> Versions:
    """Versions of noiselab, qiskit, qiskit-aer and numpy (part of every simulation key)."""
    global _VERSIONS
    if _VERSIONS is None:
        items = []
        for dist in ("noiselab", "qiskit", "qiskit-aer", "numpy"):
            try:
                items.append((dist, metadata.version(dist)))
            except metadata.PackageNotFoundError:
                items.append((dist, "absent"))
        _VERSIONS = Versions(tuple(items))
    return _VERSIONS


def digest(*parts: Any) -> str:
    """SHA-256 hex digest of ``parts`` (bytes, str, or JSON-able values) plus package versions."""
    h = hashlib.sha256()
    h.update(package_versions().as_text().encode())
    for part in parts:
        h.update(b"\x1f")
        h.update(_as_bytes(part))
    return h.hexdigest()


def _as_bytes(part: Any) -> bytes:
    if isinstance(part, bytes | bytearray | memoryview):
        return bytes(part)
    if isinstance(part, str):
        return part.encode("utf-8")
    return json.dumps(part, sort_keys=True, default=_json_default, separators=(",", ":")).encode()


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.ndarray):
        return {"__array__": obj.tolist(), "dtype": str(obj.dtype)}
    if isinstance(obj, np.generic):
        return obj.item()
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return dataclasses.asdict(obj)
    if hasattr(obj, "model_dump"):
        return obj.model_dump(mode="json")
    if isinstance(obj, set | frozenset):
        return sorted(obj, key=repr)
    return repr(obj)


# ---------------------------------------------------------------- record (de)serialization


def pack_record(record: Any) -> bytes:
    """Serialize a frozen dataclass of arrays and plain values (e.g. BasisDistributions) to bytes.

    Arrays go into an ``np.savez`` archive; the other fields into a JSON header inside it.
    """
    arrays: dict[str, np.ndarray] = {}
    plain: dict[str, Any] = {}
    for field in dataclasses.fields(record):
        value = getattr(record, field.name)
        if isinstance(value, np.ndarray):
            arrays[field.name] = value
        else:
            plain[field.name] = value
    header = json.dumps(plain, default=_json_default, sort_keys=True)
    buf = io.BytesIO()
    np.savez(buf, __header__=np.frombuffer(header.encode(), dtype=np.uint8), **arrays)
    return buf.getvalue()


def unpack_record(cls: type, payload: bytes) -> Any:
    """Inverse of :func:`pack_record` for dataclass ``cls`` (lists become tuples)."""
    with np.load(io.BytesIO(payload), allow_pickle=False) as archive:
        plain = json.loads(bytes(archive["__header__"]).decode())
        arrays = {k: archive[k] for k in archive.files if k != "__header__"}
    names = {f.name for f in dataclasses.fields(cls)}
    kwargs: dict[str, Any] = {k: _tuplify(v) for k, v in plain.items() if k in names}
    kwargs.update({k: v for k, v in arrays.items() if k in names})
    return cls(**kwargs)


def unpack_or_none(cls: type, payload: bytes) -> Any:
    """:func:`unpack_record`, or None when the payload is damaged (a cache miss, never a crash)."""
    try:
        return unpack_record(cls, payload)
    except Exception:  # any damage (truncated zip, bad JSON, wrong fields) costs a recomputation
        return None


def _tuplify(value: Any) -> Any:
    if isinstance(value, list):
        return tuple(_tuplify(v) for v in value)
    return value


# ---------------------------------------------------------------- the store


class ResultsCache:
    """A key-value store of bytes in SQLite, safe for concurrent processes and threads.

    ``path=None`` gives a disabled cache (every lookup misses, nothing is written).
    """

    def __init__(self, path: str | Path | None) -> None:
        self.path: Path | None = None if path is None else Path(path).expanduser()
        self._local = threading.local()
        if self.path is not None:
            self._prepare()

    @classmethod
    def disabled(cls) -> ResultsCache:
        return cls(None)

    @property
    def enabled(self) -> bool:
        return self.path is not None

    def __getstate__(self) -> dict[str, Any]:
        # Connections do not cross process boundaries; the child reopens its own.
        return {"path": self.path}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.path = state["path"]
        self._local = threading.local()

    def _prepare(self) -> None:
        assert self.path is not None
        if self.path.exists() and self.path.is_dir():
            where = f"{self.path}: {arg('cache')}"
            raise InputError(f"{where}: is a folder; allowed: a cache file path")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            with self._connection() as conn:
                conn.execute(_SCHEMA)
        except (OSError, sqlite3.DatabaseError) as exc:
            raise InputError(
                f"{self.path}: {arg('cache')}: cannot open the results cache ({exc}); "
                "allowed: a writable SQLite file path, or no cache"
            ) from None

    @contextlib.contextmanager
    def _connection(self) -> Iterator[sqlite3.Connection]:
        conn = getattr(self._local, "conn", None)
        pid = getattr(self._local, "pid", None)
        if conn is None or pid != os.getpid():
            conn = sqlite3.connect(
                str(self.path),
                timeout=BUSY_TIMEOUT_S,
                isolation_level=None,
                check_same_thread=False,
            )
            conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = NORMAL")
            self._local.conn = conn
            self._local.pid = os.getpid()
        yield conn

    def get(self, kind: str, key: str) -> tuple[bytes, float] | None:
        """The stored payload and engine seconds for ``(kind, key)``, or None."""
        if self.path is None:
            return None
        try:
            with self._connection() as conn:
                row = conn.execute(
                    "SELECT payload, engine_seconds FROM entries WHERE kind = ? AND key = ?",
                    (kind, key),
                ).fetchone()
        except (sqlite3.DatabaseError, OSError):
            return None  # a damaged cache only costs a recomputation
        return None if row is None else (bytes(row[0]), float(row[1]))

    def put(self, kind: str, key: str, payload: bytes, engine_seconds: float = 0.0) -> None:
        """Store one entry in its own transaction (first writer wins)."""
        if self.path is None:
            return
        try:
            with self._connection() as conn:
                conn.execute("BEGIN IMMEDIATE")
                try:
                    conn.execute(
                        "INSERT OR IGNORE INTO entries"
                        " (kind, key, payload, engine_seconds, created_unix)"
                        " VALUES (?, ?, ?, ?, ?)",
                        (kind, key, sqlite3.Binary(payload), float(engine_seconds), time.time()),
                    )
                    conn.execute("COMMIT")
                except BaseException:
                    conn.execute("ROLLBACK")
                    raise
        except (sqlite3.DatabaseError, OSError) as exc:
            # caching is an optimisation; never fail a run because of it, but say so once
            _warn_write_failed(self.path, exc)

    def discard(self, kind: str, key: str) -> None:
        """Delete one entry (a damaged one, so that the next put stores a good one)."""
        if self.path is None:
            return
        try:
            with self._connection() as conn:
                conn.execute("DELETE FROM entries WHERE kind = ? AND key = ?", (kind, key))
        except (sqlite3.DatabaseError, OSError) as exc:
            _warn_write_failed(self.path, exc)

    def count(self, kind: str | None = None) -> int:
        """Number of stored entries (of one kind)."""
        if self.path is None:
            return 0
        with self._connection() as conn:
            if kind is None:
                return int(conn.execute("SELECT COUNT(*) FROM entries").fetchone()[0])
            return int(
                conn.execute("SELECT COUNT(*) FROM entries WHERE kind = ?", (kind,)).fetchone()[0]
            )

    def close(self) -> None:
        conn = getattr(self._local, "conn", None)
        if conn is not None:
            conn.close()
            self._local.conn = None


_WARNED: set[str] = set()


def _warn_write_failed(path: Path | None, exc: BaseException) -> None:
    """One line on stderr, once per cache file and process, when a cache write fails."""
    key = str(path)
    if key in _WARNED:
        return
    _WARNED.add(key)
    import sys

    from noiselab.common.errors import one_line

    sys.stderr.write(
        one_line(
            f"noiselab: warning: results cache {path}: cannot store results ({exc}); this "
            "run continues, but its results will not be reused (free disk space or use --cache)"
        )
        + "\n"
    )
    sys.stderr.flush()


def open_cache(path: str | Path | None = None, *, enabled: bool = True) -> ResultsCache:
    """The cache at ``path`` (default: the user cache folder), or a disabled one."""
    if not enabled:
        return ResultsCache.disabled()
    return ResultsCache(default_cache_path() if path is None else path)


# ---------------------------------------------------------------- the caching runner

SIMULATION_KIND = "basis-distributions-v1"


def _simulate(item: tuple[Any, Any]) -> Any:
    """Executor task: one simulation of ``variant`` for ``experiment`` (module level: picklable)."""
    experiment, variant = item
    return make_runner(experiment)(variant)


def _state_variant(variant: Any) -> Any:
    """``variant`` without its readout-only transforms (``CircuitTransform.readout_only``), or
    None when it has none: both need the same state simulation."""
    transforms = getattr(variant, "transforms", ())
    if not any(getattr(t, "readout_only", False) for t in transforms):
        return None
    return CircuitVariant(tuple(t for t in transforms if not t.readout_only))


class CachingRunner:
    """``runner(variant) -> BasisDistributions``, shared by every recipe of a job.

    Looks in memory, then in the results cache, and only then simulates. ``simulations`` counts
    the simulations actually run; ``requested`` the distinct variants asked for.
    """

    def __init__(
        self, experiment: Any, cache: ResultsCache | None = None, base: Any = None
    ) -> None:
        self.experiment = experiment
        self.cache = cache if cache is not None else ResultsCache.disabled()
        self._base = base if base is not None else make_runner(experiment)
        self._memory: dict[Any, Any] = {}
        self._lock = threading.Lock()
        self.simulations = 0
        self.cache_hits = 0
        self.engine_seconds = 0.0
        self.requested: set[Any] = set()

    @property
    def calibrator(self) -> Any:
        """The experiment's own readout calibrator (``experiment.calibrator``, memoized with the
        context), so a runner and ``run_recipe``'s default share one memo."""
        return self.experiment.calibrator

    def key(self, variant: Any) -> str:
        """SHA-256 of everything that determines this variant's simulation."""
        return digest(SIMULATION_KIND, variant_key_material(self.experiment, variant))

    def _lookup(self, variant: Any) -> Any:
        if variant in self._memory:
            return self._memory[variant]
        hit = self.cache.get(SIMULATION_KIND, self.key(variant))
        if hit is None:
            return None
        value = unpack_or_none(BasisDistributions, hit[0])
        if value is None:  # unreadable entry: dropped and simulated again
            self.cache.discard(SIMULATION_KIND, self.key(variant))
            return None
        self.cache_hits += 1
        self._memory[variant] = value
        return value

    def _store(self, variant: Any, value: Any) -> None:
        self._memory[variant] = value
        self.simulations += 1
        seconds = float(getattr(value, "engine_seconds", 0.0) or 0.0)
        self.engine_seconds += seconds
        self.cache.put(SIMULATION_KIND, self.key(variant), pack_record(value), seconds)

    def __call__(self, variant: Any) -> Any:
        shared = _state_variant(variant)
        if shared is not None:  # readout-only transforms: the state simulation is shared
            with self._lock:
                self.requested.add(variant)
                if variant in self._memory:
                    return self._memory[variant]
            base = self(shared)
            if base.is_exact:
                compiled, profile, _ = variant_inputs(self.experiment, variant)
                with self._lock:
                    self._memory[variant] = with_readout(base, compiled, profile)
                    return self._memory[variant]
        with self._lock:
            self.requested.add(variant)
            value = self._lookup(variant)
            if value is None:
                value = self._base(variant)
                self._store(variant, value)
            return value

    def prefetch(self, variants: Any, executor: Any = None, on_done: Any = None) -> int:
        """Simulate the distinct ``variants`` not yet known, through ``executor`` if given.

        Returns how many were simulated. ``on_done(done, total)`` reports progress.
        """
        with self._lock:
            todo = []
            for v in dict.fromkeys(variants):
                self.requested.add(v)
                v = _state_variant(v) or v  # readout-only: simulate the state once
                if v not in todo and self._lookup(v) is None:
                    todo.append(v)
        if not todo:
            return 0
        total = len(todo)
        if executor is None or getattr(executor, "in_process", True):
            for i, v in enumerate(todo):
                with self._lock:
                    if v not in self._memory:
                        self._store(v, self._base(v))
                if on_done is not None:
                    on_done(i + 1, total)
            return total
        done = [0]

        def finished(index: int, value: Any) -> None:
            with self._lock:
                if todo[index] not in self._memory:
                    self._store(todo[index], value)
            done[0] += 1
            if on_done is not None:
                on_done(done[0], total)

        executor.map(_simulate, [(self.experiment, v) for v in todo], on_result=finished)
        return total


# ---------------------------------------------------------------- whole-job results

JOB_KIND = "job-result-v1"
_SOURCE_DIGEST: str | None = None


def source_digest() -> str:
    """SHA-256 over noiselab's own source files (an edited checkout invalidates job results)."""
    global _SOURCE_DIGEST
    if _SOURCE_DIGEST is None:
        root = Path(__file__).resolve().parents[1]
        h = hashlib.sha256()
        for p in sorted(root.rglob("*.py")):
            h.update(str(p.relative_to(root)).encode())
            h.update(p.read_bytes())
        _SOURCE_DIGEST = h.hexdigest()
    return _SOURCE_DIGEST


def job_key(job: str, study_path: str | Path, options: dict[str, Any]) -> str | None:
    """Key of a whole job on a study file: the file's bytes, its device file's bytes, the
    options, noiselab's source and the package versions (PySCF included). None when the
    inputs cannot be read cheaply (the job then runs and reports the problem itself)."""
    p = Path(study_path)
    try:
        raw = read_input_bytes(p, "study file")
        data = parse_yaml_mapping(raw.decode("utf-8"), str(p))
        device = data.get("device")
        device_bytes = b""
        if isinstance(device, str):
            device_bytes = read_input_bytes(device_profile_path(device, p), "device profile")
    except (OSError, UnicodeDecodeError, InputError):
        return None

    try:
        pyscf_version = metadata.version("pyscf")
    except metadata.PackageNotFoundError:
        pyscf_version = "absent"
    return digest(JOB_KIND, job, str(p), raw, device_bytes, options, source_digest(), pyscf_version)
