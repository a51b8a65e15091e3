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
    amplifier=["none", "stretch"],
    scales=[[1, 3, 5]],
    fit=["linear"],
    suppress=["none"],
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
        # a verdict naming an extrapolated recipe states the amplification it assumes
        extrapolated = "extrapolation" in js["recipes"][js["best_recipe"]]["details"]
        assert ("Amplification assumed:" in js["verdict"]) == extrapolated
        tj = tune(path, grid=SMALL_GRID, cache=store, reuse=False).to_json()
        seen |= {_check(e, tj["confidence"]) for e in tj["ranking"]}
    assert seen == {True, False}  # both sides of the rule occur


def test_sweep_and_budget_json(store, loose_study: Path) -> None:
    from noiselab.study.budget import budget
    from noiselab.study.sweep import sweep

    seen: set[bool] = set()
    for path in _all_studies(loose_study):
        sj = sweep(
            path, "noise_scale", 0.5, 2.0, 2, True, recipes=["raw"], cache=store
        ).to_json()
        for point in sj["points"]:
            seen |= {_check(e, sj["confidence"]) for e in point["results"]}
        bj = budget(path, cache=store).to_json()
        for row in bj["rows"]:
            for p, hit in zip(row["p_within_target"], row["reaches_target"], strict=True):
                seen.add(_check({"p_within_target": p, "reaches_target": hit}, bj["confidence"]))
    assert seen == {True, False}


def test_closest_recipe_when_none_reaches_is_ranked_by_p_then_bias() -> None:
    from types import SimpleNamespace

    from noiselab.study.results import best_of, verdict_line

    def r(bias: float, p: float = 0.0, needed: int | None = None) -> SimpleNamespace:
        return SimpleNamespace(
            bias_exact_mha=bias, p_within_target=p, shots_needed=needed, limited_by="bias"
        )

    # file order puts raw first; every P is 0: the smallest |bias| is the closest
    results = {"raw": r(217.0), "readout": r(120.0), "zne": r(-35.9)}
    assert best_of(results) == "zne"
    ok, text = verdict_line("zne", results["zne"], 1.5936, 0.95, 10**6)
    assert not ok
    assert "no recipe reaches chemical accuracy" in text and "closest is 'zne' at -35.9 mHa" in text
    # P first, then |bias|, then shots needed
    assert best_of({"a": r(0.1, 0.3), "b": r(1.0, 0.5)}) == "b"
    assert best_of({"a": r(1.0, 0.5, 10**7), "b": r(-1.0, 0.5, 10**6)}) == "b"


def test_every_fixed_variance_source_gets_its_own_verdict_words() -> None:
    # a result kept out of reach by a fixed variance names that variance, its size and the
    # remedy, never "its bias keeps it out of reach" (common practice, no source)
    from types import SimpleNamespace

    from noiselab.mitigate.target import FIXED_WORDS
    from noiselab.study.results import FIXED_VERDICT, verdict_line

    details = {
        "std_calibration_mha": 1.1,
        "std_amplification_mha": 2.2,
        "error_cancellation": {"std_learning_mha": 3.3},
        "std_twirl_mha": 4.4,
        "twirl_instances": 8,
        "truncation_estimate_std_mha": 5.5,
    }
    assert set(FIXED_VERDICT) == set(FIXED_WORDS)  # every named fixed source has its words
    for i, source in enumerate(FIXED_VERDICT):
        best = SimpleNamespace(
            bias_exact_mha=0.5,
            p_within_target=0.4,
            shots_needed=None,
            limited_by=source,
            details=details,
        )
        ok, text = verdict_line("r", best, 1.5936, 0.95, 10**6)
        assert not ok
        assert f"({1.1 * (i + 1):.3g} mHa) does not shrink with more" in text, source
        assert "its bias keeps it out of reach" not in text
    best = SimpleNamespace(
        bias_exact_mha=0.5, p_within_target=0.4, shots_needed=None, limited_by="twirl",
        details=details,
    )  # fmt: skip
    assert "between its 8 random twirls (4.4 mHa)" in verdict_line("r", best, 1.6, 0.95, 10)[1]


def test_study_where_every_recipe_fails_names_the_smallest_bias(store, tmp_path: Path) -> None:
    """H2 on the deliberately poor rustbucket-6: raw first in the file, no recipe close."""
    from noiselab.study.assess import assess

    data = yaml.safe_load((ROOT / "configs" / "studies" / "h2-equilibrium.yaml").read_text())
    data["device"] = str(ROOT / "configs" / "devices" / "rustbucket-6.yaml")
    data["recipes"] = {
        "raw": [],
        "readout": [{"pass": "readout"}],
        "readout_postselect": [{"pass": "readout"}, {"pass": "postselect", "mode": "discard"}],
    }
    data.pop("tune", None)
    data.pop("sweep", None)
    path = tmp_path / "h2-rust.yaml"
    path.write_text(yaml.safe_dump(data))
    res = assess(path, cache=store, reuse=False)
    assert not any(r.reaches_target for r in res.recipes.values())
    assert all(r.p_within_target == 0.0 for r in res.recipes.values())
    closest = min(res.recipes, key=lambda n: abs(res.recipes[n].bias_exact_mha))
    assert closest != "raw"
    assert res.best_recipe == closest and not res.reachable
    bias = res.recipes[closest].bias_exact_mha
    assert "no recipe reaches chemical accuracy" in res.verdict
    assert f"closest is '{closest}' at {bias:+.3g} mHa" in res.verdict
