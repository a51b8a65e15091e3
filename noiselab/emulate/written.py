"""The device's noise written into circuits, so that circuits under different profiles share
one qiskit-aer call.

qiskit-aer takes one noise model per call. Circuits that differ only in their noise (drawn
device days, stretched profiles) are therefore rewritten with their noise as explicit
``superop`` instructions and run together without a noise model. The channels are those of
:func:`noiselab.device.noise.noise_spec`, computed here in numpy (no qiskit objects per drawn
profile): after each native gate its error (relaxation over the gate, the depolarizing part,
the coherent terms, in that order), after each ``delay`` thermal relaxation of the idle qubit.
To keep the instruction count (aer's per-instruction conversion is most of a small circuit's
cost) low, each qubit's run of single-qubit operations is composed into the next two-qubit
operation on it, so a circuit becomes one superoperator per two-qubit gate plus at most one per
qubit at the end. The basis-change layer and the readout-calibration circuits read the same
channels (:meth:`WrittenNoise.layer_superop`). Equal to the noise-model path to rounding
(tests/test_emulate_written.py).
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import lru_cache
from typing import Any

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit import CircuitInstruction
from qiskit.circuit.library import RXGate, RZZGate
from qiskit.quantum_info import Operator

from noiselab.device.aer_adapter import superop_instruction
from noiselab.device.noise import delay_seconds, noise_spec
from noiselab.device.profile import VIRTUAL_GATES
from noiselab.device.thermal import decay_factor
from noiselab.emulate.channels import (
    BasisLayerSpec,
    effects_from_superop,
    gate_superop,
    native_basis_change,
)

_IDENTITY_1Q = np.eye(4, dtype=complex)


def relaxation_superop(t_ns: float, t1_us: float | None, t2_us: float | None) -> np.ndarray:
    """Thermal relaxation to |0> over ``t_ns`` (4x4, qiskit's column stacking): the excited
    population decays as exp(-t/T1), the coherences as exp(-t/T2) (T2 capped at 2 T1, as the
    noise model does); Nielsen & Chuang sec. 8.3.1."""
    if t1_us is not None and t2_us is not None:
        t2_us = min(t2_us, 2.0 * t1_us)
    elif t1_us is not None and t2_us is None:
        t2_us = 2.0 * t1_us
    e1, e2 = decay_factor(t_ns, t1_us), decay_factor(t_ns, t2_us)
    out = np.zeros((4, 4), dtype=complex)
    out[0, 0] = 1.0
    out[0, 3] = 1.0 - e1  # |1><1| decays into |0><0|
    out[3, 3] = e1
    out[1, 1] = out[2, 2] = e2
    return out


def superop_tensor(low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Superoperator of ``low`` on qubit 0 and ``high`` on qubit 1 (qiskit's
    ``SuperOp(low).expand(SuperOp(high))``): vec index r0 + 2 r1 + 4 c0 + 8 c1."""
    a = low.reshape(2, 2, 2, 2)  # (c0, r0, c0', r0')
    b = high.reshape(2, 2, 2, 2)  # (c1, r1, c1', r1')
    return np.einsum("abcd,efgh->aebfcgdh", b, a).reshape(16, 16)


def unitary_superop(u: np.ndarray) -> np.ndarray:
    """U rho U^dagger in column stacking: conj(U) x U."""
    return np.kron(np.conj(u), u)


@lru_cache(maxsize=64)
def _coherent(kind: str, angle: float) -> np.ndarray:
    gate = RZZGate(angle) if kind == "zz" else RXGate(angle)
    out = unitary_superop(Operator(gate).data)
    out.setflags(write=False)
    return out


def _depolarizing(p: float, k: int) -> np.ndarray:
    d = 2**k
    vec_i = np.eye(d).reshape(-1)
    return (1.0 - p) * np.eye(d * d) + (p / d) * np.outer(vec_i, vec_i)


class WrittenNoise:
    """The numpy channels of a profile on a patch (circuit qubit i = physical ``patch[i]``)."""

    def __init__(self, profile: Any, patch: Sequence[int]) -> None:
        spec = noise_spec(profile, patch)
        self.patch = spec.patch
        self.coherence = tuple((profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in self.patch)
        self.idle = spec.idle_coherence is not None
        self.dt_s = spec.dt_s
        self.errors: dict[tuple[str, tuple[int, ...]], np.ndarray] = {}
        for rule in spec.gates:
            sop = self._gate_error(rule.noise, rule.qubits)
            if sop is not None:
                self.errors[(rule.gate, rule.qubits)] = sop
        self._relax: dict[tuple[int, float], np.ndarray] = {}

    def _gate_error(self, noise: Any, qubits: tuple[int, ...]) -> np.ndarray | None:
        """The channel after a gate, as ``device.noise._noise_superop`` composes it."""
        if noise.gate in VIRTUAL_GATES:
            return None
        k = len(qubits)
        total: np.ndarray | None = None
        coh = [self.coherence[q] for q in qubits]
        if noise.duration_ns > 0.0 and any(c != (None, None) for c in coh):
            parts = [relaxation_superop(noise.duration_ns, *c) for c in coh]
            total = parts[0] if k == 1 else superop_tensor(parts[0], parts[1])
        if noise.depolarizing_param > 0.0:
            dep = _depolarizing(noise.depolarizing_param, k)
            total = dep if total is None else dep @ total
        for kind, angle in (("zz", noise.zz_angle_rad), ("rx", noise.over_rotation_rad)):
            if angle != 0.0:
                sop = _coherent(kind, angle)
                total = sop if total is None else sop @ total
        return total

    def idle_superop(self, qubit: int, t_ns: float) -> np.ndarray | None:
        """Relaxation of circuit qubit ``qubit`` idle for ``t_ns`` (None: no idle noise)."""
        if not self.idle or t_ns <= 0.0 or self.coherence[qubit] == (None, None):
            return None
        key = (qubit, round(float(t_ns), 9))
        if key not in self._relax:
            self._relax[key] = relaxation_superop(t_ns, *self.coherence[qubit])
        return self._relax[key]

    def op_superop(self, name: str, params: Sequence[Any], qubits: tuple[int, ...], op: Any) -> Any:
        """Gate then its error, as one superoperator on ``qubits`` (in that order)."""
        try:
            gate = gate_superop(name, params)
        except (KeyError, TypeError, ValueError):
            gate = unitary_superop(Operator(op).data)
        err = self.errors.get((name, qubits))
        return gate if err is None else err @ gate

    def layer_superop(
        self, qubit: int, gates: Sequence[tuple[str, tuple[float, ...]]], layer_ns: float,
        spec: BasisLayerSpec,
    ) -> np.ndarray:  # fmt: skip
        """``emulate.channels.qubit_layer_superop`` with these channels: idle for the layer
        minus the qubit's own gates, then its gates with their errors."""
        own = sum(spec.duration_ns(g, qubit) for g, _ in gates)
        out = _IDENTITY_1Q
        idle = layer_ns - own
        if idle > 1e-9:
            relax = self.idle_superop(qubit, idle)
            if relax is not None:
                out = relax @ out
        for name, params in gates:
            out = self.op_superop(name, params, (qubit,), None) @ out
        return out

    def written(self, circuit: Any) -> Any:
        """``circuit`` (bound, no measurements) with its noise as fused ``superop``
        instructions: single-qubit runs composed into the next two-qubit operation."""
        k = circuit.num_qubits
        pending: list[np.ndarray | None] = [None] * k
        out = QuantumCircuit(k)

        def push(q: int, sop: np.ndarray) -> None:
            pending[q] = sop if pending[q] is None else sop @ pending[q]

        for name, params, qs, op, t_ns in _skeleton(circuit):
            if name == "delay":
                if t_ns is None:
                    t_ns = delay_seconds(op, self.dt_s) * 1e9
                for q in qs:
                    relax = self.idle_superop(q, t_ns)
                    if relax is not None:
                        push(q, relax)
                continue
            sop = self.op_superop(name, params, qs, op)
            if len(qs) == 1:
                push(qs[0], sop)
                continue
            if len(qs) != 2:
                for q in qs:
                    _flush(out, pending, q)
                _add(out, sop, qs)
                continue
            a, b = qs
            before = superop_tensor(
                _IDENTITY_1Q if pending[a] is None else pending[a],
                _IDENTITY_1Q if pending[b] is None else pending[b],
            )
            pending[a] = pending[b] = None
            _add(out, sop @ before, qs)
        for q in range(k):
            _flush(out, pending, q)
        return out


#: circuit skeletons by circuit identity (the entry keeps the circuit alive), most recent last
_SKELETONS: dict[int, tuple[Any, list[tuple[Any, ...]]]] = {}
_SKELETON_SLOTS = 16


def _skeleton(circuit: Any) -> list[tuple[Any, ...]]:
    """(name, params, circuit qubits, operation, delay in ns or None) per instruction, barriers
    dropped; shared by every profile the circuit is written for."""
    entry = _SKELETONS.pop(id(circuit), None)
    if entry is None or entry[0] is not circuit:
        ops = []
        for inst in circuit.data:
            op = inst.operation
            if op.name == "barrier":
                continue
            qs = tuple(circuit.find_bit(q).index for q in inst.qubits)
            t_ns = None
            if op.name == "delay" and getattr(op, "unit", "dt") != "dt":
                t_ns = delay_seconds(op) * 1e9
            params = tuple(float(p) for p in op.params) if op.name != "delay" else ()
            ops.append((op.name, params, qs, op, t_ns))
        entry = (circuit, ops)
        while len(_SKELETONS) >= _SKELETON_SLOTS:
            _SKELETONS.pop(next(iter(_SKELETONS)))
    _SKELETONS[id(circuit)] = entry
    return entry[1]


def _add(out: Any, sop: np.ndarray, qs: Sequence[int]) -> None:
    """Append a ``superop`` instruction (qiskit's checked ``append`` costs more than the rest of
    writing a circuit; these qubits are the circuit's own)."""
    inst = superop_instruction(sop)
    out._append(CircuitInstruction(inst, tuple(out.qubits[q] for q in qs), ()))


def _flush(out: Any, pending: list[np.ndarray | None], q: int) -> None:
    if pending[q] is not None:
        _add(out, pending[q], (q,))
        pending[q] = None


class WrittenEffects:
    """Basis-layer effect tensors from :class:`WrittenNoise` (the interface of
    ``emulate.channels.EffectCache``)."""

    def __init__(self, noise: WrittenNoise, spec: BasisLayerSpec) -> None:
        self.noise = noise
        self.spec = spec
        self._cache: dict[tuple[int, str, float], np.ndarray] = {}

    def get(self, qubit: int, letter: str, layer_ns: float) -> np.ndarray:
        key = (qubit, "Z" if letter == "I" else letter, round(float(layer_ns), 6))
        if key not in self._cache:
            gates = native_basis_change(key[1], self.spec.native_1q)
            sop = self.noise.layer_superop(qubit, gates, key[2], self.spec)
            self._cache[key] = effects_from_superop(sop)
        return self._cache[key]
