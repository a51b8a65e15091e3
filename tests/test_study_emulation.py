"""The study's emulation: section and the CLI past the density-matrix guard.

``noiselab assess`` on a study the density matrix may not take either switches to Monte Carlo
trajectories (and says so on stderr, with a trajectory error bar in the JSON and the table) or,
asked to stay exact, refuses in one line with the qubit count and the memory estimate.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Any

import pytest
import yaml

from noiselab.cli.app import main
from noiselab.common.errors import InputError
from noiselab.emulate.memory import MEMORY_LIMIT_ENV
from noiselab.study.assess import demo_study_path
from noiselab.study.spec import load_study

TRAJECTORIES = 128  # small: a few seconds; the agreement check below scales with its error bar


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


def _demo_copy(folder: Path, emulation: dict | None, name: str = "h2-emulation.yaml") -> Path:
    """The demo H2 study (4 qubits, Jordan-Wigner) with an emulation: section; its device is
    a shipped profile by name, so the copy can live anywhere."""
    src = demo_study_path()
    data = yaml.safe_load(src.read_text(encoding="utf-8"))
    data.pop("tune", None)
    if emulation is not None:
        data["emulation"] = emulation
    p = folder / name
    p.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return p


@pytest.fixture(scope="module")
def capped_study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    # a density-matrix cap below the circuit width: the guard's own switch (see the report
    # note: at 4 qubits no memory limit lets trajectories fit where the density matrix does not)
    return _demo_copy(
        tmp_path_factory.mktemp("emulation"),
        {"max_density_matrix_qubits": 3, "trajectories": TRAJECTORIES, "batches": 16},
    )


@pytest.fixture(scope="module")
def dm_result() -> Any:
    """assess of the demo study with the exact density-matrix method (no memory limit)."""
    from noiselab.study.assess import assess

    return assess(demo_study_path(), cache=False, method="density_matrix")


@pytest.fixture(scope="module")
def auto_run(capped_study: Path) -> tuple[int, str, str]:
    """``noiselab assess --json`` in auto mode on the capped study (captured by hand)."""
    import contextlib
    import io

    out, err = io.StringIO(), io.StringIO()
    with (
        contextlib.redirect_stdout(out),
        contextlib.redirect_stderr(err),
        pytest.raises(SystemExit) as info,
    ):
        main(["assess", str(capped_study), "--json", "--no-cache", "--quiet"])
    return int(info.value.code or 0), out.getvalue(), err.getvalue()


def test_auto_switches_to_trajectories_and_says_so(auto_run: tuple[int, str, str]) -> None:
    rc, out, err = auto_run
    assert rc == 0, err
    data = json.loads(out)  # stdout is exactly one JSON object (notices go to stderr)
    assert data["emulation_method"] == "trajectory"
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, lines  # one notice per job, not one per simulation
    assert "trajectories" in lines[0] and "4 qubits" in lines[0]
    for name, r in data["recipes"].items():
        t = r["trajectory_std_mha"]
        assert t is not None and math.isfinite(t) and t > 0.0, name
        assert r["std_mha"] > 0.0  # shot noise stays a separate number


def test_trajectory_energy_agrees_with_density_matrix(
    auto_run: tuple[int, str, str], dm_result: Any
) -> None:
    data = json.loads(auto_run[1])
    dm_reference = dm_result.to_json()
    assert dm_reference["emulation_method"] == "density_matrix"
    raw_t, raw_dm = data["recipes"]["raw"], dm_reference["recipes"]["raw"]
    assert raw_dm["trajectory_std_mha"] is None
    # source: the engine's own density-matrix result is the reference (common practice: Monte
    # Carlo wavefunction trajectories average to the density matrix); the density matrix is
    # exact, so the combined standard error is the trajectory one
    diff_mha = abs(raw_t["energy"] - raw_dm["energy"]) * 1000.0
    assert diff_mha <= 4.0 * raw_t["trajectory_std_mha"]


def test_density_matrix_refused_under_memory_limit(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "1000")  # bytes: nothing fits
    out_dir = tmp_path / "never"
    rc, out, err = _run(
        [
            "assess",
            str(demo_study_path()),
            "--method",
            "density_matrix",
            "--no-cache",
            "--quiet",
            "--out",
            str(out_dir),
        ],
        capsys,
    )
    assert rc == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "4 qubits" in lines[0] and "GiB" in lines[0] and "density matrix" in lines[0]
    assert "h2-equilibrium.yaml" in lines[0]
    assert "Traceback" not in err
    assert not out_dir.exists()  # nothing written, not even the folder


def test_auto_refused_when_trajectories_do_not_fit_either(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "1000")
    rc, out, err = _run(
        ["assess", str(demo_study_path()), "--json", "--no-cache", "--quiet"], capsys
    )
    assert rc == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and "GiB" in err and "qubits" in err
    assert "Traceback" not in err


def test_cap_refusal_with_density_matrix(
    capped_study: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, out, err = _run(
        ["assess", str(capped_study), "--method", "density_matrix", "--no-cache", "-q"], capsys
    )
    assert rc == 2 and out == ""
    assert len(err.strip().splitlines()) == 1
    assert "4 qubits" in err and "GiB" in err and "Traceback" not in err


def test_table_has_trajectory_column_only_when_used(
    capped_study: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, out, err = _run(
        ["assess", str(capped_study), "--trajectories", "32", "--no-cache", "-q"], capsys
    )
    assert rc == 0, err
    assert "trajectory error (mHa)" in out
    assert "Verdict:" in out and "Caution:" in out
    assert len([x for x in err.splitlines() if x.strip()]) == 1


def test_table_without_trajectories_has_no_column(dm_result: Any) -> None:
    from noiselab.report.tables import assess_table, render_text

    result = dm_result
    text = render_text(assess_table(result), width=200)
    assert "trajectory error" not in text
    assert "trajectory_std_mha" not in result.csv_rows()[0]


# ---------------------------------------------------------------- the study file's section


def test_emulation_section_defaults_and_overrides(tmp_path: Path) -> None:
    import inspect

    from noiselab.emulate import engine

    study = load_study(_demo_copy(tmp_path, None))
    assert study.emulation.method == "auto"
    # the defaults are the engine's own
    params = inspect.signature(engine.emulate_bases).parameters
    assert study.emulation.trajectories == params["num_trajectories"].default
    assert study.emulation.batches == params["num_batches"].default
    s2 = study.with_emulation("trajectory", 40)
    assert (s2.emulation.method, s2.emulation.trajectories) == ("trajectory", 40)
    with pytest.raises(InputError, match=r": method 'exact'") as refused:
        study.with_emulation("exact")
    assert "--method" not in str(refused.value)  # Python names the argument


@pytest.mark.parametrize(
    ("section", "needle"),
    [
        ({"method": "exact"}, "emulation.method"),
        ({"trajectory_count": 10}, "emulation.trajectory_count: unknown key"),
        ({"trajectories": 8, "batches": 16}, "trajectories >= batches"),
        ({"trajectories": 1}, "emulation.trajectories"),
        ({"max_density_matrix_qubits": 0}, "emulation.max_density_matrix_qubits"),
    ],
)
def test_bad_emulation_section_is_one_line(tmp_path: Path, section: dict, needle: str) -> None:
    path = _demo_copy(tmp_path, section)
    with pytest.raises(InputError) as info:
        load_study(path)
    text = str(info.value)
    assert needle in text and str(path) in text and "\n" not in text


def test_bad_method_option_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _run(["assess", str(demo_study_path()), "--method", "exact"], capsys)
    assert rc == 2 and "--method" in err and "density_matrix" in err


def test_trajectory_count_enters_the_cache_key(tmp_path: Path) -> None:
    from noiselab.mitigate.experiment import variant_key_material
    from noiselab.mitigate.variants import CircuitVariant
    from noiselab.study.context import build_context

    ctx = build_context(load_study(_demo_copy(tmp_path, None)))
    base = dataclasses.replace(ctx.experiment, emulation_method="trajectory")
    v = CircuitVariant()
    k64 = variant_key_material(dataclasses.replace(base, num_trajectories=64), v)
    k128 = variant_key_material(dataclasses.replace(base, num_trajectories=128), v)
    assert k64 != k128 and k64["method"] == "trajectory"
    exact = variant_key_material(
        dataclasses.replace(ctx.experiment, emulation_method="density_matrix"), v
    )
    assert "trajectories" not in exact
    capped = variant_key_material(
        dataclasses.replace(base, max_density_matrix_qubits=3, emulation_method="auto"), v
    )
    assert capped["method"] == "trajectory"  # the key follows what the runner will do


# ---------------------------------------------------------------- the other jobs


def test_sweep_carries_the_trajectory_error(tmp_path: Path) -> None:
    from noiselab.report.tables import sweep_rows
    from noiselab.study.sweep import sweep

    result = sweep(
        _demo_copy(tmp_path, None),
        "noise_scale",
        values=[1.0],
        recipes=["raw"],
        cache=False,
        method="trajectory",
        trajectories=32,
    )
    assert result.emulation_method == "trajectory"
    entry = result.points[0].entries[0]
    assert entry.trajectory_std_mha is not None and entry.trajectory_std_mha > 0.0
    assert result.to_json()["emulation_method"] == "trajectory"
    assert sweep_rows(result)[0]["trajectory_std_mha"] == entry.trajectory_std_mha


@pytest.mark.parametrize("job", ["tune", "sweep", "budget"])
def test_jobs_refuse_density_matrix_before_simulating(
    job: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import importlib

    from noiselab.common.errors import ProblemTooLargeError
    from noiselab.emulate.engine import engine_call_count

    fn = getattr(importlib.import_module(f"noiselab.study.{job}"), job)
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "1000")
    calls = engine_call_count()
    with pytest.raises(ProblemTooLargeError, match=r"4 qubits need about .* GiB"):
        fn(_demo_copy(tmp_path, None), cache=False, method="density_matrix")
    assert engine_call_count() == calls  # refused before any simulation
