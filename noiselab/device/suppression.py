"""Error suppression as circuit transforms: Pauli twirling of two-qubit gates, dynamical
decoupling in idle windows, measurement twirling.

* :class:`PauliTwirl` (``twirl``): every two-qubit gate is sandwiched by random Paulis (merged
  into the neighbouring single-qubit layers, so no extra gate is counted: in the experiment's
  favour where no such layer exists). Emulated exactly as the average over the Pauli group: each
  two-qubit gate's error channel is replaced by its Pauli-twirled part (the diagonal of its
  Pauli transfer matrix; Wallman and Emerson 2016). The always-on terms of
  :mod:`noiselab.device.evolution` are not twirled (``decouple`` acts on them).
* :class:`Decouple` (``decouple``): every idle window (a ``delay`` after the qubit's first gate)
  that the pulses fit in gets an XY4 or X-X sequence (X-X where XY4 does not fit), pulses centred
  at (2k+1) D / (2n) of the window D (CPMG spacing), each a native x (Y = rz(pi) then x, rz
  virtual) with the profile's error and duration. Neighbours on the coupling graph are staggered
  (graph two-colouring): the second colour runs the sequence twice as often, so that the
  always-on ZZ between two decoupled neighbours is refocused too (their toggling signs are
  orthogonal over the window). Windows before a qubit's first gate are left alone (the qubit is
  in |0>, where decoupling is not the usual practice; with the symmetric ZZ of
  :mod:`noiselab.device.evolution` its neighbours still pick up a phase then, which stays).
* :class:`MeasureTwirl` (``measure_twirl``): a random X before each measurement, undone
  classically. The exact average replaces each qubit's assignment matrix A by (A + X A X) / 2
  (P(1|0) = P(0|1) = their mean); the joint flips are symmetric already. Outcome-dependent
  flips are not: on the qubits they touch the readout map becomes the exact average over the
  2^m flips (``untwirled_readout_flips``, :func:`noiselab.device.readout_map.readout_terms`). The X
  pulse's own gate error on half the shots is left out (in the experiment's favour; it is a
  single-qubit error, small beside readout error). The readout calibration circuits are
  twirled the same way.
"""

from __future__ import annotations

import dataclasses
import math
from collections import deque
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit.library import PauliGate, RZGate, XGate
from qiskit.quantum_info import Clifford, Pauli

from noiselab.device.noise import delay_seconds
from noiselab.device.profile import _CTX_ALLOW_INFINITE, VIRTUAL_GATES, DeviceProfile
from noiselab.device.transforms import (
    Applied,
    CircuitTransform,
    TransformRealizer,
    register_transform,
)

DD_SEQUENCES = {"x_x": ("x", "x"), "xy4": ("x", "y", "x", "y")}


def _with_profile_values(profile: DeviceProfile, **updates: Any) -> DeviceProfile:
    data = profile.model_dump(exclude_unset=True)
    for path, value in updates.items():
        node = data
        keys: list[Any] = [int(k) if k.isdigit() else k for k in path.split(".")]
        for k in keys[:-1]:
            node = node.setdefault(k, {})
        node[keys[-1]] = value
    out = DeviceProfile.model_validate(data, context={_CTX_ALLOW_INFINITE: True})
    out._source = profile.source
    return out


@dataclass(frozen=True)
class PauliTwirl(CircuitTransform):
    """Exact Pauli twirling of every two-qubit gate (see the module docstring)."""

    kind: ClassVar[str] = "twirl"
    changes_circuit: ClassVar[bool] = False

    def label(self) -> str:
        return "twirled"

    def calibration(self) -> CircuitTransform | None:
        return None

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        return Applied(compiled, _with_profile_values(profile, twirled_two_qubit_gates=True), 1.0)


