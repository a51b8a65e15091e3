"""Tables (rich) and CSV files from study results; units in every header.

CSV files are written with the ``csv`` module through an atomic rename, so a reader never sees
half a file.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from rich import box
from rich.console import Console
from rich.table import Table

from noiselab.common.atomic import write_text_atomic
from noiselab.study.results import TABLE_HEADERS, TUNE_HEADERS, score_values

# ---------------------------------------------------------------- CSV


def csv_text(rows: Sequence[Mapping[str, Any]], columns: Sequence[str] | None = None) -> str:
    """CSV text for ``rows`` (columns: given, else first-seen order over all rows)."""
    if columns is None:
        seen: list[str] = []
        for row in rows:
            seen += [k for k in row if k not in seen]
        columns = seen
    buf = io.StringIO()
    writer = csv.DictWriter(
        buf, fieldnames=list(columns), lineterminator="\n", extrasaction="raise"
    )
    writer.writeheader()
    for row in rows:
        writer.writerow({k: _cell(row.get(k, "")) for k in columns})
    return buf.getvalue()


def _cell(v: Any) -> Any:
    if isinstance(v, float):
        return "" if not math.isfinite(v) else repr(v)
    if v is None:
        return ""
    return v


def write_csv(
    path: str | Path, rows: Sequence[Mapping[str, Any]], columns: Sequence[str] | None = None
) -> Path:
    """Write ``rows`` as CSV to ``path`` atomically; return the path."""
    return write_text_atomic(path, csv_text(rows, columns))


# ---------------------------------------------------------------- rows per result kind


def knob_column(knob: Any) -> str:
    """CSV column name of a sweep knob's value, with its display unit."""
    if knob.unit == "us":
        return "t1_us"
    unit = {"%": "percent", "": "factor"}[knob.unit]
    return f"{knob.name.replace('-', '_')}_{unit}"


def sweep_rows(result: Any) -> list[dict[str, Any]]:
    """One row per (point, recipe): knob value in display units, energies (Ha), errors (mHa)."""
    knob = result.knob_spec
    col = knob_column(knob)
    rows = []
    for i, p in enumerate(result.points):
        for e in p.entries:
            rows.append(
                {
                    "point": i,
                    col: p.value * knob.display_factor,
                    "channel_scale_factor": p.factor,
                    "recipe": e.recipe,
                    "energy_ha": e.energy_ha,
                    "error_mha": e.error_mha,
                    "abs_error_mha": abs(e.error_mha),
                    "std_mha": e.std_mha,
                    "bias_ansatz_mha": e.bias_ansatz_mha,
                    "p_within_target": e.p_within_target,
                    "reaches_target": bool(e.reaches_target),
                    "limited_by": e.limited_by,
                }
            )
            if getattr(result, "emulation_method", "density_matrix") == "trajectory":
                t = getattr(e, "trajectory_std_mha", None)
                rows[-1]["trajectory_std_mha"] = "" if t is None else t
    return rows


def _at(values: Sequence[Any], k: int) -> Any:
    return values[k] if k < len(values) else ""


def budget_rows(result: Any) -> list[dict[str, Any]]:
    """One row per (configuration, recipe): errors and standard errors in mHa."""
    rows = []
    for r in result.rows:
        for k, name in enumerate(result.recipes):
            rows.append(
                {
                    "configuration": r.label,
                    "kind": r.kind,
                    "channel": r.channel or "",
                    "recipe": name,
                    "error_mha": r.errors_mha[k],
                    "std_mha": r.stds_mha[k],
                    "p_within_target": _at(r.p_within_target, k),
                    "reaches_target": _at(r.reaches_target, k),
                }
            )
            if getattr(result, "emulation_method", "density_matrix") == "trajectory":
                stds = getattr(r, "trajectory_stds_mha", ())
                t = stds[k] if k < len(stds) else None
                rows[-1]["trajectory_std_mha"] = "" if t is None else t
    return rows


