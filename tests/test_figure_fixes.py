"""One test per figure fix: signed bias bars with both whiskers, a zoom that holds the stars it
shows, budget ticks at the target in a reader's words, a legend that names the extrapolation,
sweep crossings quoted to their resolution, a colour-blind-safe palette, PNG/SVG/PDF."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
from test_report_figures import EXACT_HA, _hand_budget, _hand_sweep, _zne_result

from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.report import figures as F  # noqa: N812
from noiselab.report.outputs import write_budget_outputs
from noiselab.study.budget import BudgetRow, dominant_channel
from noiselab.study.sweep import BISECTION_REL_TOL, get_knob

T = CHEMICAL_ACCURACY_MHA


def _bias_data() -> F.BiasFigureData:
    bars = (F.BiasBar("raw", 35.0, 0.4), F.BiasBar("over", -0.8, 0.3), F.BiasBar("zne", 0.02, 0.9))
    return F.BiasFigureData("h2-hand", "toy-chip", T, bars)


def test_bias_bars_show_signs() -> None:
    data = _bias_data()
    ax = F.bias_figure(data).axes[0]
    assert ax.get_yscale() != "log"  # a log axis of |bias| hides the sign
    heights = [p.get_height() for p in ax.containers[0]]
    assert heights == [b.bias_mha for b in data.bars]
    assert heights[1] < 0


def test_bias_bars_have_both_whiskers() -> None:
    data = _bias_data()
    ax = F.bias_figure(data).axes[0]
    errorbar = next(c for c in ax.containers if hasattr(c, "has_yerr"))
    segments = errorbar.lines[2][0].get_segments()
    for seg, bar in zip(segments, data.bars, strict=True):
        (_, y0), (_, y1) = seg
        assert min(y0, y1) == pytest.approx(bar.bias_mha - bar.std_mha)
        assert max(y0, y1) == pytest.approx(bar.bias_mha + bar.std_mha)
    # the last bar's error bar (0.9) exceeds its bias (0.02): its lower whisker is still drawn,
    # below zero (on a symmetric-log axis values below zero exist)
    lo = ax.get_ylim()[0]
    assert lo < data.bars[2].bias_mha - data.bars[2].std_mha


def _zoom_data() -> F.ExtrapolationFigureData:
    quadratic = [EXACT_HA + 0.02 * c + 0.004 * c * c for c in (1.0, 2.0, 3.0)]
    near = F.extrapolation_series("zne-linear", _zne_result("linear", quadratic))
    assert near is not None
    star_near = EXACT_HA + 6.0 * T / 1000  # 6 targets: outside the default ±4, inside the cap
    star_far = EXACT_HA + 40.0 * T / 1000
    near = dataclasses.replace(near, estimate_ha=star_near, estimate_std_ha=0.5e-3)
    far = dataclasses.replace(near, recipe="far-off", estimate_ha=star_far)
    return F.ExtrapolationFigureData("h2-hand", "toy-chip", EXACT_HA, T, (near, far))


def test_zoom_contains_every_star_it_claims() -> None:
    data = _zoom_data()
    fig = F.extrapolation_figure(data)
    main, zoom = fig.axes[:2]
    lo, hi = zoom.get_ylim()
    shown = {s.recipe for s in data.series} - {"far-off"}
    for s in data.series:
        y = (s.estimate_ha - EXACT_HA) * 1000
        e = (s.estimate_std_ha or 0.0) * 1000
        if s.recipe in shown:
            assert lo <= y - e and y + e <= hi, s.recipe
        else:
            assert not lo <= y <= hi
    notes = " ".join(t.get_text() for t in zoom.texts)
    assert "outside this panel: far-off" in notes
    # the zoom's abscissae: around scale 0, holding every star drawn there (dodged apart)
    x_lo, x_hi = zoom.get_xlim()
    stars = [line for line in zoom.get_lines() if line.get_marker() == "*"]
    assert len(stars) == len(data.series)
    xs = [float(line.get_xdata()[0]) for line in stars]
    assert all(x_lo < x < x_hi for x in xs) and len(set(xs)) == len(xs)
    assert x_hi < main.get_xlim()[1] / 4


def test_extrapolation_legend_names_fit_amplifier_scales_and_shots() -> None:
    fig = F.extrapolation_figure(_zoom_data())
    legend = fig.axes[0].get_legend()
    text = " ".join(t.get_text() for t in legend.get_texts())
    for words in ("linear fit", "stretch amplifier", "scales 1, 2, 3", "3,000 shots"):
        assert words in text
    assert min(t.get_fontsize() for t in legend.get_texts()) >= 8


def test_budget_ticks_include_the_target_and_use_readers_words() -> None:
    fig = F.budget_figure(_hand_budget())
    ax = fig.axes[0]
    assert any(abs(v - T) < 1e-9 for v in ax.get_xticks())
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert "without two-qubit gate errors" in labels and "device as profiled" in labels
    assert not any("_" in lab for lab in labels)
    assert "readout errors cost the most" in ax.get_title()


def _budget_where_removal_hurts() -> object:
    # removing any channel raises |error| (errors that cancel): no channel is a cost
    b = _hand_budget()
    rows = [
        BudgetRow(r.label, r.kind, r.channel, (r.errors_mha[0] + 10.0, r.errors_mha[1]),
                  r.stds_mha, (False, True))
        if r.kind == "removed" else r
        for r in b.rows
    ]  # fmt: skip
    rows[0] = dataclasses.replace(rows[0], reaches_target=(True, True))
    dom, sentence = dominant_channel(tuple(rows), 0, T)
    return dataclasses.replace(b, rows=tuple(rows), dominant=dom, sentence=sentence)


def test_budget_never_calls_a_removal_that_raises_the_error_the_largest_cost() -> None:
    b = _budget_where_removal_hurts()
    assert "largest single cost" not in b.sentence
    assert "no single channel's removal lowers the error" in b.sentence
    title = F.budget_figure(b).axes[0].get_title()
    assert "cost the most" not in title and "no single channel" in title


def test_sweep_crossing_quoted_to_its_resolution(tmp_path: Path) -> None:
    knob = get_knob("two_qubit_error")
    # bisection to 1 % of the value: the midpoint is known to ±0.5 % (0.4312 % -> ±0.0022 %)
    assert BISECTION_REL_TOL == 0.01
    assert F.crossing_text(knob, 0.004312) == "0.431 ± 0.002 %"
    sweep = _hand_sweep()
    first = dataclasses.replace(sweep.crossings[0], crossings=(0.004312,))
    sweep = dataclasses.replace(sweep, crossings=(first, *sweep.crossings[1:]))
    quoted = [F.crossing_text(sweep.knob_spec, x) for c in sweep.crossings for x in c.crossings]
    assert quoted, "the hand-made sweep has a crossing"
    F.plot_sweep(sweep, tmp_path / "sw")
    svg = (tmp_path / "sw.svg").read_text(encoding="utf-8")
    for text in quoted:
        assert text in svg
    assert "located by bisection to ±0.5 %" in svg


def test_palette_is_okabe_ito() -> None:
    # source: Okabe & Ito (2008), "Color Universal Design", the eight colours
    published = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
                 "#CC79A7"}  # fmt: skip
    colours = F._colors(["raw", "a", "b", "c", "d"])
    assert {colours[n] for n in "abcd"} <= published
    assert {c for c, _ in F.VERDICT_STYLE.values()} <= published
    assert F.TARGET_COLOUR in published
    # colour is never the only cue for the verdict: amber and red bars carry hatches
    assert F.VERDICT_STYLE["amber"][1] and F.VERDICT_STYLE["red"][1]


def test_every_figure_in_png_svg_pdf_byte_identical(tmp_path: Path) -> None:
    names = {p.name for p in write_budget_outputs(_hand_budget(), tmp_path)}
    assert {"budget.png", "budget.svg", "budget.pdf"} <= names
    runs = []
    for tag in ("a", "b"):
        folder = tmp_path / tag
        folder.mkdir()
        out = {}
        for ext in ("png", "svg", "pdf"):
            for stem, path in (
                ("bias", F.plot_bias_bars(_bias_data(), folder / f"bias.{ext}")),
                ("x", F.plot_extrapolation(_zoom_data(), folder / f"x.{ext}")),
            ):
                out[f"{stem}.{ext}"] = path.read_bytes()
        runs.append(out)
    assert runs[0] == runs[1]
