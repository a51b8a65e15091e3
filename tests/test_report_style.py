"""``--style paper|talk``: both styles write every figure; talk type and lines are larger."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import matplotlib.image
import pytest
from helpers.cli import run_main
from test_report_figures import _check_png, _hand_budget, _hand_sweep

import noiselab
from noiselab.common.errors import InputError
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.report import figures as F  # noqa: N812
from noiselab.report.style import current_style, figure_style, get_style

BARS = F.BiasFigureData(
    "h2-hand", "toy-chip", CHEMICAL_ACCURACY_MHA, (F.BiasBar("raw", 35.0, 0.4),
                                                   F.BiasBar("zne", 0.02, 0.9))
)  # fmt: skip


def _sizes(fig: object) -> dict[str, float]:
    ax = fig.axes[0]
    return {
        "title_pt": ax.title.get_fontsize(),
        "label_pt": ax.xaxis.label.get_fontsize(),
        "tick_pt": ax.get_xticklabels()[0].get_fontsize(),
        "legend_pt": ax.get_legend().get_texts()[0].get_fontsize(),
        "width_in": fig.get_figwidth(),
        "line_pt": max(line.get_linewidth() for line in ax.get_lines()),
    }


def test_talk_is_larger_than_paper_in_type_lines_and_size() -> None:
    with figure_style("paper"):
        paper = _sizes(F.bias_figure(BARS))
    with figure_style("talk"):
        talk = _sizes(F.bias_figure(BARS))
    for key in paper:
        assert talk[key] > paper[key], key
    assert current_style().name == "paper"  # the block ends the style
    assert noiselab.figure_style is figure_style  # the notebook's way in


def test_paper_is_the_default_look() -> None:
    # the paper style changes nothing: the sizes the figure code sets, as before the styles
    fig = F.bias_figure(BARS)
    assert fig.axes[0].title.get_fontsize() == 10.0
    assert fig.get_figwidth() == pytest.approx(max(5.5, 1.1 * 2 + 3.0))


@pytest.mark.parametrize("style", ["paper", "talk"])
def test_every_figure_is_written_in_both_styles(style: str, tmp_path: Path) -> None:
    with figure_style(style):
        paths = [
            F.plot_bias_bars(BARS, tmp_path / "bias.png"),
            F.plot_budget(_hand_budget(), tmp_path / "budget.png"),
            *F.plot_sweep(_hand_sweep(), tmp_path / "sweep"),
        ]
    for p in paths:
        assert p.exists()
        if p.suffix == ".png":
            _check_png(p)


def test_talk_pngs_have_more_pixels(tmp_path: Path) -> None:
    shapes = {}
    for style in ("paper", "talk"):
        with figure_style(style):
            shapes[style] = matplotlib.image.imread(
                F.plot_bias_bars(BARS, tmp_path / f"{style}.png")
            ).shape
    assert shapes["talk"][0] > shapes["paper"][0] and shapes["talk"][1] > shapes["paper"][1]


def test_unknown_style_is_refused_naming_the_option() -> None:
    with pytest.raises(InputError, match=r"^style: .*allowed: paper, talk"):  # Python: argument
        get_style("poster")
    code, _, err = run_main(["assess", "h2-equilibrium", "--style", "poster"])
    assert code == 2 and "--style" in err and "Traceback" not in err


@pytest.mark.parametrize(
    "command", ["assess", "demo", "sweep", "budget", "scan", "compare", "rehearse"]
)
def test_every_figure_writing_command_offers_style(command: str) -> None:
    code, out, _ = run_main([command, "--help"])
    assert code == 0
    assert "--style" in out and "talk" in out


def test_assess_writes_talk_figures(tmp_path: Path) -> None:
    code, _, err = run_main(
        ["assess", "h2-equilibrium", "--style", "talk", "--out", str(tmp_path / "out"),
         "--cache", str(tmp_path / "cache.sqlite"), "-q"]
    )  # fmt: skip
    assert code == 0, err
    png = tmp_path / "out" / "assess-bias.png"
    _check_png(png)
    # paper: 1.1 in per bar + 3 in for the demo's 5 recipes, at 150 dpi; talk is wider
    assert matplotlib.image.imread(png).shape[1] > 1.1 * (1.1 * 5 + 3.0) * 150


@pytest.mark.parametrize("style", ["paper", "talk"])
@pytest.mark.parametrize("knob", ["two_qubit_error", "coherence_us"])
def test_sweep_and_budget_titles_stay_clear_of_the_legend(style: str, knob: str) -> None:
    sweep = dataclasses.replace(_hand_sweep(), knob=knob, shots_total=4_000_000)
    with figure_style(style):
        for fig in (F.sweep_figure(sweep), F.budget_figure(_hand_budget())):
            fig.canvas.draw()
            renderer = fig.canvas.get_renderer()
            title = fig.axes[0].title.get_window_extent(renderer)
            legend = fig.legends[0].get_window_extent(renderer)
            assert title.x1 < legend.x0, (style, knob, fig.axes[0].title.get_text())
