"""Sector restriction and exact sector energies."""

from __future__ import annotations

import numpy as np
import pytest

from noiselab.chem.encode import encode
from noiselab.chem.exact import diagonal_values, sector_ground_energy, sector_indices, sector_mask
from noiselab.chem.molecule import MoleculeSpec, compute_problem


@pytest.fixture(scope="module")
def lih_full():
    return compute_problem(MoleculeSpec(geometry="Li 0 0 0; H 0 0 1.595"))


def test_jw_sector_is_popcount_selection(lih_full):
    qp = encode(lih_full, "jordan_wigner")
    n_orb = qp.n_orb
    idx = np.arange(2**qp.num_qubits)
    n_alpha = np.array([bin(k & ((1 << n_orb) - 1)).count("1") for k in idx])
    n_beta = np.array([bin(k >> n_orb).count("1") for k in idx])
    # Jordan-Wigner: qubit j is the occupation of spin orbital j (Jordan and Wigner 1928)
    expected = idx[(n_alpha == qp.n_alpha) & (n_beta == qp.n_beta)]
    assert np.array_equal(sector_indices(qp), expected)
    assert sector_mask(qp).sum() == len(expected)


def test_lih_full_space_sector_energy_uses_sparse_solver(lih_full):
    from pyscf import fci, gto, scf

    qp = encode(lih_full, "jordan_wigner")
    assert len(sector_indices(qp)) > 200  # beyond the dense limit: the eigsh path
    mol = gto.M(atom="Li 0 0 0; H 0 0 1.595", basis="sto-3g", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-12)
    # source: PySCF FCI, LiH/STO-3G full space (12 spin orbitals)
    assert sector_ground_energy(qp) == pytest.approx(fci.FCI(mf).kernel()[0], abs=1e-8)


def test_sector_restriction_matters_for_a_cation():
    from pyscf import fci, gto, scf

    cation = compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414", charge=1, spin=1))
    qp = encode(cation, "bravyi_kitaev")
    full_min = np.linalg.eigvalsh(qp.hamiltonian.to_matrix())[0]
    mol = gto.M(atom="H 0 0 0; H 0 0 0.7414", basis="sto-3g", verbose=0)
    e_neutral = fci.FCI(scf.RHF(mol).run()).kernel()[0]
    # source: PySCF FCI. The full-space FCI is orbital invariant, so the unrestricted minimum of
    # the cation's qubit Hamiltonian is the neutral molecule's ground state (REFERENCES.md note)
    assert full_min == pytest.approx(e_neutral, abs=1e-8)
    assert sector_ground_energy(qp) == pytest.approx(cation.exact_energy_ha, abs=1e-8)
    assert sector_ground_energy(qp) > full_min + 0.1


def test_diagonal_values_match_dense_diagonal(lih_full):
    qp = encode(lih_full, "parity", drop_fixed_parity_qubits=True)
    dense = qp.number_op.to_matrix(sparse=True).diagonal().real
    # qiskit.quantum_info SparsePauliOp.to_matrix as the reference
    assert np.allclose(diagonal_values(qp.number_op), dense)
    with pytest.raises(ValueError, match="not diagonal"):
        diagonal_values(qp.hamiltonian)
