"""Figures from study results (matplotlib, object-oriented API on an Agg canvas).

No pyplot state is touched: each function builds a ``matplotlib.figure.Figure`` with an Agg
canvas, writes it atomically and drops it, so nothing stays open and a notebook's backend is
left alone. (The command line imports this module only inside its commands.)

Energies are drawn as errors against the exact energy in mHa, the unit of the target. Every
figure reads typed records only: an ``AssessResult`` (its ``RecipeResult``s, their variant
scores and the extrapolation pass's ``ExtrapolationReport``, whose fitted curve is drawn as
reported), a ``SweepResult``, a ``BudgetResult``, or the figure's own data record.

Over 400 lines: the four figures of the jobs (assess: extrapolation and bias bars; sweep;
budget) share their records, palette, caution footnote and atomic writing here, and the callers
(``report.outputs``, the notebook) import them from this one module.
"""

from __future__ import annotations

import dataclasses
import math
import textwrap
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import matplotlib
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from noiselab.common.atomic import atomic_path
from noiselab.common.units import HA_TO_MHA
from noiselab.common.wording import CAUTION, target_words
from noiselab.mitigate.passes.extrapolate import ExtrapolationReport
from noiselab.mitigate.result import RecipeResult
from noiselab.study.budget import BudgetResult
from noiselab.study.results import AssessResult
from noiselab.study.sweep import SweepResult

_FORMATS = ("svg", "pdf", "png")
_DPI = 150
_RAW_NAMES = ("raw", "none", "unmitigated")


# ---------------------------------------------------------------- plain records the figures use


@dataclasses.dataclass(frozen=True)
class ExtrapolationSeries:
    """One recipe's energies against noise scale, and its fit sampled on [0, max scale].

    Energies in Ha; ``curve_*``: the fitted curve as the extrapolation pass reported it (empty:
    no curve drawn).
    """

    recipe: str
    scales: tuple[float, ...]
    energies_ha: tuple[float, ...]
    stds_ha: tuple[float, ...]
    estimate_ha: float | None = None
    estimate_std_ha: float | None = None
    curve_scales: tuple[float, ...] = ()
    curve_energies_ha: tuple[float, ...] = ()


@dataclasses.dataclass(frozen=True)
class ExtrapolationFigureData:
    """What :func:`plot_extrapolation` draws."""

    study_name: str
    device_name: str
    exact_energy_ha: float
    target_mha: float
    series: tuple[ExtrapolationSeries, ...]


@dataclasses.dataclass(frozen=True)
class BiasBar:
    """One recipe's bias against the exact energy and its standard error at the budget (mHa)."""

    recipe: str
    bias_mha: float
    std_mha: float
    reaches_target: bool = False  # the one rule (P >= confidence at the budget)


@dataclasses.dataclass(frozen=True)
class BiasFigureData:
    """What :func:`plot_bias_bars` draws."""

    study_name: str
    device_name: str
    target_mha: float
    bars: tuple[BiasBar, ...]


# ---------------------------------------------------------------- shared helpers


def _new_figure(width_in: float = 7.0, height_in: float = 4.6) -> Any:
    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _decorate(fig: Any, ax: Any, title: str, study: str, device: str) -> None:
    """Title, subtitle ``study S on D`` (``D``: 'device NAME', or words such as '4 devices')
    and the caution line."""
    where = device if " " in device else f"device {device}"
    ax.set_title(f"{title}\nstudy {study} on {where}", fontsize=10)
    # a figure-level x label is laid out below everything else (outside legends included)
    # wrapped to the figure's width (about 17 characters per inch at 7 pt)
    caution = textwrap.fill(CAUTION, width=int(17 * fig.get_figwidth()))
    fig.supxlabel(caution, x=0.995, ha="right", ma="right", fontsize=7, style="italic", color="0.4")
    ax.grid(True, which="major", alpha=0.3)


#: Metadata that would differ between identical runs (dates, random ids) is fixed or left out,
#: so the same result gives byte-identical files.
_METADATA = {"svg": {"Date": None}, "pdf": {"CreationDate": None}, "png": {"Software": None}}
_SVG_HASH_SALT = "noiselab"


def _savefig(fig: Any, target: Path, fmt: str) -> None:
    # SVG text stays text (searchable, editable in a proposal); PDF fonts embedded as Type 42;
    # SVG element ids come from a fixed salt instead of a random one
    rc = {"svg.fonttype": "none", "pdf.fonttype": 42, "svg.hashsalt": _SVG_HASH_SALT}
    with matplotlib.rc_context(rc):
        fig.savefig(target, format=fmt, dpi=_DPI, metadata=_METADATA.get(fmt))


