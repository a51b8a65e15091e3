"""Shipped profiles and studies: found by name, listed one line each, copied into the wheel."""

from __future__ import annotations

from pathlib import Path

import pytest

from noiselab.cli.app import main
from noiselab.common.errors import InputError
from noiselab.common.shipped import looks_like_name, shipped_files, shipped_root
from noiselab.device.profile import load_profile
from noiselab.study.spec import load_study

ROOT = Path(__file__).resolve().parents[1]


def test_checkout_reads_configs_itself() -> None:
    assert shipped_root() == ROOT / "configs"
    assert [p.name for p in shipped_files("devices")] == sorted(
        p.name for p in (ROOT / "configs" / "devices").glob("*.yaml")
    )


@pytest.mark.parametrize(
    ("value", "is_name"),
    [("cobaltgrid-12", True), ("h2-stretched", True), ("../devices/a.yaml", False),
     ("a.yaml", False), ("dev/x", False), ("", False)],
)
def test_names_versus_paths(value: str, is_name: bool) -> None:
    assert looks_like_name(value) is is_name


def test_profile_by_name_equals_profile_by_path() -> None:
    by_name = load_profile("amberline-10")
    by_path = load_profile(ROOT / "configs" / "devices" / "amberline-10.yaml")
    assert by_name == by_path


def test_study_device_by_name(tmp_path: Path) -> None:
    text = (ROOT / "configs" / "studies" / "h2-equilibrium.yaml").read_text()
    assert "\ndevice: cobaltgrid-12" in text  # the shipped demo uses the name form
    path = tmp_path / "copy.yaml"
    path.write_text(text)
    study = load_study(path)  # a copy elsewhere still finds the shipped profile
    assert study.profile.name == "cobaltgrid-12"
    path.write_text(text.replace("\ndevice: cobaltgrid-12", "\ndevice: cobaltgrid-99"))
    with pytest.raises(InputError) as err:
        load_study(path)
    message = str(err.value)
    assert "\n" not in message
    assert f"{path}: device: no shipped device profile named 'cobaltgrid-99'" in message
    assert "amberline-10" in message  # lists what is allowed


def test_study_by_name() -> None:
    assert load_study("h2-stretched").name == "h2-stretched"


def test_shipped_command_lists_each_file_once(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as done:
        main(["shipped"])
    assert done.value.code == 0
    out = capsys.readouterr().out
    for kind in ("devices", "studies"):
        for path in shipped_files(kind):
            lines = [ln for ln in out.splitlines() if ln.strip().startswith(path.stem + " ")]
            assert len(lines) == 1, path.stem
            assert " qubits " in lines[0]


def test_unknown_shipped_name_is_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as done:
        main(["profile", "check", "no-such-chip"])
    assert done.value.code == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "no shipped device profile named 'no-such-chip'" in err
