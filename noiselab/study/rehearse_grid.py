"""``rehearse --grid``: the rehearsal repeated over shots per evaluation x optimizer x in-loop
recipe, ranked by P(final within target), then by device hours per run.

What the settings share: one study context (verification bases measured when any in-loop or
final recipe verifies), hence one compile, noiseless optimum and measurement plan; and every
emulation of a bound circuit, keyed by its parameter values (:class:`SharedRuns`): a point two
settings or two repeats evaluate (the common Hartree-Fock start, COBYLA's first simplex) is
simulated once. Each setting's result equals a separate ``rehearse`` with those overrides.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from noiselab.common.atomic import write_text_atomic
from noiselab.common.errors import input_error
from noiselab.common.wording import CAUTION, target_words
from noiselab.study.context import build_context, recipes_verify
from noiselab.study.job import as_cache
from noiselab.study.rehearse import OPTIMIZER_WORDS, RehearseResult, rehearse, resolve_settings
from noiselab.study.rehearse_spec import DEFAULT_LOOP_NAME, DEFAULT_LOOP_RECIPE, RehearseGrid
from noiselab.study.results import csv_text
from noiselab.study.spec import Study, load_study

ProgressHook = Callable[[str, int, int], None]


class SharedRuns:
    """Emulations of bound circuits shared by several rehearsals of one context: keyed by the
    parameter values bit for bit (and the measured bases), each point's distributions per
    circuit variant, so a point that two settings or two repeats evaluate is simulated once;
    the results are those of separate runs. At most ``max_points`` points are kept (later ones
    are simulated and not kept)."""

    def __init__(self, max_points: int = 4096) -> None:
        self.max_points = int(max_points)
        self._points: dict[tuple[bytes, tuple[str, ...]], dict[Any, Any]] = {}
        self.evaluations = 0  # evaluations asked for
        self.reused = 0  # of which at a point simulated before

    @staticmethod
    def _key(x: np.ndarray, bases: tuple[str, ...]) -> tuple[bytes, tuple[str, ...]]:
        return (np.asarray(x, dtype=float).tobytes(), tuple(bases))

    def lookup(self, x: np.ndarray, bases: tuple[str, ...], variants: Any) -> dict[Any, Any] | None:
        """The distributions of every one of ``variants`` at ``x``, or None (not all known)."""
        self.evaluations += 1
        known = self._points.get(self._key(x, bases))
        if known is None or any(v not in known for v in variants):
            return None
        self.reused += 1
        return {v: known[v] for v in variants}

    def keep(self, x: np.ndarray, bases: tuple[str, ...], data: dict[Any, Any]) -> None:
        """Remember the distributions emulated at ``x`` (variant -> distributions)."""
        key = self._key(x, bases)
        if key in self._points:
            self._points[key].update(data)
        elif len(self._points) < self.max_points:
            self._points[key] = dict(data)


@dataclasses.dataclass(frozen=True)
class GridCell:
    """One setting of the grid and what its rehearsal gave (errors in mHa, time in hours)."""

    optimizer: str
    shots_per_evaluation: int
    loop_recipe: str
    p_within_target: float
    reaches_target: bool
    runs_within_target: int
    repeats: int
    median_abs_final_error_mha: float
    total_shots: int  # one run (the largest over the repeats)
    device_hours: float  # one run (the largest over the repeats)
    final_errors_mha: tuple[float, ...]  # per repeat, signed

    def sort_key(self) -> tuple[float, float]:
        return (-self.p_within_target, self.device_hours)


@dataclasses.dataclass(frozen=True)
class RehearseGridResult:
    """The settings ranked best first, the verdict and each setting's full rehearsal."""

    study: str
    device: str
    target_mha: float
    confidence: float
    iterations: int
    cells: tuple[GridCell, ...]  # ranked
    rehearsals: tuple[RehearseResult, ...]  # in ``cells`` order
    evaluations: int
    reused_evaluations: int
    verdict: str
    wall_seconds: float = dataclasses.field(default=0.0, compare=False)

    def to_json(self) -> dict[str, Any]:
        return {
            "study": self.study,
            "device": self.device,
            "target_mha": self.target_mha,
            "confidence": self.confidence,
            "iterations": self.iterations,
            "units": {"errors": "mHa", "device_hours": "hours of device time per run"},
            "ranking": "P(final within target), then device hours per run",
            "settings": [
                {"rank": i + 1, **dataclasses.asdict(c)} for i, c in enumerate(self.cells)
            ],
            "evaluations": self.evaluations,
            "reused_evaluations": self.reused_evaluations,
            "verdict": self.verdict,
            "caution": CAUTION,
        }

    def csv_rows(self) -> list[dict[str, Any]]:
        """One row per setting (the per-repeat errors are in the JSON only)."""
        rows = []
        for i, c in enumerate(self.cells):
            row = {"rank": i + 1, **dataclasses.asdict(c)}
            row.pop("final_errors_mha")
            rows.append(row)
        return rows

    def table_headers(self) -> tuple[str, ...]:
        return (
            "rank", "optimizer", "shots per evaluation", "loop recipe", "P(final within target)",
            "runs within", "median |final error| (mHa)", "shots per run", "device hours (h)",
        )  # fmt: skip

    def table_rows(self) -> list[tuple[str, ...]]:
        return [
            (
                str(i + 1),
                c.optimizer,
                f"{c.shots_per_evaluation:,}",
                c.loop_recipe,
                f"{c.p_within_target:.3f}",
                f"{c.runs_within_target}/{c.repeats}",
                f"{c.median_abs_final_error_mha:.3g}",
                f"{c.total_shots:.3g}",
                f"{c.device_hours:.3g}",
            )
            for i, c in enumerate(self.cells)
        ]


