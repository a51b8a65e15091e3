"""Write a finished job's files (CSV, JSON, figures) into an output folder, atomically."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from noiselab.common.atomic import write_text_atomic
from noiselab.report.figures import (
    extrapolation_data,
    plot_bias_bars,
    plot_budget,
    plot_drift,
    plot_extrapolation,
    plot_sweep,
)
from noiselab.report.tables import budget_rows, sweep_rows, write_csv
from noiselab.study.results import jsonable


def _json_text(obj: Any) -> str:
    return json.dumps(jsonable(obj), indent=2) + "\n"


def write_sweep_outputs(result: Any, out_dir: str | Path, stem: str | None = None) -> list[Path]:
    """``<stem>.csv``, ``<stem>.json`` and the figure as SVG, PDF and PNG; returns the paths.

    ``stem`` defaults to ``sweep-<knob>``.
    """
    out = Path(out_dir)
    stem = stem or f"sweep-{result.knob}"
    written = [
        write_csv(out / f"{stem}.csv", sweep_rows(result)),
        write_text_atomic(out / f"{stem}.json", _json_text(result.to_json())),
    ]
    written += list(plot_sweep(result, out / stem))
    return written


def write_budget_outputs(result: Any, out_dir: str | Path, stem: str = "budget") -> list[Path]:
    """``budget.csv``, ``budget.json`` and ``budget.png`` / ``budget.svg``; returns the paths."""
    out = Path(out_dir)
    written = [
        write_csv(out / f"{stem}.csv", budget_rows(result)),
        write_text_atomic(out / f"{stem}.json", _json_text(result.to_json())),
        plot_budget(result, out / f"{stem}.png"),
        plot_budget(result, out / f"{stem}.svg"),
    ]
    return written


def write_assess_figures(result: Any, out_dir: str | Path) -> list[Path]:
    """``assess-bias.png``/``.svg``, ``assess-extrapolation`` when a recipe extrapolates and
    ``assess-drift`` after ``--drift``."""
    out = Path(out_dir)
    written = [
        plot_bias_bars(result, out / "assess-bias.png"),
        plot_bias_bars(result, out / "assess-bias.svg"),
    ]
    if extrapolation_data(result).series:
        written += [
            plot_extrapolation(result, out / "assess-extrapolation.png"),
            plot_extrapolation(result, out / "assess-extrapolation.svg"),
        ]
    if getattr(result, "drift", None):
        written += [
            plot_drift(result, out / "assess-drift.png"),
            plot_drift(result, out / "assess-drift.svg"),
        ]
    return written
