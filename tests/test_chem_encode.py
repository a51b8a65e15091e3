"""Fermion-to-qubit encodings: spectra against PySCF, symmetries, ladder-operator algebra."""

from __future__ import annotations

import functools
import itertools
from functools import reduce
from math import comb

import numpy as np
import pytest

from noiselab.chem import fermion
from noiselab.chem.encode import encode, encode_fermion_operator
from noiselab.chem.exact import diagonal_values, sector_ground_energy, sector_indices
from noiselab.chem.molecule import MoleculeSpec, compute_problem
from noiselab.common.errors import InputError

VARIANTS = [
    ("jordan_wigner", False),
    ("parity", False),
    ("bravyi_kitaev", False),
    ("parity", True),
]

SPECS = {
    "h2": MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414"),
    "lih_2e3o": MoleculeSpec(
        geometry="Li 0 0 0; H 0 0 1.595", active_space={"electrons": 2, "orbitals": 3}
    ),
    "h4_4e4o": MoleculeSpec(geometry="H 0 0 0; H 0 0 0.9; H 0 0 1.8; H 0 0 2.7"),
    "h2o_4e4o": MoleculeSpec(
        geometry="O 0 0 0.1173; H 0 0.7572 -0.4692; H 0 -0.7572 -0.4692",
        active_space={"electrons": 4, "orbitals": 4},
    ),
    "h3_doublet": MoleculeSpec(geometry="H 0 0 0; H 0 0 0.9; H 0 0 1.8", spin=1),
}


@pytest.fixture(scope="module")
def problems():
    return {name: compute_problem(spec) for name, spec in SPECS.items()}


@functools.cache
def _pyscf_reference(name: str) -> tuple[float, float]:
    """(HF, FCI or CASCI) energies computed with PySCF alone."""
    from pyscf import fci, gto, mcscf, scf

    spec = SPECS[name]
    mol = gto.M(
        atom=[[a[0], a[1:]] for a in spec.geometry], basis=spec.basis, spin=spec.spin, verbose=0
    )
    mf = (scf.RHF(mol) if spec.spin == 0 else scf.ROHF(mol)).run(conv_tol=1e-12)
    if spec.active_space is None:
        return mf.e_tot, fci.FCI(mf).kernel()[0]
    cas = mcscf.CASCI(mf, spec.active_space.orbitals, spec.active_space.electrons)
    return mf.e_tot, cas.kernel()[0]


@pytest.mark.parametrize("name", list(SPECS))
@pytest.mark.parametrize(("encoding", "reduced"), VARIANTS)
def test_sector_energy_and_hf_match_pyscf(problems, name, encoding, reduced):
    prob = problems[name]
    qp = encode(prob, encoding, drop_fixed_parity_qubits=reduced)
    e_hf, e_exact = _pyscf_reference(name)
    # source: PySCF FCI / mcscf.CASCI and (RO)HF on the same molecule
    assert sector_ground_energy(qp) == pytest.approx(e_exact, abs=1e-8)
    h_hf = qp.hamiltonian.to_matrix(sparse=True)[qp.hf_index, qp.hf_index]
    assert np.real(h_hf) == pytest.approx(e_hf, abs=1e-8)
    assert qp.num_qubits == 2 * prob.n_orb - (2 if reduced else 0)
    assert np.all(np.isreal(qp.hamiltonian.coeffs))


