"""error_cancellation and distillation in the jobs: tune's grid and the error budget."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import pytest
from helpers.pass_contract import DEMO, h2_experiment

from noiselab.device.profile import load_profile
from noiselab.study.budget import budget
from noiselab.study.cache import open_cache
from noiselab.study.context import replace_experiment
from noiselab.study.spec import load_study
from noiselab.study.tune import GridOverride, applicable, grid_settings, resolve_grid, tune


def test_default_grid_holds_the_families() -> None:
    study = load_study(DEMO)
    bare = study.__class__(**{**study.__dict__, "tune": None})
    grid, _ = resolve_grid(bare, GridOverride(suppress=["none"]))
    settings, _ = grid_settings(grid)
    families = [s.options["family"] for s in settings]
    # by hand: error cancellation with 4 readout x 3 post-selection choices and no
    # extrapolation (12), distillation alone (1); the stack without a family: 156 as before plus
    # Clifford regression on the amplifier axis with each readout and post-selection choice (12)
    assert families.count("error_cancellation") == 12
    assert families.count("distillation") == 1
    assert families.count("none") == 168
    assert len(settings) == 181
    # the demo's own tune section names no family beyond none: its 81 settings as they were
    # (without suppression; tests/test_tune_suppression.py counts the suppress axis)
    own, _ = resolve_grid(study, GridOverride(suppress=["none"]))
    assert len(grid_settings(own)[0]) == 81


def test_tune_ranks_the_families(tmp_path: Path) -> None:
    grid = GridOverride(
        readout=["none", "per_qubit_inverse"],
        postselect=["none"],
        amplifier=["none"],
        family=["none", "error_cancellation", "distillation"],
        suppress=["none"],
    )
    result = tune(DEMO, grid=grid, cache=tmp_path / "t.db", reuse=False)
    # by hand: 2 plain + 2 with error cancellation + distillation; circuits: the device as it
    # is, the sign-flagged circuit (and at learning_error -+0.05 for std_learning_mha) and the
    # two-copy measurement
    assert len(result.entries) == 5
    assert result.distinct_variants == 5
    by_family = {e.setting["family"]: e for e in result.entries if e.setting["readout"] == "none"}
    pec = by_family["error_cancellation"].result
    assert next(iter(pec.details["error_cancellation"]["quasi_norm"].values())) > 1.0
    assert by_family["distillation"].label.startswith("family=distillation")
    raw = by_family["none"].result
    assert abs(pec.bias_exact_mha) < abs(raw.bias_exact_mha)


def test_families_the_experiment_refuses_are_left_out_with_a_note() -> None:
    ctx, _, _ = h2_experiment()
    small = SimpleNamespace(
        experiment=replace_experiment(ctx, profile=load_profile("tallowtrap-8"))
    )
    grid = resolve_grid(
        load_study(DEMO),
        GridOverride(
            readout=["none"],
            postselect=["none"],
            amplifier=["none"],
            family=["none", "distillation"],
            suppress=["none"],
        ),
    )[0]
    kept, notes = applicable(small, grid_settings(grid)[0])
    assert [s.options["family"] for s in kept] == ["none"]
    assert len(notes) == 1 and "distillation left out" in notes[0] and "2n + 1" in notes[0]


# H2 / STO-3G, parity, fixed parity qubits dropped: 2 qubits (REFERENCES.md); invented chip with
# five qubits on a line (two copies and the ancilla of distillation)
LINE_STUDY = """\
name: h2-line-families
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {kind: uccsd}
device:
  schema_version: 1
  name: line-five-chip
  qubit_count: 5
  links: [[0, 1], [1, 2], [2, 3], [3, 4]]
  native_gates: {single_qubit: [rz, sx, x], two_qubit: cz}
  durations: {single_qubit_ns: 35, two_qubit_ns: 300, readout_ns: 1500}
  qubits:
    default: {t1_us: 60, t2_us: 50, gate_error: 1.0e-3, flip_0to1: 0.01,
              flip_1to0: 0.03, over_rotation_fraction: 0.01}
  couplers:
    default: {gate_error: 2.0e-2, zz_angle_rad: 0.03}
shots: 50000
seed: 5
recipes:
  raw: []
  pec:
    - {pass: error_cancellation}
    - {pass: readout, method: per_qubit_inverse}
  distill:
    - {pass: distillation}
"""


@pytest.fixture(scope="module")
def line_study(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    d = tmp_path_factory.mktemp("families")
    p = d / "h2-line-families.yaml"
    p.write_text(LINE_STUDY, encoding="utf-8")
    return p, d / "cache.sqlite"


def test_budget_of_error_cancellation(line_study: tuple[Path, Path]) -> None:
    path, cache = line_study
    result = budget(path, recipe="pec", cache=open_cache(cache))
    assert result.recipes == ("raw", "pec")
    noiseless = result.row("noiseless").errors_mha[1]
    # the two-qubit gates' depolarizing error alone is Pauli noise the model learns exactly: the
    # recipe leaves the noiseless error (to 1e-8 Ha = 1e-5 mHa); the raw energy does not
    pauli = result.row("alone", "two_qubit").errors_mha
    assert abs(pauli[1] - noiseless) < 1e-5
    assert abs(pauli[0] - noiseless) > 1.0


def test_budget_of_distillation(line_study: tuple[Path, Path]) -> None:
    path, cache = line_study
    result = budget(path, recipe="distill", cache=open_cache(cache))
    # no noise anywhere (the copy circuit's included): Tr(rho^2 H)/Tr(rho^2) of a pure state is
    # its energy, the raw one
    raw, distilled = result.row("noiseless").errors_mha
    assert distilled == pytest.approx(raw, abs=1e-5)
    total = result.row("total").errors_mha
    assert abs(total[1]) < abs(total[0])
