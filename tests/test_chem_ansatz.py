"""Trial circuits and the compiled statevector engine against qiskit.quantum_info."""

from __future__ import annotations

import numpy as np
import pytest
from qiskit import QuantumCircuit
from qiskit.circuit import Parameter
from qiskit.quantum_info import Statevector

from noiselab.chem.ansatz import (
    circuit_summary,
    layered_circuit,
    uccsd_circuit,
    uccsd_excitations,
)
from noiselab.chem.encode import encode
from noiselab.chem.molecule import MoleculeSpec, compute_problem
from noiselab.chem.statevector import compile_statevector
from noiselab.common.errors import InputError

# qiskit's Statevector of a PauliEvolutionGate goes through scipy's sparse expm, which warns
pytestmark = pytest.mark.filterwarnings("ignore::scipy.sparse.SparseEfficiencyWarning")

VARIANTS = [
    ("jordan_wigner", False),
    ("parity", False),
    ("bravyi_kitaev", False),
    ("parity", True),
]


@pytest.fixture(scope="module")
def h3():
    return compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.9; H 0 0 1.8", spin=1))


@pytest.fixture(scope="module")
def h2():
    return compute_problem(MoleculeSpec(geometry="H 0 0 0; H 0 0 0.7414"))


def test_excitation_counts():
    # H2 minimal basis: 2 singles and 1 double (common practice, no source)
    assert len(uccsd_excitations(2, 1, 1)) == 3
    # 4 spatial orbitals, 2 alpha + 2 beta: singles 2*(2*2)=8; doubles aa 1, bb 1, ab 4*4=16
    assert len(uccsd_excitations(4, 2, 2)) == 8 + 1 + 1 + 16


@pytest.mark.parametrize(("encoding", "reduced"), VARIANTS)
def test_uccsd_state_matches_qiskit_statevector(h3, encoding, reduced):
    qp = encode(h3, encoding, drop_fixed_parity_qubits=reduced)
    qc = uccsd_circuit(qp)
    theta = np.random.default_rng(7).normal(scale=0.4, size=qc.num_parameters)
    ours = compile_statevector(qc).state(theta)
    ref = Statevector(qc.assign_parameters(theta)).data
    # reference: qiskit.quantum_info.Statevector of the same circuit (up to a global phase)
    assert abs(np.vdot(ref, ours)) == pytest.approx(1.0, abs=1e-10)
    # zero parameters: the Hartree-Fock basis state
    hf = compile_statevector(qc).state(np.zeros(qc.num_parameters))
    assert abs(hf[qp.hf_index]) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize(("encoding", "reduced"), VARIANTS)
def test_uccsd_conserves_number_and_sz(h3, encoding, reduced):
    qp = encode(h3, encoding, drop_fixed_parity_qubits=reduced)
    qc = uccsd_circuit(qp)
    psi = compile_statevector(qc).state(np.linspace(-0.7, 0.9, qc.num_parameters))
    sv = Statevector(psi)
    # expectation values with qiskit.quantum_info
    assert sv.expectation_value(qp.number_op).real == pytest.approx(3.0, abs=1e-10)
    assert sv.expectation_value(qp.sz_op).real == pytest.approx(0.5, abs=1e-10)


def test_gradient_matches_central_differences(h3):
    qp = encode(h3, "bravyi_kitaev")
    for qc in (
        uccsd_circuit(qp),
        layered_circuit(qp.num_qubits, 2, initial_bitstring=qp.hf_bitstring),
    ):
        prog = compile_statevector(qc)
        h = qp.hamiltonian.to_matrix(sparse=True)
        theta = np.random.default_rng(3).normal(scale=0.5, size=qc.num_parameters)
        energy, grad = prog.expectation_and_gradient(h, theta)
        step = 1e-5
        fd = np.array(
            [
                (prog.expectation(h, theta + step * e) - prog.expectation(h, theta - step * e))
                / (2 * step)
                for e in np.eye(len(theta))
            ]
        )
        # central finite differences (common practice, no source)
        assert np.allclose(grad, fd, atol=1e-7)
        ref = Statevector(qc.assign_parameters(theta)).expectation_value(qp.hamiltonian).real
        assert energy == pytest.approx(ref, abs=1e-10)  # qiskit.quantum_info reference


def test_engine_handles_mixed_gates():
    a, b = Parameter("a"), Parameter("b")
    qc = QuantumCircuit(3)
    qc.h(0)
    qc.cx(0, 2)
    qc.rx(2 * a + 0.3, 1)
    qc.rzz(b, 0, 1)
    qc.u(a, b, 0.2, 2)
    qc.cp(0.7, 2, 1)
    qc.ryy(-a, 1, 2)
    qc.barrier()
    qc.p(b, 0)
    theta = np.array([0.37, -1.1])
    ours = compile_statevector(qc).state(theta)
    ref = Statevector(qc.assign_parameters(theta)).data
    # reference: qiskit.quantum_info.Statevector
    assert abs(np.vdot(ref, ours)) == pytest.approx(1.0, abs=1e-10)


def test_layered_circuit_structure():
    qc = layered_circuit(4, 3, pairs=[(0, 1), (1, 2), (2, 3), (3, 0)], entangler="cx")
    summary = circuit_summary(qc)
    # 2 rotations per qubit per layer, layers + 1 rotation layers (by construction of the ansatz)
    assert summary["num_parameters"] == 2 * 4 * (3 + 1)
    assert summary["two_qubit_gates"] == 3 * 4
    assert qc.count_ops()["cx"] == 12


def test_uccsd_summary_counts_cnots(h2):
    qp = encode(h2, "parity", drop_fixed_parity_qubits=True)
    summary = circuit_summary(uccsd_circuit(qp))
    assert summary["num_parameters"] == 3
    assert summary["num_qubits"] == 2
    assert summary["gate_counts"].get("cx", 0) == summary["two_qubit_gates"] > 0


@pytest.mark.parametrize(
    "kwargs",
    [
        {"num_qubits": 3, "layers": 1, "pairs": [(0, 3)]},
        {"num_qubits": 3, "layers": 1, "pairs": [(1, 1)]},
        {"num_qubits": 3, "layers": -1},
        {"num_qubits": 3, "layers": 1, "entangler": "swap"},
        {"num_qubits": 3, "layers": 1, "initial_bitstring": (1, 0)},
    ],
)
def test_layered_bad_input(kwargs):
    with pytest.raises(InputError) as info:
        layered_circuit(**kwargs)
    assert str(info.value).startswith("ansatz.") and "allowed:" in str(info.value)
