"""Trial-state circuits: unitary coupled cluster (singles and doubles) and a layered circuit.

Both act on the logical qubits of a :class:`~noiselab.chem.encode.QubitProblem` (qubit order of
:mod:`noiselab.chem.encode`). Parameters are ``ParameterVector`` elements, so
``circuit.parameters`` is in excitation / layer order.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.circuit import ParameterVector
from qiskit.circuit.library import PauliEvolutionGate
from qiskit.quantum_info import SparsePauliOp

from noiselab.chem.encode import QubitProblem, encode_fermion_operator
from noiselab.common.errors import InputError


@dataclass(frozen=True)
class Excitation:
    """Spin-conserving excitation: electrons leave ``occupied`` spin orbitals for ``virtual``."""

    occupied: tuple[int, ...]
    virtual: tuple[int, ...]

    @property
    def label(self) -> str:
        return f"{','.join(map(str, self.occupied))}->{','.join(map(str, self.virtual))}"


def uccsd_excitations(
    n_orb: int, n_alpha: int, n_beta: int, singles: bool = True, doubles: bool = True
) -> list[Excitation]:
    """Singles then doubles (alpha-alpha, beta-beta, alpha-beta), spin orbitals in block order."""
    occ_a = list(range(n_alpha))
    vir_a = list(range(n_alpha, n_orb))
    occ_b = [n_orb + j for j in range(n_beta)]
    vir_b = [n_orb + j for j in range(n_beta, n_orb)]
    out: list[Excitation] = []
    if singles:
        for occ, vir in ((occ_a, vir_a), (occ_b, vir_b)):
            out += [Excitation((i,), (a,)) for i in occ for a in vir]
    if doubles:
        for occ, vir in ((occ_a, vir_a), (occ_b, vir_b)):
            for x, i in enumerate(occ):
                for j in occ[x + 1 :]:
                    for y, a in enumerate(vir):
                        out += [Excitation((i, j), (a, b)) for b in vir[y + 1 :]]
        for i in occ_a:
            for j in occ_b:
                for a in vir_a:
                    out += [Excitation((i, j), (a, b)) for b in vir_b]
    return out


def excitation_generator(excitation: Excitation, qubit_problem: QubitProblem) -> SparsePauliOp:
    """Hermitian ``i (T - T^dagger)`` of ``T = a+_a a+_b ... a_j a_i`` in the problem's encoding.

    ``exp(-i theta * generator) = exp(theta (T - T^dagger))``.
    """
    ops_t = [(a, True) for a in excitation.virtual] + [
        (i, False) for i in reversed(excitation.occupied)
    ]
    ops_dag = [(i, True) for i in excitation.occupied] + [
        (a, False) for a in reversed(excitation.virtual)
    ]
    return encode_fermion_operator([(1j, ops_t), (-1j, ops_dag)], qubit_problem)


def _commuting(op: SparsePauliOp) -> bool:
    paulis = op.paulis
    return all(paulis[i].commutes(paulis[j]) for i in range(len(paulis)) for j in range(i))


def hf_preparation(bitstring: Sequence[int]) -> QuantumCircuit:
    """X on every qubit that is 1 in ``bitstring`` (qubit 0 first)."""
    qc = QuantumCircuit(len(bitstring))
    for q, b in enumerate(bitstring):
        if b:
            qc.x(q)
    return qc


def uccsd_circuit(
    qubit_problem: QubitProblem, singles: bool = True, doubles: bool = True
) -> QuantumCircuit:
    """Hartree-Fock state, then one Pauli-string exponential block per excitation.

    Each excitation's generator is a sum of mutually commuting Pauli strings (checked), so its
    ``PauliEvolutionGate`` is exact; the product over excitations is the first-order Trotterized
    UCCSD. All parameters zero gives the Hartree-Fock state.
    """
    qp = qubit_problem
    excitations = uccsd_excitations(qp.n_orb, qp.n_alpha, qp.n_beta, singles, doubles)
    if not excitations:
        raise InputError("ansatz: the molecule has no excitations in this active space")
    qc = hf_preparation(qp.hf_bitstring)
    qc.name = "uccsd"
    theta = ParameterVector("t", len(excitations))
    for k, exc in enumerate(excitations):
        gen = excitation_generator(exc, qp)
        if not _commuting(gen):
            raise AssertionError(f"excitation {exc.label}: generator terms do not commute")
        gate = PauliEvolutionGate(gen, time=theta[k], label=f"exc[{exc.label}]")
        qc.append(gate, range(qp.num_qubits))
    return qc


def layered_circuit(
    num_qubits: int,
    layers: int,
    pairs: Sequence[tuple[int, int]] | None = None,
    entangler: str = "cz",
    initial_bitstring: Sequence[int] | None = None,
) -> QuantumCircuit:
    """Hardware-efficient circuit: (ry, rz on every qubit; entangler on ``pairs``) x layers, then
    a final ry, rz layer. ``pairs`` defaults to the linear chain (0,1), (1,2), ...;
    ``initial_bitstring`` (e.g. ``hf_bitstring``) prepends X gates. 2 * num_qubits * (layers + 1)
    parameters; all zero leaves the initial state unchanged.
    """
    if num_qubits < 1:
        raise InputError(f"ansatz.num_qubits: {num_qubits}; allowed: at least 1")
    if layers < 0:
        raise InputError(f"ansatz.layers: {layers}; allowed: 0 or more")
    if entangler not in ("cz", "cx"):
        raise InputError(f"ansatz.entangler: {entangler!r}; allowed: cz, cx")
    if pairs is None:
        pairs = [(q, q + 1) for q in range(num_qubits - 1)]
    pairs = [tuple(int(v) for v in p) for p in pairs]
    for p in pairs:
        if len(p) != 2 or p[0] == p[1] or not all(0 <= v < num_qubits for v in p):
            raise InputError(
                f"ansatz.pairs: {p} is not a pair of distinct qubits; "
                f"allowed: two different qubits in 0..{num_qubits - 1}"
            )
    if initial_bitstring is not None and len(initial_bitstring) != num_qubits:
        raise InputError(
            f"ansatz.initial_bitstring: length {len(initial_bitstring)}; allowed: {num_qubits}"
        )
    qc = hf_preparation(initial_bitstring or [0] * num_qubits)
    qc.name = "layered"
    theta = ParameterVector("w", 2 * num_qubits * (layers + 1))
    k = 0
    for layer in range(layers + 1):
        for q in range(num_qubits):
            qc.ry(theta[k], q)
            qc.rz(theta[k + 1], q)
            k += 2
        if layer < layers:
            for a, b in pairs:
                getattr(qc, entangler)(a, b)
    return qc


def circuit_summary(circuit: QuantumCircuit) -> dict[str, Any]:
    """Parameter count, two-qubit gate count and depth after decomposing to cx + rz, sx, x.

    Uses ``qiskit.transpile(optimization_level=1)`` without a device (all-to-all, no routing).
    """
    basic = transpile(
        circuit, basis_gates=["cx", "rz", "sx", "x"], optimization_level=1, seed_transpiler=0
    )
    ops = dict(basic.count_ops())
    two_q = sum(1 for inst in basic.data if len(inst.qubits) == 2)
    return {
        "num_qubits": int(circuit.num_qubits),
        "num_parameters": int(circuit.num_parameters),
        "two_qubit_gates": int(two_q),
        "depth": int(basic.depth()),
        "gate_counts": {str(k): int(v) for k, v in ops.items()},
    }


def random_parameters(circuit: QuantumCircuit, seed: int = 0, scale: float = np.pi) -> np.ndarray:
    """Uniform values in [-scale, scale] for every circuit parameter (reproducible)."""
    rng = np.random.default_rng(seed)
    return rng.uniform(-scale, scale, size=circuit.num_parameters)
