"""Noiseless optimization: UCCSD reaches the exact energy where it must; layered is variational."""

from __future__ import annotations

import numpy as np
import pytest

from noiselab.chem.ansatz import layered_circuit, uccsd_circuit
from noiselab.chem.encode import encode
from noiselab.chem.molecule import MoleculeSpec, compute_problem
from noiselab.chem.optimize import noiseless_energy, optimize_noiseless
from noiselab.common.errors import InputError


@pytest.fixture(scope="module")
def h2():
    return compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414"))


@pytest.mark.parametrize(("encoding", "reduced"), [("jordan_wigner", False), ("parity", True)])
def test_uccsd_reaches_h2_fci(h2, encoding, reduced):
    from pyscf import fci, gto, scf

    qp = encode(h2, encoding, drop_fixed_parity_qubits=reduced)
    res = optimize_noiseless(qp, uccsd_circuit(qp))
    mol = gto.M(atom="H 0 0 0; H 0 0 0.7414", basis="sto-3g", verbose=0)
    e_fci = fci.FCI(scf.RHF(mol).run(conv_tol=1e-12)).kernel()[0]
    # source: PySCF FCI; for two electrons UCCSD spans the exact ground state (REFERENCES.md)
    assert res.energy_ha == pytest.approx(e_fci, abs=1e-6)
    assert abs(res.ansatz_error_mha) < 1e-3
    assert res.converged
    assert res.parameters.shape == (3,)
    assert noiseless_energy(qp, uccsd_circuit(qp), res.parameters) == pytest.approx(res.energy_ha)


def test_uccsd_two_electron_active_space_is_exact():
    from pyscf import gto, mcscf, scf

    spec = MoleculeSpec(
        geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 3}
    )
    qp = encode(compute_problem(spec), "bravyi_kitaev")
    res = optimize_noiseless(qp, uccsd_circuit(qp), method="L-BFGS-B")
    mf = scf.RHF(gto.M(atom="Li 0 0 0; H 0 0 1.595", basis="sto-3g", verbose=0)).run()
    # source: PySCF mcscf.CASCI(2e, 3o); two active electrons: UCCSD is exact (REFERENCES.md)
    assert res.energy_ha == pytest.approx(mcscf.CASCI(mf, 3, 2).kernel()[0], abs=1e-6)


def test_layered_circuit_is_variational(h2):
    qp = encode(h2, "parity", drop_fixed_parity_qubits=True)
    h_full_min = np.linalg.eigvalsh(qp.hamiltonian.to_matrix())[0]
    # numpy eigvalsh: for H2 the neutral singlet is the lowest state of the whole qubit space,
    # so any state's energy is bounded below by the sector energy (variational principle)
    assert h_full_min == pytest.approx(h2.exact_energy_ha, abs=1e-10)
    qc = layered_circuit(qp.num_qubits, 1, initial_bitstring=qp.hf_bitstring)
    res = optimize_noiseless(qp, qc, starts=3, seed=11)
    assert qc.num_parameters == 2 * 2 * 2
    assert res.energy_ha >= h2.exact_energy_ha - 1e-9
    assert res.energy_ha <= h2.hf_energy_ha + 1e-9
    assert len(res.start_energies_ha) == 3
    assert res.energy_ha == min(res.start_energies_ha)
    again = optimize_noiseless(qp, qc, starts=3, seed=11)
    assert np.array_equal(again.parameters, res.parameters)  # deterministic for a fixed seed


def test_bad_optimizer_options(h2):
    qp = encode(h2, "jordan_wigner")
    qc = uccsd_circuit(qp)
    with pytest.raises(InputError, match=r"optimizer\.method"):
        optimize_noiseless(qp, qc, method="nelder")
    with pytest.raises(InputError, match=r"optimizer\.starts"):
        optimize_noiseless(qp, qc, starts=0)
    with pytest.raises(InputError, match=r"optimizer\.initial"):
        optimize_noiseless(qp, qc, initial=np.zeros(5))
    with pytest.raises(InputError, match="ansatz"):
        optimize_noiseless(qp, layered_circuit(3, 1))
