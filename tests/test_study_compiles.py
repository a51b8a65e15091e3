"""Compile ensemble: the compile an experimenter would pick, and the bias spread over compiles."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
import yaml

from noiselab.study.spec import study_from_mapping

ROOT = Path(__file__).resolve().parents[1]
H2 = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"


def _study(**compile_options):
    data = yaml.safe_load(H2.read_text(encoding="utf-8"))
    data["recipes"] = {"raw": [], "readout": [{"pass": "readout", "method": "per_qubit_inverse"}]}
    data.pop("tune", None)
    data.pop("sweep", None)
    if compile_options:
        data["compile"] = compile_options
    return study_from_mapping(data, H2)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    from noiselab.study.assess import assess
    from noiselab.study.cache import open_cache

    store = open_cache(tmp_path_factory.mktemp("compiles") / "cache.db")
    study = _study()
    return {
        "study": study,
        "store": store,
        "a": assess(study, cache=store),
        "b": assess(study.with_seed(99), cache=store),
    }


def test_json_reports_the_seeds_and_the_choice(runs):
    data = runs["a"].to_json()
    comp = data["compile"]
    assert comp["seeds_tried"] == list(range(8))  # compile.seeds default 8
    gates = comp["two_qubit_gates"]
    assert len(gates) == 8 and len(comp["duration_ns"]) == 8
    best = min(zip(gates, comp["duration_ns"], range(8), strict=True))
    assert comp["chosen_seed"] == best[2]
    assert data["compiled"]["two_qubit_count"] == best[0]
    for entry in data["recipes"].values():
        assert entry["bias_spread_mha"] is not None and entry["bias_spread_mha"] >= 0.0
    assert "compile spread (mHa)" in runs["a"].table_headers()


def test_seed_changes_neither_compile_nor_spread(runs):
    a, b = runs["a"].to_json(), runs["b"].to_json()
    assert a["compile"] == b["compile"]
    for name in a["recipes"]:  # biases come from exact inputs (exact readout calibration)
        assert a["recipes"][name]["bias_spread_mha"] == b["recipes"][name]["bias_spread_mha"]
        assert a["recipes"][name]["bias_mha"] == b["recipes"][name]["bias_mha"]


def test_spread_equals_biases_of_each_seed_compiled_alone(runs):
    """Every seed compiled on its own (compile_to_device), every recipe re-run: max - min."""
    from noiselab.device.compile import compile_to_device
    from noiselab.mitigate.recipe import run_recipe
    from noiselab.study.cache import CachingRunner
    from noiselab.study.context import build_context

    study, store = runs["study"], runs["store"]
    ctx = build_context(study, cache=store)
    bound = ctx.ansatz_circuit.assign_parameters(list(ctx.optimum.parameters))
    biases: dict[str, list[float]] = {name: [] for name in study.recipes}
    for seed in range(8):
        compiled = compile_to_device(
            bound, study.profile, optimization_level=study.optimization_level, seed=seed
        )
        experiment = dataclasses.replace(ctx.experiment, compiled=compiled)
        runner = CachingRunner(experiment, store)
        for name, passes in study.recipes.items():
            r = run_recipe(list(passes), experiment, runner, calibrator=runner.calibrator)
            biases[name].append(float(r.bias_exact_mha))
    for name, values in biases.items():
        spread = runs["a"].bias_spread_mha[name]
        assert spread == pytest.approx(max(values) - min(values), abs=1e-9)
    assert max(runs["a"].bias_spread_mha.values()) > 0.0  # the demo's compiles do differ


def test_one_seed_or_spread_off(tmp_path):
    from noiselab.study.assess import assess

    one = assess(_study(seeds=1), cache=tmp_path / "c.db")
    assert one.to_json()["compile"]["seeds_tried"] == [0]
    assert all(v == 0.0 for v in one.bias_spread_mha.values())
    off = assess(_study(bias_spread=False), cache=tmp_path / "c.db")
    assert all(v is None for v in off.bias_spread_mha.values())
    assert "compile spread (mHa)" not in off.table_headers()
    assert off.stats.simulations <= 1  # nothing beyond the chosen compile's own run
