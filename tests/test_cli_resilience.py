"""A sweep killed mid-run (SIGKILL) resumes to byte-identical files and leaves no temporaries;
Ctrl-C prints the interrupt line; random command-line values never give exit 1 or a traceback."""

from __future__ import annotations

import contextlib
import os
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest
from helpers.cli import run_main as run_cli_in_process
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

ROOT = Path(__file__).resolve().parents[1]
DEVICE = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"

# H2 / STO-3G, parity with the two-qubit reduction: 2 qubits (REFERENCES.md); invented chip
TINY_STUDY = f"""\
name: h2-tiny-resilience
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {{kind: uccsd}}
device: {DEVICE}
shots: 1e5
seed: 3
recipes:
  raw: []
  zne:
    - {{pass: extrapolate, scales: [1, 2, 3], fit: richardson}}
rehearse:
  loop_recipe: [{{pass: readout, method: per_qubit_inverse}}]
"""

SWEEP = ["--knob", "two_qubit_error", "--start", "0.002", "--stop", "0.05", "--points", "20"]
SWEEP += ["--log"]
FILES = [f"sweep-two_qubit_error.{ext}" for ext in ("csv", "json", "svg", "pdf", "png")]


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    p = tmp_path_factory.mktemp("study") / "h2-tiny.yaml"
    p.write_text(TINY_STUDY, encoding="utf-8")
    return p


def _cli(args: list[str]) -> list[str]:
    return [sys.executable, "-m", "noiselab", *args]


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def _simulations(db: Path) -> int:
    if not db.exists():
        return 0
    try:
        with contextlib.closing(sqlite3.connect(db, timeout=1)) as conn:
            row = conn.execute(
                "SELECT COUNT(*) FROM entries WHERE kind LIKE 'basis-distributions%'"
            ).fetchone()
            return int(row[0])
    except sqlite3.Error:
        return 0


def _start_and_signal(args: list[str], db: Path, sig: int, after: int) -> subprocess.Popen[str]:
    """Start ``noiselab args``; once ``after`` simulations are in the cache, send ``sig``."""
    proc = subprocess.Popen(
        _cli(args), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env()
    )
    deadline = time.monotonic() + 300  # a hang guard, not a speed target
    while proc.poll() is None and _simulations(db) < after and time.monotonic() < deadline:
        time.sleep(0.01)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    proc.send_signal(sig)
    return proc


def test_killed_sweep_resumes_to_identical_files(study: Path, tmp_path: Path) -> None:
    ref_out, out = tmp_path / "reference", tmp_path / "out"
    ref = subprocess.run(
        _cli(["sweep", str(study), *SWEEP, "--out", str(ref_out), "--cache", str(tmp_path / "r")]),
        capture_output=True,
        text=True,
        timeout=600,
        env=_env(),
    )
    assert ref.returncode == 0, ref.stderr

    db = tmp_path / "resume.sqlite"
    args = ["sweep", str(study), *SWEEP, "--out", str(out), "--cache", str(db), "-q"]
    killed = _start_and_signal(args, db, signal.SIGKILL, after=5)
    killed.communicate(timeout=60)
    assert killed.returncode == -signal.SIGKILL
    done_before = _simulations(db)
    assert done_before > 0

    resumed = subprocess.run(_cli(args), capture_output=True, text=True, timeout=600, env=_env())
    assert resumed.returncode == 0, resumed.stderr
    # the resumed run simulated only what the killed one had not stored
    new = int(resumed.stdout.split(" new simulation(s), ")[0].rsplit("(", 1)[1])
    cached = int(resumed.stdout.split(" new simulation(s), ")[1].split(" from cache")[0])
    assert cached >= done_before and new > 0

    assert sorted(p.name for p in out.iterdir()) == sorted(FILES)  # no staging, no temporaries
    for name in FILES:
        assert (out / name).read_bytes() == (ref_out / name).read_bytes(), name


def test_ctrl_c_prints_the_interrupt_line(study: Path, tmp_path: Path) -> None:
    db = tmp_path / "c.sqlite"
    args = ["sweep", str(study), *SWEEP, "--out", str(tmp_path / "out"), "--cache", str(db)]
    proc = _start_and_signal(args, db, signal.SIGINT, after=2)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130
    assert "interrupted" in err and "Traceback" not in err
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


# ---------------------------------------------------------------- random command-line values


def run_main(argv: list[str]) -> tuple[int, str]:
    """(exit code, stdout + stderr) of ``noiselab argv`` in-process."""
    code, out, err = run_cli_in_process(argv)
    return code, out + err


