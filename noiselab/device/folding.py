"""Unitary folding of native, scheduled circuits (noise amplification for extrapolation).

Whole-circuit folding U -> U (U^dag U)^k L^dag L, with L the last s gates (partial folding for
scales that are not odd integers), and two-qubit-gate folding G -> G (G^dag G)^k for every
two-qubit gate G, one more fold on an evenly spread selection of them for fractional scales
(Giurgica-Tiron, Hindy, LaRose, Mari and Zeng, IEEE QCE 2020, arXiv:2005.10921). Inverses are
written in native gates
(cz, cx, ecr, x are self-inverse; rz(t)^dag = rz(-t); sx^dag = rz(pi) sx rz(pi) up to a global
phase), so the folded circuit stays in the device's gate set and nothing cancels the folds.
Delays are dropped before folding; :func:`reschedule` re-schedules the folded circuit on the
device (the transform that folds is ``device.transforms.GateFolding``).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Any

from qiskit import QuantumCircuit, transpile
from qiskit.circuit import CircuitInstruction, Instruction
from qiskit.circuit.library import RZGate, SXGate

from noiselab.common.errors import NoiselabError
from noiselab.device.compile import circuit_duration_ns, estimate_fidelity

_SELF_INVERSE = {"cz", "cx", "ecr", "x", "y", "z", "h", "id", "swap", "ccx", "cy"}
_NEGATE_ANGLE = {"rz", "rx", "ry", "p", "u1", "rzz", "rxx", "ryy", "rzx", "cp", "crz", "crx", "cry"}
_NOT_GATES = {"delay", "barrier"}
#: Most gates of a folded circuit: past this, re-scheduling and emulating it takes hours and the
#: circuit objects alone take gigabytes.
MAX_FOLDED_GATES = 200_000


@dataclass(frozen=True)
class FoldResult:
    """A folded circuit, the scale actually reached and its gate counts."""

    circuit: QuantumCircuit
    requested_scale: float
    actual_scale: float
    n_gates: int
    n_two_qubit: int


def _inverse(inst: CircuitInstruction) -> list[tuple[Instruction, tuple]]:
    op = inst.operation
    q = inst.qubits
    if op.name in _SELF_INVERSE:
        return [(op, q)]
    if op.name in _NEGATE_ANGLE:
        inv = op.copy()
        inv.params = [-p for p in op.params]
        return [(inv, q)]
    if op.name == "sx":
        return [(RZGate(math.pi), q), (SXGate(), q), (RZGate(math.pi), q)]
    if op.name == "sxdg":
        return [(SXGate(), q)]
    return [(op.inverse(), q)]


def unitary_instructions(circuit: QuantumCircuit) -> list[CircuitInstruction]:
    """The gates of a circuit, delays and barriers dropped; measurements refused."""
    out = []
    for inst in circuit.data:
        name = inst.operation.name
        if name in _NOT_GATES:
            continue
        if name in {"measure", "reset"} or inst.clbits:
            raise ValueError(f"cannot fold a circuit containing {name!r}")
        out.append(inst)
    return out


def _empty_like(circuit: QuantumCircuit) -> QuantumCircuit:
    out = QuantumCircuit(*circuit.qregs, name=circuit.name)
    out.global_phase = circuit.global_phase
    return out


def _append(out: QuantumCircuit, inst: CircuitInstruction) -> None:
    out.append(inst.operation, inst.qubits)


def _append_inverse(out: QuantumCircuit, inst: CircuitInstruction) -> None:
    for op, q in _inverse(inst):
        out.append(op, q)


def whole_circuit_folding(circuit: QuantumCircuit, scale: float) -> FoldResult:
    """U (U^dag U)^k L^dag L with total gate count closest to ``scale`` times the original."""
    if scale < 1:
        raise ValueError("fold scale must be >= 1")
    gates = unitary_instructions(circuit)
    d = len(gates)
    out = _empty_like(circuit)
    for g in gates:
        _append(out, g)
    pairs = round((scale - 1.0) * d / 2.0) if d else 0
    k, s = divmod(pairs, d) if d else (0, 0)
    for _ in range(k):
        for g in reversed(gates):
            _append_inverse(out, g)
        for g in gates:
            _append(out, g)
    tail = gates[d - s :] if s else []
    for g in reversed(tail):
        _append_inverse(out, g)
    for g in tail:
        _append(out, g)
    n2 = sum(1 for g in gates if len(g.qubits) == 2)
    tail2 = sum(1 for g in tail if len(g.qubits) == 2)
    return FoldResult(
        circuit=out,
        requested_scale=float(scale),
        actual_scale=(d + 2 * pairs) / d if d else 1.0,
        n_gates=d + 2 * pairs,
        n_two_qubit=n2 * (1 + 2 * k) + 2 * tail2,
    )


def spread_indices(count: int, total: int) -> set[int]:
    """``count`` indices out of ``range(total)``, evenly spread."""
    if count <= 0:
        return set()
    return {min(total - 1, int((j + 0.5) * total / count)) for j in range(count)}


def two_qubit_gate_folding(circuit: QuantumCircuit, scale: float) -> FoldResult:
    """Every two-qubit gate G -> G (G^dag G)^k; one more fold on a spread selection (fractions)."""
    if scale < 1:
        raise ValueError("fold scale must be >= 1")
    gates = unitary_instructions(circuit)
    two = [i for i, g in enumerate(gates) if len(g.qubits) == 2]
    n2 = len(two)
    pairs = round((scale - 1.0) * n2 / 2.0) if n2 else 0
    k, s = divmod(pairs, n2) if n2 else (0, 0)
    extra = {two[j] for j in spread_indices(s, n2)}
    out = _empty_like(circuit)
    for i, g in enumerate(gates):
        _append(out, g)
        if len(g.qubits) != 2:
            continue
        for _ in range(k + (1 if i in extra else 0)):
            _append_inverse(out, g)
            _append(out, g)
    n_1q = len(gates) - n2
    return FoldResult(
        circuit=out,
        requested_scale=float(scale),
        actual_scale=(n2 + 2 * pairs) / n2 if n2 else 1.0,
        n_gates=n_1q + n2 + 2 * pairs,
        n_two_qubit=n2 + 2 * pairs,
    )


def folded_gate_count(circuit: QuantumCircuit, method: str, scale: float) -> int:
    """Gates of ``circuit`` folded to ``scale`` by ``method``, counted without folding."""
    gates = [inst for inst in circuit.data if inst.operation.name not in _NOT_GATES]
    d = len(gates)
    if method == "two_qubit_gates":
        n2 = sum(1 for g in gates if len(g.qubits) == 2)
        return d + 2 * round((float(scale) - 1.0) * n2 / 2.0)
    return d + 2 * round((float(scale) - 1.0) * d / 2.0)


def fold_circuit(circuit: QuantumCircuit, method: str, scale: float) -> FoldResult:
    """Dispatch on ``method`` ("whole_circuit" | "two_qubit_gates", the amplifier names);
    refuses (one line) a folded circuit beyond :data:`MAX_FOLDED_GATES` gates before building
    it."""
    from noiselab.common.errors import ProblemTooLargeError

    if not math.isfinite(scale):
        raise ValueError("fold scale must be finite")
    gates = folded_gate_count(circuit, method, scale)
    if gates > MAX_FOLDED_GATES:
        raise ProblemTooLargeError(
            f"folding: scale {scale:g} gives a circuit of {gates} gates; allowed: at most "
            f"{MAX_FOLDED_GATES} (smaller scales, or the 'stretch' amplifier)"
        )
    if method == "whole_circuit":
        return whole_circuit_folding(circuit, scale)
    if method == "two_qubit_gates":
        return two_qubit_gate_folding(circuit, scale)
    raise ValueError(f"unknown fold method {method!r}")


def reschedule(
    circuit: QuantumCircuit,
    like: Any,
    profile: Any,
    target: Any,
    *,
    expected_two_qubit: int | None = None,
) -> Any:
    """``like`` (a CompiledCircuit) with ``circuit`` re-scheduled in its place.

    Transpiles at optimization level 0 on the patch's ``target`` with the trivial layout
    (nothing is optimized away, idle delays recomputed); the two-qubit count is checked
    against ``expected_two_qubit`` when given.
    """
    k = like.circuit.num_qubits
    out = transpile(
        circuit,
        target=target,
        initial_layout=list(range(k)),
        optimization_level=0,
        scheduling_method="alap",
        seed_transpiler=0,
    )
    n2 = int(out.count_ops().get(profile.two_qubit_gate, 0))
    if expected_two_qubit is not None and n2 != expected_two_qubit:
        raise NoiselabError(
            f"folding: re-scheduling changed the two-qubit count ({n2}, expected "
            f"{expected_two_qubit})"
        )
    depth = int(out.depth(filter_function=lambda i: i.operation.name not in ("delay", "barrier")))
    return dataclasses.replace(
        like,
        circuit=out,
        two_qubit_count=n2,
        depth=depth,
        duration_ns=circuit_duration_ns(out, profile),
        estimated_fidelity=estimate_fidelity(out, profile, like.patch),
    )
