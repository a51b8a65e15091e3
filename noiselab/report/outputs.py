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

#: Every figure is written in these formats (PNG to look at, SVG and PDF for a document).
FIGURE_FORMATS = ("png", "svg", "pdf")


def with_provenance(obj: dict[str, Any], provenance: dict[str, Any] | None) -> dict[str, Any]:
    """The job's JSON with its ``provenance`` block (kept out of ``to_json`` and the goldens:
    the machine changes between machines). The block leaves out the time of writing
    (``date_utc``; the report pages carry it), so that a resumed or repeated job writes the
    same bytes as an uninterrupted one."""
    if provenance is None:
        return obj
    return {**obj, "provenance": {k: v for k, v in provenance.items() if k != "date_utc"}}


def _json_text(obj: Any) -> str:
    return json.dumps(jsonable(obj), indent=2) + "\n"


def write_sweep_outputs(
    result: Any,
    out_dir: str | Path,
    stem: str | None = None,
    provenance: dict[str, Any] | None = None,
) -> list[Path]:
    """``<stem>.csv``, ``<stem>.json`` and the figure as SVG, PDF and PNG; returns the paths.

    ``stem`` defaults to ``sweep-<knob>``.
    """
    out = Path(out_dir)
    stem = stem or f"sweep-{result.knob}"
    written = [
        write_csv(out / f"{stem}.csv", sweep_rows(result)),
        write_text_atomic(
            out / f"{stem}.json", _json_text(with_provenance(result.to_json(), provenance))
        ),
    ]
    written += list(plot_sweep(result, out / stem))
    return written


def write_budget_outputs(
    result: Any,
    out_dir: str | Path,
    stem: str = "budget",
    provenance: dict[str, Any] | None = None,
) -> list[Path]:
    """``budget.csv``, ``budget.json`` and the figure as PNG, SVG and PDF; returns the paths."""
    out = Path(out_dir)
    written = [
        write_csv(out / f"{stem}.csv", budget_rows(result)),
        write_text_atomic(
            out / f"{stem}.json", _json_text(with_provenance(result.to_json(), provenance))
        ),
        *(plot_budget(result, out / f"{stem}.{ext}") for ext in FIGURE_FORMATS),
    ]
    return written


def write_assess_figures(result: Any, out_dir: str | Path) -> list[Path]:
    """``assess-bias``, ``assess-extrapolation`` when a recipe extrapolates and
    ``assess-drift`` after ``--drift``, each as PNG, SVG and PDF."""
    out = Path(out_dir)
    plots = [("assess-bias", plot_bias_bars)]
    if extrapolation_data(result).series:
        plots.append(("assess-extrapolation", plot_extrapolation))
    if getattr(result, "drift", None):
        plots.append(("assess-drift", plot_drift))
    return [plot(result, out / f"{stem}.{ext}") for stem, plot in plots for ext in FIGURE_FORMATS]
