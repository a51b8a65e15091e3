"""The error budget on a 2-qubit H2 study: noiseless limit, channels alone and removed."""

from __future__ import annotations

from pathlib import Path

import pytest

from noiselab.study.budget import CHANNELS, BudgetResult, budget
from noiselab.study.cache import open_cache

# H2 / STO-3G, parity, fixed parity qubits dropped: 2 qubits (REFERENCES.md); invented chip
TINY_STUDY = """\
name: h2-tiny-budget
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {kind: uccsd}
device:
  schema_version: 1
  name: tiny-budget-chip
  qubit_count: 2
  links: [[0, 1]]
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
  zne:
    - {pass: extrapolate, scales: [1, 2, 3], fit: richardson}
"""


@pytest.fixture(scope="module")
def result(tmp_path_factory: pytest.TempPathFactory) -> BudgetResult:
    d = tmp_path_factory.mktemp("budget")
    p = d / "h2-tiny-budget.yaml"
    p.write_text(TINY_STUDY, encoding="utf-8")
    return budget(p, recipe="zne", cache=open_cache(d / "cache.sqlite"))


def test_rows_and_recipes(result: BudgetResult) -> None:
    assert result.recipes == ("raw", "zne")
    kinds = [(r.kind, r.channel) for r in result.rows]
    assert kinds[0] == ("total", None) and kinds[-1] == ("noiseless", None)
    assert {c for k, c in kinds if k == "alone"} == set(CHANNELS)
    assert {c for k, c in kinds if k == "removed"} == set(CHANNELS)


def test_all_channels_removed_is_the_ansatz_error(result: BudgetResult) -> None:
    # noiseless density-matrix emulation must give the noiseless optimum of the trial state,
    # computed separately by the chem layer's statevector optimizer (1e-8 Ha = 1e-5 mHa)
    ansatz_mha = (result.ansatz_energy_ha - result.exact_energy_ha) * 1000.0
    floor = result.row("noiseless")
    for e in floor.errors_mha:  # raw, and ZNE extrapolating three equal energies
        assert e == pytest.approx(ansatz_mha, abs=1e-5)
    # UCCSD is exact for two electrons (REFERENCES.md), so the ansatz error itself is tiny
    assert abs(ansatz_mha) < 1e-3


def test_channels_alone_are_consistent(result: BudgetResult) -> None:
    floor = result.row("noiseless").errors_mha[0]
    total = result.row("total").errors_mha[0]
    for c in ("relaxation", "single_qubit", "two_qubit", "coherent"):
        alone = result.row("alone", c).errors_mha[0]
        # physical noise acting on the state cannot go below the ground energy
        # (variational principle, Szabo & Ostlund sec. 1.3): error >= 0
        assert alone >= -1e-6
        # one channel alone costs no more than all channels together here (small noise)
        assert alone <= total + 1e-6
    # small, independent errors add to first order (common practice, no source): the sum of
    # the channels' separate contributions is the total's within a factor 2
    parts = sum(result.row("alone", c).errors_mha[0] - floor for c in CHANNELS)
    assert 0.5 * (total - floor) <= parts <= 2.0 * (total - floor)
    # the device as profiled is worse than with its dominant channel removed
    assert abs(result.row("removed", result.dominant).errors_mha[0]) < abs(total)
    assert result.dominant in result.sentence
    # ZNE removes most of the gate-noise error (readout is not amplified, so it stays)
    assert abs(result.row("total").errors_mha[1]) < abs(total)


def test_budget_files(result: BudgetResult, tmp_path: Path) -> None:
    from noiselab.report.outputs import write_budget_outputs

    written = write_budget_outputs(result, tmp_path)
    assert sorted(p.name for p in written) == sorted(
        ["budget.csv", "budget.json", "budget.png", "budget.svg", "budget.pdf"]
    )
    import csv

    rows = list(csv.DictReader((tmp_path / "budget.csv").open()))
    assert len(rows) == len(result.rows) * 2 and "error_mha" in rows[0]
