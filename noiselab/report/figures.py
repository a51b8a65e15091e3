"""Figures from study results (matplotlib, object-oriented API on an Agg canvas).

No pyplot state is touched: each function builds a ``matplotlib.figure.Figure`` with an Agg
canvas, writes it atomically and drops it, so nothing stays open and a notebook's backend is
left alone. matplotlib is imported inside the functions (``noiselab --help`` stays fast).

Energies are drawn as errors against the exact energy in mHa, the unit of the target.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from noiselab.common.atomic import atomic_path
from noiselab.common.units import CHEMICAL_ACCURACY_MHA, HA_TO_MHA

CAUTION = "emulated: only as good as the noise model"
_FORMATS = ("svg", "pdf", "png")
_DPI = 150
_RAW_NAMES = ("raw", "none", "unmitigated")


# ---------------------------------------------------------------- plain records the figures use


@dataclasses.dataclass(frozen=True)
class ExtrapolationSeries:
    """One recipe's energies against noise scale, and its fit sampled on [0, max scale].

    Energies in Ha; ``curve_*`` is the fit sampled for drawing (empty when the recipe does not
    extrapolate).
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


# ---------------------------------------------------------------- shared helpers


def _new_figure(width_in: float = 7.0, height_in: float = 4.6) -> Any:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _decorate(fig: Any, ax: Any, title: str, study: str, device: str) -> None:
    ax.set_title(f"{title}\nstudy {study} on device {device}", fontsize=10)
    # a figure-level x label is laid out below everything else (outside legends included)
    fig.supxlabel(CAUTION, x=0.995, ha="right", fontsize=7, style="italic", color="0.4")
    ax.grid(True, which="major", alpha=0.3)


#: Metadata that would differ between identical runs (dates, random ids) is fixed or left out,
#: so the same result gives byte-identical files.
_METADATA = {"svg": {"Date": None}, "pdf": {"CreationDate": None}, "png": {"Software": None}}
_SVG_HASH_SALT = "noiselab"


def _savefig(fig: Any, target: Path, fmt: str) -> None:
    import matplotlib

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


def _is_chemical_accuracy(target_mha: float) -> bool:
    return abs(target_mha - CHEMICAL_ACCURACY_MHA) < 1e-4


def _target_label(target_mha: float) -> str:
    if _is_chemical_accuracy(target_mha):
        return f"chemical accuracy {target_mha:.3g} mHa"
    return f"target {target_mha:.3g} mHa"


def _is_raw(name: str) -> bool:
    return name.lower() in _RAW_NAMES


def _colors(names: Sequence[str]) -> dict[str, Any]:
    import matplotlib

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


# ---------------------------------------------------------------- adapters from study results


def _get(obj: Any, name: str, default: Any = None) -> Any:
    if isinstance(obj, dict):
        return obj.get(name, default)
    return getattr(obj, name, default)


def _first(obj: Any, names: Sequence[str], default: Any = None) -> Any:
    for n in names:
        v = _get(obj, n)
        if v is not None:
            return v
    return default


def _recipe_name(result: Any) -> str:
    r = _get(result, "recipe")
    if r is None:
        return str(_get(result, "name", "recipe"))
    if isinstance(r, str):
        return r
    return str(_first(r, ("name", "label"), r))


