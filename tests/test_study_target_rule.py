"""One rule for reaching the target, the same in the JSON of assess, tune, sweep and budget."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from noiselab.study.tune import GridOverride

ROOT = Path(__file__).resolve().parents[1]
STUDIES = sorted((ROOT / "configs" / "studies").glob("*.yaml"))
SMALL_GRID = GridOverride(
    readout=["none", "per_qubit_inverse"],
    postselect=["none"],
    amplification=["none", "stretch"],
    scales=[[1, 3, 5]],
    fit=["linear"],
)


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory):
    from noiselab.study.cache import open_cache

    return open_cache(tmp_path_factory.mktemp("rule") / "cache.db")


@pytest.fixture(scope="module")
def loose_study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo with a 60 mHa target, so that some recipes reach it and some do not."""
    data = yaml.safe_load((ROOT / "configs" / "studies" / "h2-equilibrium.yaml").read_text())
    data["target_mha"] = 60.0
    data["device"] = str(ROOT / "configs" / "devices" / "cobaltgrid-12.yaml")
    path = tmp_path_factory.mktemp("loose") / "h2-loose.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def _check(entry: dict, confidence: float) -> bool:
    assert isinstance(entry["reaches_target"], bool)
    assert entry["reaches_target"] == (entry["p_within_target"] >= confidence)
    return entry["reaches_target"]


def _all_studies(loose_study: Path) -> list[Path]:
    return [*STUDIES, loose_study]


def test_assess_and_tune_json(store, loose_study: Path) -> None:
    from noiselab.study.assess import assess
    from noiselab.study.tune import tune

    seen: set[bool] = set()
    for path in _all_studies(loose_study):
        js = assess(path, cache=store, reuse=False).to_json()
        conf = js["confidence"]
        seen |= {_check(e, conf) for e in js["recipes"].values()}
        assert js["reachable"] == js["recipes"][js["best_recipe"]]["reaches_target"]
        tj = tune(path, grid=SMALL_GRID, cache=store, reuse=False).to_json()
        seen |= {_check(e, tj["confidence"]) for e in tj["ranking"]}
    assert seen == {True, False}  # both sides of the rule occur


def test_sweep_and_budget_json(store, loose_study: Path) -> None:
    from noiselab.study.budget import budget
    from noiselab.study.sweep import sweep

    seen: set[bool] = set()
    for path in _all_studies(loose_study):
        sj = sweep(
            path, "noise-scale", 0.5, 2.0, 2, True, recipes=["raw"], cache=store
        ).to_json()
        for point in sj["points"]:
            seen |= {_check(e, sj["confidence"]) for e in point["results"]}
        bj = budget(path, cache=store).to_json()
        for row in bj["rows"]:
            for p, hit in zip(row["p_within_target"], row["reaches_target"], strict=True):
                seen.add(_check({"p_within_target": p, "reaches_target": hit}, bj["confidence"]))
    assert seen == {True, False}
