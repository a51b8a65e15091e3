"""``scan``: the process-pool and Dask paths give the in-process points; Hartree-Fock stability
against an independent broken-symmetry UHF; LiH in an active space against PySCF CASCI."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from pyscf import gto, mcscf, scf

from noiselab.study.scan import scan

H2 = {"bond": (0, 1), "start": 0.5, "stop": 2.5, "points": 3, "refine": 0, "recipes": ["raw"]}


def _same(a: Any, b: Any, where: str = "$") -> list[str]:
    """Differences between two JSON-like values (floats to 1e-9 relative)."""
    if isinstance(a, float) and isinstance(b, float):
        ok = math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12) or (math.isnan(a) and math.isnan(b))
        return [] if ok else [f"{where}: {a} != {b}"]
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            return [f"{where}: keys differ"]
        return [d for k in a for d in _same(a[k], b[k], f"{where}.{k}")]
    if isinstance(a, list | tuple) and isinstance(b, list | tuple):
        if len(a) != len(b):
            return [f"{where}: lengths differ"]
        return [
            d
            for i, (x, y) in enumerate(zip(a, b, strict=True))
            for d in _same(x, y, f"{where}[{i}]")
        ]
    return [] if a == b else [f"{where}: {a!r} != {b!r}"]


def _points(result) -> list[dict[str, Any]]:
    return [dataclasses.asdict(p) for p in result.points]


@pytest.fixture(scope="module")
def in_process(tmp_path_factory: pytest.TempPathFactory):
    cache = tmp_path_factory.mktemp("scan-inproc") / "cache.sqlite"
    return scan("h2-equilibrium", cache=cache, **H2)


@pytest.mark.slow
def test_process_pool_scan_equals_in_process(in_process, tmp_path: Path) -> None:
    pooled = scan("h2-equilibrium", cache=tmp_path / "cache.sqlite", workers=2, **H2)
    assert pooled.stats.executor.startswith("process pool (2 workers)")
    assert pooled.stats.simulations > 0  # the points ran in the pool, not from a cache
    assert _same(_points(in_process), _points(pooled)) == []
    assert pooled.notes == in_process.notes


@pytest.mark.cluster
def test_dask_scan_equals_in_process(in_process, tmp_path: Path) -> None:
    distributed = pytest.importorskip("distributed")
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
            silence_logs=40,
        ) as cluster,
        distributed.Client(cluster, set_as_default=False) as client,
    ):  # fmt: skip
        dasked = scan("h2-equilibrium", cache=tmp_path / "cache.sqlite", cluster=client, **H2)
    assert dasked.stats.executor.startswith("dask cluster")
    assert dasked.stats.simulations > 0
    assert _same(_points(in_process), _points(dasked)) == []


def _broken_symmetry_uhf_lower(r_angstrom: float) -> float:
    """E(RHF) - E(UHF) (Ha) for H2/STO-3G at R, the UHF started from a spin-polarized guess
    (alpha electron on atom 0, beta on atom 1): independent of PySCF's stability analysis."""
    mol = gto.M(atom=f"H 0 0 0; H 0 0 {r_angstrom}", basis="sto-3g", verbose=0)
    rhf = scf.RHF(mol)
    rhf.conv_tol = 1e-12
    rhf.kernel()
    uhf = scf.UHF(mol)
    uhf.conv_tol = 1e-12
    dm_a = np.zeros((2, 2))
    dm_b = np.zeros((2, 2))
    dm_a[0, 0] = dm_b[1, 1] = 1.0  # STO-3G: one 1s function per atom
    uhf.kernel(dm0=(dm_a, dm_b))
    return float(rhf.e_tot - uhf.e_tot)


def test_hartree_fock_stability_flags_and_warning(in_process) -> None:
    # source: the RHF -> UHF (Coulson-Fischer) instability of stretched H2, e.g. Szabo and
    # Ostlund sec. 3.8.7 (from memory); checked here by an independent broken-symmetry UHF
    for p in in_process.points:
        lower_ha = _broken_symmetry_uhf_lower(p.coordinate)
        assert p.hf_stable == (lower_ha < 1e-6), (p.coordinate, lower_ha)
    stable = [p.hf_stable for p in in_process.points]
    assert stable == [True, False, False]  # 0.5 and 1.5, 2.5 Angstrom (instability near 1.2)
    assert "RHF unstable towards UHF" in in_process.points[-1].hf_instability
    notes = [n for n in in_process.notes if "Hartree-Fock changes character" in n]
    assert len(notes) == 1 and "between 0.5 and 1.5" in notes[0]


def _pyscf_casci_lih(r_angstrom: float) -> tuple[float, float]:
    """(CASCI(2e, 3o), RHF) energy of LiH/STO-3G at R, computed here with PySCF alone: the
    default CASCI orbitals are the canonical RHF orbitals right above the frozen core."""
    mol = gto.M(atom=f"Li 0 0 0; H 0 0 {r_angstrom}", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    mc = mcscf.CASCI(mf, 3, 2)
    mc.fcisolver.conv_tol = 1e-12
    return float(mc.kernel()[0]), float(mf.e_tot)


@pytest.mark.slow
def test_lih_active_space_scan_equals_pyscf_casci(tmp_path: Path) -> None:
    result = scan(
        "lih-active-space", cache=tmp_path / "cache.sqlite", bond=(0, 1), start=1.2, stop=3.0,
        points=3, refine=0, recipes=["raw"],
    )  # fmt: skip
    assert result.coordinates == (1.2, 2.1, 3.0)
    for p in result.points:
        e_cas, e_hf = _pyscf_casci_lih(p.coordinate)
        assert p.exact_energy_ha == pytest.approx(e_cas, abs=1e-8)  # source: PySCF CASCI
        assert p.hf_energy_ha == pytest.approx(e_hf, abs=1e-8)  # source: PySCF RHF