def grid_cell(result: RehearseResult, loop_name: str) -> GridCell:
    """The summary of one setting's rehearsal."""
    s = result.settings
    errors = [abs(r.final_error_mha) for r in result.repeats]
    return GridCell(
        optimizer=str(s["optimizer"]),
        shots_per_evaluation=int(s["shots_per_evaluation"]),
        loop_recipe=loop_name,
        p_within_target=result.p_within_target,
        reaches_target=result.reaches_target,
        runs_within_target=sum(e <= result.target_mha for e in errors),
        repeats=len(result.repeats),
        median_abs_final_error_mha=float(np.median(errors)),
        total_shots=result.total_shots,
        device_hours=result.device_hours,
        final_errors_mha=tuple(float(r.final_error_mha) for r in result.repeats),
    )


def _loop_recipes(study: Study, grid: RehearseGrid) -> dict[str, list[dict[str, Any]]]:
    """Grid loop-recipe names -> passes ("default": readout correction + verification)."""
    out = {}
    for name in grid.loop_recipe:
        if name == DEFAULT_LOOP_NAME:
            out[name] = [dict(p) for p in DEFAULT_LOOP_RECIPE]
        elif name in study.recipes:
            out[name] = [dict(p) for p in study.recipes[name]]
        else:
            raise input_error(
                str(study.source), "rehearse.grid.loop_recipe", f"unknown recipe {name!r}",
                ", ".join([DEFAULT_LOOP_NAME, *study.recipes]),
            )  # fmt: skip
    return out


def rehearse_grid(
    study_or_path: Study | str | Path,
    *,
    cache: Any = None,
    progress: ProgressHook | None = None,
    analytic: bool = False,
    **overrides: Any,
) -> RehearseGridResult:
    """Rehearse every setting of the study's ``rehearse.grid`` (see the module docstring).

    ``overrides``: keys of the ``rehearse:`` section applied to every setting (``iterations``,
    ``repeats``, ``seed``, ...; ``grid`` replaces the grid). ``analytic``: test-only.
    """
    t0 = time.perf_counter()
    study = study_or_path if isinstance(study_or_path, Study) else load_study(study_or_path)
    settings = resolve_settings(study, overrides)
    grid = settings.grid if settings.grid is not None else RehearseGrid()
    loops = _loop_recipes(study, grid)
    finals = [study.recipes[settings.final_recipe]] if settings.final_recipe else []
    verify = recipes_verify([*loops.values(), *finals])
    ctx = build_context(study, cache=as_cache(cache), verification=verify)
    shared = SharedRuns()
    base = {k: v for k, v in overrides.items() if v is not None and k != "grid"}
    combos = list(itertools.product(grid.optimizer, grid.shots_per_evaluation, loops))
    results: list[tuple[RehearseResult, str]] = []
    for i, (opt, shots, loop_name) in enumerate(combos):
        if progress is not None:
            progress("grid settings", i, len(combos))
        res = rehearse(
            study, context=ctx, analytic=analytic, shared=shared,
            **{**base, "optimizer": opt, "shots_per_evaluation": shots,
               "loop_recipe": loops[loop_name]},
        )  # fmt: skip
        results.append((res, loop_name))
    if progress is not None:
        progress("grid settings", len(combos), len(combos))
    order = sorted(range(len(results)), key=lambda k: (*grid_cell(*results[k]).sort_key(), k))
    cells = tuple(grid_cell(*results[k]) for k in order)
    out = RehearseGridResult(
        study=study.name,
        device=str(study.profile.name),
        target_mha=float(study.target_mha),
        confidence=float(study.confidence),
        iterations=int(settings.iterations),
        cells=cells,
        rehearsals=tuple(results[k][0] for k in order),
        evaluations=shared.evaluations,
        reused_evaluations=shared.reused,
        verdict="",
    )
    return dataclasses.replace(
        out, verdict=grid_verdict(out), wall_seconds=time.perf_counter() - t0
    )


def grid_verdict(result: RehearseGridResult) -> str:
    """One sentence: the best setting, its P and cost, how many settings reach the target."""
    top = result.cells[0]
    reaching = sum(c.reaches_target for c in result.cells)
    goal = target_words(result.target_mha)
    return (
        f"Verdict: best loop of {len(result.cells)}: {OPTIMIZER_WORDS[top.optimizer]} at "
        f"{top.shots_per_evaluation:,} shots per evaluation with '{top.loop_recipe}' in the loop "
        f"({result.iterations} iterations): the final energy lands within {goal} with "
        f"P = {top.p_within_target:.2f} ({top.runs_within_target} of {top.repeats} runs), "
        f"{top.total_shots:.2g} shots and {top.device_hours:.2g} device hours per run; "
        f"{reaching} of {len(result.cells)} settings reach P >= {result.confidence:g}."
    )


def write_grid_data(result: RehearseGridResult, out: str | Path) -> list[Path]:
    """rehearse_grid.json and rehearse_grid.csv into ``out`` (atomic writes)."""
    folder = Path(out)
    text = json.dumps(result.to_json(), indent=2) + "\n"
    return [
        write_text_atomic(folder / "rehearse_grid.json", text),
        write_text_atomic(folder / "rehearse_grid.csv", csv_text(result.csv_rows())),
    ]
