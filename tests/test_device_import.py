"""Calibration tables -> device profile: shipped tables, medians, the drift block, bad tables."""

from __future__ import annotations

import math
import os
import re
from pathlib import Path

import pytest

from noiselab.common.errors import InputError
from noiselab.device.caltable import read_calibration_table
from noiselab.device.profile import load_profile, profile_warnings
from noiselab.device.profile_import import profile_from_tables

ROOT = Path(__file__).resolve().parents[1]
SHIPPED = sorted((ROOT / "configs" / "calibration").glob("lanternfield-5-day*"))
BAD = sorted((ROOT / "tests" / "data" / "bad_calibration").iterdir())

QHEAD = (
    "qubit,t1_us,t2_us,gate_error_prob,gate_duration_ns,flip_0to1_prob,flip_1to0_prob,"
    "readout_duration_ns"
)
PHEAD = "pair,gate_error_prob,gate_duration_ns"


def run_main(argv: list[str]) -> tuple[int, str, str]:
    from tests.test_hardening import run_main as run

    return run(argv)


def expectation(path: Path) -> str:
    """The '# expect:' line of a CSV/text file, or the 'expect:' note of a JSON file."""
    m = re.search(r"expect: ([^\"\n]*)", path.read_text(encoding="utf-8"))
    assert m, f"{path.name} lacks its expect text"
    return m.group(1).strip()