def _save(fig: Any, path: str | Path, fmt: str | None = None) -> Path:
    path = Path(path)
    fmt = fmt or path.suffix.lstrip(".").lower() or "png"
    with atomic_path(path) as tmp:
        _savefig(fig, tmp, fmt)
    fig.clear()
    return path


def _save_all(fig: Any, stem: str | Path) -> tuple[Path, ...]:
    stem = Path(stem)
    if stem.suffix.lower().lstrip(".") in _FORMATS:
        stem = stem.with_suffix("")
    out = []
    for fmt in _FORMATS:
        target = stem.with_name(f"{stem.name}.{fmt}")
        with atomic_path(target) as tmp:
            _savefig(fig, tmp, fmt)
        out.append(target)
    fig.clear()
    return tuple(out)


def _is_raw(name: str) -> bool:
    return name.lower() in _RAW_NAMES


def _colors(names: Sequence[str]) -> dict[str, Any]:
    # green is kept for the target band
    cmap = matplotlib.colormaps["tab10"]
    palette = [cmap(i) for i in (0, 1, 3, 4, 5, 6, 9, 8)]
    out: dict[str, Any] = {}
    k = 0
    for n in names:
        if _is_raw(n):
            out[n] = "0.25"
        else:
            out[n] = palette[k % len(palette)]
            k += 1
    return out


def _wide_range(values: Iterable[float], ratio: float = 30.0) -> bool:
    vals = [abs(v) for v in values if v and math.isfinite(v)]
    return bool(vals) and max(vals) / max(min(vals), 1e-12) > ratio


# ---------------------------------------------------------------- from the typed study results


def extrapolation_series(name: str, result: RecipeResult) -> ExtrapolationSeries | None:
    """One recipe's series from its typed records (None if it does not extrapolate): the scales,
    energies and fitted curve its :class:`ExtrapolationReport` gives, each scale's standard
    error from the recipe's variant scores, the extrapolated energy and its standard error."""
    report = result.report(ExtrapolationReport)
    if report is None:
        return None
    std_mha = {v.label: v.std_mha for v in result.variants}
    return ExtrapolationSeries(
        recipe=name,
        scales=report.scales,
        energies_ha=report.energies_ha,
        stds_ha=tuple(std_mha[label] / HA_TO_MHA for label in report.variants),
        estimate_ha=result.energy_ha,
        estimate_std_ha=result.std_mha / HA_TO_MHA,
        curve_scales=report.curve_scales,
        curve_energies_ha=report.curve_energies_ha,
    )


def extrapolation_data(result: AssessResult) -> ExtrapolationFigureData:
    """What :func:`plot_extrapolation` draws for an assess result (every extrapolating recipe)."""
    named = ((name, extrapolation_series(name, r)) for name, r in result.recipes.items())
    return ExtrapolationFigureData(
        study_name=result.context.study,
        device_name=result.context.device,
        exact_energy_ha=result.exact_energy_ha,
        target_mha=result.target_mha,
        series=tuple(s for _, s in named if s is not None),
    )


def bias_data(result: AssessResult) -> BiasFigureData:
    """What :func:`plot_bias_bars` draws for an assess result (every recipe, in study order)."""
    bars = tuple(
        BiasBar(name, r.bias_exact_mha, r.std_mha, r.reaches_target)
        for name, r in result.recipes.items()
    )
    return BiasFigureData(result.context.study, result.context.device, result.target_mha, bars)


# ---------------------------------------------------------------- the figures


