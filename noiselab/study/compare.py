"""The compare job: the same experiment on several device profiles, ranked.

Each device gets the study with its ``device:`` replaced (and any ``layout:`` dropped: each
device is compiled for its own connectivity and gate set, patch chosen per device) and one
``assess`` run through the shared results cache. Devices rank by their best recipe with the one
ranking of recipes (``noiselab.study.results.rank_key``: P within target, then |bias|, then
shots needed); "reaches the target" is the one rule of ``noiselab.mitigate.target``.
"""

from __future__ import annotations

import dataclasses
import json
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from noiselab.common.atomic import write_text_atomic
from noiselab.common.errors import InputError, arg, input_error
from noiselab.common.shipped import looks_like_name, shipped_path
from noiselab.common.wording import CAUTION, target_words
from noiselab.mitigate.target import reaches_target
from noiselab.study.assess import assess
from noiselab.study.cache import ResultsCache
from noiselab.study.job import start_job
from noiselab.study.results import (
    DEVICE_HOURS_HEADER,
    AssessResult,
    RunStats,
    csv_text,
    format_count,
    format_hours,
    jsonable,
    rank_key,
)
from noiselab.study.spec import Study, study_from_mapping

ProgressHook = Callable[[str, int, int], None]


@dataclasses.dataclass(frozen=True)
class DeviceRow:
    """One device's line of the ranked table (biases and std in mHa)."""

    device: str
    device_source: str
    best_recipe: str
    p_within_target: float
    reaches_target: bool
    bias_mha: float
    std_mha: float
    shots_needed: int | None
    device_hours: float  # the best recipe's estimate at the budget (noiselab.study.device_time)
    limited_by: str
    two_qubit_gates: int
    duration_ns: float
    raw_recipe: str
    raw_bias_mha: float
    raw_std_mha: float


@dataclasses.dataclass(frozen=True)
class CompareResult:
    """``compare``: devices ranked best first, the verdict, and each device's assess result."""

    study_name: str
    target_mha: float
    confidence: float
    shots: int
    rows: tuple[DeviceRow, ...]  # ranked, best first
    verdict: str
    assessed: tuple[AssessResult, ...]  # in ``rows`` order
    stats: RunStats
    caution: str = CAUTION

    @property
    def emulation_notice(self) -> str | None:
        """The devices' emulation notices (how each was emulated, and what that leaves out),
        each once, with the devices it concerns; None when there is none."""
        by_notice: dict[str, list[str]] = {}
        for row, result in zip(self.rows, self.assessed, strict=True):
            if result.emulation_notice:
                by_notice.setdefault(result.emulation_notice, []).append(row.device)
        if not by_notice:
            return None
        if len(by_notice) == 1 and len(next(iter(by_notice.values()))) == len(self.rows):
            return next(iter(by_notice))
        return " | ".join(f"{', '.join(devs)}: {text}" for text, devs in by_notice.items())

    def to_json(self) -> dict[str, Any]:
        return jsonable(
            {
                "study": self.study_name,
                "target_mha": self.target_mha,
                "confidence": self.confidence,
                "shots": self.shots,
                "units": {
                    "bias, std": "mHa",
                    "duration": "ns",
                    "shots": "total per estimate",
                    "device_hours": "hours of device time for the best recipe at the budget",
                },
                "ranking": "best recipe per device; devices by P within target, then |bias|, "
                "then shots needed",
                "devices": [
                    {"rank": i + 1, **dataclasses.asdict(r)} for i, r in enumerate(self.rows)
                ],
                "verdict": self.verdict,
                "emulation_notice": self.emulation_notice,
                "caution": self.caution,
            }
        )

    def csv_rows(self) -> list[dict[str, Any]]:
        return [{"rank": i + 1, **dataclasses.asdict(r)} for i, r in enumerate(self.rows)]

    def table_headers(self) -> tuple[str, ...]:
        return (
            "rank", "device", "best recipe", "P(within target)", "reaches", "bias (mHa)",
            "std. error (mHa)", "shots needed", DEVICE_HOURS_HEADER, "two-qubit gates",
            "limited by", "raw bias (mHa)",
        )  # fmt: skip

    def table_rows(self) -> list[tuple[str, ...]]:
        return [
            (
                str(i + 1),
                r.device,
                r.best_recipe,
                f"{r.p_within_target:.3f}",
                "yes" if r.reaches_target else "no",
                f"{r.bias_mha:+.3f}",
                f"{r.std_mha:.3f}",
                "never" if r.shots_needed is None else format_count(r.shots_needed),
                format_hours(r.device_hours),
                str(r.two_qubit_gates),
                r.limited_by,
                f"{r.raw_bias_mha:+.3f}",
            )
            for i, r in enumerate(self.rows)
        ]


def resolve_device(value: str) -> Path:
    """A ``--devices`` entry: an existing profile file, or a shipped profile name."""
    text = str(value).strip()
    if not text:
        raise input_error(arg("devices"), "device", "empty entry", "a profile path or shipped name")
    p = Path(text).expanduser()
    if p.is_file():
        return p.resolve()
    if not p.exists() and looks_like_name(text):
        return shipped_path("devices", text, arg("devices"), "device")
    what = "is a folder" if p.is_dir() else "no such file"
    raise input_error(
        arg("devices"),
        text,
        f"device profile not found ({what})",
        "a profile YAML path or a shipped profile name (noiselab shipped)",
    )


def study_on_device(study: Study, device: Path) -> Study:
    """``study`` with ``device:`` replaced by ``device`` and ``layout:`` dropped (revalidated:
    a device with too few qubits is refused in one line naming the study and the device)."""
    data = dict(study.raw)
    data["device"] = str(device)
    data.pop("layout", None)
    out = study_from_mapping(data, study.source)
    return (
        out.with_seed(study.seed)
        .with_shots(study.shots)
        .with_emulation(study.emulation.method, study.emulation.trajectories)
    )


