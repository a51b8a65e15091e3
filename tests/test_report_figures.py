"""Figures and tables from hand-made result records (no simulation)."""

from __future__ import annotations

import csv
import dataclasses
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.common.wording import CAUTION
from noiselab.mitigate.base import Workspace
from noiselab.mitigate.estimate import Estimate
from noiselab.mitigate.passes.extrapolate import (
    ExtrapolateOptions,
    ExtrapolatePass,
    ExtrapolationReport,
)
from noiselab.mitigate.reports import VariantScore
from noiselab.mitigate.result import RecipeResult
from noiselab.mitigate.target import p_within
from noiselab.report import figures as F  # noqa: N812
from noiselab.report import tables as T  # noqa: N812
from noiselab.report.outputs import write_budget_outputs, write_sweep_outputs
from noiselab.study.budget import CHANNELS, BudgetResult, BudgetRow, dominant_channel
from noiselab.study.sweep import (
    SweepEntry,
    SweepPoint,
    SweepResult,
    get_knob,
    recipe_crossing,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (RFC 2083), sec. 3.1
EXACT_HA = -1.137


def _hand_sweep(log: bool = True) -> SweepResult:
    knob = get_knob("two_qubit_error")
    values = knob.values(1e-3, 5e-2, 6, log)
    points = []
    for v in values:
        x = v / 0.01
        entries = tuple(
            SweepEntry(name, EXACT_HA + e / 1000, e, s, e, p, "-", None, p >= 0.95)
            for name, e, s in (("raw", 40 * x, 0.3), ("zne", 3 * x * x, 1.0))
            for p in (p_within(e, s, CHEMICAL_ACCURACY_MHA),)
        )
        points.append(SweepPoint(v, x, entries))
    recipes = ("raw", "zne")
    models = {"raw": (lambda x: 40 * x, 0.3), "zne": (lambda x: 3 * x * x, 1.0)}

    def evaluator(name: str):
        err, std = models[name]

        def evaluate(v: float) -> SweepEntry:
            e = err(v / 0.01)
            p = p_within(e, std, CHEMICAL_ACCURACY_MHA)
            return SweepEntry(name, EXACT_HA + e / 1000, e, std, e, p, "-", None, p >= 0.95)

        return evaluate

    crossings = tuple(
        recipe_crossing(r, knob, points, CHEMICAL_ACCURACY_MHA, 0.95, log, evaluator(r))
        for r in recipes
    )
    return SweepResult(
        "h2-hand", "toy-chip", "two_qubit_error", log, 0.01, CHEMICAL_ACCURACY_MHA, 100_000,
        EXACT_HA, EXACT_HA + 1e-4, recipes, tuple(points), crossings,
    )  # fmt: skip


def _hand_budget() -> BudgetResult:
    rows = [BudgetRow("all channels", "total", None, (30.0, 1.2), (0.3, 1.0))]
    rows += [
        BudgetRow(f"{c} alone", "alone", c, (2.0 * (i + 1), 0.5), (0.3, 0.8))
        for i, c in enumerate(CHANNELS)
    ]
    rows += [
        BudgetRow(f"without {c}", "removed", c, (30 - 2.0 * (i + 1), 1.0), (0.3, 0.8))
        for i, c in enumerate(CHANNELS)
    ]
    rows.append(BudgetRow("noiseless", "noiseless", None, (0.1, 0.1), (0.0, 0.0)))
    dom, sentence = dominant_channel(tuple(rows))
    return BudgetResult(
        "h2-hand", "toy-chip", ("raw", "zne"), CHEMICAL_ACCURACY_MHA, 100_000, EXACT_HA,
        EXACT_HA + 1e-4, tuple(rows), dom, sentence,
    )  # fmt: skip


def _check_png(path: Path) -> None:
    import matplotlib.image

    assert path.read_bytes()[:8] == PNG_SIGNATURE
    img = matplotlib.image.imread(path)
    assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 200
    # not a blank canvas
    assert float(np.std(img[..., :3])) > 0.01


def _svg_text(path: Path) -> str:
    root = ET.parse(path).getroot()  # raises on malformed XML
    assert root.tag.endswith("svg")
    return " ".join(t for t in root.itertext())


def test_sweep_figure_three_formats(tmp_path: Path) -> None:
    paths = F.plot_sweep(_hand_sweep(), tmp_path / "sw")
    assert [p.suffix for p in paths] == [".svg", ".pdf", ".png"]
    _check_png(tmp_path / "sw.png")
    text = _svg_text(tmp_path / "sw.svg")
    assert "two-qubit gate error (%)" in text
    assert "(mHa)" in text
    assert "h2-hand" in text and "toy-chip" in text
    assert CAUTION in text  # the one caution sentence, wrapped to the figure's width
    assert (tmp_path / "sw.pdf").read_bytes()[:5] == b"%PDF-"
    # no temporary files left behind by the atomic writes
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sw.pdf", "sw.png", "sw.svg"]


def test_budget_figure(tmp_path: Path) -> None:
    b = _hand_budget()
    _check_png(F.plot_budget(b, tmp_path / "b.png"))
    text = _svg_text(F.plot_budget(b, tmp_path / "b.svg"))
    assert "energy − exact energy (mHa)" in text
    # the reader's words, not the channel names of the code
    assert "without two-qubit gate errors" in text and "only readout errors" in text
    assert "two_qubit" not in text


SCALES = (1.0, 2.0, 3.0)


def _zne_result(fit: str, energies: list[float]) -> RecipeResult:
    """A RecipeResult as run_recipe builds it, around the report ExtrapolatePass.combine gives
    for hand-made per-scale energies (exact estimates: no sources)."""
    p = ExtrapolatePass(ExtrapolateOptions(scales=SCALES, fit=fit))
    ctx = SimpleNamespace(amplification_spread=0.0, amplification_offset=0.0)
    variants = p.variants(ctx)
    ws = Workspace(ctx=ctx, measured={}, calibration=None)
    combined = p.combine(variants, [Estimate(e) for e in energies], ws)
    scores = tuple(
        VariantScore(v.label(), e, 0.4 + 0.1 * i, 1000, c, c, 0.0, None)
        for i, (v, e, c) in enumerate(zip(variants, energies, SCALES, strict=True))
    )
    energy = combined.estimate.value
    return RecipeResult(
        recipe=f"zne-{fit}", spec=(), energy_ha=energy, bias_exact_mha=(energy - EXACT_HA) * 1e3,
        bias_ansatz_mha=0.0, std_mha=0.9, shots_total=3000, shots_per_circuit={}, n_circuits=3,
        engine_seconds=0.0, p_within_target=0.5, shots_needed=None, limited_by="bias",
        variants=scores, reports={"extrapolate": combined.report},
    )  # fmt: skip


def test_extrapolation_series_plots_what_the_pass_reported(tmp_path: Path) -> None:
    quadratic = [EXACT_HA + 0.02 * c + 0.004 * c * c for c in SCALES]
    zne = _zne_result("linear", quadratic)
    s = F.extrapolation_series("zne-linear", zne)
    assert s is not None and s.scales == SCALES and s.energies_ha == tuple(quadratic)
    # error bars: each scale's standard error from the recipe's variant scores (mHa -> Ha)
    assert s.stds_ha == pytest.approx((4e-4, 5e-4, 6e-4), rel=1e-12)
    report = zne.report(ExtrapolationReport)
    assert s.curve_scales == report.curve_scales and s.curve_energies_ha == report.curve_energies_ha
    # the reported curve is the least-squares line (source: numpy.polynomial.polynomial.polyfit),
    # drawn from scale 0, where it meets the extrapolated energy
    line = np.polynomial.polynomial.polyfit(SCALES, quadratic, 1)
    curve = np.polynomial.polynomial.polyval(np.array(s.curve_scales), line)
    assert s.curve_scales[0] == 0.0 and max(s.curve_scales) == 3.0
    assert np.allclose(s.curve_energies_ha, curve, atol=1e-12)
    assert s.estimate_ha == pytest.approx(line[0], abs=1e-12)
    # Richardson through three points of a quadratic is that quadratic (Lagrange interpolation)
    rich = F.extrapolation_series("r", _zne_result("richardson", quadratic))
    assert rich is not None
    xs = np.array(rich.curve_scales)
    assert np.allclose(rich.curve_energies_ha, EXACT_HA + 0.02 * xs + 0.004 * xs**2, atol=1e-12)
    # a recipe without an extrapolation report draws no series
    raw = dataclasses.replace(zne, reports={}, variants=zne.variants[:1])
    assert F.extrapolation_series("raw", raw) is None
    # the typed records survive the results cache's record (JSON) unchanged
    again = RecipeResult(**json.loads(json.dumps(zne.to_dict())))
    assert F.extrapolation_series("zne-linear", again) == s
    data = F.ExtrapolationFigureData("h2-hand", "toy-chip", EXACT_HA, CHEMICAL_ACCURACY_MHA, (s,))
    _check_png(F.plot_extrapolation(data, tmp_path / "x.png"))
    text = _svg_text(F.plot_extrapolation(data, tmp_path / "x.svg"))
    assert "noise scale factor" in text and "energy − exact energy (mHa)" in text


def test_bias_bars_log_and_linear(tmp_path: Path) -> None:
    wide = [F.BiasBar("raw", 35.0, 0.4), F.BiasBar("zne", 0.02, 0.9)]
    narrow = [F.BiasBar("raw", 3.0, 0.4), F.BiasBar("zne", 1.0, 0.3)]
    for name, bars in (("wide", wide), ("narrow", narrow)):
        data = F.BiasFigureData("h2-hand", "toy-chip", CHEMICAL_ACCURACY_MHA, tuple(bars))
        _check_png(F.plot_bias_bars(data, tmp_path / f"{name}.png"))
        text = _svg_text(F.plot_bias_bars(data, tmp_path / f"{name}.svg"))
        assert "energy − exact energy (mHa)" in text and "h2-hand" in text
    assert F._wide_range([35.0, 0.02, CHEMICAL_ACCURACY_MHA])


def test_bias_bar_colours_follow_the_rule() -> None:
    t = CHEMICAL_ACCURACY_MHA
    # |bias| + std above the target, yet the rule says it reaches (P >= confidence): green
    assert F.bar_colour(F.BiasBar("a", 1.0, 0.8, reaches_target=True), t) == "green"
    # |bias| + std inside the target but the rule says no (a recipe at a tiny budget): not green
    assert F.bar_colour(F.BiasBar("b", 0.2, 0.3, reaches_target=False), t) == "amber"
    assert F.bar_colour(F.BiasBar("c", -2.0, 0.1, reaches_target=False), t) == "red"
    assert not F._wide_range([3.0, 1.0, CHEMICAL_ACCURACY_MHA])


def test_sweep_outputs_and_csv(tmp_path: Path) -> None:
    res = _hand_sweep()
    written = write_sweep_outputs(res, tmp_path)
    names = sorted(p.name for p in written)
    stem = "sweep-two_qubit_error"
    assert names == sorted(f"{stem}.{e}" for e in ("csv", "json", "svg", "pdf", "png"))
    with open(tmp_path / f"{stem}.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(res.points) * len(res.recipes)
    assert "two_qubit_error_percent" in rows[0] and "error_mha" in rows[0]
    # the CSV value is the knob in percent: 0.1 % for the first point
    assert float(rows[0]["two_qubit_error_percent"]) == pytest.approx(0.1)
    assert float(rows[0]["error_mha"]) == pytest.approx(res.points[0].entry("raw").error_mha)


def test_budget_outputs_and_tables(tmp_path: Path) -> None:
    b = _hand_budget()
    written = write_budget_outputs(b, tmp_path)
    assert {p.suffix for p in written} == {".csv", ".json", ".png", ".svg", ".pdf"}
    text = T.render_text(T.budget_table(b, plain=True))
    assert "error ± std (mHa)" in text and "without readout" in text
    assert "\x1b" not in text  # plain text, no terminal escape codes
    stext = T.render_text(T.sweep_table(_hand_sweep(), plain=True))
    assert "two-qubit gate error (%)" in stext


def test_dominant_channel_is_the_largest_removal_gain() -> None:
    b = _hand_budget()
    # readout: the largest error alone (10 mHa) and the largest drop when removed (30 -> 20)
    assert b.dominant == "readout"
    assert "readout" in b.sentence


def test_csv_text_roundtrip() -> None:
    rows = [{"a_mha": 1.5, "b": "x"}, {"a_mha": math.nan, "c": 3}]
    text = T.csv_text(rows)
    parsed = list(csv.DictReader(text.splitlines()))
    assert parsed[0] == {"a_mha": "1.5", "b": "x", "c": ""}
    assert parsed[1]["a_mha"] == ""  # NaN written as an empty cell


def test_tune_and_assess_tables_from_duck_typed_results() -> None:
    from types import SimpleNamespace

    tune = SimpleNamespace(
        context=SimpleNamespace(study="h2-hand"),
        entries=[1, 2, 3],
        table_rows=lambda top: [("1", "readout+zne", "+0.100", "0.500", "0.950", "1.0e5", "shots")],
    )
    text = T.render_text(T.tune_table(tune, top=1, plain=True))
    assert "best 1 of 3 settings" in text and "std. error (mHa)" in text
    r = SimpleNamespace(
        energy_ha=-1.1, bias_exact_mha=2.5, std_mha=0.4, p_within_target=0.1, shots_needed=None,
        limited_by="bias", reaches_target=False,
    )  # fmt: skip
    assess = SimpleNamespace(study="h2-hand", recipes={"raw": r})
    rows = T.assess_rows(assess)
    assert rows[0]["recipe"] == "raw" and rows[0]["bias_mha"] == 2.5
    assert "never (bias)" in T.render_text(T.assess_table(assess, plain=True))


def test_identical_runs_write_byte_identical_figures(tmp_path: Path) -> None:
    # two identical runs: SVG (random ids, date), PDF (creation date) and PNG must not differ
    runs = []
    for tag in ("a", "b"):
        folder = tmp_path / tag
        written = [*F.plot_sweep(_hand_sweep(), folder / "sweep")]
        for ext in ("svg", "png"):
            written.append(F.plot_budget(_hand_budget(), folder / f"budget.{ext}"))
        runs.append({p.name: p.read_bytes() for p in written})
    assert sorted(runs[0]) == sorted(runs[1])
    assert {n.rsplit(".", 1)[1] for n in runs[0]} == {"svg", "pdf", "png"}
    for name, data in runs[0].items():
        assert data == runs[1][name], name
    svg = runs[0]["sweep.svg"].decode()
    assert "<dc:date>" not in svg  # no date: the run's time would differ
    assert b"/CreationDate" not in runs[0]["sweep.pdf"]