def _draw_extrapolation(
    ax: Any, data: ExtrapolationFigureData, colors: dict[str, Any], legend: bool
) -> None:
    t = data.target_mha
    ax.axhspan(
        -t, t, color="tab:green", alpha=0.18, label=f"target band ±{t:.3g} mHa" if legend else None
    )
    ax.axhline(
        0.0,
        color="k",
        lw=1.0,
        label=f"exact energy {data.exact_energy_ha:.6f} Ha" if legend else None,
    )
    for s in data.series:
        c = colors[s.recipe]
        ys = [(e - data.exact_energy_ha) * HA_TO_MHA for e in s.energies_ha]
        es = [v * HA_TO_MHA for v in s.stds_ha]
        ax.errorbar(
            s.scales,
            ys,
            yerr=es,
            fmt="o",
            color=c,
            capsize=3,
            label=f"{s.recipe}: at each scale" if legend else None,
        )
        if s.curve_scales:
            cy = [(e - data.exact_energy_ha) * HA_TO_MHA for e in s.curve_energies_ha]
            ax.plot(
                s.curve_scales,
                cy,
                "-",
                color=c,
                lw=1.2,
                alpha=0.8,
                label=f"{s.recipe}: fit" if legend else None,
            )
        if s.estimate_ha is not None:
            y0 = (s.estimate_ha - data.exact_energy_ha) * HA_TO_MHA
            e0 = None if s.estimate_std_ha is None else [s.estimate_std_ha * HA_TO_MHA]
            ax.errorbar(
                [0.0],
                [y0],
                yerr=e0,
                fmt="*",
                ms=11,
                color=c,
                capsize=3,
                mec="k",
                mew=0.5,
                label=f"{s.recipe}: extrapolated {y0:+.2f} mHa" if legend else None,
            )


def plot_extrapolation(result: AssessResult | ExtrapolationFigureData, path: str | Path) -> Path:
    """Energy error against noise scale for every extrapolating recipe; the fitted curves the
    extrapolation pass reported, down to scale 0.

    Points carry error bars of one standard error at the shot budget; the exact energy is the
    zero line and the target band (exact ± target) is shaded. When the band is thin at full
    scale a second panel zooms on it. Returns the path written (format from its suffix).
    """
    data = extrapolation_data(result) if isinstance(result, AssessResult) else result
    colors = _colors([s.recipe for s in data.series])
    xmax = max([1.0, *[max(s.scales) for s in data.series if s.scales]])
    all_y = [0.0] + [
        (e - data.exact_energy_ha) * HA_TO_MHA for s in data.series for e in s.energies_ha
    ]
    zoom = bool(data.series) and (max(all_y) - min(all_y)) > 12 * data.target_mha
    fig = _new_figure(11.0 if zoom else 8.6, 4.8)
    if zoom:
        ax, zx = fig.subplots(1, 2, width_ratios=(1.7, 1.0))
    else:
        ax, zx = fig.add_subplot(1, 1, 1), None
    _draw_extrapolation(ax, data, colors, legend=True)
    if not data.series:
        ax.text(
            0.5, 0.5, "no extrapolating recipe in this study", transform=ax.transAxes, ha="center"
        )
    for a in (ax, zx):
        if a is not None:
            a.set_xlim(-0.05 * xmax, xmax * 1.08)
            a.set_xlabel("noise scale factor (1 = device as profiled)")
    ax.set_ylabel("energy − exact energy (mHa)")
    if zx is not None:
        _draw_extrapolation(zx, data, colors, legend=False)
        zx.set_ylim(-4.0 * data.target_mha, 4.0 * data.target_mha)
        smallest = min(min(s.scales) for s in data.series if s.scales)
        zx.set_xlim(-0.08 * smallest, 0.6 * smallest)
        zx.set_title(f"zoom on the target band (±{4 * data.target_mha:.3g} mHa)", fontsize=9)
        zx.grid(True, alpha=0.3)
    fig.legend(loc="outside right upper", fontsize=7, framealpha=0.9)
    _decorate(fig, ax, "Zero-noise extrapolation", data.study_name, data.device_name)
    return _save(fig, path)


def bar_colour(bar: BiasBar, target_mha: float) -> str:
    """ "green": reaches the target at the budget (the one rule); "amber": only the bias is
    within the target; "red": the bias is outside it."""
    if bar.reaches_target:
        return "green"
    return "amber" if abs(bar.bias_mha) < target_mha else "red"


