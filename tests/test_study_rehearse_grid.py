"""``rehearse --grid``: every setting rehearsed, shared emulations change nothing, ranked by P
then device hours; one-line refusals."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from noiselab.cli.app import main
from noiselab.study.cache import ResultsCache
from noiselab.study.context import build_context
from noiselab.study.rehearse import rehearse
from noiselab.study.rehearse_grid import rehearse_grid
from noiselab.study.spec import load_study

GRID = {
    "optimizer": ["cobyla", "spsa"],
    "shots_per_evaluation": [500, 8000],
    "loop_recipe": ["default", "readout"],
}
COMMON = {"iterations": 6, "repeats": 2, "spsa": {"calibration_samples": 1}}


@pytest.fixture(scope="module")
def grid_result(tmp_path_factory: pytest.TempPathFactory):
    cache = tmp_path_factory.mktemp("grid") / "cache.sqlite"
    study = load_study("h2-equilibrium")
    return study, rehearse_grid(study, cache=cache, grid=GRID, **COMMON)


def test_grid_covers_every_setting_and_ranks_by_p_then_device_hours(grid_result) -> None:
    _, res = grid_result
    seen = {(c.optimizer, c.shots_per_evaluation, c.loop_recipe) for c in res.cells}
    assert len(res.cells) == 8 and len(seen) == 8
    keys = [(-c.p_within_target, c.device_hours) for c in res.cells]
    assert keys == sorted(keys)
    for cell, rehearsal in zip(res.cells, res.rehearsals, strict=True):
        assert cell.total_shots == rehearsal.total_shots
        assert cell.device_hours == rehearsal.device_hours
        assert cell.runs_within_target == sum(
            abs(r.final_error_mha) <= res.target_mha for r in rehearsal.repeats
        )
        assert cell.final_errors_mha == tuple(r.final_error_mha for r in rehearsal.repeats)
    # COBYLA from Hartree-Fock starts every repeat and setting at the same simplex: shared
    assert 0 < res.reused_evaluations < res.evaluations
    assert res.to_json()["settings"][0]["rank"] == 1
    assert res.verdict.startswith("Verdict: best loop of 8")


@pytest.mark.parametrize("pick", [0, -1])
def test_a_grid_setting_equals_its_separate_rehearsal(grid_result, pick: int) -> None:
    # sharing emulations between settings must not change any number of a setting
    study, res = grid_result
    cell, shared = res.cells[pick], res.rehearsals[pick]
    loop = (
        [
            {"pass": "readout", "method": "per_qubit_inverse"},
            {"pass": "postselect", "mode": "verify"},
        ]
        if cell.loop_recipe == "default"
        else list(study.recipes[cell.loop_recipe])
    )
    ctx = build_context(study, cache=ResultsCache.disabled(), verification=True)
    alone = rehearse(
        study, context=ctx, optimizer=cell.optimizer,
        shots_per_evaluation=cell.shots_per_evaluation, loop_recipe=loop, **COMMON,
    )  # fmt: skip
    for a, b in zip(alone.repeats, shared.repeats, strict=True):
        assert a.final_parameters == b.final_parameters
        assert a.final_error_mha == b.final_error_mha
        assert a.total_shots == b.total_shots and a.device_hours == b.device_hours


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


def test_grid_refusals_are_one_line_exit_2(tmp_path: Path, capsys) -> None:
    code, _, err = _run(
        ["rehearse", "h2-equilibrium", "--grid", "--optimizer", "spsa", "--no-cache", "-q",
         "--out", str(tmp_path / "a")], capsys,
    )  # fmt: skip
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--optimizer" in err
    study = load_study("h2-equilibrium")
    data = dict(study.raw)
    data["rehearse"] = {"grid": {"loop_recipe": ["default", "no_such_recipe"]}}
    path = tmp_path / "s.yaml"
    path.write_text(json.dumps(data | {"device": str(study.device_source)}))
    code, _, err = _run(["rehearse", str(path), "--grid", "--no-cache", "-q"], capsys)
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert "rehearse.grid.loop_recipe" in err and "no_such_recipe" in err
    assert not (tmp_path / "a").exists()
