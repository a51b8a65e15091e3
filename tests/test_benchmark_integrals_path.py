"""The Pauli benchmark's integrals-only chemistry (no FCI) against compute_problem + encode."""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "pauli_propagation.py"


def _bench():
    spec = importlib.util.spec_from_file_location("bench_pauli_propagation", BENCH)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.parametrize("atoms", [2, 3, 4])
def test_integrals_path_equals_compute_problem(atoms: int) -> None:
    # H3 runs with charge +1 (the benchmark's odd-electron handling)
    assert _bench().check_integrals_path(atoms, atol=1e-10) <= 1e-10


def test_integrals_path_has_no_exact_energy() -> None:
    bench = _bench()
    problem = bench.integrals_problem(bench._chain_spec(4))
    assert math.isnan(problem.exact_energy_ha) and math.isnan(problem.exact_s2)
    assert problem.n_orb == 4 and problem.n_alpha == problem.n_beta == 2