def plot_bias_bars(result: AssessResult | BiasFigureData, path: str | Path) -> Path:
    """|bias| against the exact energy (mHa) per recipe, error bars of one standard error at the
    budget, the target as a line; log scale when the values span more than a factor 30.

    Bars are green when the recipe reaches the target at the budget (P >= confidence, the rule of
    :func:`noiselab.mitigate.target.reaches_target`), amber when only its bias is within the
    target, red otherwise.
    """
    data = bias_data(result) if isinstance(result, AssessResult) else result
    study, device, target, bars = data.study_name, data.device_name, data.target_mha, data.bars
    fig = _new_figure(max(5.5, 1.1 * len(bars) + 3.0), 4.4)
    ax = fig.add_subplot(1, 1, 1)
    names = [b.recipe for b in bars]
    mags = [abs(b.bias_mha) for b in bars]
    stds = [b.std_mha for b in bars]
    verdict = {"green": "tab:green", "amber": "tab:orange", "red": "tab:red"}
    colors = [verdict[bar_colour(b, target)] for b in bars]
    log = _wide_range([*mags, target])
    pos = [m for m in mags if m > 0] or [target]
    floor = min(min(pos), target) / 5.0
    heights = [max(m, floor) for m in mags] if log else mags
    xs = list(range(len(bars)))
    ax.bar(xs, heights, color=colors, alpha=0.8, edgecolor="k", lw=0.6)
    # on a log axis an arm reaching zero cannot be drawn: it is clipped at the bottom
    lower = [min(s, h * 0.999) for s, h in zip(stds, heights, strict=True)] if log else stds
    ax.errorbar(xs, heights, yerr=[lower, stds], fmt="none", ecolor="k", capsize=4, lw=1)
    ax.axhline(target, color="tab:green", ls="--", lw=1.2)
    for i, b in enumerate(bars):
        ax.annotate(
            f"{b.bias_mha:+.2f} ± {b.std_mha:.2f}",
            (i, heights[i] + stds[i]),
            textcoords="offset points",
            xytext=(0, 3),
            ha="center",
            fontsize=7,
        )
    many = len(bars) > 4
    ax.set_xticks(xs, names, rotation=20 if many else 0, ha="right" if many else "center")
    if log:
        ax.set_yscale("log")
        ax.set_ylim(bottom=floor)
    ax.set_xlabel("mitigation recipe")
    ax.set_ylabel("|energy − exact energy| (mHa)")
    handles = [
        Line2D([], [], color="tab:green", ls="--", label=target_words(target)),
        Patch(color=verdict["green"], alpha=0.8, label="reaches the target at the budget"),
        Patch(color=verdict["amber"], alpha=0.8, label="bias within, error bar too wide"),
        Patch(color=verdict["red"], alpha=0.8, label="bias outside target"),
    ]
    ax.legend(handles=handles, fontsize=7, loc="best", framealpha=0.9)
    _decorate(fig, ax, "Bias per recipe (error bars: 1 std at the shot budget)", study, device)
    return _save(fig, path)


