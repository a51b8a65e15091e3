"""The sweep job on a 2-qubit H2 study: resumable through the cache, same CSV as one go."""

from __future__ import annotations

from pathlib import Path

import pytest

from noiselab.report.tables import sweep_rows, write_csv
from noiselab.study.cache import open_cache
from noiselab.study.sweep import SweepPoint, sweep

# H2 / STO-3G, parity, fixed parity qubits dropped: 2 qubits (REFERENCES.md); invented chip
TINY_STUDY = """\
name: h2-tiny-sweep
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {kind: uccsd}
device:
  schema_version: 1
  name: tiny-test-chip
  qubit_count: 3
  links: [[0, 1], [1, 2]]
  native_gates: {single_qubit: [rz, sx, x], two_qubit: cz}
  durations: {single_qubit_ns: 35, two_qubit_ns: 300, readout_ns: 1500}
  qubits:
    default: {t1_us: 200, t2_us: 150, gate_error: 5.0e-4, flip_0to1: 0.01,
              flip_1to0: 0.02}
  couplers:
    default: {gate_error: 1.0e-2, zz_angle_rad: 0.01}
shots: 100000
seed: 3
recipes:
  raw: []
  zne:
    - {pass: extrapolate, scales: [1, 2, 3], fit: richardson}
  readout-zne:
    - {pass: readout, calibration_shots: 0}
    - {pass: extrapolate, scales: [1, 3], fit: linear}
"""

SWEEP_ARGS = {
    "knob": "two_qubit_error",
    "start": 0.005,
    "stop": 0.04,
    "points": 3,
    "log": True,
    "recipes": ["zne"],
}


@pytest.fixture(scope="module")
def study_path(tmp_path_factory: pytest.TempPathFactory) -> Path:
    p = tmp_path_factory.mktemp("study") / "h2-tiny-sweep.yaml"
    p.write_text(TINY_STUDY, encoding="utf-8")
    return p


class SimulationCounter:
    """Counts calls of the emulator (every simulation that is really run)."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch) -> None:
        import noiselab.mitigate.experiment as experiment

        self.calls = 0
        real = experiment.emulate_bases

        def counting(*args: object, **kwargs: object) -> object:
            self.calls += 1
            return real(*args, **kwargs)

        monkeypatch.setattr(experiment, "emulate_bases", counting)


def test_interrupted_sweep_resumes_without_repeating_points(
    study_path: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    counter = SimulationCounter(monkeypatch)
    # uninterrupted reference run, its own cache
    full = sweep(study_path, cache=open_cache(tmp_path / "full.sqlite"), **SWEEP_ARGS)
    per_run = counter.calls
    assert per_run == full.stats.simulations > 0
    write_csv(tmp_path / "full.csv", sweep_rows(full))

    # a run killed (Ctrl-C) after its first point
    store = open_cache(tmp_path / "resume.sqlite")
    counter.calls = 0
    done: list[int] = []

    def stop_after_first(index: int, point: SweepPoint) -> None:
        done.append(index)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(study_path, cache=store, on_point=stop_after_first, **SWEEP_ARGS)
    assert done == [0]
    first_point = counter.calls
    assert 0 < first_point < per_run

    # the restart simulates only the points not yet done ...
    counter.calls = 0
    again = sweep(study_path, cache=open_cache(tmp_path / "resume.sqlite"), **SWEEP_ARGS)
    assert counter.calls == per_run - first_point
    assert again.stats.cache_hits == first_point
    # ... and ends with the same CSV as the run that was never interrupted
    write_csv(tmp_path / "resumed.csv", sweep_rows(again))
    assert (tmp_path / "resumed.csv").read_bytes() == (tmp_path / "full.csv").read_bytes()

    # a third run is all cache
    counter.calls = 0
    sweep(study_path, cache=store, **SWEEP_ARGS)
    assert counter.calls == 0


def test_sweep_content(study_path: Path, tmp_path: Path) -> None:
    res = sweep(study_path, cache=open_cache(tmp_path / "c.sqlite"), **SWEEP_ARGS)
    assert res.recipes == ("raw", "zne")
    assert res.knob == "two_qubit_error"
    # the device's own value: the coupler default of the profile (1.0e-2)
    assert res.current_value == pytest.approx(1.0e-2)
    # channel factor = value / device value (the knob scales the device's two-qubit errors)
    for p in res.points:
        assert p.factor == pytest.approx(p.value / 1.0e-2)
    # log spacing: 0.5 %, 1.41 %, 4 %: the geometric mean in the middle (hand computation)
    assert res.values[1] == pytest.approx((0.005 * 0.04) ** 0.5)
    # the raw error grows with the two-qubit error and is above the exact energy
    # (variational principle: any state's energy is >= the ground energy; Szabo & Ostlund 1.3)
    raw, _ = res.series("raw")
    assert raw[0] < raw[1] < raw[2]
    assert all(e > 0 for e in raw)
    for p in res.points:
        e = p.entry("raw")
        assert e.error_mha == pytest.approx((e.energy_ha - res.exact_energy_ha) * 1000.0, abs=1e-9)
    assert all(c.sentence.startswith(c.recipe) for c in res.crossings)
    js = res.to_json()
    assert js["points"][0]["results"][0]["recipe"] == "raw"


def test_noise_scale_one_is_the_device(study_path: Path, tmp_path: Path) -> None:
    from noiselab.study.assess import assess

    store = open_cache(tmp_path / "c.sqlite")
    a = assess(study_path, cache=store)
    res = sweep(study_path, knob="noise_scale", values=[1.0], recipes=["raw"], cache=store)
    # a sweep point at scale 1 is the assessed experiment itself: the same simulation (read
    # from the cache) and the same energy
    assert res.stats.simulations == 0
    assert res.points[0].entry("raw").energy_ha == pytest.approx(
        a.recipes["raw"].energy_ha, abs=1e-12
    )


@pytest.mark.slow
def test_worker_processes_give_the_same_sweep(study_path: Path, tmp_path: Path) -> None:
    args = {**SWEEP_ARGS, "points": 2}
    here = sweep(study_path, cache=open_cache(tmp_path / "a.sqlite"), **args)
    pool = sweep(study_path, cache=open_cache(tmp_path / "b.sqlite"), workers=2, **args)
    assert "process pool" in pool.stats.executor
    assert pool.stats.simulations == here.stats.simulations  # run in the workers, cached here
    assert sweep_rows(pool) == sweep_rows(here)


def test_study_sweep_section_gives_the_defaults(tmp_path: Path) -> None:
    p = tmp_path / "with-sweep.yaml"
    section = (
        "sweep:\n  knob: two_qubit_error\n  start: 0.004\n  stop: 0.016\n  points: 2\n"
        "  log: true\n  recipes: [raw]\n"
    )
    p.write_text(TINY_STUDY + section, encoding="utf-8")
    res = sweep(p, cache=open_cache(tmp_path / "c.sqlite"))
    assert res.knob == "two_qubit_error" and res.log
    assert res.values == pytest.approx((0.004, 0.016))
    assert res.recipes == ("raw",)
    # the command line (here: arguments) overrides the study's section
    res2 = sweep(p, points=3, log=False, cache=open_cache(tmp_path / "c.sqlite"))
    assert res2.values == pytest.approx((0.004, 0.010, 0.016))
