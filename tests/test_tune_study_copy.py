"""``tune --study-copy PATH``: the winning setting written into a copy of the study."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from helpers.cli import run_main

import noiselab
from noiselab.common.errors import InputError
from noiselab.common.yamlio import parse_yaml_mapping
from noiselab.study.spec import load_study
from noiselab.study.tune import tune
from noiselab.study.tuned_copy import tuned_study_text, write_tuned_study

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.fixture(scope="module")
def tuned() -> object:
    return tune(DEMO, cache=False)


def test_copy_holds_the_winner_loads_and_checks(tuned: object, tmp_path: Path) -> None:
    before = DEMO.read_bytes()
    assert noiselab.write_tuned_study is write_tuned_study
    copy = write_tuned_study(tuned, DEMO, tmp_path / "tuned.yaml")
    assert DEMO.read_bytes() == before  # the original is never touched
    text = copy.read_text(encoding="utf-8")
    assert "# noiselab DEMO study" in text  # comments of the original survive
    study = load_study(copy)
    original = load_study(DEMO)
    assert set(study.recipes) == {*original.recipes, "tuned"}
    assert [dict(p) for p in study.recipes["tuned"]] == [dict(p) for p in tuned.best.passes]
    code, out, err = run_main(["study", "check", str(copy)])
    assert code == 0, err
    assert "tuned:" in out
    assert not [p for p in tmp_path.iterdir() if p.name != "tuned.yaml"]  # no temporary left


def test_a_taken_name_gets_a_suffix_and_flow_style_recipes_fall_back(tuned: object) -> None:
    text = DEMO.read_text(encoding="utf-8").replace("  raw: []", "  raw: []\n  tuned: []")
    new, name = tuned_study_text(tuned, text, str(DEMO))
    assert name == "tuned_2"
    assert parse_yaml_mapping(new, "x")["recipes"]["tuned"] == []
    flow = "name: x\nrecipes: {raw: []}\nshots: 1000\n"
    new, name = tuned_study_text(tuned, flow, "flow.yaml")
    data = parse_yaml_mapping(new, "x")
    assert name == "tuned" and set(data["recipes"]) == {"raw", "tuned"}
    assert data["shots"] == 1000
    assert new.startswith("# flow.yaml with tune's rank-1 setting")


def test_the_original_is_refused_before_any_work(tmp_path: Path) -> None:
    study = tmp_path / "demo.yaml"
    shutil.copy(DEMO, study)
    before = study.read_bytes()
    code, _, err = run_main(["tune", str(study), "--study-copy", str(study), "--no-cache"])
    assert code == 2
    assert "--study-copy" in err and "study file itself" in err and "Traceback" not in err
    assert study.read_bytes() == before
    code, _, err = run_main(["tune", str(study), "--study-copy", str(tmp_path / "no" / "x.yaml")])
    assert code == 2 and "does not exist" in err


def test_a_copy_that_would_not_load_is_not_written(tuned: object, tmp_path: Path) -> None:
    here = tmp_path / "a"
    here.mkdir()
    shutil.copy(ROOT / "configs" / "devices" / "cobaltgrid-12.yaml", here / "chip.yaml")
    study = here / "study.yaml"
    study.write_text(
        DEMO.read_text(encoding="utf-8").replace("device: cobaltgrid-12", "device: chip.yaml"),
        encoding="utf-8",
    )
    elsewhere = tmp_path / "b"
    elsewhere.mkdir()
    # from Python the message names the argument (the command line: --study-copy)
    with pytest.raises(InputError, match=r"^copy: the copy would not load"):
        write_tuned_study(tuned, study, elsewhere / "tuned.yaml")
    assert list(elsewhere.iterdir()) == []
    assert load_study(write_tuned_study(tuned, study, here / "tuned.yaml")).recipes["tuned"]
