"""How a job runs, apart from what it computes: one frozen value built once by the command line.

Seed, shots, emulation method and trajectories (overrides of the study file), results cache,
executor (workers or a Dask cluster), progress display and output folder. Every count is a
:data:`~noiselab.common.counts.Count` with the bounds of the study file's own field (read from
:class:`~noiselab.study.spec.StudyFile`, so the two cannot drift apart); a refused value is
named by its argument (the command line shows its option: ``--shots '1e20': ...``), exit code
2, before any work. ``--out`` is checked here too (not empty, not a file, no folder where a file
of the job goes).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from noiselab.common.atomic import check_output_dir, write_output_set
from noiselab.common.counts import MAX_SHOTS, Count
from noiselab.common.errors import InputError, arg, from_validation_error, quote
from noiselab.study.cache import ResultsCache, open_cache
from noiselab.study.executor import MAX_WORKERS
from noiselab.study.spec import EMULATION_METHODS, EmulationSettings, StudyFile


def _file_bounds(model: type[BaseModel], name: str) -> dict[str, int]:
    """The ``ge`` / ``le`` bounds of a study-file field (the command line uses the same)."""
    out: dict[str, int] = {}
    for meta in model.model_fields[name].metadata:  # pydantic's Ge(ge=...), Le(le=...)
        for bound in ("ge", "le"):
            if type(meta).__name__.lower() == bound:
                out[bound] = int(getattr(meta, bound))
    return out


#: Bounds of each count: those of the study file's field where the file has one.
COUNT_BOUNDS = {
    "seed": _file_bounds(StudyFile, "seed"),
    "shots": {"ge": 1, "le": MAX_SHOTS},  # the file checks 1..MAX_SHOTS in a validator
    "trajectories": _file_bounds(EmulationSettings, "trajectories"),
    "workers": {"ge": 1, "le": MAX_WORKERS},
}



def _allowed(name: str) -> str:
    """What a field allows, in words."""
    if name == "method":
        return ", ".join(EMULATION_METHODS)
    lo, hi = COUNT_BOUNDS[name]["ge"], COUNT_BOUNDS[name]["le"]
    hi_text = f"{hi:.0e}" if hi >= 10**9 and hi == 10 ** round(math.log10(hi)) else str(hi)
    why = " (each worker is a full process)" if name == "workers" else ""
    return f"a whole number from {lo} to {hi_text}{why}"


def _one_line(exc: ValidationError, given: dict[str, Any]) -> InputError:
    """The first refused value as one line: ``shots '1e20': ...; allowed: ...`` (the command
    line shows ``--shots``)."""
    first = exc.errors(include_url=False)[0]
    loc = first.get("loc") or ()
    if not loc:  # the model's own check
        text = str(first.get("msg", "")).removeprefix("Value error, ")
        return InputError(f"{arg('cache')}: {text}")
    key = str(loc[0])
    option = arg(key)  # the command line shows its option
    value = quote(given.get(key))
    kind = str(first.get("type", ""))
    if key in ("seed", "shots", "trajectories", "workers", "method") and kind in (
        "greater_than_equal", "less_than_equal", "literal_error", "int_type",
    ):  # fmt: skip
        problem = "unknown method" if key == "method" else "out of range"
        return InputError(f"{option} {value}: {problem}; allowed: {_allowed(key)}")
    text = str(from_validation_error(exc, None)).removeprefix(f"{key}: ")
    return InputError(f"{option} {value}: {text}")


#: spec.EMULATION_METHODS as a type (tests/test_run_options.py checks they agree)
Method = Literal["auto", "density_matrix", "trajectory", "pauli_propagation"]


class RunOptions(BaseModel):
    """Everything about how one job runs (None: the study file's value, else the default)."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    seed: Annotated[Count, Field(**COUNT_BOUNDS["seed"])] | None = None
    shots: Annotated[Count, Field(**COUNT_BOUNDS["shots"])] | None = None
    method: Method | None = None
    trajectories: Annotated[Count, Field(**COUNT_BOUNDS["trajectories"])] | None = None
    cache: Path | None = None
    use_cache: bool = True
    workers: Annotated[Count, Field(**COUNT_BOUNDS["workers"])] | None = None
    cluster: str | None = None
    quiet: bool = False
    out: Path | None = None
    #: the file names the job writes into ``out`` (checked against folders in their place)
    out_files: tuple[str, ...] = ()

    @model_validator(mode="after")
    def _check(self) -> RunOptions:
        if not self.use_cache and self.cache is not None:
            raise ValueError(f"given together with {arg('use_cache')}; allowed: one of them")
        return self

    @classmethod
    def from_command_line(cls, out_files: Iterable[str] = (), **given: Any) -> RunOptions:
        """The value from the command line's texts; one-line InputError (exit 2) naming the
        option for anything refused, ``--out`` included, before any work."""
        if "out" in given:
            given["out"] = check_output_dir(given["out"], tuple(out_files))
        if "no_cache" in given:
            given["use_cache"] = not given.pop("no_cache")
        try:
            return cls.model_validate({**given, "out_files": tuple(out_files)})
        except ValidationError as exc:
            raise _one_line(exc, given) from None

    # ------------------------------------------------------------ what a job reads from it

    def overrides(self) -> dict[str, Any]:
        """The study-file overrides: ``seed``, ``shots``, ``method``, ``trajectories``."""
        return {
            "seed": self.seed,
            "shots": self.shots,
            "method": self.method,
            "trajectories": self.trajectories,
        }

    def job_keywords(self, executor: bool = False) -> dict[str, Any]:
        """Keywords of the study jobs (``assess``, ``tune``, ...): the overrides, and with
        ``executor`` the ``workers`` / ``cluster`` of the executor the job makes."""
        out = self.overrides()
        if executor:
            out.update(workers=self.workers, cluster=self.cluster)
        return out

    def open_cache(self) -> ResultsCache:
        """The results cache (``--cache``, else the user cache folder; disabled: --no-cache)."""
        return open_cache(self.cache, enabled=self.use_cache)

    def write_outputs(self, write: Callable[[Path], Sequence[Path]]) -> list[Path]:
        """The job's files written into ``out`` as one set (nothing without ``out``)."""
        if self.out is None:
            return []
        return write_output_set(self.out, write)