def _raw_name(result: AssessResult) -> str | None:
    return next((n for n, p in result.passes.items() if len(p) == 0), None)


def device_row(result: AssessResult) -> DeviceRow:
    """The ranked-table row of one device's assess result."""
    best = result.recipes[result.best_recipe]
    raw_name = _raw_name(result)
    raw = result.recipes[raw_name] if raw_name is not None else None
    c = result.context
    return DeviceRow(
        device=c.device,
        device_source=c.device_source,
        best_recipe=result.best_recipe,
        p_within_target=float(best.p_within_target),
        reaches_target=reaches_target(best.p_within_target, result.confidence),
        bias_mha=float(best.bias_exact_mha),
        std_mha=float(best.std_mha),
        shots_needed=None if best.shots_needed is None else int(best.shots_needed),
        device_hours=float(result.device_hours.get(result.best_recipe, float("nan"))),
        limited_by=str(best.limited_by),
        two_qubit_gates=int(c.two_qubit_count),
        duration_ns=float(c.duration_ns),
        raw_recipe=raw_name or "-",
        raw_bias_mha=float("nan") if raw is None else float(raw.bias_exact_mha),
        raw_std_mha=float("nan") if raw is None else float(raw.std_mha),
    )


def compare_verdict(rows: Sequence[DeviceRow], target_mha: float, confidence: float) -> str:
    """One sentence naming the device to ask time on, and why."""
    top = rows[0]
    goal = target_words(target_mha)
    others = [r for r in rows[1:] if r.reaches_target]
    if top.reaches_target:
        alt = (
            f"; {len(others)} other device(s) reach it too ({', '.join(r.device for r in others)})"
            if others
            else "; no other device does"
        )
        return (
            f"Verdict: ask for time on '{top.device}': with recipe '{top.best_recipe}' it reaches "
            f"{goal} with probability {top.p_within_target:.3f} (>= {confidence:g}), "
            f"{top.two_qubit_gates} two-qubit gates, bias {top.bias_mha:+.3g} mHa, "
            f"{top.device_hours:.2g} device hours at the budget{alt}."
        )
    return (
        f"Verdict: no device reaches {goal} at the budget (P >= {confidence:g}); closest is "
        f"'{top.device}' with recipe '{top.best_recipe}' (probability "
        f"{top.p_within_target:.3f}, bias {top.bias_mha:+.3g} mHa, limited by {top.limited_by}, "
        f"{top.two_qubit_gates} two-qubit gates, {top.device_hours:.2g} device hours at the "
        "budget): ask for time there only with a larger budget "
        "or a better recipe."
    )


@dataclasses.dataclass(frozen=True)
class _RankView:
    """The fields ``rank_key`` reads, taken from a row."""

    p_within_target: float
    bias_exact_mha: float
    shots_needed: int | None


def row_rank_key(row: DeviceRow) -> tuple[float, float, float]:
    """The one ranking (``rank_key``: P, then |bias|, then shots needed) applied to a row."""
    return rank_key(_RankView(row.p_within_target, row.bias_mha, row.shots_needed))


def compare(
    study_or_path: Study | str | Path,
    devices: Sequence[str | Path],
    *,
    cache: ResultsCache | str | Path | bool | None = None,
    seed: int | None = None,
    shots: int | None = None,
    progress: ProgressHook | None = None,
    method: str | None = None,
    trajectories: int | None = None,
) -> CompareResult:
    """Assess the study on each device and rank the devices (see the module docstring).

    ``devices``: profile paths or shipped names (at least one; repeats are dropped). Every
    device is checked (found, enough qubits) before any computation.
    """
    if not devices:
        raise input_error(None, arg("devices"), "no device given", "one or more profiles")
    job = start_job(  # every device is one assess: the Pauli-propagation method serves it
        study_or_path,
        cache,
        seed=seed,
        shots=shots,
        method=method,
        trajectories=trajectories,
        pauli_ok=True,
    )
    base, store, t0 = job.study, job.store, job.t0
    paths = list(dict.fromkeys(resolve_device(str(d)) for d in devices))
    studies = [study_on_device(base, p) for p in paths]  # every refusal before any work
    results: list[AssessResult] = []
    for i, s in enumerate(studies):
        if progress is not None:
            progress("devices", i, len(studies))
        try:
            results.append(assess(s, cache=store))
        except InputError as exc:
            raise InputError(f"{exc} (device {s.profile.name})") from None
    if progress is not None:
        progress("devices", len(studies), len(studies))
    order = sorted(range(len(results)), key=lambda k: (*row_rank_key(device_row(results[k])), k))
    rows = tuple(device_row(results[k]) for k in order)
    stats = RunStats(
        simulations=sum(r.stats.simulations for r in results),
        cache_hits=sum(r.stats.cache_hits for r in results),
        engine_seconds=sum(r.stats.engine_seconds for r in results),
        wall_seconds=time.perf_counter() - t0,
    )
    return CompareResult(
        study_name=base.name,
        target_mha=float(base.target_mha),
        confidence=float(base.confidence),
        shots=int(base.shots),
        rows=rows,
        verdict=compare_verdict(rows, base.target_mha, base.confidence),
        assessed=tuple(results[k] for k in order),
        stats=stats,
    )


def write_compare_data(result: CompareResult, out: str | Path) -> list[Path]:
    """compare.json and compare.csv into ``out`` (atomic writes)."""
    folder = Path(out)
    return [
        write_text_atomic(folder / "compare.json", json.dumps(result.to_json(), indent=2) + "\n"),
        write_text_atomic(folder / "compare.csv", csv_text(result.csv_rows())),
    ]