@dataclass(frozen=True)
class TwirlDraw(CircuitTransform):
    """One random instance of the Pauli twirl (``twirl`` with ``draws``): around every two-qubit
    gate U a random two-qubit Pauli P after it and U^dagger P U before it (drawn from
    ``numpy.random.default_rng([seed, index])`` in circuit order), so that the gate's error
    channel E becomes P E(P . P) P and the ideal circuit is unchanged. The frames are ideal,
    zero-duration ``pauli`` instructions (``device.profile.FRAME_GATES``: merged into the
    neighbouring single-qubit layers at no cost, as in :class:`PauliTwirl`); their average is
    :class:`PauliTwirl`. Profiles with always-on terms are refused by the pass (their timeline
    does not know the frames)."""

    kind: ClassVar[str] = "twirl_draw"
    changes_circuit: ClassVar[bool] = True  # same error budget: frames cost nothing
    seed: int
    index: int

    def label(self) -> str:
        return f"twirl_draw={self.index}"

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        circ = twirl_draw_circuit(
            compiled.circuit, profile.two_qubit_gate, np.random.default_rng([self.seed, self.index])
        )
        return Applied(dataclasses.replace(compiled, circuit=circ), profile, 1.0)


_TWO_QUBIT_PAULIS = tuple(a + b for a in "IXYZ" for b in "IXYZ")


def twirl_draw_circuit(
    circuit: QuantumCircuit, two_qubit_gate: str, rng: np.random.Generator
) -> QuantumCircuit:
    """``circuit`` with every ``two_qubit_gate`` framed by a random Pauli P after it and
    U^dagger P U before it (see :class:`TwirlDraw`); other operations copied as they are."""
    out = QuantumCircuit(circuit.num_qubits, name=circuit.name)
    frames: dict[tuple[str, str], str] = {}
    for inst in circuit.data:
        op = inst.operation
        qs = [circuit.find_bit(q).index for q in inst.qubits]
        if op.name != two_qubit_gate or len(qs) != 2:
            out.append(op, qs)
            continue
        after = _TWO_QUBIT_PAULIS[int(rng.integers(16))]
        key = (op.name, after)
        if key not in frames:
            frames[key] = frame_before(op, after)
        out.append(PauliGate(frames[key]), qs)
        out.append(op, qs)
        out.append(PauliGate(after), qs)
    return out


def frame_before(gate: Any, after: str) -> str:
    """The Pauli label U^dagger P U (global phase dropped) for a Clifford two-qubit ``gate`` U
    and the Pauli label ``after`` P (qiskit order: the last letter acts on the gate's first
    qubit)."""
    before = Pauli(after).evolve(Clifford(gate), frame="h")
    return Pauli((before.z, before.x)).to_label()


@dataclass(frozen=True)
class MeasureTwirl(CircuitTransform):
    """Measurement twirling: symmetric readout assignment per qubit (see the module docstring)."""

    kind: ClassVar[str] = "measure_twirl"
    changes_circuit: ClassVar[bool] = False
    readout_only: ClassVar[bool] = True

    def label(self) -> str:
        return "measure_twirled"

    def calibration(self) -> CircuitTransform | None:
        return self

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        overrides = {}
        for q in range(profile.qubit_count):
            qp = profile.qubit(q)
            mean = 0.5 * (qp.flip_0to1 + qp.flip_1to0)
            overrides[q] = {"flip_0to1": mean, "flip_1to0": mean}
        data = profile.model_dump(exclude_unset=True)
        for q, values in overrides.items():
            data["qubits"].setdefault("overrides", {}).setdefault(q, {}).update(values)
        conditional = sorted(
            {
                q
                for e in profile.readout_crosstalk
                if e.flip_a_if_b_reads_1 > 0.0 or e.flip_b_if_a_reads_1 > 0.0
                for q in e.pair
            }
        )
        if conditional and not profile.untwirled_readout_flips:
            data["untwirled_readout_flips"] = [
                (q, profile.qubit(q).flip_0to1, profile.qubit(q).flip_1to0) for q in conditional
            ]
        out = DeviceProfile.model_validate(data, context={_CTX_ALLOW_INFINITE: True})
        out._source = profile.source
        return Applied(compiled, out, 1.0)


