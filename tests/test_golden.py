"""Golden JSON: assess on the shipped studies, tune on the demo and one sweep give what they gave.

The files in ``tests/golden/`` were written by ``tests/golden/make_golden.py`` from the code of
their commit; this test recomputes them with that script in a fresh process (fixed seeds, one
thread, an isolated temporary results cache) and compares: structure, strings, integers and
booleans exactly, floats to 1e-9 relative (1e-10 absolute for values that are differences near
zero, e.g. an ansatz error of 1e-13 mHa).

To regenerate deliberately, only when a change of values is intended, run from the repository
root

    PYTHONPATH=$PWD python tests/golden/make_golden.py

and commit the new files with a commit message that states why the values changed.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

GOLDEN_DIR = Path(__file__).resolve().parent / "golden"
REL_TOL = 1e-9
ABS_TOL = 1e-10


def differences(expected: Any, actual: Any, where: str = "$") -> list[str]:
    """Every place where ``actual`` departs from ``expected`` (empty when they agree)."""
    if isinstance(expected, bool) or isinstance(actual, bool) or expected is None:
        return [] if expected is actual else [f"{where}: {expected!r} != {actual!r}"]
    if isinstance(expected, int | float) and isinstance(actual, int | float):
        if isinstance(expected, int) and isinstance(actual, int):
            return [] if expected == actual else [f"{where}: {expected} != {actual}"]
        if math.isclose(expected, actual, rel_tol=REL_TOL, abs_tol=ABS_TOL):
            return []
        return [f"{where}: {expected!r} != {actual!r}"]
    if isinstance(expected, dict) and isinstance(actual, dict):
        if set(expected) != set(actual):
            return [f"{where}: keys {sorted(expected)} != {sorted(actual)}"]
        return [d for k in expected for d in differences(expected[k], actual[k], f"{where}.{k}")]
    if isinstance(expected, list) and isinstance(actual, list):
        if len(expected) != len(actual):
            return [f"{where}: length {len(expected)} != {len(actual)}"]
        return [
            d
            for i, (e, a) in enumerate(zip(expected, actual, strict=True))
            for d in differences(e, a, f"{where}[{i}]")
        ]
    return [] if expected == actual else [f"{where}: {expected!r} != {actual!r}"]


def test_differences_sees_a_change() -> None:
    """The comparison itself: equal within tolerance passes, anything else is reported."""
    base = {"a": [1.0, 2, "x", None, True], "b": {"c": 0.5}}
    assert differences(base, {"a": [1.0 + 1e-12, 2, "x", None, True], "b": {"c": 0.5}}) == []
    assert differences(base, {"a": [1.0 + 1e-6, 2, "x", None, True], "b": {"c": 0.5}})
    assert differences(base, {"a": [1.0, 3, "x", None, True], "b": {"c": 0.5}})
    assert differences(base, {"a": [1.0, 2, "y", None, True], "b": {"c": 0.5}})
    assert differences(base, {"a": [1.0, 2, "x", None, False], "b": {"c": 0.5}})
    assert differences(base, {"a": [1.0, 2, "x", None, True], "b": {"d": 0.5}})
    assert differences(base, {"a": [1.0, 2, "x", None], "b": {"c": 0.5}})


@pytest.mark.slow
def test_jobs_match_golden_json(tmp_path: Path) -> None:
    # a fresh process: the script pins the thread count, which must happen before numpy loads
    script = GOLDEN_DIR / "make_golden.py"
    run = subprocess.run(
        [sys.executable, str(script), "--out", str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    stored = sorted(p.name for p in GOLDEN_DIR.glob("*.json"))
    computed = sorted(p.name for p in tmp_path.glob("*.json"))
    assert computed == stored, "golden files and computed jobs differ in name"
    problems: list[str] = []
    for name in stored:
        expected = json.loads((GOLDEN_DIR / name).read_text())
        actual = json.loads((tmp_path / name).read_text())
        problems += [f"{name} {d}" for d in differences(expected, actual)]
    assert not problems, "\n".join(problems[:40])