def _fit_curve(
    fit: Any, scales: Sequence[float], energies_ha: Sequence[float]
) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Sample the extrapolation fit described by ``fit`` (mitigate's details) on [0, max scale].

    Knows: ``poly_coeffs_low_first`` (linear, polynomial), ``exp_a_ha``/``exp_b_ha``/``exp_k``
    (E = a + b exp(-k c)), Richardson (the interpolating polynomial through the points), and an
    explicit ``curve`` ([xs], [ys]).
    """
    import numpy as np

    xmax = max(scales) if scales else 1.0
    xs = np.linspace(0.0, xmax * 1.03, 90)
    curve = _get(fit, "curve")
    if curve is not None:
        cx, cy = curve
        return tuple(map(float, cx)), tuple(map(float, cy))
    poly = _first(fit, ("poly_coeffs_low_first", "coefficients"), None)
    if _get(fit, "exp_k") is not None:
        a, b, k = (float(_get(fit, n)) for n in ("exp_a_ha", "exp_b_ha", "exp_k"))
        ys = a + b * np.exp(-k * xs)
    elif poly is not None:
        ys = np.polynomial.polynomial.polyval(xs, [float(c) for c in poly])
    elif str(_get(fit, "fit", "")).lower() == "richardson" and len(scales) >= 2:
        # Richardson is the value at 0 of the polynomial of degree m-1 through the m points
        coeffs = np.polynomial.polynomial.polyfit(
            np.asarray(scales, float), np.asarray(energies_ha, float), len(scales) - 1
        )
        ys = np.polynomial.polynomial.polyval(xs, coeffs)
    else:
        return (), ()
    return tuple(map(float, xs)), tuple(map(float, ys))


def extrapolation_series(result: Any, name: str | None = None) -> ExtrapolationSeries | None:
    """An :class:`ExtrapolationSeries` from a RecipeResult-like record (None if it does not
    extrapolate). Reads ``details["extrapolation"]`` (or the details themselves)."""
    if isinstance(result, ExtrapolationSeries):
        return result
    details = _get(result, "details") or {}
    ext = _get(details, "extrapolation") or details
    scales = _first(ext, ("scales", "noise_scales", "scale_factors"), None)
    energies = _first(ext, ("energies_ha", "scale_energies_ha"), None)
    if scales is None or energies is None:
        return None
    stds = _first(ext, ("stds_ha", "scale_stds_ha"), None)
    if stds is None:
        std_mha = _first(ext, ("stds_mha", "scale_stds_mha", "std_mha"), None)
        if isinstance(std_mha, list | tuple):
            stds = [float(s) / HA_TO_MHA for s in std_mha]
        else:
            stds = [0.0] * len(scales)
    scales_f = [float(x) for x in scales]
    energies_f = [float(e) for e in energies]
    cx, cy = _fit_curve(ext, scales_f, energies_f)
    std_mha = _get(result, "std_mha")
    return ExtrapolationSeries(
        recipe=name or _recipe_name(result),
        scales=tuple(scales_f),
        energies_ha=tuple(energies_f),
        stds_ha=tuple(float(x) for x in stds),
        estimate_ha=_get(result, "energy_ha"),
        estimate_std_ha=None if std_mha is None else float(std_mha) / HA_TO_MHA,
        curve_scales=cx,
        curve_energies_ha=cy,
    )


def _named_results(obj: Any) -> list[tuple[str, Any]]:
    """(recipe name, RecipeResult-like) pairs from an assess result, a mapping or a list."""
    if isinstance(obj, Mapping):
        res: Any = obj
    elif isinstance(obj, list | tuple):
        return [(_recipe_name(r), r) for r in obj]
    else:
        res = _first(obj, ("recipes", "results", "recipe_results"), None)
        if res is None:
            raise TypeError(f"cannot find recipe results in {type(obj).__name__}")
    if isinstance(res, Mapping):
        return [(str(k), v) for k, v in res.items()]
    return [(_recipe_name(r), r) for r in res]


def _names_of(obj: Any) -> tuple[str, str]:
    """(study name, device name) of a result, looking in ``context`` too."""
    ctx = _get(obj, "context")
    study = _first(obj, ("study_name",), None) or _first(ctx, ("study",), None)
    if study is None:
        spec = _get(obj, "study")
        study = spec if isinstance(spec, str) else _first(spec, ("name",), "study")
    device = _first(obj, ("device_name",), None) or _first(ctx, ("device",), None)
    if device is None:
        dev = _get(obj, "device") or _get(obj, "profile")
        device = dev if isinstance(dev, str) else _first(dev, ("name",), "device")
    return str(study), str(device)


def extrapolation_data(obj: Any) -> ExtrapolationFigureData:
    """Figure data from an assess result (or an ExtrapolationFigureData, returned as is)."""
    if isinstance(obj, ExtrapolationFigureData):
        return obj
    study, device = _names_of(obj)
    exact = _first(obj, ("exact_energy_ha",), None)
    results = _named_results(obj)
    if exact is None:
        r0 = results[0][1]
        exact = _get(r0, "energy_ha") - _get(r0, "bias_exact_mha") / HA_TO_MHA
    series = tuple(
        s for s in (extrapolation_series(r, name) for name, r in results) if s is not None
    )
    target = float(_first(obj, ("target_mha",), CHEMICAL_ACCURACY_MHA))
    return ExtrapolationFigureData(study, device, float(exact), target, series)


def bias_bars(obj: Any) -> tuple[str, str, float, tuple[BiasBar, ...]]:
    """(study, device, target_mha, bars) from an assess result or a list of RecipeResults."""
    if isinstance(obj, list | tuple) and obj and all(isinstance(b, BiasBar) for b in obj):
        return "study", "device", CHEMICAL_ACCURACY_MHA, tuple(obj)
    plain = isinstance(obj, list | tuple | Mapping)
    study, device = ("study", "device") if plain else _names_of(obj)
    target = (
        CHEMICAL_ACCURACY_MHA
        if plain
        else float(_first(obj, ("target_mha",), CHEMICAL_ACCURACY_MHA))
    )
    bars = tuple(
        BiasBar(name, float(_get(r, "bias_exact_mha")), float(_get(r, "std_mha") or 0.0))
        for name, r in _named_results(obj)
    )
    return study, device, target, bars


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


def plot_extrapolation(assess_result_or_records: Any, path: str | Path) -> Path:
    """Energy error against noise scale for every extrapolating recipe; fit curves to 0.

    Points carry error bars of one standard error at the shot budget; the exact energy is the
    zero line and the target band (exact ± target) is shaded. When the band is thin at full
    scale a second panel zooms on it. Returns the path written (format from its suffix).
    """
    data = extrapolation_data(assess_result_or_records)
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


def plot_bias_bars(
    assess_result_or_records: Any,
    path: str | Path,
    study_name: str | None = None,
    device_name: str | None = None,
) -> Path:
    """|bias| against the exact energy (mHa) per recipe, error bars of one standard error at the
    budget, the target as a line; log scale when the values span more than a factor 30.

    Bars are green when |bias| + std is within the target, amber when only |bias| is, red
    otherwise.
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    study, device, target, bars = bias_bars(assess_result_or_records)
    study, device = study_name or study, device_name or device
    fig = _new_figure(max(5.5, 1.1 * len(bars) + 3.0), 4.4)
    ax = fig.add_subplot(1, 1, 1)
    names = [b.recipe for b in bars]
    mags = [abs(b.bias_mha) for b in bars]
    stds = [b.std_mha for b in bars]
    verdict = {"green": "tab:green", "amber": "tab:orange", "red": "tab:red"}
    colors = [
        verdict["green"] if m + s <= target else verdict["amber"] if m <= target else verdict["red"]
        for m, s in zip(mags, stds, strict=True)
    ]
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
        Line2D([], [], color="tab:green", ls="--", label=_target_label(target)),
        Patch(color=verdict["green"], alpha=0.8, label="within target, even with 1 std"),
        Patch(color=verdict["amber"], alpha=0.8, label="bias within, shot noise not"),
        Patch(color=verdict["red"], alpha=0.8, label="bias outside target"),
    ]
    ax.legend(handles=handles, fontsize=7, loc="best", framealpha=0.9)
    _decorate(fig, ax, "Bias per recipe (error bars: 1 std at the shot budget)", study, device)
    return _save(fig, path)


