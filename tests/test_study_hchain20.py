"""The 20-qubit benchmark study (benchmarks/studies/hchain-20-pauli.yaml): its exact energy."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.sparse.linalg as spla

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "benchmarks" / "studies" / "hchain-20-pauli.yaml"


@pytest.mark.slow
def test_exact_energy_is_pyscf_fci_and_the_qubit_hamiltonians_ground_state() -> None:
    from pyscf import fci, gto, scf

    from noiselab.chem.exact import sector_indices
    from noiselab.chem.pauli_sparse import pauli_sparse
    from noiselab.chem.sources import build_problem
    from noiselab.study.spec import load_study

    study = load_study(STUDY)
    assert study.num_qubits == 20
    _, qp = build_problem(study.molecule, study.encoding, study.drop_fixed_parity_qubits)
    # source: PySCF FCI, run here directly on the geometry of the study file (RHF orbitals,
    # fci.FCI), independent of noiselab's chemistry layer
    geometry = "; ".join(f"H 0 0 {1.8 * i:.2f}" for i in range(10))
    mol = gto.M(atom=geometry, basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol).run()
    e_fci = float(fci.FCI(mf).kernel()[0])
    assert abs(qp.exact_energy_ha - e_fci) < 1e-8
    # and the 20-qubit Jordan-Wigner Hamiltonian's lowest eigenvalue in the (5, 5) sector
    # (its block built on the sector's rows only; scipy eigsh) is that energy
    idx = sector_indices(qp)
    assert len(idx) == 252**2  # C(10,5)**2 determinants (textbook count)
    block = pauli_sparse(qp.hamiltonian, rows=idx).matrix
    lowest = float(spla.eigsh(block, k=1, which="SA", tol=1e-12)[0][0])
    assert abs(lowest - e_fci) < 1e-8
    assert np.isclose(qp.hf_energy_ha, float(mf.e_tot), atol=1e-8)
