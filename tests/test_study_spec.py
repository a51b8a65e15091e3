"""Study files: the shipped studies load; every malformed file gives one line and exit code 2."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from noiselab.common.errors import InputError
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.study.spec import load_study, study_from_mapping

ROOT = Path(__file__).resolve().parents[1]
BAD = ROOT / "tests" / "data" / "bad_studies"
STUDIES = ROOT / "configs" / "studies"
BAD_FILES = sorted(BAD.glob("*.yaml"))
# a few go through a real subprocess (python -m noiselab), the rest through main() in-process
SUBPROCESS_FILES = {
    "bad_profile_path.yaml",
    "unknown_pass.yaml",
    "empty.yaml",
    "too_many_qubits.yaml",
}


def _expected(path: Path) -> str:
    first = path.read_text(encoding="utf-8").splitlines()[0]
    assert first.startswith("# expect: "), f"{path.name} lacks its '# expect:' line"
    return first.removeprefix("# expect: ").strip()


def test_corpus_is_large_enough() -> None:
    assert len(BAD_FILES) >= 15


@pytest.mark.parametrize("path", BAD_FILES, ids=[p.stem for p in BAD_FILES])
def test_load_study_refuses_with_one_line(path: Path) -> None:
    with pytest.raises(InputError) as info:
        load_study(path)
    message = str(info.value)
    assert "\n" not in message
    assert str(path) in message  # the file is named
    assert _expected(path) in message  # and the key (or the YAML problem)


def _run_main(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    from noiselab.cli.app import main

    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


@pytest.mark.parametrize(
    "path",
    [p for p in BAD_FILES if p.name not in SUBPROCESS_FILES],
    ids=[p.stem for p in BAD_FILES if p.name not in SUBPROCESS_FILES],
)
def test_cli_bad_study_in_process(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, err = _run_main(["assess", str(path), "--no-cache", "--quiet"], capsys)
    assert rc == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert _expected(path) in lines[0]


@pytest.mark.parametrize("name", sorted(SUBPROCESS_FILES))
def test_cli_bad_study_subprocess(name: str, tmp_path: Path) -> None:
    path = BAD / name
    proc = subprocess.run(
        [sys.executable, "-m", "noiselab", "assess", str(path), "--cache", str(tmp_path / "c.db")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    assert lines[0].startswith("noiselab: error: ")
    assert _expected(path) in lines[0]


def test_bad_profile_path_names_the_resolved_path() -> None:
    path = BAD / "bad_profile_path.yaml"
    with pytest.raises(InputError) as info:
        load_study(path)
    resolved = (BAD / ".." / "devices" / "no-such-chip.yaml").resolve()
    assert str(resolved.relative_to(ROOT)) in str(info.value) or str(resolved) in str(info.value)


def test_too_many_qubits_names_both_counts() -> None:
    with pytest.raises(InputError) as info:
        load_study(BAD / "too_many_qubits.yaml")
    # H2/STO-3G: 2 spatial orbitals -> 4 spin orbitals -> 4 Jordan-Wigner qubits (from memory,
    # Szabo & Ostlund's minimal-basis H2); the corpus device has 3
    assert "needs 4 qubits" in str(info.value)
    assert "has 3" in str(info.value)


def test_unknown_option_cli_flag_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _run_main(["assess", "x.yaml", "--no-such-flag"], capsys)
    assert rc == 2
    assert len(err.strip().splitlines()) == 1


def test_missing_study_file_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _run_main(["assess", str(tmp_path / "nope.yaml"), "--no-cache"], capsys)
    assert rc == 2
    assert "not found" in err and "nope.yaml" in err


SHIPPED = sorted(STUDIES.glob("*.yaml"))


@pytest.mark.parametrize("path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_shipped_studies_load(path: Path) -> None:
    study = load_study(path)
    assert study.shots > 0
    assert 0 < study.confidence < 1
    assert study.recipes
    assert study.num_qubits <= study.profile.qubit_count


def test_shipped_set_has_the_three_scenarios() -> None:
    names = {p.stem for p in SHIPPED}
    assert len(names) >= 3
    demo = [p for p in SHIPPED if "demo" in p.read_text(encoding="utf-8").lower()]
    assert demo, "one shipped study must be marked as the demo"


def test_defaults_target_and_confidence() -> None:
    data = {
        "name": "t",
        "molecule": {"geometry": "H 0 0 0; H 0 0 0.74"},
        "ansatz": {"kind": "uccsd"},
        "device": str(BAD / "inline_device_invalid.yaml"),  # not loaded: path must exist only
        "shots": 1000,
        "recipes": {"raw": []},
    }
    # the device path points at a study file, not a profile: the profile layer refuses it
    with pytest.raises(InputError):
        study_from_mapping(data, BAD / "x.yaml")
    from noiselab.study.spec import StudyFile

    spec = StudyFile.model_validate(data)
    # 1 kcal/mol = 1.5936 mHa (1 Ha = 627.5095 kcal/mol, CODATA-derived; common practice)
    assert spec.target_mha == pytest.approx(1.5936, abs=1e-4)
    assert spec.target_mha == CHEMICAL_ACCURACY_MHA
    assert spec.confidence == 0.95


def test_help_lists_the_commands() -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "noiselab", "--help"], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 0
    for cmd in ("assess", "tune", "demo"):
        assert cmd in proc.stdout


@pytest.mark.parametrize("cmd", ["assess", "tune", "demo"])
def test_every_command_has_help_with_example(cmd: str) -> None:
    from typer.testing import CliRunner

    from noiselab.cli.app import _register_commands, app

    _register_commands()
    result = CliRunner().invoke(app, [cmd, "--help"])
    assert result.exit_code == 0
    assert "Example: noiselab" in result.output


def test_help_does_not_import_heavy_modules() -> None:
    code = (
        "import sys\n"
        "from noiselab.cli.app import main\n"
        "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
        "heavy = [m for m in ('qiskit', 'pyscf', 'matplotlib', 'qiskit_aer') if m in sys.modules]\n"
        "print('heavy=' + ','.join(heavy))\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert proc.stdout.strip().splitlines()[-1] == "heavy=", proc.stdout


def test_postselect_without_symmetries_is_refused_with_its_key(tmp_path: Path) -> None:
    import yaml

    from noiselab.study.assess import assess

    data = yaml.safe_load((BAD / "unknown_pass.yaml").read_text(encoding="utf-8"))
    data.update(encoding="parity", drop_fixed_parity_qubits=True)
    # the dropped qubits hold the parities post-selection would check (Bravyi et al. 2017)
    data["recipes"] = {"raw": [], "ps": [{"pass": "postselect"}]}
    path = tmp_path / "reduced.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    with pytest.raises(InputError) as info:
        assess(path, cache=False)
    assert str(path) in str(info.value) and "recipes.ps[0]" in str(info.value)


def test_main_registers_the_commands_once() -> None:
    """Repeated in-process calls reuse one command tree (no re-registration, no slow-down)."""
    import contextlib
    import io

    from noiselab.cli.app import _command, app, main

    for _ in range(3):
        with contextlib.redirect_stdout(io.StringIO()), pytest.raises(SystemExit):
            main(["--version"])
    names = [c.name for c in app.registered_commands]
    assert len(names) == len(set(names)) and "assess" in names
    assert _command() is _command()
