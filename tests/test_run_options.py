"""One run-options value for every job: the same bounds as the study file, refused options and
unusable --out folders named in one line (exit 2) before any work, options declared once."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
import typer
from helpers.cli import run_main as run_cli_in_process

from noiselab.cli.jobs import run_job
from noiselab.cli.options import STUDY_JOB, StudyArg, run_options
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


def test_methods_are_the_study_files() -> None:
    from typing import get_args

    from noiselab.study.run_options import Method
    from noiselab.study.spec import EMULATION_METHODS

    assert get_args(Method) == EMULATION_METHODS


def test_refusals_name_the_option() -> None:
    from noiselab.cli.options import option_of

    # the study layer names the argument; the command line (main) shows the option
    with pytest.raises(InputError, match=r"^workers '0': .*1 to 256") as refused:
        RunOptions.from_command_line(workers="0")
    assert refused.value.with_options(option_of).message.startswith("--workers '0': ")
    with pytest.raises(InputError, match=r"^cache: given together with use_cache") as refused:
        RunOptions.from_command_line(cache="c.db", no_cache=True)
    shown = refused.value.with_options(option_of).message
    assert shown.startswith("--cache: given together with --no-cache;")
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
        first = {"assess": "assess.json", "tune": "tune.csv", "sweep": "sweep-noise_scale.csv",
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


def test_a_new_job_command_needs_only_its_own_options(tmp_path: Path) -> None:
    """The 'adding a job' recipe of DEVELOPERS.md: a command declares its own options, gets the
    shared ones and one validated RunOptions, and run_job writes its files as one set."""
    from typer.testing import CliRunner

    seen: dict[str, object] = {}

    def toy_job(study: Path, *, cache: object, progress: object, **keywords: object) -> str:
        seen.update(keywords, study=study, cache=cache)
        return "result"

    def write(result: str, folder: Path) -> list[Path]:
        path = folder / "toy.txt"
        path.write_text(result, encoding="utf-8")
        return [path]

    @run_options(STUDY_JOB, files=("toy.txt",))
    def toy_cmd(study: StudyArg, run: RunOptions, extra: int = 0) -> None:
        _, written = run_job(toy_job, study, run, write=write, extra=extra)
        typer.echo(",".join(p.name for p in written))

    app = typer.Typer()
    app.command("toy")(toy_cmd)
    app.command("other")(lambda: None)  # two commands: typer keeps the sub-command name
    out = tmp_path / "out"
    argv = ["toy", "s.yaml", "--shots", "1e6", "--extra", "3", "--no-cache", "--out", str(out)]
    result = CliRunner().invoke(app, argv)
    assert result.exit_code == 0, result.output
    assert seen["shots"] == 10**6 and seen["extra"] == 3 and seen["seed"] is None
    assert (out / "toy.txt").read_text(encoding="utf-8") == "result"
    refused = CliRunner().invoke(app, ["toy", "s.yaml", "--shots", "2.5"])
    # raised past the command (no main() here): it names the argument, main() the option
    assert isinstance(refused.exception, InputError)
    assert str(refused.exception).startswith("shots '2.5'")
