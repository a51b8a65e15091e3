"""Figures of the compare and scan jobs (same conventions as ``noiselab.report.figures``:
Agg canvas, atomic writes, the caution footnote, typed records only)."""

from __future__ import annotations

import math
from pathlib import Path

from noiselab.common.units import HA_TO_MHA
from noiselab.common.wording import target_words
from noiselab.report.figures import _colors, _decorate, _new_figure, _save_all
from noiselab.report.style import font, line, mark
from noiselab.study.compare import CompareResult, write_compare_data
from noiselab.study.scan import ScanResult, write_scan_data


def plot_compare(result: CompareResult, path_stem: str | Path) -> tuple[Path, ...]:
    """Per device (ranked, best left): the best recipe's bias with ±1 std error bar and the raw
    bias, against the target band. Symmetric log axis (raw biases are often 100x the target).
    Writes SVG, PDF and PNG."""
    rows = result.rows
    t = result.target_mha
    fig = _new_figure(8.0, 4.8)
    ax = fig.add_subplot(1, 1, 1)
    xs = list(range(len(rows)))
    ax.axhspan(-t, t, color="tab:green", alpha=0.15, zorder=0, label=target_words(t))
    ax.axhline(0.0, color="0.3", lw=line(0.8))
    for x, r in zip(xs, rows, strict=True):
        col = "tab:green" if r.reaches_target else "tab:blue"
        ax.errorbar(
            [x - 0.1], [r.bias_mha], yerr=[r.std_mha], fmt="o", color=col, capsize=mark(4),
            ms=mark(6),
            label="best recipe (±1 std at the budget)" if x == 0 else None,
        )  # fmt: skip
        ax.annotate(
            f"{r.best_recipe}\nP={r.p_within_target:.2f}", (x - 0.1, r.bias_mha),
            textcoords="offset points", xytext=(6, 4), fontsize=font(7),
        )  # fmt: skip
        if math.isfinite(r.raw_bias_mha):
            ax.errorbar(
                [x + 0.1], [r.raw_bias_mha], yerr=[r.raw_std_mha], fmt="s", color="0.35",
                mfc="white", capsize=mark(3), ms=mark(5),
                label="raw (no mitigation)" if x == 0 else None,
            )  # fmt: skip
    big = max([t] + [abs(r.raw_bias_mha) for r in rows if math.isfinite(r.raw_bias_mha)])
    if big > 20 * t:
        ax.set_yscale("symlog", linthresh=t)
    ax.set_xticks(xs, [f"{i + 1}. {r.device}\n{r.two_qubit_gates} 2q gates" for i, r in
                       enumerate(rows)], fontsize=font(8))  # fmt: skip
    ax.set_xlim(-0.6, len(rows) - 0.4)
    ax.set_ylabel("energy − exact energy (mHa)")
    ax.legend(loc="best", fontsize=font(7), framealpha=0.9)
    _decorate(
        fig, ax,
        f"Devices ranked (P within target, then |bias|); {result.shots:,} shots per estimate",
        result.study_name, f"{len(rows)} devices",
    )  # fmt: skip
    return _save_all(fig, path_stem)


def plot_scan(result: ScanResult, path_stem: str | Path) -> tuple[Path, ...]:
    """Top: energy (Ha) against the scan coordinate: exact line, Hartree-Fock dashed, each
    recipe with ±1 std error bars. Bottom: each recipe's error against exact (mHa) with the
    target band. Writes SVG, PDF and PNG."""
    fig = _new_figure(8.0, 7.0)
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    xs = list(result.coordinates)
    top.plot(xs, [p.exact_energy_ha for p in result.points], "-", color="k", lw=line(1.6),
             label="exact (FCI/CASCI)")  # fmt: skip
    top.plot(xs, [p.hf_energy_ha for p in result.points], "--", color="0.45", lw=line(1.2),
             label="Hartree-Fock")  # fmt: skip
    colors = _colors(result.recipes)
    t = result.target_mha
    bottom.axhspan(-t, t, color="tab:green", alpha=0.15, zorder=0, label=target_words(t))
    bottom.axhline(0.0, color="k", lw=line(0.8))
    big = t
    for name in result.recipes:
        e = [p.recipe(name).energy_ha for p in result.points]
        s = [p.recipe(name).std_mha / HA_TO_MHA for p in result.points]
        b = [p.recipe(name).bias_mha for p in result.points]
        sb = [p.recipe(name).std_mha for p in result.points]
        c = colors[name]
        top.errorbar(
            xs, e, yerr=s, fmt="o:", color=c, ms=mark(4), capsize=mark(3), lw=line(0.9), label=name
        )
        bottom.errorbar(
            xs, b, yerr=sb, fmt="o-", color=c, ms=mark(4), capsize=mark(3), lw=line(1.0), label=name
        )
        big = max(big, *(abs(v) for v in b))
    if big > 20 * t:
        bottom.set_yscale("symlog", linthresh=t)
    top.set_ylabel("energy (Ha)")
    bottom.set_ylabel("energy − exact (mHa)")
    bottom.set_xlabel(result.axis_label)
    top.legend(loc="best", fontsize=font(7), framealpha=0.9)
    bottom.legend(loc="best", fontsize=font(7), framealpha=0.9)
    top.grid(True, alpha=0.3)
    _decorate(
        fig, bottom,
        f"Error against exact (bars: ±1 std at {result.shots:,} shots)",
        result.study_name, result.device_name,
    )  # fmt: skip
    top.set_title(f"Potential-energy scan: {result.coordinate_words}", fontsize=font(10))
    return _save_all(fig, path_stem)


def write_compare_outputs(result: CompareResult, out_dir: str | Path) -> list[Path]:
    """compare.json, compare.csv and the figure (SVG, PDF, PNG) into ``out_dir``."""
    folder = Path(out_dir)
    folder.mkdir(parents=True, exist_ok=True)
    return [*write_compare_data(result, folder), *plot_compare(result, folder / "compare")]


def write_scan_outputs(result: ScanResult, out_dir: str | Path) -> list[Path]:
    """scan.json, scan.csv and the figure (SVG, PDF, PNG) into ``out_dir``."""
    folder = Path(out_dir)
    folder.mkdir(parents=True, exist_ok=True)
    return [*write_scan_data(result, folder), *plot_scan(result, folder / "scan")]
