"""Device drift: drawn profiles (log-normal factors) and assess --drift over the drawn days."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from noiselab.device.drift import draw_profiles, lognormal_factors
from noiselab.device.profile import load_profile, profile_from_mapping
from noiselab.study.spec import study_from_mapping

ROOT = Path(__file__).resolve().parents[1]
H2 = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
COBALT = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"
SPREADS = (
    "t1_rel_std",
    "t2_rel_std",
    "single_qubit_error_rel_std",
    "two_qubit_error_rel_std",
    "readout_error_rel_std",
)


def _profile_data(**drift: float) -> dict:
    data = yaml.safe_load(COBALT.read_text(encoding="utf-8"))
    if drift:
        data["drift"] = drift
    return data


@pytest.mark.parametrize("sigma", [0.1, 0.3])
def test_lognormal_factors_have_mean_one_and_the_relative_std(sigma):
    f = lognormal_factors(np.random.default_rng(4), sigma, 400_000)
    # textbook log-normal moments: mean exp(mu + s^2/2) = 1, relative std sqrt(exp(s^2) - 1)
    assert f.mean() == pytest.approx(1.0, abs=4 * sigma / math.sqrt(len(f)) + 1e-3)
    assert f.std() / f.mean() == pytest.approx(sigma, rel=0.02)
    assert np.all(f > 0)
    assert np.all(lognormal_factors(np.random.default_rng(4), 0.0, 10) == 1.0)


def test_zero_drift_draws_equal_the_nominal_profile():
    zero = profile_from_mapping(_profile_data(**dict.fromkeys(SPREADS, 0.0)), "zero.yaml")
    for p in draw_profiles(zero, 4, 7):
        assert p.fingerprint == zero.fingerprint
        assert p == zero


def test_drawn_profiles_stay_physical_and_reproducible():
    nominal = load_profile(COBALT)
    assert nominal.drift.t1_rel_std == 0.2  # the documented default
    days = draw_profiles(nominal, 20, 3)
    again = draw_profiles(nominal, 20, 3)
    assert [d.fingerprint for d in days] == [d.fingerprint for d in again]
    assert len({d.fingerprint for d in days}) == 20
    t1 = []
    for d in days:
        for q in range(d.qubit_count):
            rq = d.qubit(q)
            # Nielsen & Chuang sec. 8.3: T2 <= 2 T1
            assert rq.t2_us <= 2 * rq.t1_us * (1 + 1e-12)
            assert 0 < rq.gate_error <= 0.5 and 0 <= rq.flip_1to0 <= 0.5
            t1.append(rq.t1_us / nominal.qubit(q).t1_us)
        assert d.qubit(0).over_rotation_fraction == nominal.qubit(0).over_rotation_fraction
        assert d.pair(0, 1).zz_angle_rad == nominal.pair(0, 1).zz_angle_rad
    # 240 log-normal factors of relative std 0.2 (textbook moments, loose bounds)
    assert np.mean(t1) == pytest.approx(1.0, abs=0.05)
    assert np.std(t1) == pytest.approx(0.2, abs=0.05)


def _study(device: dict | str):
    data = yaml.safe_load(H2.read_text(encoding="utf-8"))
    data["recipes"] = {
        "raw": [],
        "readout": [{"pass": "readout", "method": "per_qubit_inverse"}],
    }
    data.pop("tune", None)
    data.pop("sweep", None)
    data["compile"] = {"bias_spread": False}
    data["device"] = device
    return study_from_mapping(data, H2)


def test_zero_drift_every_day_equals_nominal(tmp_path):
    from noiselab.study.assess import assess

    study = _study(_profile_data(**dict.fromkeys(SPREADS, 0.0)))
    res = assess(study, cache=tmp_path / "c.db", drift=3)
    for name, r in res.recipes.items():
        d = res.drift[name]
        assert d.draws == 3
        # the days are simulated together with their noise written into the circuits
        # (emulate.batch.emulate_written): equal to the nominal noise-model run to rounding
        assert d.biases_mha == pytest.approx((float(r.bias_exact_mha),) * 3, rel=0, abs=1e-9)
        assert d.p_within_target_mean == pytest.approx(float(r.p_within_target), abs=1e-12)
        assert d.fraction_reaching == float(r.p_within_target >= study.confidence)
    assert "of 3 drawn days" in res.verdict


def test_drift_json_table_figure(tmp_path, capsys):
    from noiselab.cli.app import main

    path = tmp_path / "study.yaml"
    data = yaml.safe_load(H2.read_text(encoding="utf-8"))
    data["recipes"] = {"raw": [], "readout": data["recipes"]["readout"]}
    data.pop("tune", None)
    data.pop("sweep", None)
    data["device"] = str(COBALT)
    data["compile"] = {"bias_spread": False}
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    out = tmp_path / "out"
    argv = ["assess", str(path), "--drift", "4", "--cache", str(tmp_path / "c.db")]
    with pytest.raises(SystemExit) as info:
        main([*argv, "--json", "--out", str(out)])
    assert info.value.code in (0, None)
    doc = json.loads(capsys.readouterr().out)
    for entry in doc["recipes"].values():
        d = entry["drift"]
        assert set(d) == {
            "draws",
            "p_within_target_mean",
            "fraction_reaching",
            "bias_mha_p05",
            "bias_mha_p95",
        }
        assert d["draws"] == 4 and d["bias_mha_p05"] <= d["bias_mha_p95"]
        assert 0.0 <= d["fraction_reaching"] <= 1.0
    raw = doc["recipes"]["raw"]["drift"]
    assert raw["bias_mha_p05"] < raw["bias_mha_p95"]  # drifting noise moves the raw bias
    assert "drawn days" in doc["verdict"]
    assert (out / "assess-drift.png").stat().st_size > 0
    with pytest.raises(SystemExit):
        main([*argv, "-q"])  # the table: read back from the cache
    text = capsys.readouterr().out
    assert "drift days reaching" in text and "/4 " in text


def test_batched_days_equal_day_by_day_simulation(tmp_path, monkeypatch):
    """The drawn days simulated together (noise written into the circuits, one qiskit-aer call)
    give the biases of simulating each day on its own through the noise model and the cache,
    stretched variants and readout calibration included."""
    import noiselab.study.drift as drift_mod
    from noiselab.emulate.engine import engine_call_count
    from noiselab.study.assess import assess

    study = _study(str(COBALT))
    recipes = {
        "readout": [{"pass": "readout", "method": "per_qubit_inverse"}],
        "zne": [
            {"pass": "readout", "method": "per_qubit_inverse"},
            {"pass": "extrapolate", "amplifier": "stretch", "scales": [1, 3], "fit": "linear"},
        ],
    }
    study = dataclasses.replace(study, recipes=recipes)
    calls = engine_call_count()
    batched = assess(study, cache=False, drift=3)
    batched_calls = engine_call_count() - calls
    monkeypatch.setattr(drift_mod, "batched_days", lambda *args: None)
    calls = engine_call_count()
    alone = assess(study, cache=False, drift=3)
    assert engine_call_count() - calls == batched_calls - 1 + 3 * 2  # 2 variants x 3 days
    for name in recipes:
        a, b = batched.drift[name], alone.drift[name]
        assert a.biases_mha == pytest.approx(b.biases_mha, rel=0, abs=1e-9)
        assert a.p_within_target_mean == pytest.approx(b.p_within_target_mean, abs=1e-12)
        assert len(set(a.biases_mha)) == 3  # the days differ
