"""Sorted-insertion grouping of the measurement plan (the pauli_propagation method's plan)."""

from __future__ import annotations

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit.random import random_circuit
from qiskit.quantum_info import SparsePauliOp, Statevector

from noiselab.mitigate.plan import build_plan, measurable_in, sorted_insertion


def _hamiltonian() -> SparsePauliOp:
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping

    spec = molecule_from_mapping({"geometry": "H 0 0 0; H 0 0 1.0; H 0 0 2.0; H 0 0 3.0"})
    return encode(compute_problem(spec), "jordan_wigner").hamiltonian


def _qubit_wise(a: str, b: str) -> bool:
    # common practice, no source: qubit-wise commuting = on every qubit equal or one identity
    return all(x == "I" or y == "I" or x == y for x, y in zip(a, b, strict=True))


def test_groups_cover_every_term_once_and_commute_qubit_wise() -> None:
    op = _hamiltonian().simplify()
    members = sorted_insertion(op)
    flat = sorted(i for g in members for i in g)
    assert flat == list(range(len(op)))
    labels = op.paulis.to_labels()
    for g in members:
        for i in g:
            assert all(_qubit_wise(labels[i], labels[j]) for j in g)
    plan = build_plan(op, grouping="sorted_insertion")
    assert all(measurable_in(lab, g.basis) for g in plan.groups for lab in g.labels)


def test_grouped_energy_equals_statevector_expectation() -> None:
    # source: qiskit.quantum_info.Statevector (expectation value, and outcome probabilities
    # after the basis change H for X, Sdg then H for Y)
    op = _hamiltonian()
    n = op.num_qubits
    state = random_circuit(n, 5, seed=3)
    plan = build_plan(op, grouping="sorted_insertion")
    energy = plan.constant
    for g in plan.groups:
        rotate = QuantumCircuit(n)
        for q in range(n):
            letter = g.basis[n - 1 - q]
            if letter == "Y":
                rotate.sdg(q)
            if letter in "XY":
                rotate.h(q)
        probs = Statevector(state.compose(rotate)).probabilities()
        energy += float(probs @ g.weights)
    ref = float(np.real(Statevector(state).expectation_value(op)))
    assert abs(energy - ref) < 1e-10
    colouring = build_plan(op)
    assert abs(len(plan.groups) - len(colouring.groups)) <= 0.25 * len(colouring.groups)