def plot_sweep(sweep_result: SweepResult, path_stem: str | Path) -> tuple[Path, ...]:
    """The proposal figure: |energy error| (mHa, log) against the knob, raw and each mitigated
    recipe with a ± one-standard-error band at the budget, the target band shaded, crossings
    marked, the device's current value as a vertical line. Writes SVG, PDF and PNG."""
    knob = sweep_result.knob_spec
    fig = _new_figure(9.4, 4.8)
    ax = fig.add_subplot(1, 1, 1)
    d = knob.display_factor
    xs = [v * d for v in sweep_result.values]
    t = sweep_result.target_mha
    colors = _colors(sweep_result.recipes)
    all_vals: list[float] = [t]
    floor = t * 1e-3
    any_negative = False
    for name in sweep_result.recipes:
        err, std = sweep_result.series(name)
        mag = [max(abs(e), floor) for e in err]
        all_vals += mag
        lo = [max(abs(e) - s, floor) for e, s in zip(err, std, strict=True)]
        hi = [abs(e) + s for e, s in zip(err, std, strict=True)]
        c = colors[name]
        ls = "--" if _is_raw(name) else "-"
        ax.plot(xs, mag, ls, color=c, lw=1.6, label=name)
        # filled: energy above the exact one; open: below it (over-correction)
        for x, e, m in zip(xs, err, mag, strict=True):
            ax.plot([x], [m], "o", ms=4.5, color=c, mfc=c if e >= 0 else "white", mew=1.2)
        ax.fill_between(xs, lo, hi, color=c, alpha=0.14, lw=0)
        any_negative = any_negative or any(e < 0 for e in err)
    ax.axhspan(floor * 0.5, t, color="tab:green", alpha=0.12, zorder=0)
    ax.axhline(t, color="tab:green", lw=1.0, label=target_words(t) + " (shaded below)")
    k = 0
    for c_ in sweep_result.crossings:
        col = colors.get(c_.recipe, "k")
        for x in c_.bias_crossings:
            ax.plot([x * d], [t], marker="D", ms=7, color="white", markeredgecolor=col, zorder=5)
        for x in c_.crossings:
            ax.plot([x * d], [t], marker="X", ms=10, color=col, markeredgecolor="k", zorder=5)
            # stagger the labels so that neighbouring crossings stay readable
            ax.annotate(
                knob.show(x),
                (x * d, t),
                textcoords="offset points",
                xytext=(6, -14 - 11 * k),
                fontsize=7,
                color=col,
                fontweight="bold",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8},
            )
            k += 1
    cur = sweep_result.current_value * d
    ax.axvline(
        cur,
        color="0.35",
        ls=":",
        lw=1.3,
        label=f"device now: {knob.show(sweep_result.current_value)}",
    )
    low = [p.value * d for p in sweep_result.points if p.floored]
    if low:
        # shade up to halfway to the first point above the floor (geometric mean on a log axis)
        above = [x for x in xs if x > max(low)]
        edge = max(low)
        if above:
            nxt = min(above)
            edge = math.sqrt(edge * nxt) if sweep_result.log else 0.5 * (edge + nxt)
        ax.axvspan(
            min(xs),
            edge,
            color="0.85",
            alpha=0.5,
            lw=0,
            zorder=0,
            label="gate error below the T1/T2 floor (relaxation alone)",
        )
    ax.set_yscale("log")
    positive = [v for v in all_vals if v > floor]
    ax.set_ylim(max(min(positive) / 3.0, floor), max(positive) * 3.0)
    if sweep_result.log:
        ax.set_xscale("log")
        # plain numbers at 1, 2, 5 x 10^k read better than 2 x 10^-1 in a proposal
        ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel(knob.axis_label)
    ax.set_ylabel("|energy − exact energy| (mHa)")
    conf = sweep_result.confidence
    ax.plot(
        [], [], "X", color="0.5", markeredgecolor="k",
        label=f"reaching the target at the budget (P >= {conf:g}) starts or stops",
    )  # fmt: skip
    ax.plot(
        [], [], "D", color="white", markeredgecolor="0.3",
        label="bias alone (unlimited shots) crosses the target",
    )  # fmt: skip
    if any_negative:
        ax.plot([], [], "o", color="0.3", mfc="white", label="open: energy below the exact one")
    fig.legend(loc="outside right upper", fontsize=7, framealpha=0.9)
    _decorate(
        fig,
        ax,
        f"Energy error against {knob.phrase.removeprefix('the ')} (bands: ±1 std at "
        f"{sweep_result.shots_total:,} shots)",
        sweep_result.study_name,
        sweep_result.device_name,
    )
    return _save_all(fig, path_stem)