def _colouring(num_qubits: int, links: set[tuple[int, int]]) -> list[int]:
    colour = [-1] * num_qubits
    for s in range(num_qubits):
        if colour[s] >= 0:
            continue
        colour[s] = 0
        todo = deque([s])
        while todo:
            a = todo.popleft()
            for b in range(num_qubits):
                if colour[b] < 0 and ((a, b) in links or (b, a) in links):
                    colour[b] = 1 - colour[a]
                    todo.append(b)
    return colour


@dataclass(frozen=True)
class Decouple(CircuitTransform):
    """Dynamical decoupling (``sequence``: "x_x" | "xy4") in idle windows of at least
    ``min_window_ns`` that the pulses fit in (X-X where XY4 does not fit)."""

    kind: ClassVar[str] = "decouple"
    changes_circuit: ClassVar[bool] = True  # realized scale: error budget with the pulses
    sequence: str = "xy4"
    min_window_ns: float = 0.0

    def __post_init__(self) -> None:
        if self.sequence not in DD_SEQUENCES:
            raise ValueError(f"unknown decoupling sequence {self.sequence!r}")
        object.__setattr__(self, "min_window_ns", float(self.min_window_ns))

    def label(self) -> str:
        return f"decoupled_{self.sequence}"

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        circ = decouple_circuit(
            compiled.circuit, profile, compiled.patch, self.sequence, self.min_window_ns
        )
        return Applied(dataclasses.replace(compiled, circuit=circ), profile, 1.0)


def _fitting_pulses(sequence: str, colour: int, window_ns: float, pulse_ns: float) -> tuple:
    """The longest of ``sequence`` and X-X (times 1 + ``colour``) whose pulses fit the window."""
    for name in dict.fromkeys((sequence, "x_x")):
        pulses = DD_SEQUENCES[name] * (1 + colour)
        if len(pulses) * pulse_ns <= window_ns * (1.0 + 1e-9):
            return pulses
    return ()


def decouple_circuit(
    circuit: QuantumCircuit,
    profile: DeviceProfile,
    patch: tuple[int, ...],
    sequence: str,
    min_window_ns: float = 0.0,
) -> QuantumCircuit:
    """``circuit`` with every long enough idle window after a qubit's first gate filled with
    ``sequence`` (doubled on the second colour of the coupling graph), the window's length kept."""
    k = circuit.num_qubits
    links = {
        (i, j) for i in range(k) for j in range(k) if i < j and profile.has_pair(patch[i], patch[j])
    }
    colour = _colouring(k, links)
    pulse_ns = profile.durations.single_qubit_ns
    started = [False] * k
    out = QuantumCircuit(k, name=circuit.name)
    for inst in circuit.data:
        op = inst.operation
        qs = [circuit.find_bit(q).index for q in inst.qubits]
        if op.name != "delay":
            if op.name not in VIRTUAL_GATES and op.name != "barrier":
                for q in qs:
                    started[q] = True
            out.append(op, qs)
            continue
        q = qs[0]
        window_ns = delay_seconds(op) * 1e9
        pulses = _fitting_pulses(sequence, colour[q], window_ns, pulse_ns)
        if not started[q] or window_ns < min_window_ns or not pulses:
            out.append(op, qs)
            continue
        n = len(pulses)
        gap_ns = (window_ns - n * pulse_ns) / n
        out.delay(gap_ns / 2 * 1e-9, q, unit="s")
        for m, name in enumerate(pulses):
            if name == "y":  # Y = i X Z: rz(pi) (virtual) then x
                out.append(RZGate(math.pi), [q])
            out.append(XGate(), [q])
            last = m == n - 1
            out.delay((gap_ns / 2 if last else gap_ns) * 1e-9, q, unit="s")
    return out


for _cls in (PauliTwirl, TwirlDraw, MeasureTwirl, Decouple):
    register_transform(_cls)
