"""Fast noiseless statevector evaluation of parametrized circuits, with exact (adjoint) gradients.

A circuit is compiled once into a list of steps: fixed gates (their matrix, applied by tensor
contraction) and Pauli rotations ``exp(-i phi P)`` with ``phi = slope * theta_m + offset`` for one
circuit parameter ``theta_m`` (rx, ry, rz, rxx, ryy, rzz, rzx, p, and every term of a
``PauliEvolutionGate`` in Lie-Trotter order; u as rz ry rz). Other parametrized gates are
expanded through their definitions. Gradients use adjoint differentiation: one forward and one
backward sweep give every ``dE/dtheta`` exactly (no parameter shifts, no finite differences).

Statevector index k holds basis state with bit q = qubit q (qiskit order). Global phases are
dropped (they do not change expectation values). Parameter vectors follow ``circuit.parameters``
order, as in ``QuantumCircuit.assign_parameters(list)``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.circuit import ParameterExpression
from qiskit.quantum_info import Operator, SparsePauliOp

from noiselab.common.errors import ProblemTooLargeError

MAX_STATEVECTOR_QUBITS = 20

_ROTATIONS = {"rx": "X", "ry": "Y", "rz": "Z", "rxx": "XX", "ryy": "YY", "rzz": "ZZ", "rzx": "XZ"}


@dataclass(frozen=True)
class _Fixed:
    matrix: np.ndarray  # (2^k, 2^k), qiskit little-endian over ``qubits``
    qubits: tuple[int, ...]


@dataclass(frozen=True)
class _Rotation:
    param: int  # index into the parameter vector; -1 for a bound angle
    slope: float
    offset: float
    perm: np.ndarray  # (P psi)[m] = phase[m] * psi[perm[m]]
    phase: np.ndarray


def _pauli_action(label: str, qubits: tuple[int, ...], n: int) -> tuple[np.ndarray, np.ndarray]:
    """Permutation and phases of a Pauli string; ``label[-1 - i]`` acts on ``qubits[i]``."""
    idx = np.arange(2**n, dtype=np.int64)
    xmask = zmask = ny = 0
    for i, ch in enumerate(reversed(label)):
        q = qubits[i]
        if ch in "XY":
            xmask |= 1 << q
        if ch in "ZY":
            zmask |= 1 << q
        ny += ch == "Y"
    perm = idx ^ xmask
    # P|k> = i^ny (-1)^{|k & z|} |k ^ x>, so (P psi)[m] = i^ny (-1)^{|(m^x) & z|} psi[m ^ x]
    sign = 1 - 2 * (np.bitwise_count(perm & zmask).astype(np.int64) & 1)
    phase = (1j**ny) * sign.astype(complex)
    return perm, phase


def _linear_angle(expr: Any, params: dict[Any, int]) -> tuple[int, float, float]:
    """(parameter index, slope, offset) of an angle that is linear in at most one parameter."""
    if not isinstance(expr, ParameterExpression):
        return -1, 0.0, float(expr)
    free = list(expr.parameters)
    if not free:
        return -1, 0.0, float(expr)
    if len(free) > 1:
        raise ValueError(f"gate angle {expr} depends on several parameters; allowed: one")
    p = free[0]
    slope_expr = expr.gradient(p)
    if isinstance(slope_expr, ParameterExpression) and slope_expr.parameters:
        raise ValueError(f"gate angle {expr} is not linear in {p}")
    offset = complex(expr.bind({p: 0.0}))
    return params[p], float(complex(slope_expr).real), float(offset.real)


class StatevectorProgram:
    """A compiled circuit: ``state(theta)``, ``expectation(hmat, theta)`` and gradients."""

    def __init__(self, circuit: QuantumCircuit) -> None:
        n = circuit.num_qubits
        if n > MAX_STATEVECTOR_QUBITS:
            raise ProblemTooLargeError(
                f"circuit: {n} qubits; allowed: at most {MAX_STATEVECTOR_QUBITS} for statevectors"
            )
        self.num_qubits = n
        self.parameters = list(circuit.parameters)
        self.num_parameters = len(self.parameters)
        index = {p: i for i, p in enumerate(self.parameters)}
        self.steps: list[_Fixed | _Rotation] = []
        self._compile(circuit, tuple(range(n)), index)

    # -- compilation -------------------------------------------------------------------------
    def _compile(self, circuit: QuantumCircuit, wires: tuple[int, ...], index: dict) -> None:
        for inst in circuit.data:
            op = inst.operation
            qubits = tuple(wires[circuit.find_bit(q).index] for q in inst.qubits)
            name = op.name
            if name in ("barrier", "delay", "id"):
                continue
            if name in ("measure", "reset") or inst.clbits:
                raise ValueError(f"circuit contains {name!r}; allowed: unitary gates only")
            if name == "PauliEvolution":
                self._add_evolution(op, qubits, index)
                continue
            is_param = any(isinstance(p, ParameterExpression) and p.parameters for p in op.params)
            if name in _ROTATIONS and is_param:
                m, slope, offset = _linear_angle(op.params[0], index)
                self._add_rotation(_ROTATIONS[name], qubits, m, 0.5 * slope, 0.5 * offset)
            elif name in ("p", "u1") and is_param:
                m, slope, offset = _linear_angle(op.params[0], index)
                self._add_rotation("Z", qubits, m, 0.5 * slope, 0.5 * offset)  # up to global phase
            elif name in ("u", "u3") and is_param:
                # U(theta, phi, lam) = Rz(phi) Ry(theta) Rz(lam) up to a global phase
                for angle, axis in ((op.params[2], "Z"), (op.params[0], "Y"), (op.params[1], "Z")):
                    m, slope, offset = _linear_angle(angle, index)
                    self._add_rotation(axis, qubits, m, 0.5 * slope, 0.5 * offset)
            elif is_param:
                definition = op.definition
                if definition is None:
                    single = QuantumCircuit(op.num_qubits)
                    single.append(op, range(op.num_qubits))
                    definition = transpile(
                        single, basis_gates=["rz", "sx", "x", "cx"], optimization_level=0
                    )
                self._compile(definition, qubits, index)
            else:
                self.steps.append(_Fixed(np.asarray(Operator(op).data, dtype=complex), qubits))

    def _add_rotation(
        self, label: str, qubits: tuple[int, ...], m: int, slope: float, offset: float
    ) -> None:
        perm, phase = _pauli_action(label, qubits, self.num_qubits)
        self.steps.append(_Rotation(m, slope, offset, perm, phase))

    def _add_evolution(self, gate: Any, qubits: tuple[int, ...], index: dict) -> None:
        ops = gate.operator if isinstance(gate.operator, list) else [gate.operator]
        m, slope, offset = _linear_angle(gate.params[0], index)
        reps = int(getattr(gate.synthesis, "reps", 1) or 1)
        terms = []
        for op in ops:
            spo = op if isinstance(op, SparsePauliOp) else SparsePauliOp(op)
            for label, c in spo.to_list():
                if abs(complex(c).imag) > 1e-12:
                    raise ValueError("PauliEvolutionGate operator must have real coefficients")
                terms.append((label, float(complex(c).real)))
        for _ in range(reps):
            for label, c in terms:
                if set(label) == {"I"}:
                    continue  # global phase
                self._add_rotation(label, qubits, m, slope * c / reps, offset * c / reps)

    # -- evaluation --------------------------------------------------------------------------
    def _angles(self, theta: np.ndarray) -> list[float]:
        return [
            s.slope * (theta[s.param] if s.param >= 0 else 0.0) + s.offset
            for s in self.steps
            if isinstance(s, _Rotation)
        ]

    def _apply_fixed(self, psi: np.ndarray, step: _Fixed, adjoint: bool) -> np.ndarray:
        n, k = self.num_qubits, len(step.qubits)
        mat = step.matrix.conj().T if adjoint else step.matrix
        t = psi.reshape([2] * n)
        # tensor axis a is qubit n-1-a; matrix row/col bits: qubits[k-1] most significant
        in_axes = [n - 1 - q for q in reversed(step.qubits)]
        t = np.tensordot(mat.reshape([2] * (2 * k)), t, axes=(list(range(k, 2 * k)), in_axes))
        return np.moveaxis(t, list(range(k)), in_axes).reshape(-1)

    def state(self, theta: np.ndarray | None = None) -> np.ndarray:
        """Final statevector for parameter values ``theta`` (length ``num_parameters``)."""
        theta = self._check(theta)
        psi = np.zeros(2**self.num_qubits, dtype=complex)
        psi[0] = 1.0
        angles = iter(self._angles(theta))
        for step in self.steps:
            if isinstance(step, _Fixed):
                psi = self._apply_fixed(psi, step, adjoint=False)
            else:
                phi = next(angles)
                psi = np.cos(phi) * psi - 1j * np.sin(phi) * (step.phase * psi[step.perm])
        return psi

    def expectation(self, hmat: Any, theta: np.ndarray | None = None) -> float:
        """<psi(theta)| H |psi(theta)> for a (sparse or dense) matrix ``hmat``."""
        psi = self.state(theta)
        return float(np.real(np.vdot(psi, hmat @ psi)))

    def expectation_and_gradient(
        self, hmat: Any, theta: np.ndarray | None = None
    ) -> tuple[float, np.ndarray]:
        """Energy and its exact gradient by adjoint differentiation."""
        theta = self._check(theta)
        psi = self.state(theta)
        lam = hmat @ psi
        energy = float(np.real(np.vdot(psi, lam)))
        grad = np.zeros(self.num_parameters)
        angles = self._angles(theta)
        j = len(angles)
        for step in reversed(self.steps):
            if isinstance(step, _Fixed):
                psi = self._apply_fixed(psi, step, adjoint=True)
                lam = self._apply_fixed(lam, step, adjoint=True)
                continue
            j -= 1
            p_psi = step.phase * psi[step.perm]
            if step.param >= 0:
                grad[step.param] += 2.0 * step.slope * float(np.imag(np.vdot(lam, p_psi)))
            c, s = np.cos(angles[j]), np.sin(angles[j])
            psi = c * psi + 1j * s * p_psi
            lam = c * lam + 1j * s * (step.phase * lam[step.perm])
        return energy, grad

    def _check(self, theta: np.ndarray | None) -> np.ndarray:
        if theta is None:
            theta = np.zeros(self.num_parameters)
        theta = np.asarray(theta, dtype=float).reshape(-1)
        if theta.size != self.num_parameters:
            raise ValueError(f"{theta.size} parameter values for {self.num_parameters} parameters")
        return theta


def compile_statevector(circuit: QuantumCircuit) -> StatevectorProgram:
    """Compile ``circuit`` for repeated noiseless evaluation."""
    return StatevectorProgram(circuit)
