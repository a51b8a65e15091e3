"""One run-options value for every job: the same bounds as the study file, refused options and
unusable --out folders named in one line (exit 2) before any work, options declared once."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from helpers.cli import run_main as run_cli_in_process

from noiselab.common.errors import InputError
from noiselab.study.run_options import RunOptions
from noiselab.study.spec import load_study

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"


def run_main(argv: list[str]) -> tuple[int, str]:
    code, out, err = run_cli_in_process(argv)
    return code, out + err


def _accepts(build: object) -> bool:
    try:
        build()  # type: ignore[operator]
    except InputError:
        return False
    return True


@pytest.mark.parametrize(
    ("key", "value"),
    [
        ("seed", "0"), ("seed", "-1"), ("seed", "4294967295"), ("seed", "4294967296"),
        ("seed", "1e3"), ("seed", "2.5"), ("shots", "1"), ("shots", "0"), ("shots", "1e12"),
        ("shots", "1.000001e12"), ("shots", "1e6"), ("trajectories", "1"), ("trajectories", "2"),
        ("trajectories", "1e7"), ("trajectories", "1e7+1"), ("method", "trajectory"),
        ("method", "exact"),
    ],
)  # fmt: skip
def test_bounds_are_the_study_files(key: str, value: str) -> None:
    """RunOptions accepts a value exactly when the study file's model does."""
    by_file = _accepts(lambda: load_study(STUDY, {key: value}))
    by_options = _accepts(lambda: RunOptions.from_command_line(**{key: value}))
    assert by_options == by_file


def test_refusals_name_the_option() -> None:
    with pytest.raises(InputError, match=r"^--workers '0': .*1 to 256"):
        RunOptions.from_command_line(workers="0")
    with pytest.raises(InputError, match=r"^--cache: given together with --no-cache"):
        RunOptions.from_command_line(cache="c.db", no_cache=True)
    run = RunOptions.from_command_line(shots="1e6", seed="4e0", workers="2")
    assert (run.shots, run.seed, run.workers) == (10**6, 4, 2)
    with pytest.raises(Exception):  # noqa: B017 (frozen: any pydantic error)
        run.shots = 5  # type: ignore[misc]


JOBS = ["assess", "tune", "sweep", "budget", "rehearse", "compare", "scan"]


@pytest.mark.parametrize("job", JOBS)
@pytest.mark.parametrize("out", ["", "FILE", "FOLDER"])
def test_unusable_out_is_refused_before_any_work(job: str, out: str, tmp_path: Path) -> None:
    """--out that is empty, a file, or holds a folder where a file of the job goes: exit 2,
    one line, and nothing was computed (the results cache was never created)."""
    target = tmp_path / "out"
    if out == "FILE":
        target.write_text("x", encoding="utf-8")
    elif out == "FOLDER":
        first = {"assess": "assess.json", "tune": "tune.csv", "sweep": "sweep-noise-scale.csv",
                 "budget": "budget.csv", "rehearse": "rehearse.json", "compare": "compare.json",
                 "scan": "scan.json"}[job]  # fmt: skip
        (target / first).mkdir(parents=True)
    cache = tmp_path / "cache.sqlite"
    argv = [job, str(STUDY), "--out", "" if out == "" else str(target), "--cache", str(cache)]
    if job == "compare":
        argv += ["--devices", "cobaltgrid-12"]
    code, text = run_main(argv)
    assert code == 2, text
    assert text.count("noiselab: error: --out") == 1, text
    assert not cache.exists()


def test_run_options_are_declared_once() -> None:
    """No command module declares a run option itself: they come from cli/options.py."""
    shared = {"--out", "--cache", "--no-cache", "--seed", "--shots", "--workers", "--cluster",
              "--quiet", "--method", "--trajectories"}  # fmt: skip
    for path in sorted((ROOT / "noiselab" / "cli").glob("*.py")):
        if path.name == "options.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and getattr(node.func, "attr", "") == "Option":
                names = {a.value for a in node.args if isinstance(a, ast.Constant)}
                assert not names & shared, (path.name, names & shared)
