"""What every study job does first and last, once: the clock, the study with its command-line
overrides (read bounded and validated before anything else), the results cache, the executor
(made before the slow context, so a bad cluster address fails at once), the record's common
fields, and a whole-job result stored in and read back from the cache.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import os
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from noiselab.common.errors import InputError, arg
from noiselab.emulate.memory import MEMORY_LIMIT_ENV
from noiselab.study.cache import JOB_KIND, ResultsCache, open_cache
from noiselab.study.context import StudyContext
from noiselab.study.executor import make_executor
from noiselab.study.results import RunStats
from noiselab.study.spec import Study, load_study


@dataclasses.dataclass(frozen=True)
class JobStart:
    """The first steps of a study job: its clock, its validated study and its results cache."""

    study: Study
    store: ResultsCache
    t0: float


def start_job(
    study_or_path: Study | str | Path,
    cache: ResultsCache | str | Path | bool | None,
    *,
    seed: int | str | None = None,
    shots: int | str | None = None,
    method: str | None = None,
    trajectories: int | str | None = None,
    pauli_ok: bool = False,
) -> JobStart:
    """Start the clock, resolve the study with its overrides (one-line refusals before any
    work), then open the results cache (``cache``: see :func:`as_cache`). ``pauli_ok``: the
    job runs under ``emulation.method: pauli_propagation`` (assess and compare; others refuse
    it)."""
    t0 = time.perf_counter()
    study = resolve_study(study_or_path, seed, shots, method, trajectories)
    if not pauli_ok:
        refuse_pauli_method(study)
    return JobStart(study, as_cache(cache), t0)


def refuse_pauli_method(study: Study) -> None:
    """Refuse in one line a job other than assess under ``emulation.method: pauli_propagation``
    (it has no outcome distributions for the other jobs' recipes)."""
    if study.emulation.method == "pauli_propagation":
        raise InputError(
            f"{study.source}: emulation.method: pauli_propagation serves assess and compare only; "
            f"allowed for this job: auto, density_matrix, trajectory ({arg('method')})"
        )


def as_cache(cache: ResultsCache | str | Path | bool | None) -> ResultsCache:
    """A ResultsCache from a cache, a path, None / True (the user cache folder) or False (none)."""
    if isinstance(cache, ResultsCache):
        return cache
    if cache is False:
        return ResultsCache.disabled()
    if cache is None or cache is True:
        return open_cache()
    return open_cache(cache)


def resolve_study(
    study_or_path: Study | str | Path,
    seed: int | None,
    shots: int | None,
    method: str | None = None,
    trajectories: int | None = None,
) -> Study:
    """A Study from a Study or a path, with optional seed, shot and emulation overrides."""
    if isinstance(study_or_path, Study):
        return study_or_path.with_overrides(
            seed=seed, shots=shots, method=method, trajectories=trajectories
        )
    overrides = {"seed": seed, "shots": shots, "method": method, "trajectories": trajectories}
    return load_study(study_or_path, overrides)


def override_key_options(
    study: Study,
    seed: int | str | None,
    shots: int | str | None,
    method: str | None,
    trajectories: int | str | None,
) -> dict[str, Any]:
    """Job-key options of validated overrides (``1e6`` and ``1000000`` give one key)."""
    return {
        "seed": None if seed is None else study.seed,
        "shots": None if shots is None else study.shots,
        **emulation_key_options(
            method, None if trajectories is None else study.emulation.trajectories
        ),
    }


def emulation_key_options(method: str | None, trajectories: int | None) -> dict[str, Any]:
    """Job-key options of the emulation overrides; "auto" depends on the memory available, so
    the test override of the memory guard enters too."""
    return {
        "method": method,
        "trajectories": trajectories,
        "memory_limit": os.environ.get(MEMORY_LIMIT_ENV),
    }


def job_fields(study: Study, ctx: StudyContext, stats: RunStats) -> dict[str, Any]:
    """Fields that every assess and tune result takes from the study, its context and the run."""
    return {
        "context": ctx.summary(),
        "target_mha": study.target_mha,
        "confidence": study.confidence,
        "shots": study.shots,
        "seed": study.seed,
        "stats": stats,
        "emulation_method": ctx.emulation_method,
        "emulation_notice": ctx.emulation_notice,
    }


def load_job_result(store: ResultsCache, key: str | None, cls: Any, t0: float) -> Any:
    """The stored result of an identical earlier job (``cls.from_record``), or None.

    A record that no longer rebuilds (damaged, or written by another version) counts as a miss
    and is dropped, so that the rerun stores a good one.
    """
    hit = store.get(JOB_KIND, key) if key is not None else None
    if hit is not None and key is not None:
        try:
            return cls.from_record(json.loads(hit[0]), RunStats.reused_since(t0))
        except Exception:  # any damage costs a recomputation, never a crash
            store.discard(JOB_KIND, key)
    return None


def save_job_result(store: ResultsCache, key: str | None, result: Any) -> None:
    """Store a job's result under ``key`` for :func:`load_job_result` (None: not stored)."""
    if key is not None:
        store.put(JOB_KIND, key, json.dumps(result.to_record()).encode(), result.stats.wall_seconds)


@contextlib.contextmanager
def own_executor(workers: int | None, cluster: Any, executor: Any) -> Iterator[Any]:
    """``executor`` if given, else one made (and closed) here from ``workers`` / ``cluster``;
    made before the slow context so that a bad cluster address fails at once."""
    if executor is not None:
        yield executor
        return

    ex = make_executor(workers, cluster)
    try:
        yield ex
    finally:
        ex.close()


def scan_fields(study: Any, ctx: Any, recipes: tuple[str, ...], stats: RunStats) -> dict[str, Any]:
    """Fields that sweep and budget results take from the study, its context and the run."""
    return {
        "study_name": study.name,
        "device_name": str(study.profile.name),
        "recipes": recipes,
        "target_mha": float(study.target_mha),
        "shots_total": int(study.shots),
        "exact_energy_ha": float(ctx.exact_energy_ha),
        "ansatz_energy_ha": float(ctx.ansatz_energy_ha),
        "stats": stats,
        "emulation_method": ctx.emulation_method,
        "emulation_notice": ctx.emulation_notice,
        "confidence": float(study.confidence),
    }