def plot_budget(budget_result: BudgetResult, path: str | Path) -> Path:
    """Error budget as horizontal bars (mHa): the device as profiled, each channel alone, each
    channel removed and the noiseless limit, one bar per recipe, with the target lines."""
    b = budget_result
    rows = list(b.rows)
    order = [
        r for kind in ("total", "alone", "removed", "noiseless") for r in rows if r.kind == kind
    ]
    n = len(b.recipes)
    fig = _new_figure(8.8, 2.0 + 0.2 * len(order) * max(1, n))
    ax = fig.add_subplot(1, 1, 1)
    height = 0.8 / n
    colors = _colors(b.recipes)
    for k, name in enumerate(b.recipes):
        ys = [i + (k - (n - 1) / 2) * height for i in range(len(order))]
        vals = [r.errors_mha[k] for r in order]
        errs = [r.stds_mha[k] for r in order]
        hatches = ["//" if r.kind == "removed" else "" for r in order]
        bars = ax.barh(
            ys,
            vals,
            height=height * 0.92,
            color=colors[name],
            alpha=0.85,
            edgecolor="k",
            lw=0.5,
            xerr=errs,
            error_kw={"capsize": 2, "lw": 0.8},
        )
        for bar, h in zip(bars, hatches, strict=True):
            bar.set_hatch(h)
        for y, v, e in zip(ys, vals, errs, strict=True):
            ax.annotate(
                f"{v:+.2f}",
                (v + (e if v >= 0 else -e), y),
                textcoords="offset points",
                xytext=(4 if v >= 0 else -4, 0),
                ha="left" if v >= 0 else "right",
                va="center",
                fontsize=6.5,
            )
    t = b.target_mha
    ax.axvline(t, color="tab:green", ls="--", lw=1.2)
    if any(r.errors_mha[k] < 0 for r in order for k in range(n)):
        ax.axvline(-t, color="tab:green", ls="--", lw=1.2)
    ax.axvline(0.0, color="k", lw=0.6)
    values = [abs(v) for r in order for v in r.errors_mha]
    symlog = bool(values) and max(values) > 30 * t
    if symlog:
        # raw errors of 100 mHa beside mitigated ones inside the target: linear up to the
        # target, logarithmic beyond, so both stay readable
        ax.set_xscale("symlog", linthresh=t, linscale=1.0)
    signed = [v for r in order for v in r.errors_mha]
    hi_x, lo_x = max([*signed, t]), min([*signed, -t])
    # room for the value labels beyond the bars
    ax.set_xlim(lo_x * (3.0 if symlog else 1.25), hi_x * (3.0 if symlog else 1.15))
    for sep in (0.5, 0.5 + len([r for r in order if r.kind == "alone"])):
        ax.axhline(sep, color="0.6", lw=0.6)
    ax.set_yticks(range(len(order)), [r.label for r in order], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel(
        "energy − exact energy (mHa), error bars: 1 std at the shot budget"
        + ("\n(linear within ±target, logarithmic beyond)" if symlog else "")
    )
    ax.set_ylabel("noise channels present")
    handles = [Patch(facecolor=colors[nm], edgecolor="k", label=nm) for nm in b.recipes]
    handles.append(
        Patch(facecolor="white", edgecolor="k", hatch="//", label="that channel removed")
    )
    handles.append(Line2D([], [], color="tab:green", ls="--", label=target_words(t)))
    fig.legend(handles=handles, fontsize=7, loc="outside right upper", framealpha=0.9)
    _decorate(fig, ax, f"Error budget: {b.dominant} dominates", b.study_name, b.device_name)
    return _save(fig, path)


def plot_drift(assess_result: Any, path: str | Path) -> Path:
    """Bias against the exact energy (mHa) on each drawn device day, per recipe: one dot per
    day, a bar from the 5th to the 95th percentile, the nominal bias as a diamond, the target
    as a green band and the days that reach the target above each recipe. Symmetric-log axis
    (linear within the target) when the biases span more than a factor 30."""
    r = assess_result
    target = float(r.target_mha)
    names = [n for n in r.recipes if n in r.drift]
    draws = max((r.drift[n].draws for n in names), default=0)
    fig = _new_figure(max(5.5, 1.1 * len(names) + 3.0), 4.6)
    ax = fig.add_subplot(1, 1, 1)
    ax.axhspan(-target, target, color="tab:green", alpha=0.15, lw=0)
    everything = [target]
    for i, name in enumerate(names):
        d = r.drift[name]
        biases = list(d.biases_mha)
        everything += [abs(b) for b in biases]
        offsets = [((k * 0.618034) % 1.0 - 0.5) * 0.36 for k in range(len(biases))]
        ax.scatter(
            [i + o for o in offsets], biases, s=10, color="tab:blue", alpha=0.55, lw=0, zorder=3
        )
        ax.vlines(i, d.bias_mha_p05, d.bias_mha_p95, color="k", lw=2.2, zorder=4)
        nominal = float(r.recipes[name].bias_exact_mha)
        ax.plot([i], [nominal], marker="D", color="k", ms=5, zorder=5)
        top = max(max(biases), nominal, target)
        ax.annotate(
            f"reaches {d.reaching}/{d.draws}",
            (i, top),
            textcoords="offset points",
            xytext=(0, 5),
            ha="center",
            fontsize=7,
        )
    if _wide_range(everything):
        ax.set_yscale("symlog", linthresh=target)
    xs = list(range(len(names)))
    many = len(names) > 4
    ax.set_xticks(xs, names, rotation=20 if many else 0, ha="right" if many else "center")
    ax.set_xlim(-0.6, len(names) - 0.4)
    ax.margins(y=0.12)
    ax.set_xlabel("mitigation recipe")
    ax.set_ylabel("energy − exact energy (mHa)")
    handles = [
        Patch(color="tab:green", alpha=0.15, label=target_words(target)),
        Line2D([], [], ls="", marker="o", color="tab:blue", alpha=0.55, label="one drawn day"),
        Line2D([], [], color="k", lw=2.2, label="5th-95th percentile"),
        Line2D([], [], ls="", marker="D", color="k", label="nominal device"),
    ]
    ax.legend(handles=handles, fontsize=7, loc="best", framealpha=0.9)
    study, device = r.context.study, r.context.device
    title = (
        f"Bias over {draws} drawn device days; reaches: P(within target) >= "
        f"{float(r.confidence):g} at the budget"
    )
    _decorate(fig, ax, title, study, device)
    return _save(fig, path)