def write_day(path: Path, qubit_rows: list[list[float]], pair_rows: list[tuple[str, float, float]]):
    lines = [QHEAD] + [
        ",".join(repr(v) if isinstance(v, float) else str(v) for v in r) for r in qubit_rows
    ]
    lines += ["", PHEAD] + [f"{p},{e!r},{d}" for p, e, d in pair_rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


# ---- shipped example tables ------------------------------------------------------------------


def test_shipped_tables_import(tmp_path: Path) -> None:
    assert len(SHIPPED) == 3 and {p.suffix for p in SHIPPED} == {".csv", ".json"}
    out = tmp_path / "lanternfield-5.yaml"
    code, stdout, err = run_main(["profile", "import", *map(str, SHIPPED), "--to", str(out)])
    assert code == 0, err
    assert "wrote" in stdout and "t1_rel_std" in stdout and "relative std." in stdout
    assert "optimistic" in stdout  # what the tables could not fill, said so
    p = load_profile(out)
    assert p.name == "lanternfield-5" and p.qubit_count == 5 and len(p.pairs()) == 4
    assert profile_warnings(p) == []
    # medians worked by hand from the three tables (day 2 in percent, day 3's T1 in ms)
    assert p.qubit(0).t1_us == 112.0  # median of 112.0, 98.0, 120.5
    assert p.qubit(3).t2_us == 43.75  # day 2 empty: median of 40.5 and 47.0
    assert p.qubit(1).gate_error == 3.4e-4  # median of 3.4e-4, 3.0e-4 (0.030 %), 3.8e-4
    assert p.pair_error(2, 3) == 1.35e-2  # median of 1.35e-2, 1.62e-2, 1.21e-2
    assert p.durations.single_qubit_ns == 40.0 and p.durations.two_qubit_ns == 320.0
    code, stdout, _ = run_main(["profile", "check", str(out)])
    assert code == 0 and "0 warning(s)" in stdout


def test_units_are_converted_exactly(tmp_path: Path) -> None:
    """The same values in percent / ms / us give the same profile as in probability / us / ns."""
    rows = [
        [0, 100.0, 80.0, 3e-4, 35, 0.012, 0.025, 1200],
        [1, 90.0, 70.0, 4e-4, 35, 0.02, 0.03, 1200],
    ]
    a = write_day(tmp_path / "a.csv", rows, [("0-1", 8e-3, 300)])
    b = tmp_path / "b.csv"
    b.write_text(
        "qubit,t1_ms,t2_us,gate_error_pct,gate_duration_us,flip_0to1_pct,flip_1to0_pct,"
        "readout_duration_us\n0,0.1,80,0.03,0.035,1.2,2.5,1.2\n1,0.09,70,0.04,0.035,2,3,1.2\n\n"
        "pair,gate_error_pct,gate_duration_ns\n1-0,0.8,300\n",
        encoding="utf-8",
    )
    pa = profile_from_tables([read_calibration_table(a)], "x", "x.yaml", description="").profile
    pb = profile_from_tables([read_calibration_table(b)], "x", "x.yaml", description="").profile
    assert pa.fingerprint == pb.fingerprint


# ---- drift from several tables ------------------------------------------------------------


def test_three_tables_give_the_sample_spreads(tmp_path: Path) -> None:
    """Day values v (1 - a), v, v (1 + a): median v, sample relative std exactly a."""
    # source: definition of the sample standard deviation (n - 1 in the denominator):
    # s^2 = ((a v)^2 + 0 + (a v)^2) / 2 = (a v)^2, mean v, so s / mean = a; pooled over
    # elements with equally many days: root mean square of the a (pooled variance, textbook)
    t1 = [100.0, 80.0, 120.0]
    a_t1 = [0.10, 0.20, 0.30]
    a_t2 = [0.05, 0.05, 0.05]
    a_1q = [0.25, 0.15, 0.35]
    a_01 = [0.10, 0.10, 0.10]
    a_10 = [0.20, 0.20, 0.20]
    a_2q = [0.12, 0.30]
    days = []
    for d, sign in enumerate((-1.0, 0.0, 1.0)):
        qrows = [
            [
                q,
                t1[q] * (1 + sign * a_t1[q]),
                0.8 * t1[q] * (1 + sign * a_t2[q]),
                3e-4 * (1 + sign * a_1q[q]),
                35,
                0.01 * (1 + sign * a_01[q]),
                0.02 * (1 + sign * a_10[q]),
                1200,
            ]
            for q in range(3)
        ]
        prows = [
            ("0-1", 8e-3 * (1 + sign * a_2q[0]), 300),
            ("1-2", 1e-2 * (1 + sign * a_2q[1]), 300),
        ]
        days.append(write_day(tmp_path / f"day{d}.csv", qrows, prows))
    imported = profile_from_tables([read_calibration_table(p) for p in days], "x", "x.yaml")

    def rms(values: list[float]) -> float:
        return math.sqrt(sum(v * v for v in values) / len(values))

    drift = imported.profile.drift
    assert drift.t1_rel_std == pytest.approx(rms(a_t1), rel=1e-12, abs=0)
    assert drift.t2_rel_std == pytest.approx(rms(a_t2), rel=1e-12, abs=0)
    assert drift.single_qubit_error_rel_std == pytest.approx(rms(a_1q), rel=1e-12, abs=0)
    assert drift.two_qubit_error_rel_std == pytest.approx(rms(a_2q), rel=1e-12, abs=0)
    assert drift.readout_error_rel_std == pytest.approx(rms(a_01 + a_10), rel=1e-12, abs=0)
    assert [imported.profile.qubit(q).t1_us for q in range(3)] == t1  # the middle day
    # the written file carries the same block
    out = tmp_path / "x.yaml"
    out.write_text(imported.text, encoding="utf-8")
    assert load_profile(out).drift == drift


def test_one_table_keeps_the_default_spreads(tmp_path: Path) -> None:
    day = write_day(tmp_path / "d.csv", [[0, 100.0, 80.0, 3e-4, 35, 0.01, 0.02, 1200]], [])
    imported = profile_from_tables([read_calibration_table(day)], "x", "x.yaml")
    assert "drift" not in imported.mapping and imported.drift == ()
    assert any("one table" in n for n in imported.notes)


def test_missing_values_are_filled_with_the_worst_and_reported(tmp_path: Path) -> None:
    rows = [
        [0, 100.0, 80.0, 3e-4, 35, 0.01, 0.02, 1200],
        [1, "", 70.0, 5e-4, 35, 0.01, 0.02, 1200],
        [2, 60.0, 50.0, 4e-4, 35, 0.01, 0.02, 1200],
    ]
    day = write_day(tmp_path / "d.csv", rows, [("0-1", 8e-3, 300), ("1-2", 9e-3, 300)])
    imported = profile_from_tables([read_calibration_table(day)], "x", "x.yaml")
    assert imported.profile.qubit(1).t1_us == 60.0  # the shortest T1 measured on the device
    assert any("qubit 1: t1 empty" in n for n in imported.notes)


def test_tables_of_different_devices_are_refused(tmp_path: Path) -> None:
    rows = [
        [0, 100.0, 80.0, 3e-4, 35, 0.01, 0.02, 1200],
        [1, 90.0, 70.0, 5e-4, 35, 0.01, 0.02, 1200],
    ]
    a = write_day(tmp_path / "a.csv", rows, [("0-1", 8e-3, 300)])
    b = write_day(
        tmp_path / "b.csv",
        [*rows, [2, 90.0, 70.0, 0.0005, 35, 0.01, 0.02, 1200]],
        [("0-1", 8e-3, 300), ("1-2", 8e-3, 300)],
    )
    code, _, err = run_main(
        ["profile", "import", str(a), str(b), "--to", str(tmp_path / "o.yaml")]
    )
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert "b.csv: qubits: differ from" in err and "extra: 2" in err
    assert not (tmp_path / "o.yaml").exists()


def test_out_must_be_a_yaml_file(tmp_path: Path) -> None:
    code, _, err = run_main(["profile", "import", str(SHIPPED[0]), "--to", str(tmp_path)])
    assert code == 2 and "--to" in err and len(err.strip().splitlines()) == 1


# ---- malformed tables: one line naming row and column, exit 2, nothing written -----------------


@pytest.mark.parametrize("path", BAD, ids=lambda p: p.name)
def test_bad_table_refused_in_one_line(path: Path, tmp_path: Path) -> None:
    out = tmp_path / "never.yaml"
    code, stdout, err = run_main(["profile", "import", str(path), "--to", str(out)])
    lines = err.strip().splitlines()
    assert code == 2, err
    assert len(lines) == 1 and "Traceback" not in err and "internal error" not in err
    assert lines[0].startswith(f"noiselab: error: {path}"), lines[0]
    assert expectation(path) in lines[0]
    assert not out.exists() and stdout == ""


def test_bad_table_api_raises_input_error() -> None:
    with pytest.raises(InputError, match=r"line 4, column gate_error_prob"):
        read_calibration_table(ROOT / "tests" / "data" / "bad_calibration" / "nan_value.csv")


def test_a_named_pipe_is_refused_without_blocking(tmp_path: Path) -> None:
    """Tables are read through common.reading.read_input_bytes: special files are refused."""
    fifo = tmp_path / "day.csv"
    os.mkfifo(fifo)
    code, _, err = run_main(["profile", "import", str(fifo), "--to", str(tmp_path / "o.yaml")])
    assert code == 2 and "named pipe" in err and len(err.strip().splitlines()) == 1
