"""``noiselab sweep`` / ``noiselab budget`` on the command line: exit codes, one-line errors."""

from __future__ import annotations

from pathlib import Path

import pytest

from noiselab.cli.app import main

# H2 / STO-3G, parity, fixed parity qubits dropped: 2 qubits (REFERENCES.md); invented chip
TINY_STUDY = """\
name: h2-tiny-cli
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {kind: uccsd}
device:
  schema_version: 1
  name: tiny-cli-chip
  qubit_count: 2
  links: [[0, 1]]
  native_gates: {single_qubit: [rz, sx, x], two_qubit: cz}
  durations: {single_qubit_ns: 35, two_qubit_ns: 300, readout_ns: 1500}
  qubits:
    default: {t1_us: 150, t2_us: 120, gate_error: 3.0e-4, flip_0to1: 0.005,
              flip_1to0: 0.01}
  couplers:
    default: {gate_error: 1.0e-2}
shots: 100000
seed: 2
recipes:
  raw: []
  zne:
    - {pass: readout, calibration_shots: 0}
    - {pass: extrapolate, scales: [1, 2, 3], fit: richardson}
"""


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    p = tmp_path_factory.mktemp("cli") / "h2-tiny-cli.yaml"
    p.write_text(TINY_STUDY, encoding="utf-8")
    return p


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


@pytest.mark.parametrize(
    ("extra", "needle"),
    [
        (["--knob", "gate-fidelity"], "--knob"),  # not a knob
        # a negative error; an error above 1; a readout worse than a coin toss
        (["--knob", "two_qubit_error", "--start", "-0.01", "--stop", "0.02"], "--start"),
        (["--knob", "single_qubit_error", "--start", "0.001", "--stop", "1.5"], "--stop"),
        (["--knob", "readout_error", "--start", "0.01", "--stop", "0.6"], "--stop"),
        (["--knob", "coherence_us", "--start", "0", "--stop", "100"], "--start"),  # zero T1
        (["--knob", "noise_scale", "--start", "0", "--stop", "2", "--log"], "--start"),  # log of 0
        (["--knob", "noise_scale", "--points", "1"], "--points"),
        (["--knob", "noise_scale", "--recipes", "nonesuch"], "--recipes"),
    ],
)
def test_bad_sweep_input_exits_2_with_one_line(
    study: Path, tmp_path: Path, extra: list[str], needle: str, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, out, err = _run(["sweep", str(study), "--no-cache", "--quiet", *extra], capsys)
    assert rc == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("noiselab: error:") and needle in lines[0]


def test_bad_budget_recipe_and_missing_study(
    study: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, _, err = _run(["budget", str(study), "--no-cache", "--recipe", "nonesuch"], capsys)
    assert rc == 2 and "nonesuch" in err and len(err.strip().splitlines()) == 1
    rc, _, err = _run(["sweep", str(tmp_path / "missing.yaml"), "--knob", "noise_scale"], capsys)
    assert rc == 2 and "not found" in err


def test_sweep_writes_files_and_states_the_crossing(
    study: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out_dir = tmp_path / "out"
    argv = ["sweep", str(study), "--cache", str(tmp_path / "c.sqlite"), "--quiet"]
    argv += ["--knob", "two_qubit_error", "--start", "0.005", "--stop", "0.05", "--points", "3"]
    argv += ["--log", "--out", str(out_dir)]
    rc, out, err = _run(argv, capsys)
    assert rc == 0, err
    assert "two-qubit gate error (%)" in out  # the table header, with its unit
    assert "raw " in out and "zne " in out
    sentences = [line for line in out.splitlines() if "chemical accuracy" in line]
    assert any(line.startswith("zne ") for line in sentences)
    stem = "sweep-two_qubit_error"
    for ext in ("csv", "json", "svg", "pdf", "png"):
        assert (out_dir / f"{stem}.{ext}").is_file()
