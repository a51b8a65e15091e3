"""Device hours of ``assess`` (its budget): shots x (schedule + readout + repetition delay),
calibration shots, one overhead per circuit; folded and stretched variants at their own length."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from noiselab.cli.app import main
from noiselab.study.assess import assess
from noiselab.study.spec import load_study, study_from_mapping

FOLD = [{"pass": "extrapolate", "amplifier": "two_qubit_gates", "scales": [1, 3], "fit": "linear"}]


@pytest.fixture(scope="module")
def assessed(tmp_path_factory: pytest.TempPathFactory):
    base = load_study("h2-equilibrium")
    data = dict(base.raw)
    data["recipes"] = {**data["recipes"], "fold": FOLD}
    study = study_from_mapping(data, base.source)
    cache = tmp_path_factory.mktemp("hours") / "cache.sqlite"
    return study, assess(study, cache=cache)


def _hand_hours(study, result, name: str, durations_ns: dict[str, float]) -> float:
    # the stated rule, written out from the profile's fields: every shot costs its circuit's
    # schedule + readout + repetition delay; a calibration shot one 1q gate + readout + delay;
    # 0.05 s per distinct circuit (common practice, no source: the rule's own definition)
    prof = study.profile
    delay_ns = (prof.repetition_delay_us or 250.0) * 1000.0
    r = result.recipes[name]
    ns = sum(
        n * (durations_ns[key.rsplit("|", 1)[0]] + prof.durations.readout_ns + delay_ns)
        for key, n in r.shots_per_circuit.items()
    )
    cal = r.details.get("calibration_shots_total", 0)
    ns += cal * (prof.durations.single_qubit_ns + prof.durations.readout_ns + delay_ns)
    return (ns * 1e-9 + r.n_circuits * 0.05) / 3600.0


def test_assess_device_hours_follow_the_stated_rule(assessed) -> None:
    study, result = assessed
    base_ns = result.context.duration_ns
    for name in ("raw", "readout", "readout_postselect"):
        assert result.device_hours[name] == pytest.approx(
            _hand_hours(study, result, name, {"base": base_ns}), rel=1e-12
        )
    # stretched pulses take longer: the variant at scale c lasts c times the base schedule
    zne = result.recipes["zne_linear"]
    labels = {k.rsplit("|", 1)[0] for k in zne.shots_per_circuit}
    stretch = {v.label: v.scale for v in zne.variants}
    assert len(labels) == 3
    durations = {lab: base_ns * stretch[lab] for lab in labels}
    assert result.device_hours["zne_linear"] == pytest.approx(
        _hand_hours(study, result, "zne_linear", durations), rel=1e-12
    )
    # a folded variant lasts longer than the base circuit (its re-scheduled duration)
    fold_hours = result.device_hours["fold"]
    base_only = _hand_hours(
        study,
        result,
        "fold",
        {k.rsplit("|", 1)[0]: base_ns for k in result.recipes["fold"].shots_per_circuit},
    )
    assert fold_hours > base_only
    # 4e6 shots at >= 250 us each are at least 0.28 h (the repetition delay alone)
    assert all(h >= 4e6 * 250e-6 / 3600 for h in result.device_hours.values())


def test_assess_json_and_table_carry_device_hours(tmp_path: Path, capsys) -> None:
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as info:
        main(["assess", "h2-equilibrium", "--cache", str(tmp_path / "c.sqlite"), "-q",
              "--out", str(out)])  # fmt: skip
    assert info.value.code in (0, None)
    printed = capsys.readouterr().out
    assert "device hours (h)" in printed
    data = json.loads((out / "assess.json").read_text())
    assert data["device_time"]["repetition_delay_us"] > 0
    assert all(r["device_hours"] > 0 for r in data["recipes"].values())
    assert "device_hours" in (out / "assess.csv").read_text().splitlines()[0]