@pytest.mark.parametrize(("encoding", "reduced"), VARIANTS)
def test_number_and_sz_commute_with_h_and_fix_hf(problems, encoding, reduced):
    for name in ("h2", "h3_doublet", "lih_2e3o"):
        prob = problems[name]
        qp = encode(prob, encoding, drop_fixed_parity_qubits=reduced)
        h = qp.hamiltonian
        for op in (qp.number_op, qp.sz_op):
            # [H, O] = 0 as operators (qiskit.quantum_info algebra)
            comm = (h @ op - op @ h).simplify(atol=1e-10)
            assert np.allclose(comm.coeffs, 0.0, atol=1e-10)
        n_vals = diagonal_values(qp.number_op)
        sz_vals = diagonal_values(qp.sz_op)
        assert n_vals[qp.hf_index] == pytest.approx(prob.n_alpha + prob.n_beta)
        assert sz_vals[qp.hf_index] == pytest.approx(0.5 * (prob.n_alpha - prob.n_beta))
        # sector size is C(n_orb, N_alpha) C(n_orb, N_beta) (combinatorics, textbook)
        assert len(sector_indices(qp)) == comb(prob.n_orb, prob.n_alpha) * comb(
            prob.n_orb, prob.n_beta
        )


@pytest.mark.parametrize("encoding", ["jordan_wigner", "parity", "bravyi_kitaev"])
def test_z2_symmetries_commute_and_hold_on_hf(problems, encoding):
    qp = encode(problems["h3_doublet"], encoding)
    names = [s.name for s in qp.symmetries]
    assert names == ["number_parity", "alpha_parity", "beta_parity"]
    for sym in qp.symmetries:
        assert len(sym.pauli) == 1 and not np.any(sym.pauli.paulis.x)
        comm = (qp.hamiltonian @ sym.pauli - sym.pauli @ qp.hamiltonian).simplify(atol=1e-10)
        assert np.allclose(comm.coeffs, 0.0, atol=1e-10)
        assert diagonal_values(sym.pauli)[qp.hf_index] == sym.eigenvalue
    # H3 doublet: N = 3, N_alpha = 2, N_beta = 1 (parities -1, +1, -1)
    assert [s.eigenvalue for s in qp.symmetries] == [-1, 1, -1]


def test_reduced_parity_has_no_symmetries_left(problems):
    qp = encode(problems["h2"], "parity", drop_fixed_parity_qubits=True)
    assert qp.symmetries == ()
    assert qp.removed_qubits == (1, 3)


def test_h2_term_counts(problems):
    # H2/STO-3G: 15 Pauli terms on 4 qubits in Jordan-Wigner; 5 terms (I, Z0, Z1, Z0Z1, X0X1) on
    # 2 qubits once parity drops its two fixed qubits (from memory; common in VQE papers)
    jw = encode(problems["h2"], "jordan_wigner")
    red = encode(problems["h2"], "parity", drop_fixed_parity_qubits=True)
    assert (jw.num_qubits, len(jw.hamiltonian)) == (4, 15)
    assert (red.num_qubits, len(red.hamiltonian)) == (2, 5)
    assert sorted(red.hamiltonian.paulis.to_labels()) == ["II", "IZ", "XX", "ZI", "ZZ"]


def test_full_spectra_agree_between_encodings(problems):
    prob = problems["h3_doublet"]
    spectra = [
        np.linalg.eigvalsh(encode(prob, enc).hamiltonian.to_matrix())
        for enc in ("jordan_wigner", "parity", "bravyi_kitaev")
    ]
    # encodings are unitary changes of basis: identical spectra (numpy eigvalsh)
    assert np.allclose(spectra[0], spectra[1], atol=1e-9)
    assert np.allclose(spectra[0], spectra[2], atol=1e-9)


def _jw_ladder_dense(n: int, j: int) -> np.ndarray:
    """Independent Jordan-Wigner a_j by Kronecker products (qubit 0 least significant)."""
    z = np.diag([1.0, -1.0])
    lower = np.array([[0.0, 1.0], [0.0, 0.0]])  # |0><1|: removes an electron
    eye = np.eye(2)
    factors = [z if q < j else (lower if q == j else eye) for q in range(n)]
    # qiskit order: kron(q_{n-1}, ..., q_0)
    return reduce(np.kron, reversed(factors))