def plot_sweep(sweep_result: Any, path_stem: str | Path) -> tuple[Path, ...]:
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
    ax.axhline(t, color="tab:green", lw=1.0, label=_target_label(t) + " (shaded below)")
    k = 0
    for c_ in sweep_result.crossings:
        for x in c_.crossings:
            col = colors.get(c_.recipe, "k")
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
    low = [p.value * d for p in sweep_result.points if getattr(p, "floored", False)]
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
        from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

        ax.set_xscale("log")
        # plain numbers at 1, 2, 5 x 10^k read better than 2 x 10^-1 in a proposal
        ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel(knob.axis_label)
    ax.set_ylabel("|energy − exact energy| (mHa)")
    ax.plot([], [], "X", color="0.5", markeredgecolor="k", label="crossing of the target")
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


def plot_budget(budget_result: Any, path: str | Path) -> Path:
    """Error budget as horizontal bars (mHa): the device as profiled, each channel alone, each
    channel removed and the noiseless limit, one bar per recipe, with the target lines."""
    from matplotlib.patches import Patch

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
    from matplotlib.lines import Line2D

    handles.append(Line2D([], [], color="tab:green", ls="--", label=_target_label(t)))
    fig.legend(handles=handles, fontsize=7, loc="outside right upper", framealpha=0.9)
    _decorate(fig, ax, f"Error budget: {b.dominant} dominates", b.study_name, b.device_name)
    return _save(fig, path)
