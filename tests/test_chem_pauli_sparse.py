"""Block-built sparse matrices of Pauli sums (noiselab.chem.pauli_sparse) and the 20-qubit
noiseless optimizer path that uses them."""

from __future__ import annotations

import numpy as np
import pytest
from qiskit.quantum_info import SparsePauliOp, Statevector, random_pauli_list

from noiselab.chem import pauli_sparse as ps
from noiselab.common.errors import ProblemTooLargeError


def _operator(n: int, terms: int, real: bool, seed: int) -> SparsePauliOp:
    paulis = random_pauli_list(n, terms, seed=seed, phase=False)
    coeffs = np.random.default_rng(seed).normal(size=terms)
    op = SparsePauliOp(paulis, coeffs)
    if real:  # even number of Y: a real matrix (the chemistry case)
        keep = [i for i, lab in enumerate(paulis.to_labels()) if lab.count("Y") % 2 == 0]
        op = op[keep]
    return op


@pytest.mark.parametrize("real", [True, False])
@pytest.mark.parametrize("n", [3, 7, 12])
def test_matrix_equals_qiskit(n: int, real: bool) -> None:
    op = _operator(n, 80, real, seed=n)
    # source: qiskit.quantum_info SparsePauliOp.to_matrix (independent construction)
    ref = op.to_matrix(sparse=True).toarray()
    got = ps.pauli_sparse(op)
    assert got.matrix.dtype == (np.float64 if real else np.complex128)
    assert np.max(np.abs(got.matrix.toarray() - ref)) < 1e-12
    psi = np.random.default_rng(1).normal(size=2**n) + 1j * np.random.default_rng(2).normal(
        size=2**n
    )
    assert np.max(np.abs(got @ psi - ref @ psi)) < 1e-11
    rows = np.sort(np.random.default_rng(3).choice(2**n, size=2 ** (n - 1), replace=False))
    block = ps.pauli_sparse(op, rows=rows).matrix.toarray()
    assert np.max(np.abs(block - ref[np.ix_(rows, rows)])) < 1e-12


def test_operator_matrix_keeps_qiskit_below_the_threshold() -> None:
    op = _operator(6, 40, True, seed=4)
    small = ps.operator_matrix(op)
    # below MASK_BUILD_FROM_QUBITS the matrix is qiskit's own, bit for bit
    assert (small != op.to_matrix(sparse=True).tocsr()).nnz == 0
    assert ps.MASK_BUILD_FROM_QUBITS > 16  # every shipped and golden study keeps qiskit's


def test_memory_bound_refuses_while_building() -> None:
    op = _operator(10, 60, True, seed=5)
    with pytest.raises(ProblemTooLargeError, match="memory budget"):
        ps.pauli_sparse(op, max_bytes=1000)


def test_statevector_expectation_with_block_matrix() -> None:
    # source: qiskit.quantum_info.Statevector.expectation_value
    from qiskit.circuit.random import random_circuit

    from noiselab.chem.statevector import compile_statevector

    n = 6
    op = _operator(n, 50, True, seed=6)
    circuit = random_circuit(n, 4, seed=7)
    ref = float(np.real(Statevector(circuit).expectation_value(op)))
    got = compile_statevector(circuit).expectation(ps.pauli_sparse(op))
    assert abs(got - ref) < 1e-10


def test_optimizer_results_do_not_depend_on_the_matrix_path(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # the same optimization with qiskit's matrix and with the block-built one (forced below 17
    # qubits) agrees to 1e-9 Ha and in its S^2: the 20-qubit path changes nothing but memory
    from noiselab.chem.ansatz import layered_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.chem.optimize import optimize_noiseless
    from noiselab.chem.spin import exact_spin_squared

    spec = molecule_from_mapping({"geometry": "H 0 0 0; H 0 0 0.9; H 0 0 1.8; H 0 0 2.7"})
    qp = encode(compute_problem(spec), "jordan_wigner")
    circuit = layered_circuit(qp.num_qubits, 1, initial_bitstring=list(qp.hf_bitstring))
    kw = {"starts": 1, "max_starts": 1, "max_iterations": 15}
    before = optimize_noiseless(qp, circuit, **kw)
    s2_before = exact_spin_squared(qp)
    monkeypatch.setattr(ps, "MASK_BUILD_FROM_QUBITS", 1)
    after = optimize_noiseless(qp, circuit, **kw)
    assert abs(after.energy_ha - before.energy_ha) < 1e-9
    assert np.max(np.abs(after.parameters - before.parameters)) < 1e-6
    assert abs(after.spin_squared - before.spin_squared) < 1e-9
    assert abs(exact_spin_squared(qp) - s2_before) < 1e-9


def test_preflight_bounds_the_stored_matrix() -> None:
    # the study's preflight estimate of the block-built Hamiltonian is at least what the builder
    # really stores (8-qubit H4 chain: Jordan-Wigner full space, parity with two qubits dropped)
    from math import comb

    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.chem.sources import source_sizes
    from noiselab.study.preflight import _masked_build

    spec = molecule_from_mapping({"geometry": "H 0 0 0; H 0 0 1.1; H 0 0 2.2; H 0 0 3.3"})
    problem = compute_problem(spec)
    for encoding, drop in (("jordan_wigner", False), ("parity", True)):
        qp = encode(problem, encoding, drop)
        q = qp.num_qubits
        nnz, nbytes = _masked_build(source_sizes(spec), q, 1 + comb(8, 2) + comb(8, 4))
        stored = ps.pauli_sparse(qp.hamiltonian)
        assert stored.matrix.nnz <= nnz, encoding
        assert stored.nbytes <= nbytes, encoding
