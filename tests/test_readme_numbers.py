"""The numbers README.md quotes from the shipped studies agree with their current outputs.

The outputs are the golden JSON files (tests/golden/, recomputed and compared by
test_golden.py), so no study runs here: when a change moves a golden number, this test names
the README passage to update. A number is compared at the precision the README shows it.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest

from noiselab.common.yamlio import parse_yaml_mapping
from noiselab.study.crossings import BISECTION_REL_TOL

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
PROSE = " ".join(README.split())  # line breaks of the prose do not matter
GOLDEN = ROOT / "tests" / "golden"


def _golden(name: str) -> dict[str, Any]:
    return json.loads((GOLDEN / f"{name}.json").read_text(encoding="utf-8"))


DEMO = _golden("assess-h2-equilibrium")
STRETCHED = _golden("assess-h2-stretched")
LIH = _golden("assess-lih-active-space")
TUNE = _golden("tune-h2-equilibrium")
SWEEP = _golden("sweep-h2-equilibrium-two_qubit_error")


def shown(text: str, value: float) -> None:
    """``text`` (a number as the README prints it) is ``value`` rounded to its digits."""
    text = text.strip()
    digits = len(text.split(".")[1]) if "." in text else 0
    sign = "+" if text.startswith("+") else ""
    assert f"{value:{sign}.{digits}f}" == text, (text, value)


def _find(pattern: str) -> re.Match[str]:
    match = re.search(pattern, PROSE)
    assert match is not None, f"README no longer says: {pattern}"
    return match


def _tour_block() -> list[str]:
    start = README.index("$ noiselab demo\n")
    return README[start : README.index("```", start)].splitlines()[1:]


def test_tour_header_lines() -> None:
    study, energies = _tour_block()[0], _tour_block()[1]
    c = DEMO["compiled"]
    m = re.search(r"(\d+) qubits .*patch (\[[\d, ]+\]), (\d+) two-qubit gates, ([\d.]+) us", study)
    assert m is not None
    assert int(m[1]) == DEMO["qubits"] and json.loads(m[2]) == c["patch"]
    assert int(m[3]) == c["two_qubit_count"]
    shown(m[4], c["duration_ns"] / 1000.0)
    assert f"{DEMO['n_parameters']} parameters" in study and DEMO["device"] in study
    m = re.search(r"exact (\S+) .*Hartree-Fock (\S+), noiseless ansatz (\S+)", energies)
    assert m is not None
    shown(m[1], DEMO["exact_energy"])
    shown(m[2], DEMO["hartree_fock_energy"])
    shown(m[3], DEMO["ansatz_energy"])


def test_tour_table_rows() -> None:
    rows = [line for line in _tour_block() if line.startswith("| ") and "recipe" not in line]
    assert sorted(r.split("|")[1].strip() for r in rows) == sorted(DEMO["recipes"])
    for row in rows:
        cells = [c.strip() for c in row.strip().strip("|").split("|")]
        r = DEMO["recipes"][cells[0]]
        shown(cells[1], r["energy"])
        shown(cells[2], r["bias_mha"])
        shown(cells[3], r["bias_spread_mha"])
        shown(cells[4], r["std_mha"])
        shown(cells[5], r["p_within_target"])
        assert cells[6] == ("never" if r["shots_needed"] is None else cells[6])
        assert cells[7] == r["limited_by"]
        shown(cells[8], r["device_hours"])


def test_tour_verdict_is_the_golden_one() -> None:
    verdict = next(line for line in _tour_block() if line.startswith("Verdict:"))
    assert verdict == DEMO["verdict"]


def test_demo_prose() -> None:
    lin, rich = DEMO["recipes"]["zne_linear"], DEMO["recipes"]["zne_richardson"]
    shown(_find(r"leaves a bias of (\S+) mHa")[1], lin["bias_mha"])
    shown(
        _find(r"that alone puts (\S+) mHa into its error bar")[1],
        lin["details"]["std_amplification_mha"],
    )
    m = _find(
        r"Richardson extrapolation, more sensitive to the scales, gets (\S+) mHa from it "
        r"\(error bar (\S+) mHa\)"
    )
    shown(m[1], rich["details"]["std_amplification_mha"])
    shown(m[2], rich["std_mha"])
    m = _find(r"The demo's 4e6 shots cost (\S+) h raw and (\S+) h with `zne_linear`")
    shown(m[1], DEMO["recipes"]["raw"]["device_hours"])
    shown(m[2], lin["device_hours"])
    # the bond length the README gives for the demo study is the study's
    study = parse_yaml_mapping(
        (ROOT / "configs" / "studies" / "h2-equilibrium.yaml").read_text(encoding="utf-8"), "demo"
    )
    bond = study["molecule"]["geometry"].split(";")[1].split()[3]
    assert _find(r"not the demo study's (\S+?);")[1] == bond


def test_cancellation_table_rows_that_are_study_recipes() -> None:
    table = README[README.index("| recipe | bias (mHa) | std. error (mHa) | P(within") :]
    for label, name in (
        ("raw", "raw"),
        ("readout + post-selection", "readout_postselect"),
        ("zne_linear (readout, verify, stretch 1, 3, 5)", "zne_linear"),
    ):
        row = next(line for line in table.splitlines() if line.startswith(f"| {label} |"))
        cells = [c.strip() for c in row.strip().strip("|").split("|")]
        r = DEMO["recipes"][name]
        shown(cells[1], r["bias_mha"])
        shown(cells[2], r["std_mha"])
        shown(cells[3], r["p_within_target"])
        assert cells[4] == r["limited_by"]


def test_other_shipped_studies() -> None:
    best = STRETCHED["recipes"][STRETCHED["best_recipe"]]
    assert STRETCHED["best_recipe"] == "zne_two_qubit_gates"
    assert best["details"]["extrapolation"]["amplifier"] == "two_qubit_gates"
    m = _find(r"realize noise scales (\S+) and (\S+), not 3 and 5")
    realized = best["details"]["extrapolation"]["scales_realized"]
    shown(m[1], realized[1])
    shown(m[2], realized[2])
    shown(_find(r"keeps a bias of (\S+) mHa, out of reach")[1], best["bias_mha"])
    rich = LIH["recipes"]["zne_richardson"]
    assert LIH["best_recipe"] == "zne_richardson"
    m = _find(
        r"gets the bias down to (\S+) mHa \(Richardson\), but the 2 % amplification "
        r"uncertainty alone puts (\S+) mHa into its error bar \(probability (\S+)\)"
    )
    shown(m[1], rich["bias_mha"])
    shown(m[2], rich["details"]["std_amplification_mha"])
    shown(m[3], rich["p_within_target"])


def test_tune_prose() -> None:
    m = _find(r"the demo's (\d+) settings need (\d+) distinct simulations")
    assert int(m[1]) == TUNE["settings"] and int(m[2]) == TUNE["distinct_variants"]
    first = TUNE["ranking"][0]
    assert (
        first["setting"]
        == "readout=per_qubit_inverse post=verify zne=two_qubit_gates[1,2,3]/linear"
    )
    m = _find(
        r"the closest is linear extrapolation over two-qubit-gate folding 1, 2, 3 with "
        r"verification \((\S+) mHa, probability (\S+)\)"
    )
    shown(m[1], first["bias_mha"])
    shown(m[2], first["p_within_target"])


def test_sweep_prose() -> None:
    shown(_find(r"\(the chip is at (\S+) %\)")[1], 100 * SWEEP["current_value"])
    quoted = float(_find(r"within the target while the two-qubit gate error is below (\S+) %")[1])
    crossing = next(c for c in SWEEP["crossings"] if c["recipe"] == "zne_linear")
    (golden,) = crossing["bias_crossings"]
    # the README's sweep has 7 points, the golden one 3: both bisect to BISECTION_REL_TOL
    assert quoted / 100 == pytest.approx(golden, rel=BISECTION_REL_TOL)
