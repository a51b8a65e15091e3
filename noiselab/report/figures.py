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
from noiselab.report.style import current_style, font, line, mark, size
from noiselab.study.budget import BudgetResult
from noiselab.study.results import AssessResult
from noiselab.study.sweep import BISECTION_REL_TOL, SweepResult

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
    fit: str = ""
    amplifier: str = ""
    shots: int | None = None  # the recipe's total shots at the budget

    def describe(self) -> str:
        """'linear fit, stretch amplifier, scales 1, 3, 5; 4,000,000 shots' (what is known)."""
        parts = [
            p
            for p in (
                f"{self.fit} fit" if self.fit else "",
                f"{self.amplifier} amplifier" if self.amplifier else "",
            )
            if p
        ]
        parts.append("scales " + ", ".join(f"{c:g}" for c in self.scales))
        text = ", ".join(parts)
        return f"{text}; {self.shots:,} shots" if self.shots else text


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
    """A figure of the paper size (inches) scaled by the current style, on an Agg canvas."""
    fig = Figure(figsize=size(width_in, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _decorate(fig: Any, ax: Any, title: str, study: str, device: str, room: float = 1.0) -> None:
    """Title, subtitle ``study S on D`` (``D``: 'device NAME', or words such as '4 devices')
    and the caution line. ``room``: the share of the figure's width the title may take (less
    beside a legend outside the axes); a longer title is wrapped."""
    where = device if " " in device else f"device {device}"
    # about 13 characters per inch at 10 pt; a legend beside the axes grows with the type
    style = current_style()
    chars = int(room * style.size_scale / style.font_scale * fig.get_figwidth() * 130 / font(10))
    if len(title) > chars and " (" in title:  # a parenthesis goes to its own line first
        head, _, tail = title.rpartition(" (")
        title = f"{head}\n({tail}"
    title = "\n".join(textwrap.fill(part, width=chars) for part in title.split("\n"))
    ax.set_title(f"{title}\nstudy {study} on {where}", fontsize=font(10))
    # a figure-level x label is laid out below everything else (outside legends included)
    # wrapped to the figure's width (about 17 characters per inch at 7 pt)
    chars = 17 * fig.get_figwidth() / current_style().font_scale
    caution = textwrap.fill(CAUTION, width=int(chars))
    fig.supxlabel(
        caution, x=0.995, ha="right", ma="right", fontsize=font(7), style="italic", color="0.4"
    )
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


#: Okabe & Ito's colour-blind-safe palette ("Color Universal Design", 2008): black, orange,
#: sky blue, bluish green, yellow, blue, vermillion, reddish purple.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
#: the target band and "reaches the target"
TARGET_COLOUR = OKABE_ITO["bluish_green"]
#: recipes, in order (bluish green is kept for the target)
RECIPE_COLOURS = tuple(
    OKABE_ITO[n] for n in ("blue", "orange", "reddish_purple", "vermillion", "sky_blue", "yellow")
)
#: verdict colours of the bias bars, with a hatch each so that colour is never the only cue
VERDICT_STYLE = {
    "green": (OKABE_ITO["bluish_green"], ""),
    "amber": (OKABE_ITO["orange"], ".."),
    "red": (OKABE_ITO["vermillion"], "xx"),
}


def _colors(names: Sequence[str]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    k = 0
    for n in names:
        if _is_raw(n):
            out[n] = "0.25"
        else:
            out[n] = RECIPE_COLOURS[k % len(RECIPE_COLOURS)]
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
        fit=report.fit,
        amplifier=report.amplifier,
        shots=int(result.shots_total) if result.shots_total else None,
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
    ax: Any,
    data: ExtrapolationFigureData,
    colors: dict[str, Any],
    legend: bool,
    dodge: float = 0.0,
) -> None:
    """Draw every series on ``ax``; ``dodge``: horizontal step between the stars at scale 0
    (the zoom panel sets one so that stars at equal energies stay apart)."""
    t = data.target_mha
    n = len(data.series)
    ax.axhspan(
        -t,
        t,
        color=TARGET_COLOUR,
        alpha=0.18,
        label=f"target band ±{t:.3g} mHa" if legend else None,
    )
    ax.axhline(
        0.0,
        color="k",
        lw=line(1.0),
        label=f"exact energy {data.exact_energy_ha:.6f} Ha" if legend else None,
    )
    for i, s in enumerate(data.series):
        c = colors[s.recipe]
        ys = [(e - data.exact_energy_ha) * HA_TO_MHA for e in s.energies_ha]
        es = [v * HA_TO_MHA for v in s.stds_ha]
        ax.errorbar(
            s.scales,
            ys,
            yerr=es,
            fmt="o",
            color=c,
            capsize=mark(3),
            label=f"{s.recipe}: {s.describe()}" if legend else None,
        )
        if s.curve_scales:
            cy = [(e - data.exact_energy_ha) * HA_TO_MHA for e in s.curve_energies_ha]
            ax.plot(
                s.curve_scales,
                cy,
                "-",
                color=c,
                lw=line(1.2),
                alpha=0.8,
            )
        if s.estimate_ha is not None:
            y0 = (s.estimate_ha - data.exact_energy_ha) * HA_TO_MHA
            e0 = None if s.estimate_std_ha is None else [s.estimate_std_ha * HA_TO_MHA]
            ax.errorbar(
                [dodge * (i - (n - 1) / 2)],
                [y0],
                yerr=e0,
                fmt="*",
                ms=mark(11),
                color=c,
                capsize=mark(3),
                mec="k",
                mew=line(0.5),
                label=(
                    f"{s.recipe}: extrapolated {y0:+.2f} ± {(e0 or [0.0])[0]:.2f} mHa"
                    if legend
                    else None
                ),
            )


#: The zoom panel spans at least ±ZOOM_TARGETS targets and grows to hold every star within
#: ±ZOOM_MAX_TARGETS targets; a star beyond is named in a note on the panel.
ZOOM_TARGETS = 4.0
ZOOM_MAX_TARGETS = 25.0


def zoom_limits(data: ExtrapolationFigureData) -> tuple[tuple[float, float], tuple[str, ...]]:
    """(y limits of the zoom panel in mHa, recipes whose extrapolated energy lies outside)."""
    t = data.target_mha
    lo, hi = -ZOOM_TARGETS * t, ZOOM_TARGETS * t
    outside = []
    for s in data.series:
        if s.estimate_ha is None:
            continue
        y0 = (s.estimate_ha - data.exact_energy_ha) * HA_TO_MHA
        e0 = (s.estimate_std_ha or 0.0) * HA_TO_MHA
        if abs(y0) > ZOOM_MAX_TARGETS * t:
            outside.append(s.recipe)
            continue
        lo, hi = min(lo, y0 - 1.3 * e0 - 0.3 * t), max(hi, y0 + 1.3 * e0 + 0.3 * t)
    return (lo, hi), tuple(outside)


def extrapolation_figure(result: AssessResult | ExtrapolationFigureData, ax: Any = None) -> Figure:
    """Energy error against noise scale for every extrapolating recipe; the fitted curves the
    extrapolation pass reported, down to scale 0. The legend (below) names each recipe's fit,
    amplifier, scales and shots.

    Points carry error bars of one standard error at the shot budget; the exact energy is the
    zero line and the target band (exact ± target) is shaded. When the band is thin at full
    scale a second panel zooms on it (same scales), sized to hold every extrapolated energy
    (star) within ±25 targets; a star beyond is named on the panel.
    """
    data = extrapolation_data(result) if isinstance(result, AssessResult) else result
    colors = _colors([s.recipe for s in data.series])
    xmax = max([1.0, *[max(s.scales) for s in data.series if s.scales]])
    all_y = [0.0] + [
        (e - data.exact_energy_ha) * HA_TO_MHA for s in data.series for e in s.energies_ha
    ]
    zoom = bool(data.series) and (max(all_y) - min(all_y)) > 12 * data.target_mha
    own = ax is None  # on a caller's axes: one panel, no zoom
    zoom = zoom and own
    if own:
        fig = _new_figure(10.0 if zoom else 8.0, 5.6 + 0.22 * len(data.series))
        if zoom:
            ax, zx = fig.subplots(1, 2, width_ratios=(2.4, 1.0))
        else:
            ax, zx = fig.add_subplot(1, 1, 1), None
    else:
        fig, zx = ax.get_figure(), None
    _draw_extrapolation(ax, data, colors, legend=True)
    if not data.series:
        ax.text(
            0.5, 0.5, "no extrapolating recipe in this study", transform=ax.transAxes, ha="center"
        )
    ax.set_xlim(-0.05 * xmax, xmax * 1.08)
    ax.set_xlabel("noise scale factor (1 = device as profiled)")
    ax.set_ylabel("energy − exact energy (mHa)")
    if zx is not None:
        smallest = min(min(s.scales) for s in data.series if s.scales)
        half = 0.25 * smallest
        _draw_extrapolation(zx, data, colors, legend=False, dodge=half / max(2, len(data.series)))
        (lo, hi), outside = zoom_limits(data)
        zx.set_ylim(lo, hi)
        zx.set_xlim(-half, half)  # around scale 0, where the stars are
        zx.set_xticks([0.0], ["0"])
        zx.set_xlabel("noise scale 0\n(extrapolated)")
        zx.set_title("zoom on the target band:\nthe extrapolated energies", fontsize=font(9))
        if outside:
            zx.text(
                0.02, 0.02, "outside this panel: " + ", ".join(outside),
                transform=zx.transAxes, fontsize=font(7), va="bottom",
                bbox={"fc": "white", "ec": "0.6", "alpha": 0.9},
            )  # fmt: skip
        zx.grid(True, alpha=0.3)
    # below the main panel (the layout reserves its room), above the caution line
    ax.legend(
        loc="upper left",
        bbox_to_anchor=(0.0, -0.13),
        ncols=1 if zoom else 2,
        fontsize=font(8),
        framealpha=0.9,
    )
    _decorate(fig, ax, "Zero-noise extrapolation", data.study_name, data.device_name)
    return fig


def plot_extrapolation(result: AssessResult | ExtrapolationFigureData, path: str | Path) -> Path:
    """:func:`extrapolation_figure` written to ``path`` (format from its suffix)."""
    return _save(extrapolation_figure(result), path)


def bar_colour(bar: BiasBar, target_mha: float) -> str:
    """ "green": reaches the target at the budget (the one rule); "amber": only the bias is
    within the target; "red": the bias is outside it."""
    if bar.reaches_target:
        return "green"
    return "amber" if abs(bar.bias_mha) < target_mha else "red"


def bias_figure(result: AssessResult | BiasFigureData, ax: Any = None) -> Figure:
    """Signed bias against the exact energy (mHa) per recipe, error bars of one standard error
    at the budget on both sides, the target band ±target shaded; a symmetric-log axis (linear
    within ±target) when the values span more than a factor 30. Draws on ``ax`` when given.

    Bars are green when the recipe reaches the target at the budget (P >= confidence, the rule of
    :func:`noiselab.mitigate.target.reaches_target`), amber (dotted) when only its bias is within
    the target, red (crossed) otherwise.
    """
    data = bias_data(result) if isinstance(result, AssessResult) else result
    study, device, target, bars = data.study_name, data.device_name, data.target_mha, data.bars
    if ax is None:
        fig = _new_figure(max(5.5, 1.1 * len(bars) + 3.0), 4.4)
        ax = fig.add_subplot(1, 1, 1)
    fig = ax.get_figure()
    names = [b.recipe for b in bars]
    biases = [b.bias_mha for b in bars]
    stds = [b.std_mha for b in bars]
    styles = [VERDICT_STYLE[bar_colour(b, target)] for b in bars]
    xs = list(range(len(bars)))
    ax.axhspan(-target, target, color=TARGET_COLOUR, alpha=0.15, lw=0, zorder=0)
    ax.axhline(0.0, color="k", lw=line(0.8))
    drawn = ax.bar(
        xs, biases, color=[c for c, _ in styles], alpha=0.85, edgecolor="k", lw=line(0.6), zorder=2
    )
    for patch, (_, hatch) in zip(drawn, styles, strict=True):
        patch.set_hatch(hatch)
    ax.errorbar(
        xs, biases, yerr=stds, fmt="none", ecolor="k", capsize=mark(4), lw=line(1), zorder=3
    )
    for i, b in enumerate(bars):
        up = b.bias_mha >= 0
        ax.annotate(
            f"{b.bias_mha:+.2f} ± {b.std_mha:.2f}",
            (i, b.bias_mha + (b.std_mha if up else -b.std_mha)),
            textcoords="offset points",
            xytext=(0, 3 if up else -3),
            ha="center",
            va="bottom" if up else "top",
            fontsize=font(7),
        )
    many = len(bars) > 4
    ax.set_xticks(xs, names, rotation=20 if many else 0, ha="right" if many else "center")
    symlog = _wide_range([*(abs(v) for v in biases), target])
    if symlog:
        ax.set_yscale("symlog", linthresh=target, linscale=1.0)
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.margins(y=0.15)
    ax.set_xlabel("mitigation recipe")
    ax.set_ylabel(
        "energy − exact energy (mHa)"
        + ("\nlinear within ±target, logarithmic beyond" if symlog else "")
    )
    handles = [
        Patch(color=TARGET_COLOUR, alpha=0.15, label=target_words(target)),
        *(
            Patch(facecolor=VERDICT_STYLE[k][0], hatch=VERDICT_STYLE[k][1], edgecolor="k",
                  alpha=0.85, label=words)
            for k, words in (
                ("green", "reaches the target at the budget"),
                ("amber", "bias within, error bar too wide"),
                ("red", "bias outside target"),
            )
        ),
    ]  # fmt: skip
    ax.legend(handles=handles, fontsize=font(7), loc="best", framealpha=0.9)
    _decorate(fig, ax, "Bias per recipe (error bars: ±1 std at the shot budget)", study, device)
    return fig


def plot_bias_bars(result: AssessResult | BiasFigureData, path: str | Path) -> Path:
    """:func:`bias_figure` written to ``path`` (format from its suffix)."""
    return _save(bias_figure(result), path)


def crossing_text(knob: Any, value: float, rel_tol: float = BISECTION_REL_TOL) -> str:
    """A crossing quoted to the resolution it was located at: bisection stops at a bracket of
    ``rel_tol`` of the value, so the midpoint is known to ±rel_tol/2 ('0.431 ± 0.002 %')."""
    v = value * knob.display_factor
    half = abs(v) * rel_tol / 2.0
    decimals = max(0, -math.floor(math.log10(half))) if half > 0 else 0
    unit = f" {knob.unit}" if knob.unit else ""
    return f"{v:.{decimals}f} ± {half:.{decimals}f}{unit}"


def plot_sweep(sweep_result: SweepResult, path_stem: str | Path) -> tuple[Path, ...]:
    """:func:`sweep_figure` written as SVG, PDF and PNG beside ``path_stem``."""
    return _save_all(sweep_figure(sweep_result), path_stem)


def sweep_figure(sweep_result: SweepResult, ax: Any = None) -> Figure:
    """The proposal figure: |energy error| (mHa, log) against the knob, raw and each mitigated
    recipe with a ± one-standard-error band at the budget, the target band shaded, crossings
    marked, the device's current value as a vertical line. Writes SVG, PDF and PNG."""
    knob = sweep_result.knob_spec
    own = ax is None
    if own:
        fig = _new_figure(9.4, 4.8)
        ax = fig.add_subplot(1, 1, 1)
    fig = ax.get_figure()
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
        ax.plot(xs, mag, ls, color=c, lw=line(1.6), label=name)
        # filled: energy above the exact one; open: below it (over-correction)
        for x, e, m in zip(xs, err, mag, strict=True):
            ax.plot(
                [x], [m], "o", ms=mark(4.5), color=c, mfc=c if e >= 0 else "white", mew=line(1.2)
            )
        ax.fill_between(xs, lo, hi, color=c, alpha=0.14, lw=0)
        any_negative = any_negative or any(e < 0 for e in err)
    ax.axhspan(floor * 0.5, t, color=TARGET_COLOUR, alpha=0.12, zorder=0)
    ax.axhline(t, color=TARGET_COLOUR, lw=line(1.0), label=target_words(t) + " (shaded below)")
    k = 0
    for c_ in sweep_result.crossings:
        col = colors.get(c_.recipe, "k")
        for x in c_.bias_crossings:
            ax.plot(
                [x * d], [t], marker="D", ms=mark(7), color="white", markeredgecolor=col, zorder=5
            )
        for x in c_.crossings:
            ax.plot([x * d], [t], marker="X", ms=mark(10), color=col, markeredgecolor="k", zorder=5)
            # stagger the labels so that neighbouring crossings stay readable
            ax.annotate(
                crossing_text(knob, x),
                (x * d, t),
                textcoords="offset points",
                xytext=(6, -14 - 11 * k),
                fontsize=font(7),
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
        lw=line(1.3),
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
    mode = sweep_result.coherence_gate_errors
    gates = {"follow": "; gate errors follow (relaxation part)", "fixed": "; gate errors fixed"}
    ax.set_xlabel(knob.axis_label + gates.get(mode or "", ""))
    ax.set_ylabel("|energy − exact energy| (mHa)")
    conf = sweep_result.confidence
    ax.plot(
        [], [], "X", color="0.5", markeredgecolor="k",
        label=f"reaching the target at the budget (P >= {conf:g}) starts or stops\n"
        f"(located by bisection to ±{BISECTION_REL_TOL * 50:g} %)",
    )  # fmt: skip
    ax.plot(
        [], [], "D", color="white", markeredgecolor="0.3",
        label="bias alone (unlimited shots) crosses the target",
    )  # fmt: skip
    if any_negative:
        ax.plot([], [], "o", color="0.3", mfc="white", label="open: energy below the exact one")
    if own:
        fig.legend(loc="outside right upper", fontsize=font(7), framealpha=0.9)
    else:
        ax.legend(fontsize=font(7), framealpha=0.9)
    _decorate(
        fig,
        ax,
        f"Energy error against {knob.phrase.removeprefix('the ')} (bands: ±1 std at "
        f"{sweep_result.shots_total:,} shots)",
        sweep_result.study_name,
        sweep_result.device_name,
        room=0.6 if own else 1.0,  # the legend takes the rest
    )
    return fig


#: The noise channels in a reader's words (figures only; CSV and JSON keep the channel names).
CHANNEL_WORDS = {
    "relaxation": "relaxation (T1/T2)",
    "single_qubit": "one-qubit gate errors",
    "two_qubit": "two-qubit gate errors",
    "coherent": "coherent errors (ZZ, over-rotation)",
    "readout": "readout errors",
}


def budget_label(row: Any) -> str:
    """A budget row's label in a reader's words ('without two-qubit gate errors')."""
    words = CHANNEL_WORDS.get(row.channel, str(row.channel))
    return {
        "total": "device as profiled",
        "alone": f"only {words}",
        "removed": f"without {words}",
        "noiseless": "noiseless",
    }.get(row.kind, row.label)


def budget_title(b: BudgetResult) -> str:
    """'Error budget: two-qubit gate errors cost the most' when removing that channel lowers
    the first recipe's |error|; no channel is named a cost when no removal lowers it."""
    total = next(r for r in b.rows if r.kind == "total")
    removed = next((r for r in b.rows if r.kind == "removed" and r.channel == b.dominant), None)
    if removed is None or abs(removed.errors_mha[0]) >= abs(total.errors_mha[0]):
        return "Error budget: no single channel's removal lowers the error"
    return f"Error budget: {CHANNEL_WORDS.get(b.dominant, b.dominant)} cost the most"


def _ticks_with_target(ax: Any, t: float, negative: bool) -> None:
    """The value axis' ticks plus ±target, labelled as plain numbers."""
    lo, hi = ax.get_xlim()
    ticks = [v for v in ax.get_xticks() if lo <= v <= hi]
    extra = [t, -t] if negative else [t]
    # drop a default tick too close to a target tick to be read apart
    span = hi - lo
    near = 0.07 * current_style().font_scale  # larger type needs more room
    kept = [v for v in ticks if all(abs(v - e) > near * span for e in extra)]
    if ax.get_xscale() == "symlog":
        kept = [v for v in ticks if all(abs(v - e) > 0.25 * abs(e) or v == 0 for e in extra)]
    ax.set_xticks(sorted({*kept, *extra}))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:.3g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())


def plot_budget(budget_result: BudgetResult, path: str | Path) -> Path:
    """:func:`budget_figure` written to ``path`` (format from its suffix)."""
    return _save(budget_figure(budget_result), path)


def budget_figure(budget_result: BudgetResult, ax: Any = None) -> Figure:
    """Error budget as horizontal bars (mHa): the device as profiled, each channel alone, each
    channel removed and the noiseless limit, one bar per recipe, with the target lines."""
    b = budget_result
    rows = list(b.rows)
    order = [
        r for kind in ("total", "alone", "removed", "noiseless") for r in rows if r.kind == kind
    ]
    n = len(b.recipes)
    own = ax is None
    if own:
        fig = _new_figure(8.8, 2.0 + 0.2 * len(order) * max(1, n))
        ax = fig.add_subplot(1, 1, 1)
    fig = ax.get_figure()
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
            lw=line(0.5),
            xerr=errs,
            error_kw={"capsize": mark(2), "lw": line(0.8)},
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
                fontsize=font(6.5),
            )
    t = b.target_mha
    ax.axvline(t, color=TARGET_COLOUR, ls="--", lw=line(1.2))
    if any(r.errors_mha[k] < 0 for r in order for k in range(n)):
        ax.axvline(-t, color=TARGET_COLOUR, ls="--", lw=line(1.2))
    ax.axvline(0.0, color="k", lw=line(0.6))
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
        ax.axhline(sep, color="0.6", lw=line(0.6))
    ax.set_yticks(range(len(order)), [budget_label(r) for r in order], fontsize=font(8))
    _ticks_with_target(ax, t, any(r.errors_mha[k] < 0 for r in order for k in range(n)))
    ax.invert_yaxis()
    ax.set_xlabel(
        "energy − exact energy (mHa), error bars: 1 std at the shot budget"
        + ("\n(linear within ±target, logarithmic beyond)" if symlog else "")
    )
    ax.set_ylabel("error sources present")
    handles = [Patch(facecolor=colors[nm], edgecolor="k", label=nm) for nm in b.recipes]
    handles.append(
        Patch(facecolor="white", edgecolor="k", hatch="//", label="that error source removed")
    )
    handles.append(Line2D([], [], color=TARGET_COLOUR, ls="--", label=target_words(t)))
    if own:
        fig.legend(handles=handles, fontsize=font(7), loc="outside right upper", framealpha=0.9)
    else:
        ax.legend(handles=handles, fontsize=font(7), framealpha=0.9)
    _decorate(fig, ax, budget_title(b), b.study_name, b.device_name, room=0.45 if own else 1.0)
    return fig


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
    ax.axhspan(-target, target, color=TARGET_COLOUR, alpha=0.15, lw=0)
    everything = [target]
    for i, name in enumerate(names):
        d = r.drift[name]
        biases = list(d.biases_mha)
        everything += [abs(b) for b in biases]
        offsets = [((k * 0.618034) % 1.0 - 0.5) * 0.36 for k in range(len(biases))]
        ax.scatter(
            [i + o for o in offsets],
            biases,
            s=mark(10**0.5) ** 2,  # an area in points^2
            color=OKABE_ITO["blue"],
            alpha=0.55,
            lw=0,
            zorder=3,
        )
        ax.vlines(i, d.bias_mha_p05, d.bias_mha_p95, color="k", lw=line(2.2), zorder=4)
        nominal = float(r.recipes[name].bias_exact_mha)
        ax.plot([i], [nominal], marker="D", color="k", ms=mark(5), zorder=5)
        top = max(max(biases), nominal, target)
        ax.annotate(
            f"reaches {d.reaching}/{d.draws}",
            (i, top),
            textcoords="offset points",
            xytext=(0, 5),
            ha="center",
            fontsize=font(7),
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
        Patch(color=TARGET_COLOUR, alpha=0.15, label=target_words(target)),
        Line2D(
            [], [], ls="", marker="o", color=OKABE_ITO["blue"], alpha=0.55, label="one drawn day"
        ),
        Line2D([], [], color="k", lw=line(2.2), label="5th-95th percentile"),
        Line2D([], [], ls="", marker="D", color="k", label="nominal device"),
    ]
    ax.legend(handles=handles, fontsize=font(7), loc="best", framealpha=0.9)
    study, device = r.context.study, r.context.device
    title = (
        f"Bias over {draws} drawn device days; reaches: P(within target) >= "
        f"{float(r.confidence):g} at the budget"
    )
    _decorate(fig, ax, title, study, device)
    return _save(fig, path)