NUMBERS = st.sampled_from(
    ["0", "-1", "1", "2", "3", "2.5", "1e6", "1.0e+3", "1e20", "1e400", "nan", "inf", "-inf",
     "abc", "", " ", "0x10", "1_000", "99999999999999999999999", "-0", "1e-3"]
)  # fmt: skip
WILD = {
    "--shots": st.one_of(NUMBERS, st.integers(-10, 10**13).map(str)),
    "--seed": st.one_of(NUMBERS, st.integers(-10, 2**33).map(str)),
    "--method": st.sampled_from(["auto", "density_matrix", "trajectory", "x", ""]),
    "--trajectories": st.one_of(NUMBERS, st.integers(-3, 10**8).map(str)),
    "--workers": st.sampled_from(["1", "0", "-2", "1e9", "1.5", "w", "100000"]),
    "--points": st.one_of(NUMBERS, st.integers(-3, 10**6).map(str)),
    "--start": st.one_of(NUMBERS, st.floats(width=32).map(repr)),
    "--stop": st.one_of(NUMBERS, st.floats(width=32).map(repr)),
    "--knob": st.sampled_from(["noise_scale", "readout_error", "coherence_us", "noise-scale", ""]),
    "--recipe": st.sampled_from(["zne", "raw", "nope", ""]),
    "--recipes": st.sampled_from(["zne", "raw", "nope", ""]),
    "--top": st.one_of(NUMBERS, st.integers(-3, 10**7).map(str)),
    "--fit": st.sampled_from(["linear", "richardson", "spline", ""]),
    "--scales": st.sampled_from(["1,3", "1,2,3", "1", "1,1e9", "a,b", "1,nan", ""]),
    "--readout": st.sampled_from(["none", "per_qubit_inverse", "magic"]),
    "--iterations": st.one_of(NUMBERS, st.integers(-3, 10**6).map(str)),
    "--repeats": st.one_of(NUMBERS, st.integers(-3, 10**4).map(str)),
    "--shots-per-evaluation": st.one_of(NUMBERS, st.integers(-3, 10**10).map(str)),
    "--max-shots": st.one_of(NUMBERS, st.integers(-3, 10**16).map(str)),
    "--optimizer": st.sampled_from(["spsa", "cobyla", "newton", ""]),
    "rehearse --start": st.sampled_from(["hartree_fock", "random", "middle", ""]),
    "--devices": st.sampled_from(["cobaltgrid-12", "no-such-chip", "", "/dev/null"]),
    "--refine": st.one_of(NUMBERS, st.integers(-3, 100).map(str)),
    "--bond": st.sampled_from([["0", "1"], ["0", "0"], ["0", "7"], ["-1", "1"], ["a", "1"]]),
    "--style": st.sampled_from(["paper", "talk", "poster", ""]),
    "--coherence-gate-errors": st.sampled_from(["follow", "fixed", "both", ""]),
}
# values that keep a valid run small (2 qubits, a few points, cached simulations)
TAME = {
    "--shots": st.sampled_from(["1e5", "20000", "1.0e+6", "1_000_000"]),
    "--seed": st.sampled_from(["3", "0", "4e0"]),
    "--method": st.sampled_from(["auto", "density_matrix", "trajectory"]),
    "--trajectories": st.sampled_from(["32", "64", "2e1"]),
    "--workers": st.just("1"),
    "--points": st.sampled_from(["2", "3", "3e0"]),
    "--start": st.sampled_from(["0.5", "1", "0.01"]),
    "--stop": st.sampled_from(["2", "3", "0.02"]),
    "--knob": st.sampled_from(["noise_scale", "readout_error"]),
    "--recipe": st.sampled_from(["zne", "raw"]),
    "--recipes": st.sampled_from(["zne", "raw"]),
    "--top": st.sampled_from(["1", "5", "1e1"]),
    "--fit": st.sampled_from(["linear", "richardson"]),
    "--scales": st.sampled_from(["1,3", "1,2,3"]),
    "--readout": st.sampled_from(["none", "per_qubit_inverse"]),
    "--iterations": st.sampled_from(["1", "2", "2e0"]),
    "--repeats": st.just("1"),
    "--shots-per-evaluation": st.sampled_from(["100", "1e3"]),
    "--max-shots": st.sampled_from(["1e9", "5000"]),
    "--optimizer": st.sampled_from(["spsa", "cobyla"]),
    "rehearse --start": st.sampled_from(["hartree_fock", "random"]),
    "--devices": st.sampled_from(["cobaltgrid-12", "tallowtrap-8"]),
    "--refine": st.sampled_from(["0", "0e0"]),
    "--bond": st.just(["0", "1"]),
    "--style": st.sampled_from(["paper", "talk"]),
    "--coherence-gate-errors": st.sampled_from(["follow", "fixed"]),
}
# scan: a tame line keeps its geometry small (two points near equilibrium, no refinement)
SCAN_TAME = {"--start": st.sampled_from(["0.6", "0.7"]), "--stop": st.sampled_from(["0.8", "0.9"])}
OPTIONS = {
    "assess": ["--shots", "--seed", "--method", "--trajectories", "--style"],
    "sweep": ["--shots", "--seed", "--method", "--trajectories", "--workers", "--points",
              "--start", "--stop", "--knob", "--recipes", "--style", "--coherence-gate-errors"],
    "tune": ["--shots", "--seed", "--method", "--trajectories", "--workers", "--top", "--fit",
             "--scales", "--readout"],
    "budget": ["--shots", "--seed", "--method", "--trajectories", "--workers", "--recipe"],
    "rehearse": ["--seed", "--iterations", "--repeats", "--shots-per-evaluation", "--max-shots",
                 "--optimizer", "--start"],
    "compare": ["--devices", "--shots", "--seed", "--method", "--trajectories"],
    "scan": ["--bond", "--start", "--stop", "--points", "--refine", "--recipes", "--shots",
             "--seed", "--method", "--trajectories", "--workers"],
}  # fmt: skip
#: what a tame line of a job always carries, unless the option was drawn (small, fast runs)
REQUIRED = {
    "tune": [("--scales", "1,3"), ("--fit", "linear"), ("--readout", "none")],
    "rehearse": [("--iterations", "1"), ("--repeats", "1"), ("--shots-per-evaluation", "100")],
    "compare": [("--devices", "cobaltgrid-12")],
    "scan": [("--bond", ["0", "1"]), ("--start", "0.6"), ("--stop", "0.8"), ("--points", "2"),
             ("--refine", "0"), ("--recipes", "raw")],
}  # fmt: skip


