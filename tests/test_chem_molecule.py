"""MoleculeSpec validation and PySCF-derived electronic problems."""

from __future__ import annotations

import numpy as np
import pytest

from noiselab.chem.molecule import MoleculeSpec, compute_problem, molecule_from_mapping
from noiselab.common.errors import InputError


@pytest.fixture(scope="module")
def h2_textbook():
    # R = 1.4 bohr = 0.7408 Angstrom, the Szabo-Ostlund geometry
    return compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7408"))


def test_h2_textbook_energies(h2_textbook):
    # source: Szabo and Ostlund, Modern Quantum Chemistry, H2/STO-3G at 1.4 bohr (from memory):
    # E(RHF) about -1.117 Ha, E(FCI) about -1.137 Ha
    assert h2_textbook.hf_energy_ha == pytest.approx(-1.117, abs=1e-3)
    assert h2_textbook.exact_energy_ha == pytest.approx(-1.137, abs=1e-3)
    assert (h2_textbook.n_orb, h2_textbook.n_alpha, h2_textbook.n_beta) == (2, 1, 1)
    assert h2_textbook.exact_s2 == pytest.approx(0.0, abs=1e-8)


def test_h2_full_space_matches_pyscf_fci(h2_textbook):
    from pyscf import fci, gto, scf

    mol = gto.M(atom="H 0 0 0; H 0 0 0.7408", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    e_fci = fci.FCI(mf).kernel()[0]
    # source: PySCF FCI and RHF, computed independently of noiselab's integrals
    assert h2_textbook.exact_energy_ha == pytest.approx(e_fci, abs=1e-8)
    assert h2_textbook.hf_energy_ha == pytest.approx(mf.e_tot, abs=1e-8)
    assert h2_textbook.nuclear_repulsion_ha == pytest.approx(mol.energy_nuc(), abs=1e-12)


def test_lih_active_space_matches_pyscf_casci():
    spec = MoleculeSpec(
        geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 3}
    )
    prob = compute_problem(spec)
    from pyscf import gto, mcscf, scf

    mol = gto.M(atom="Li 0 0 0; H 0 0 1.595", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    e_cas = mcscf.CASCI(mf, 3, 2).kernel()[0]
    # source: PySCF mcscf.CASCI (2 electrons in 3 orbitals above the frozen Li 1s)
    assert prob.exact_energy_ha == pytest.approx(e_cas, abs=1e-8)
    assert prob.hf_energy_ha == pytest.approx(mf.e_tot, abs=1e-8)
    assert (prob.n_orb, prob.n_alpha, prob.n_beta, prob.n_core_orbitals) == (3, 1, 1, 1)
    assert prob.h2.shape == (3, 3, 3, 3)
    # chemists' notation (pq|rs) has the 8-fold permutational symmetry (common practice, no source)
    assert np.allclose(prob.h2, prob.h2.transpose(1, 0, 2, 3))
    assert np.allclose(prob.h2, prob.h2.transpose(2, 3, 0, 1))


def test_open_shell_li_atom_matches_pyscf_rohf_fci():
    prob = compute_problem(MoleculeSpec(geometry="Li 0 0 0", spin=1))
    from pyscf import fci, gto, scf

    mol = gto.M(atom="Li 0 0 0", basis="sto-3g", spin=1, verbose=0)
    mf = scf.ROHF(mol).run(conv_tol=1e-12)
    solver = fci.FCI(mf)
    e_fci = solver.kernel()[0]
    # source: PySCF ROHF and FCI (doublet, Sz = 1/2)
    assert prob.exact_energy_ha == pytest.approx(e_fci, abs=1e-8)
    assert prob.hf_energy_ha == pytest.approx(mf.e_tot, abs=1e-8)
    assert (prob.n_alpha, prob.n_beta) == (2, 1)
    # doublet: S(S+1) = 3/4 (textbook spin algebra)
    assert prob.exact_s2 == pytest.approx(0.75, abs=1e-6)


def test_geometry_forms_are_equivalent():
    a = MoleculeSpec(geometry="H 0 0 0; H 0 0 0.74")
    b = MoleculeSpec(geometry=[["h", 0, 0, 0], ["H", 0.0, 0.0, 0.74]])
    assert a == b


@pytest.mark.parametrize(
    ("data", "key"),
    [
        ({"geometry": "Xq 0 0 0; H 0 0 0.74"}, "molecule.geometry"),
        ({"geometry": "H 0 0 0; H 0 0 0.74", "basis": "no-such-basis"}, "molecule.basis"),
        (
            {"geometry": "H 0 0 0; H 0 0 0.74", "active_space": {"electrons": 2, "orbitals": 3}},
            "molecule.active_space",
        ),
        (
            {"geometry": "Li 0 0 0; H 0 0 1.6", "active_space": {"electrons": 6, "orbitals": 2}},
            "molecule.active_space",
        ),
        (
            {"geometry": "Li 0 0 0; H 0 0 1.6", "active_space": {"electrons": 3, "orbitals": 3}},
            "molecule.active_space",
        ),
        ({"geometry": "H 0 0 0; H 0 0 0.74; H 0 0 1.5"}, "molecule.spin"),
        ({"geometry": "H 0 0 0; H 0 0 0.74", "charge": 1}, "molecule.spin"),
        ({"geometry": "H 0 0 0; H 0 0 0.74", "spin": -2}, "molecule.spin"),
        ({"geometry": "H 0 0 0; H 0 0 0.74", "colour": "red"}, "molecule.colour"),
        ({"geometry": [["H", 0, 0]]}, "molecule.geometry"),
    ],
)
def test_bad_molecule_is_one_line_input_error(data, key):
    with pytest.raises(InputError) as info:
        molecule_from_mapping(data, "study.yaml", prefix="molecule")
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"study.yaml: {key}:")


def test_too_large_exact_problem_is_refused_before_scf():
    from noiselab.common.errors import ProblemTooLargeError

    spec = MoleculeSpec(
        geometry="O 0 0 0.1173; H 0 0.7572 -0.4692; H 0 -0.7572 -0.4692", basis="cc-pvdz"
    )
    # 24 orbitals, 5 alpha + 5 beta: C(24, 5)^2 = 1.8e9 determinants (combinatorics)
    with pytest.raises(ProblemTooLargeError) as info:
        compute_problem(spec)
    assert str(info.value).startswith("molecule.active_space:") and "allowed:" in str(info.value)


def test_count_orbitals():
    from noiselab.chem.molecule import count_orbitals

    # STO-3G: one function per H, five per Li (1s 2s 2p) (common practice, no source)
    assert count_orbitals(MoleculeSpec(geometry="Li 0 0 0; H 0 0 1.6")) == 6
    spec = MoleculeSpec(
        geometry="Li 0 0 0; H 0 0 1.6", active_space={"electrons": 2, "orbitals": 3}
    )
    assert count_orbitals(spec) == 3
