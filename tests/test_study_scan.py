"""``scan``: exact energies against PySCF FCI, fitted equilibria, resume, geometry moves."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from pyscf import fci, gto, scf
from scipy.optimize import minimize_scalar

from noiselab.cli.app import main
from noiselab.common.errors import InputError
from noiselab.study.scan import ScanAxis, geometry_at, moving_atoms, scan

OPTIONS = {"bond": (0, 1), "start": 0.5, "stop": 2.5, "points": 5, "refine": 2, "recipes": ["raw"]}


def _pyscf_h2(r_angstrom: float) -> tuple[float, float]:
    """(FCI, RHF) energy of H2/STO-3G at R, computed here independently of noiselab."""
    mol = gto.M(atom=f"H 0 0 0; H 0 0 {r_angstrom}", basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    return float(fci.FCI(mf).kernel()[0]), float(mf.e_tot)


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory):
    folder = tmp_path_factory.mktemp("scan")
    return scan("h2-equilibrium", cache=folder / "cache.sqlite", **OPTIONS), folder


def test_exact_energies_equal_pyscf_fci_at_every_point(run) -> None:
    result, _ = run
    assert len(result.points) >= 5
    assert result.coordinates[0] == 0.5 and result.coordinates[-1] == 2.5
    for p in result.points:
        e_fci, e_hf = _pyscf_h2(p.coordinate)
        assert p.exact_energy_ha == pytest.approx(e_fci, abs=1e-8)  # source: PySCF FCI
        assert p.hf_energy_ha == pytest.approx(e_hf, abs=1e-8)  # source: PySCF RHF


def test_fitted_equilibria_match_independent_minima(run) -> None:
    result, _ = run
    # source: PySCF FCI minimized with scipy's bounded minimize_scalar (REFERENCES.md: ~0.7349)
    r_fci = minimize_scalar(lambda r: _pyscf_h2(r)[0], bounds=(0.6, 0.9), method="bounded",
                            options={"xatol": 1e-6}).x  # fmt: skip
    assert result.fit("exact").equilibrium == pytest.approx(r_fci, abs=0.005)
    # source: Szabo and Ostlund, RHF/STO-3G R_e = 1.346 bohr = 0.712 Angstrom (from memory)
    assert result.fit("hartree_fock").equilibrium == pytest.approx(0.712, abs=0.005)
    # curvature of the exact curve: finite-difference second derivative of PySCF FCI
    h = 0.01
    e0, ep, em = (_pyscf_h2(r_fci + d)[0] for d in (0.0, h, -h))
    assert result.fit("exact").curvature_ha == pytest.approx((ep - 2 * e0 + em) / h**2, rel=0.05)
    raw = result.fit("raw")
    assert raw.difference_std_mha > 0
    assert raw.difference_error_mha == pytest.approx(
        raw.difference_mha - result.fit("exact").difference_mha
    )


def test_every_point_but_the_first_is_warm_started(run) -> None:
    result, _ = run
    starts = [p.warm_start_from for p in result.points]
    assert sum(s is None for s in starts) == 1
    assert all(s is None or s in result.coordinates for s in starts)


def test_interrupted_scan_resumes_and_writes_identical_outputs(run, tmp_path: Path) -> None:
    full, _ = run
    cache = tmp_path / "cache.sqlite"
    seen: list[float] = []

    class StopScanError(Exception):
        pass

    def stop_after_two(point) -> None:
        seen.append(point.coordinate)
        if len(seen) == 2:
            raise StopScanError

    with pytest.raises(StopScanError):
        scan("h2-equilibrium", cache=cache, on_point=stop_after_two, **OPTIONS)
    resumed = scan("h2-equilibrium", cache=cache, **OPTIONS)
    assert resumed.stats.cache_hits >= 2
    assert json.dumps(resumed.to_json()) == json.dumps(full.to_json())
    again = scan("h2-equilibrium", cache=cache, **OPTIONS)
    assert again.stats.simulations == 0
    assert json.dumps(again.to_json()) == json.dumps(full.to_json())


def test_bond_moves_only_the_far_side() -> None:
    # water-like: cutting O-H1 moves H1 alone; the O-H1 distance becomes the value
    atoms = (("O", 0.0, 0.0, 0.0), ("H", 0.96, 0.0, 0.0), ("H", -0.24, 0.93, 0.0))
    assert moving_atoms(atoms, 0, 1) == (1,)
    new = geometry_at(atoms, ScanAxis("bond", (0, 1), 0.5, 2.0, 3), 1.5)
    assert np.linalg.norm(np.subtract(new[1][1:], new[0][1:])) == pytest.approx(1.5)
    assert new[2] == atoms[2] and new[0] == atoms[0]
    scaled = geometry_at(atoms, ScanAxis("scale", None, 0.5, 2.0, 3), 2.0)
    d0 = np.linalg.norm(np.subtract(atoms[2][1:], atoms[1][1:]))
    assert np.linalg.norm(np.subtract(scaled[2][1:], scaled[1][1:])) == pytest.approx(2 * d0)


def test_bad_scan_options_are_refused_in_one_line(capsys: pytest.CaptureFixture[str]) -> None:
    # from Python the message names the argument; the command line names the option (below)
    with pytest.raises(InputError, match=r"h2-equilibrium.yaml: bond: \[0, 5\]") as refused:
        scan("h2-equilibrium", bond=(0, 5), cache=False)
    assert "--" not in str(refused.value)
    stop_first = r"scan: stop: 0.5 <= start 1.0; allowed: a value above start"
    with pytest.raises(InputError, match=stop_first):
        scan("h2-equilibrium", bond=(0, 1), start=1.0, stop=0.5, cache=False)
    with pytest.raises(SystemExit) as info:
        main(["scan", "h2-equilibrium", "--bond", "0", "7", "--no-cache", "-q"])
    err = capsys.readouterr().err
    assert info.value.code == 2 and len(err.strip().splitlines()) == 1 and "--bond" in err