def assess_rows(result: Any) -> list[dict[str, Any]]:
    """CSV rows of an assess result (its own ``csv_rows`` when it has one)."""
    if hasattr(result, "csv_rows"):
        return list(result.csv_rows())
    out = []
    items = (
        result.recipes.items() if isinstance(result.recipes, Mapping) else enumerate(result.recipes)
    )
    for name, r in items:
        out.append({"recipe": str(name), **score_values(r)})
    return out


# ---------------------------------------------------------------- rich tables


def _table(
    title: str, headers: Sequence[str], rows: Sequence[Sequence[str]], plain: bool = False
) -> Any:
    table = Table(title=title, box=box.ASCII if plain else box.ROUNDED, title_justify="left")
    for i, h in enumerate(headers):
        table.add_column(h, justify="left" if i == 0 else "right", no_wrap=i == 0)
    for row in rows:
        table.add_row(*row)
    return table


def sweep_table(result: Any, plain: bool = False) -> Any:
    """Rich table: one row per knob value, |error| ± std (mHa) per recipe."""
    knob = result.knob_spec
    headers = [knob.axis_label, *[f"{r} error ± std (mHa)" for r in result.recipes]]
    rows = []
    for p in result.points:
        cells = [knob.show(p.value)]
        for name in result.recipes:
            e = p.entry(name)
            mark = "" if e.reaches_target else " *"
            cells.append(f"{e.error_mha:+.3f} ± {e.std_mha:.3f}{mark}")
        rows.append(cells)
    conf = getattr(result, "confidence", 0.95)
    title = (
        f"{result.study_name} on {result.device_name}: sweep of {knob.phrase} "
        f"(* does not reach ±{result.target_mha:.3g} mHa at the budget: P < {conf:g})"
    )
    mode = getattr(result, "coherence_gate_errors", None)
    if mode is not None:
        title += (
            "; gate errors follow T1/T2 (their relaxation part)"
            if mode == "follow"
            else "; quoted gate errors held fixed"
        )
    return _table(title, headers, rows, plain)


def budget_table(result: Any, plain: bool = False) -> Any:
    """Rich table: one row per noise configuration, error ± std (mHa) per recipe."""
    headers = ["noise channels", *[f"{r} error ± std (mHa)" for r in result.recipes]]
    rows = [
        [r.label, *[f"{e:+.3f} ± {s:.3f}" for e, s in zip(r.errors_mha, r.stds_mha, strict=True)]]
        for r in result.rows
    ]
    title = f"{result.study_name} on {result.device_name}: error budget against the exact energy"
    return _table(title, headers, rows, plain)


def assess_table(result: Any, plain: bool = False) -> Any:
    """Rich table of an assess result (one row per recipe)."""
    headers: Sequence[str] = TABLE_HEADERS
    if hasattr(result, "table_rows"):
        rows = result.table_rows()
        headers = result.table_headers() if hasattr(result, "table_headers") else headers
    else:
        rows = [
            (
                r["recipe"],
                f"{r['energy_ha']:.6f}",
                f"{r['bias_mha']:+.3f}",
                f"{r['std_mha']:.3f}",
                f"{r['p_within_target']:.3f}",
                str(r["shots_needed"] or "never (bias)"),
                r["limited_by"],
            )
            for r in assess_rows(result)
        ]
    study = getattr(result, "study", "study")
    return _table(f"{study}: recipes at the shot budget", headers, rows, plain)


def tune_table(result: Any, top: int = 10, plain: bool = False) -> Any:
    """Rich table of a tune result, best ``top`` settings."""
    n = len(result.entries)
    title = f"{result.context.study}: best {min(top, n)} of {n} settings"
    return _table(title, TUNE_HEADERS, result.table_rows(top), plain)


def render_text(table: Any, width: int = 140) -> str:
    """A rich table as plain text (no colour), for logs and tests."""
    console = Console(
        file=io.StringIO(),
        width=width,
        color_system=None,
        highlight=False,
        force_jupyter=False,
    )
    console.print(table)
    return console.file.getvalue()
