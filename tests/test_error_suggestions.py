"""A misspelt key gets the right key suggested ("did you mean"), and the keys allowed there."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import pytest
import yaml

from noiselab.common.errors import InputError, closest_key
from noiselab.device.profile import load_profile, profile_from_mapping
from noiselab.study.spec import study_from_mapping

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
PROFILE = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"


def _demo() -> dict[str, Any]:
    data = yaml.safe_load(DEMO.read_text(encoding="utf-8"))
    data["device"] = str(PROFILE)
    return data


def _rename(d: dict[str, Any], old: str, new: str) -> None:
    d[new] = d.pop(old)


def _top(d: dict[str, Any]) -> None:
    d["target"] = 1.0  # the user meant target_mha


def _molecule(d: dict[str, Any]) -> None:
    _rename(d["molecule"], "basis", "bassis")


def _pass_option(d: dict[str, Any]) -> None:
    _rename(d["recipes"]["zne_linear"][2], "scales", "scale")


def _emulation(d: dict[str, Any]) -> None:
    d["emulation"] = {"trajectory": 100}


def _inline_device(d: dict[str, Any]) -> None:
    profile = yaml.safe_load(PROFILE.read_text(encoding="utf-8"))
    _rename(profile["qubits"]["default"], "t1_us", "T1_us")
    d["device"] = profile


def _ansatz(d: dict[str, Any]) -> None:
    d["ansatz"]["start"] = 2


CASES = [
    (_top, "target", "target_mha", "allowed: name, description, molecule"),
    (_molecule, "molecule.bassis", "basis", "allowed: geometry, basis, charge"),
    (_pass_option, "recipes.zne_linear[2].scale", "scales", "allowed: amplifier, scales, fit"),
    (_emulation, "emulation.trajectory", "trajectories", "allowed: method, trajectories"),
    (_ansatz, "ansatz.start", "starts", "allowed: kind, singles, doubles, starts"),
]


@pytest.mark.parametrize("change, key, right, allowed", CASES, ids=[c[0].__name__ for c in CASES])
def test_misspelt_key_gets_did_you_mean(change: Any, key: str, right: str, allowed: str) -> None:
    data = copy.deepcopy(_demo())
    change(data)
    with pytest.raises(InputError) as info:
        study_from_mapping(data, DEMO)
    text = str(info.value)
    assert f"{DEMO}: {key}: unknown key (did you mean `{right}`?)" in text
    assert allowed in text
    assert "\n" not in text


def test_misspelt_required_key_is_named_misspelt_not_missing() -> None:
    data = copy.deepcopy(_demo())
    _inline_device(data)
    with pytest.raises(InputError) as info:
        study_from_mapping(data, DEMO)
    text = str(info.value)
    assert "device.qubits.default.T1_us: unknown key" in text
    assert "the required key `t1_us` is missing: `T1_us` looks misspelt" in text
    assert "allowed: t1_us, t2_us, gate_error" in text
    assert "t1_us: required key is missing" not in text


def test_profile_file_misspelling() -> None:
    data = yaml.safe_load(PROFILE.read_text(encoding="utf-8"))
    _rename(data["durations"], "readout_ns", "readout_time_ns")
    with pytest.raises(InputError, match=r"durations\.readout_time_ns: unknown key.*readout_ns"):
        profile_from_mapping(data, "p.yaml")
    load_profile(PROFILE)  # the unchanged file still loads


def test_unknown_pass_and_kind_get_suggestions() -> None:
    data = copy.deepcopy(_demo())
    data["recipes"]["readout"][0]["pass"] = "readuot"
    with pytest.raises(InputError, match=r"unknown pass 'readuot' \(did you mean `readout`\?\)"):
        study_from_mapping(data, DEMO)
    data = copy.deepcopy(_demo())
    data["ansatz"]["kind"] = "uccds"
    with pytest.raises(InputError, match=r"unknown kind 'uccds' \(did you mean `uccsd`\?\)"):
        study_from_mapping(data, DEMO)


def test_no_suggestion_for_an_unrelated_key() -> None:
    data = copy.deepcopy(_demo())
    data["zzzzzz"] = 1
    with pytest.raises(InputError) as info:
        study_from_mapping(data, DEMO)
    assert "did you mean" not in str(info.value)
    assert "allowed: name, description" in str(info.value)
    assert closest_key("zzzzzz", ["target_mha", "shots"]) is None
