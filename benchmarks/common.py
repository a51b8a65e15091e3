"""Shared pieces of the benchmarks: machine description, timers, engine-call capture, results file.

Not part of the test suite: timings depend on the machine and on what else runs on it.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
import platform
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
STUDIES = HERE / "studies"
RESULTS = HERE / "results"


def machine_info() -> dict[str, Any]:
    """Cores, memory (GiB), load average and library versions, recorded with every result."""
    info: dict[str, Any] = {
        "hostname_hash": hashlib.sha256(platform.node().encode()).hexdigest()[:8],
        "cpu_count": os.cpu_count(),
        "python": platform.python_version(),
        "platform": platform.platform(),
    }
    with contextlib.suppress(OSError, ValueError):
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                info["memory_gib"] = round(int(line.split()[1]) / 2**20, 1)
    with contextlib.suppress(OSError):
        info["load_average_1min"] = round(os.getloadavg()[0], 2)
    with contextlib.suppress(OSError, ValueError):
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                info["cpu_model"] = line.split(":", 1)[1].strip()
                break
    for module in ("numpy", "qiskit", "qiskit_aer", "pyscf", "noiselab"):
        with contextlib.suppress(Exception):
            info[f"{module}_version"] = __import__(module).__version__
    return info


@contextlib.contextmanager
def timer() -> Iterator[dict[str, float]]:
    """``with timer() as t: ...``; afterwards ``t["s"]`` holds the wall time in seconds."""
    out: dict[str, float] = {}
    start = time.perf_counter()
    try:
        yield out
    finally:
        out["s"] = time.perf_counter() - start


# --------------------------------------------------------------------------- engine capture


@dataclass
class EngineCall:
    """One ``AerSimulator.run`` call made by noiselab: what was simulated, how long it took."""

    options: dict[str, Any]
    circuits: list[Any]
    run_kwargs: dict[str, Any]
    seconds: float
    fingerprint: str


@dataclass
class EngineLog:
    calls: list[EngineCall] = field(default_factory=list)

    @property
    def seconds(self) -> float:
        return sum(c.seconds for c in self.calls)

    def distinct(self) -> list[EngineCall]:
        """One call per distinct (circuits, noise model, options) fingerprint, first seen first."""
        seen: dict[str, EngineCall] = {}
        for call in self.calls:
            seen.setdefault(call.fingerprint, call)
        return list(seen.values())


def _fingerprint(options: dict[str, Any], circuits: list[Any], run_kwargs: dict[str, Any]) -> str:
    from qiskit import qasm3

    h = hashlib.sha256()
    for circuit in circuits:
        try:
            h.update(qasm3.dumps(circuit).encode())
        except Exception:  # custom noise instructions may not export: fall back to the repr
            h.update(
                repr(
                    [
                        (
                            i.operation.name,
                            i.operation.params,
                            [circuit.find_bit(q).index for q in i.qubits],
                        )
                        for i in circuit.data
                    ]
                ).encode()
            )
    for key in sorted(options):
        value = options[key]
        if key == "noise_model" and value is not None:
            value = json.dumps(value.to_dict(serializable=True), sort_keys=True, default=str)
        h.update(f"{key}={value!r}".encode())
    for key in sorted(run_kwargs):
        h.update(f"{key}={run_kwargs[key]!r}".encode())
    return h.hexdigest()


@contextlib.contextmanager
def capture_engine() -> Iterator[EngineLog]:
    """Record every ``AerSimulator.run`` (and its wall time up to ``result()``) made inside."""
    from qiskit_aer import AerSimulator

    log = EngineLog()
    original = AerSimulator.run

    def wrapped(self: Any, circuits: Any, *args: Any, **kwargs: Any) -> Any:
        circuit_list = list(circuits) if isinstance(circuits, list | tuple) else [circuits]
        options = dict(self.options.items())
        job = original(self, circuits, *args, **kwargs)
        start = time.perf_counter()
        result = job.result()  # aer jobs run asynchronously: time until the result is there
        seconds = time.perf_counter() - start
        log.calls.append(
            EngineCall(
                options=options,
                circuits=circuit_list,
                run_kwargs=dict(kwargs),
                seconds=seconds,
                fingerprint=_fingerprint(options, circuit_list, dict(kwargs)),
            )
        )
        return _DoneJob(job, result)

    AerSimulator.run = wrapped  # type: ignore[method-assign]
    try:
        yield log
    finally:
        AerSimulator.run = original  # type: ignore[method-assign]


class _DoneJob:
    """Stands in for an AerJob whose result is already known."""

    def __init__(self, job: Any, result: Any) -> None:
        self._job = job
        self._result = result

    def result(self, *args: Any, **kwargs: Any) -> Any:
        return self._result

    def __getattr__(self, name: str) -> Any:
        return getattr(self._job, name)


def rerun_bare(calls: list[EngineCall], repeats: int = 1) -> float:
    """Wall time (s) of bare qiskit-aer runs of the given calls: a fresh simulator, same options.

    The best of ``repeats`` per call is kept (the engine's own time, without machine hiccups).
    """
    from qiskit_aer import AerSimulator

    total = 0.0
    for call in calls:
        options = {k: v for k, v in call.options.items() if v is not None}
        best = float("inf")
        for _ in range(repeats):
            sim = AerSimulator(**options)
            start = time.perf_counter()
            sim.run(call.circuits, **call.run_kwargs).result()
            best = min(best, time.perf_counter() - start)
        total += best
    return total


# --------------------------------------------------------------------------- results file


def results_path(date: str | None = None) -> Path:
    date = date or _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d")
    return RESULTS / f"{date}.json"


def record(name: str, entry: dict[str, Any], path: Path | None = None) -> Path:
    """Merge one benchmark's entry into today's results file (atomic rewrite)."""
    from noiselab.common.atomic import write_text_atomic

    path = path or results_path()
    data: dict[str, Any] = {}
    if path.exists():
        with contextlib.suppress(json.JSONDecodeError, OSError):
            data = json.loads(path.read_text())
    data.setdefault("benchmarks", {})[name] = entry
    data["updated_utc"] = _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
    write_text_atomic(
        path, json.dumps(data, indent=2, sort_keys=True, default=_json_default) + "\n"
    )
    return path


def _json_default(value: Any) -> Any:
    with contextlib.suppress(Exception):
        import numpy as np

        if isinstance(value, np.generic):
            return value.item()
        if isinstance(value, np.ndarray):
            return value.tolist()
    if isinstance(value, Path):
        return str(value)
    return repr(value)


def now_utc() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


def python_exe() -> str:
    return sys.executable
