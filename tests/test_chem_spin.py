"""S^2 as a qubit operator in every encoding, against PySCF's spin_square and s(s+1)."""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest

from noiselab.chem.encode import encode
from noiselab.chem.molecule import MoleculeSpec, compute_problem
from noiselab.chem.spin import exact_spin_squared, spin_squared_of_state, spin_squared_op

ENCODINGS = [
    ("jordan_wigner", False),
    ("parity", False),
    ("parity", True),
    ("bravyi_kitaev", False),
]


@cache
def _problem(atom: str, spin: int = 0):
    return compute_problem(MoleculeSpec(geometry=atom, spin=spin))


@cache
def _pyscf_spin_square(atom: str, spin: int) -> float:
    from pyscf import fci, gto, scf

    mol = gto.M(atom=atom, basis="sto-3g", spin=spin, verbose=0)
    mf = (scf.RHF(mol) if spin == 0 else scf.ROHF(mol)).run(conv_tol=1e-12)
    solver = fci.FCI(mf)
    _, civec = solver.kernel()
    nelec = ((mol.nelectron + spin) // 2, (mol.nelectron - spin) // 2)
    return float(fci.spin_op.spin_square(civec, mol.nao, nelec)[0])


@pytest.mark.parametrize("bond", [0.7414, 2.0])
@pytest.mark.parametrize(("encoding", "reduced"), ENCODINGS)
def test_exact_h2_ground_state_is_a_singlet(bond, encoding, reduced):
    atom = f"H 0 0 0; H 0 0 {bond}"
    qp = encode(_problem(atom), encoding, reduced)
    s2 = exact_spin_squared(qp)
    # source: PySCF fci.spin_op.spin_square of the FCI vector (0 for the H2 singlet)
    assert s2 == pytest.approx(_pyscf_spin_square(atom, 0), abs=1e-10)
    assert abs(s2) < 1e-10


@pytest.mark.parametrize(("encoding", "reduced"), ENCODINGS)
def test_open_shell_doublet_matches_pyscf(encoding, reduced):
    atom = "H 0 0 0; H 0 0 0.9; H 0 0 1.8"  # linear H3, three electrons, a doublet
    qp = encode(_problem(atom, 1), encoding, reduced)
    # source: PySCF fci.spin_op.spin_square; a doublet has s (s + 1) = 0.75 (textbook)
    s2 = exact_spin_squared(qp)
    assert s2 == pytest.approx(_pyscf_spin_square(atom, 1), abs=1e-8)
    assert s2 == pytest.approx(0.75, abs=1e-8)


@pytest.mark.parametrize(("encoding", "reduced"), ENCODINGS)
def test_spectrum_is_s_times_s_plus_one(encoding, reduced):
    qp = encode(_problem("H 0 0 0; H 0 0 0.7414"), encoding, reduced)
    op = spin_squared_op(qp)
    assert np.allclose(op.coeffs.imag, 0.0)
    values = np.linalg.eigvalsh(op.to_matrix())
    # textbook: S^2 eigenvalues are s (s + 1): 0, 3/4, 2 for up to two electrons in two orbitals
    assert all(min(abs(v - a) for a in (0.0, 0.75, 2.0)) < 1e-10 for v in values)
    if not reduced:
        # textbook counting in the 16-state Fock space of two spatial orbitals: singlets are the
        # vacuum, three two-electron states and the full shell (5); one- and three-electron
        # states are doublets (4 + 4); the two-electron triplet has 3 components
        counts = np.round(values, 8).tolist()
        assert (counts.count(0.0), counts.count(0.75), counts.count(2.0)) == (5, 8, 3)


def test_high_spin_determinant_is_a_triplet():
    qp = encode(_problem("H 0 0 0; H 0 0 0.7414"), "jordan_wigner")
    state = np.zeros(2**qp.num_qubits)
    state[0b0011] = 1.0  # both alpha spin orbitals filled (qubits 0 and 1 in Jordan-Wigner)
    # textbook: the M_s = 1 component of a triplet, s (s + 1) = 2
    assert spin_squared_of_state(qp, state) == pytest.approx(2.0, abs=1e-12)
