"""The notebook API: short reprs, an HTML display, records, and figure functions that return a
matplotlib Figure and draw on a caller's axes."""

from __future__ import annotations

import dataclasses
from html.parser import HTMLParser
from types import SimpleNamespace

import pytest
from matplotlib.figure import Figure
from test_figure_fixes import _bias_data, _zoom_data
from test_report_figures import _hand_budget, _hand_sweep

from noiselab.report import figures as F  # noqa: N812
from noiselab.study.results import AssessResult, TuneResult


def _tags(text: str) -> list[str]:
    seen: list[str] = []

    class P(HTMLParser):
        def handle_starttag(self, tag: str, attrs: list) -> None:
            seen.append(tag)

    P().feed(text)
    return seen


@pytest.mark.parametrize("result", [_hand_budget(), _hand_sweep()], ids=["budget", "sweep"])
def test_short_repr_html_and_records(result: object) -> None:
    text = repr(result)
    assert text.startswith(f"<{type(result).__name__} h2-hand") and len(text) < 400
    records = result.to_records()
    if hasattr(result, "rows"):
        assert len(records) == len(result.rows) * len(result.recipes)
    else:
        assert len(records) == len(result.points) * len(result.recipes)
    assert all("std_mha" in r for r in records)
    page = result._repr_html_()
    assert "table" in _tags(page) and _tags(page).count("tr") <= 26


def _recipe(bias: float, std: float) -> SimpleNamespace:
    return SimpleNamespace(
        energy_ha=-1.1, bias_exact_mha=bias, std_mha=std, p_within_target=0.6,
        reaches_target=False, shots_needed=None, limited_by="amplification",
    )  # fmt: skip


def test_assess_and_tune_summaries_are_one_short_line() -> None:
    fake = SimpleNamespace(
        context=SimpleNamespace(study="h2-hand"), shots=4_000_000, target_mha=1.5936,
        recipes={"raw": _recipe(139.4, 0.3), "zne": _recipe(-0.16, 1.87)}, best_recipe="zne",
        reachable=False,
    )  # fmt: skip
    line = AssessResult.summary(fake)
    assert "\n" not in line and len(line) < 200 and "'zne'" in line and "does not reach" in line
    assert [r["recipe"] for r in AssessResult.to_records(fake)] == ["raw", "zne"]
    entry = SimpleNamespace(rank=1, label="readout+verify", result=_recipe(0.19, 1.2))
    tune = SimpleNamespace(
        context=SimpleNamespace(study="h2-hand"), entries=(entry,), target_mha=1.5936,
        best=entry,
    )  # fmt: skip
    assert "readout+verify" in TuneResult.summary(tune)
    assert TuneResult.to_records(tune)[0]["rank"] == 1
    # the dataclasses keep these methods' repr (not the generated one with every field)
    assert "__repr__" not in AssessResult.__dict__ and "__repr__" not in TuneResult.__dict__


def test_figure_functions_return_a_figure_and_accept_ax() -> None:
    own = F._new_figure(12.0, 8.0)
    axes = own.subplots(2, 2).ravel()
    drawn = [
        F.bias_figure(_bias_data(), ax=axes[0]),
        F.extrapolation_figure(_zoom_data(), ax=axes[1]),
        F.sweep_figure(_hand_sweep(), ax=axes[2]),
        F.budget_figure(_hand_budget(), ax=axes[3]),
    ]
    assert all(fig is own for fig in drawn)
    assert all(ax.has_data() for ax in axes)
    assert len(own.axes) == 4  # nothing added beside the caller's axes (no zoom panel)
    alone = [F.bias_figure(_bias_data()), F.budget_figure(_hand_budget()),
             F.sweep_figure(_hand_sweep()), F.extrapolation_figure(_zoom_data())]  # fmt: skip
    assert all(isinstance(f, Figure) for f in alone)
    assert dataclasses.is_dataclass(_hand_budget())


def test_tune_prints_a_recipe_ready_to_paste() -> None:
    import yaml

    from noiselab.mitigate.recipe import parse_recipe

    passes = tuple(
        parse_recipe(
            [
                {"pass": "readout", "method": "per_qubit_inverse"},
                {"pass": "postselect", "mode": "verify"},
                {"pass": "extrapolate", "scales": [1, 2.5, 5], "fit": "linear"},
            ]
        ).spec()
    )
    entry = SimpleNamespace(rank=1, label="readout+verify+stretch", passes=passes)
    tune = SimpleNamespace(entries=(entry, SimpleNamespace(rank=2, label="raw", passes=())))
    for rank in (1, 2):
        text = TuneResult.recipe_yaml(tune, rank)
        # pasted under "recipes:" it is read back (PyYAML) and validated to the same passes
        loaded = yaml.safe_load("recipes:\n" + text)["recipes"]["tuned"]
        assert tuple(parse_recipe(loaded).spec()) == (passes if rank == 1 else ())


def test_new_names_are_importable_from_noiselab() -> None:
    import noiselab

    names = ("study_keys", "profile_keys", "describe_study", "bias_figure",
             "extrapolation_figure", "sweep_figure", "budget_figure", "write_report")  # fmt: skip
    for name in names:
        assert callable(getattr(noiselab, name)), name