def _words(option: str, value: str | list[str]) -> list[str]:
    return [option, *value] if isinstance(value, list) else [option, value]


@st.composite
def command_lines(
    draw: st.DrawFn, study: Path, cache: Path, folder: Path, jobs: tuple[str, ...]
) -> list[str]:
    """One job's command line: every option absent, tame or wild (wild values are refused or
    accepted, never crash); about a third of the lines use tame values only."""
    job = draw(st.sampled_from(sorted(jobs)))
    tame_only = draw(st.integers(0, 2)) == 0
    args = [job, str(study), "--cache", str(cache), "-q"]
    if job == "tune":
        args += ["--postselect", "none", "--amplifier", "stretch"]
    kinds = ["absent", "tame"] if tame_only else ["absent", "tame", "wild"]
    for option in OPTIONS[job]:
        kind = draw(st.sampled_from(kinds))
        tame = {**TAME, **SCAN_TAME} if job == "scan" else TAME
        if kind != "absent":
            table = tame if kind == "tame" else WILD
            # "job --option" where one option means different things on different jobs
            own = f"{job} {option}"
            args += _words(option, draw(table[own] if own in table else table[option]))
    for option, value in REQUIRED.get(job, []):  # the job's own defaults would be long runs
        if option not in args:
            args += _words(option, value)
    out = draw(st.sampled_from([None, "NEW"] if tame_only else [None, "", "FILE", "NEW"]))
    if out == "FILE":
        blocker = folder / "a-file"
        blocker.write_text("x", encoding="utf-8")
        args += ["--out", str(blocker)]
    elif out == "NEW":
        args += ["--out", str(folder / "out")]
    elif out == "":
        args += ["--out", ""]
    return args


def _check_random_lines(
    study: Path, tmp_path: Path, jobs: tuple[str, ...], examples: int
) -> dict[int, int]:
    """Run ``examples`` random command lines of ``jobs``; every one exits 0 or 2 (one error
    line), never 1, never a traceback. Returns how often each exit code came."""
    cache = tmp_path / "shared.sqlite"

    @settings(
        max_examples=examples,
        deadline=None,
        derandomize=True,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )
    @given(st.data())
    def check(data: st.DataObject) -> None:
        with tempfile.TemporaryDirectory(dir=tmp_path) as folder:
            argv = data.draw(command_lines(study, cache, Path(folder), jobs))
            code, text = run_main(argv)
            seen[code] = seen.get(code, 0) + 1
            assert code in (0, 2), (argv, text)
            assert "Traceback" not in text and "internal error" not in text, (argv, text)
            if code == 2:
                errors = [line for line in text.splitlines() if "noiselab: error:" in line]
                assert len(errors) == 1, (argv, text)

    seen: dict[int, int] = {}
    check()
    return seen


def test_random_command_lines_never_fail_internally(study: Path, tmp_path: Path) -> None:
    seen = _check_random_lines(study, tmp_path, ("assess", "sweep", "tune", "budget"), 40)
    assert seen.get(0, 0) >= 3 and seen.get(2, 0) >= 10, seen  # both kinds were exercised


def test_random_rehearse_compare_scan_lines_never_fail_internally(
    study: Path, tmp_path: Path
) -> None:
    seen = _check_random_lines(study, tmp_path, ("rehearse", "compare", "scan"), 24)
    assert seen.get(0, 0) >= 2 and seen.get(2, 0) >= 6, seen  # both kinds were exercised