def test_jw_hopping_matches_kronecker_construction(problems):
    qp = encode(problems["h2"], "jordan_wigner")
    n = 4
    for p, q in itertools.product(range(n), repeat=2):
        op = encode_fermion_operator([(1.0, [(p, True), (q, False)])], qp, hermitian=False)
        ap = _jw_ladder_dense(n, p)
        aq = _jw_ladder_dense(n, q)
        # reference: Jordan and Wigner (1928) string construction, built here with numpy.kron
        assert np.allclose(op.to_matrix(), ap.conj().T @ aq, atol=1e-12)


@pytest.mark.parametrize("encoding", ["jordan_wigner", "parity", "bravyi_kitaev"])
@pytest.mark.parametrize("n_modes", [3, 5, 6])
def test_canonical_anticommutation(encoding, n_modes):
    table = fermion.ladder_table(encoding, n_modes)
    ops = [
        fermion.to_sparse_pauli_op(
            fermion.fermion_terms_parts(table, [(1.0, [(j, False)])]), n_modes, hermitian=False
        ).to_matrix()
        for j in range(n_modes)
    ]
    eye = np.eye(2**n_modes)
    # canonical anticommutation relations {a_i, a_j^+} = delta_ij, {a_i, a_j} = 0 (textbook)
    for i, j in itertools.product(range(n_modes), repeat=2):
        ai, aj = ops[i], ops[j]
        assert np.allclose(ai @ aj.conj().T + aj.conj().T @ ai, eye * (i == j), atol=1e-12)
        assert np.allclose(ai @ aj + aj @ ai, 0.0, atol=1e-12)
    # a_j annihilates the vacuum |0...0>, which every linear encoding maps to qubit state 0
    for a in ops:
        assert np.allclose(a[:, 0], 0.0)


def test_bravyi_kitaev_sets_for_eight_modes():
    table = fermion.ladder_table("bravyi_kitaev", 8)
    # Seeley, Richard and Love, J. Chem. Phys. 137, 224109 (2012), 8-mode example (from memory)
    expected_update = [{1, 3, 7}, {3, 7}, {3, 7}, {7}, {5, 7}, {7}, {7}, set()]
    expected_parity = [set(), {0}, {1}, {1, 2}, {3}, {3, 4}, {3, 5}, {3, 5, 6}]
    expected_flip = [set(), {0}, set(), {1, 2}, set(), {4}, set(), {3, 5, 6}]
    for j in range(8):
        assert fermion.update_set(table, j) == expected_update[j]
        assert fermion.parity_set(table, j) == expected_parity[j]
        assert fermion.flip_set(table, j) == expected_flip[j]
        assert fermion.remainder_set(table, j) == expected_parity[j] - expected_flip[j]


def test_bravyi_kitaev_truncation_is_invertible_for_any_size():
    for n in range(1, 20):
        a = fermion.encoding_matrix("bravyi_kitaev", n)
        inv = fermion.gf2_inverse(a)
        assert np.array_equal((a.astype(int) @ inv.astype(int)) % 2, np.eye(n, dtype=int))


def test_lih_full_space_term_count():
    prob = compute_problem(MoleculeSpec(geometry="Li 0 0 0; H 0 0 1.595"))
    qp = encode(prob, "bravyi_kitaev")
    # LiH/STO-3G: 12 qubits, 631 Pauli terms (from memory; common in VQE benchmarks)
    assert (qp.num_qubits, len(qp.hamiltonian)) == (12, 631)


@pytest.mark.parametrize(
    ("encoding", "reduced"), [("jordan-wigner", False), ("jordan_wigner", True), ("bk", False)]
)
def test_bad_encoding_is_input_error(problems, encoding, reduced):
    with pytest.raises(InputError) as info:
        encode(problems["h2"], encoding, drop_fixed_parity_qubits=reduced)
    msg = str(info.value)
    assert msg.startswith("encoding:") and "allowed:" in msg and "\n" not in msg
