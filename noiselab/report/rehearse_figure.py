"""The rehearse job's convergence figure and its output files."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from noiselab.common.atomic import write_text_atomic
from noiselab.report.figures import _decorate, _new_figure, _save
from noiselab.report.style import font, line, mark
from noiselab.study.rehearse import RehearseResult
from noiselab.study.results import csv_text


def plot_rehearse(result: RehearseResult, path: str | Path) -> Path:
    """Energy error of the loop's measured energies against shots spent (log x): one faint
    line per repeat, the median bold, the target band, each final estimate with its error bar
    at the run's total shots."""
    fig = _new_figure()
    ax = fig.add_subplot(1, 1, 1)
    exact = result.exact_energy_ha
    t = result.target_mha
    ax.axhspan(-t, t, color="tab:green", alpha=0.15, label=f"target ±{t:.4g} mHa")
    ax.axhline(0.0, color="0.3", lw=line(0.8))
    traces = [r.trace for r in result.repeats if r.trace]
    for i, tr in enumerate(traces):
        shots = [p.shots for p in tr]
        err = [(p.energy_ha - exact) * 1000.0 for p in tr]
        ax.plot(shots, err, color="tab:blue", alpha=0.25, lw=line(0.8),
                label="in-loop estimate, each run" if i == 0 else None)  # fmt: skip
    if traces:
        n = min(len(tr) for tr in traces)
        shots = np.median([[p.shots for p in tr[:n]] for tr in traces], axis=0)
        err = np.median([[(p.energy_ha - exact) * 1000.0 for p in tr[:n]] for tr in traces], 0)
        ax.plot(shots, err, color="tab:blue", lw=line(2.2), label="median of the runs")
    for i, r in enumerate(result.repeats):
        ax.errorbar([r.total_shots], [r.final_error_mha], yerr=[r.std_mha], fmt="o",
                    color="tab:red", ms=mark(4), capsize=mark(3),
                    label="final estimate ± std (final recipe)" if i == 0 else None)  # fmt: skip
    ax.set_xscale("log")
    ax.set_xlabel("shots spent (calibration included)")
    ax.set_ylabel("energy error E - E_exact (mHa)")
    ax.legend(fontsize=font(7), loc="best")
    s = result.settings
    _decorate(
        fig, ax, f"rehearsed loop: {s['optimizer']}, {s['shots_per_evaluation']} shots/evaluation",
        result.study, result.device,
    )  # fmt: skip
    return _save(fig, path)


def write_rehearse_outputs(result: RehearseResult, out_dir: str | Path) -> list[Path]:
    """rehearse.json, rehearse_traces.csv and rehearse.png into ``out_dir`` (atomic writes)."""
    folder = Path(out_dir)
    rows: list[dict[str, Any]] = result.csv_rows()
    return [
        write_text_atomic(folder / "rehearse.json", json.dumps(result.to_json(), indent=2) + "\n"),
        write_text_atomic(folder / "rehearse_traces.csv", csv_text(rows)),
        plot_rehearse(result, folder / "rehearse.png"),
    ]
