"""Near-Clifford training circuits: a compiled circuit with some rotations set to Clifford angles.

A rotation gate (``rz``, ``rx``, ``ry``, ``p`` and the two-qubit ``rzz``-type gates) is a
Clifford gate when its angle is a multiple of pi/2. :class:`CliffordSubstitution` rounds the
angles of chosen rotations of the compiled circuit to the nearest multiple of pi/2 (the training
circuits of Clifford data regression, Czarnik, Arrasmith, Coles and Cincio, Quantum 5, 592
(2021)). The gates, their qubits and the schedule stay as they are (rounded rotations keep their
gate, hence their duration and error), so a training circuit sees exactly the target's noise.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
from dataclasses import dataclass
from typing import Any, ClassVar

from noiselab.device.transforms import Applied, CircuitTransform, register_transform

#: Single-parameter rotation gates: Clifford exactly when the angle is a multiple of pi/2.
ROTATION_GATES = frozenset({"rz", "rx", "ry", "p", "u1", "rzz", "rxx", "ryy", "rzx"})
#: An angle within this of a multiple of pi/2 counts as Clifford (transpiler round-off).
CLIFFORD_TOL_RAD = 1e-9


def round_to_clifford(angle_rad: float) -> float:
    """The multiple of pi/2 nearest to ``angle_rad`` (rad)."""
    return (math.pi / 2.0) * round(float(angle_rad) / (math.pi / 2.0))


def is_clifford_angle(angle_rad: float) -> bool:
    return abs(float(angle_rad) - round_to_clifford(angle_rad)) <= CLIFFORD_TOL_RAD


def non_clifford_rotations(circuit: Any) -> tuple[int, ...]:
    """Positions (in ``circuit.data``) of the rotation gates whose angle is not Clifford."""
    out = []
    for i, inst in enumerate(circuit.data):
        op = inst.operation
        rotation = op.name in ROTATION_GATES and len(op.params) == 1
        if rotation and not is_clifford_angle(float(op.params[0])):
            out.append(i)
    return tuple(out)


def substitute(
    circuit: Any, positions: tuple[int, ...], quarter_turns: tuple[int, ...] | None = None
) -> Any:
    """A copy of ``circuit`` with the rotations at ``positions`` set to Clifford angles: the
    nearest multiple of pi/2, or ``quarter_turns[i]`` * pi/2 where given."""
    out = circuit.copy()
    for n, i in enumerate(positions):
        inst = out.data[i]
        op = inst.operation
        if op.name not in ROTATION_GATES or len(op.params) != 1:
            raise ValueError(f"position {i} holds {op.name!r}, not a rotation gate")
        new = op.copy()
        if quarter_turns is None:
            new.params = [round_to_clifford(float(op.params[0]))]
        else:
            new.params = [quarter_turns[n] * math.pi / 2.0]
        out.data[i] = inst.replace(operation=new)
    return out


@dataclass(frozen=True)
class CliffordSubstitution(CircuitTransform):
    """The compiled circuit with the rotations at ``positions`` (indices into its instruction
    list, ascending) set to Clifford angles: ``quarter_turns[i]`` * pi/2 for each, or the
    nearest multiple of pi/2 (``quarter_turns`` None); the profile as it is."""

    kind: ClassVar[str] = "clifford_substitute"
    changes_circuit: ClassVar[bool] = True
    positions: tuple[int, ...]
    quarter_turns: tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        pos = tuple(int(i) for i in self.positions)
        if list(pos) != sorted(set(pos)):
            raise ValueError("positions must be distinct and ascending")
        object.__setattr__(self, "positions", pos)
        if self.quarter_turns is not None:
            turns = tuple(int(k) % 4 for k in self.quarter_turns)
            if len(turns) != len(pos):
                raise ValueError("one quarter-turn count per position")
            object.__setattr__(self, "quarter_turns", turns)

    @property
    def is_identity(self) -> bool:
        return not self.positions

    def label(self) -> str:
        digest = hashlib.sha256(repr((self.positions, self.quarter_turns)).encode())
        digest = digest.hexdigest()[:8]
        return f"clifford{len(self.positions)}#{digest}"

    def key_fields(self) -> dict[str, Any]:
        turns = None if self.quarter_turns is None else list(self.quarter_turns)
        return {self.kind: {"positions": list(self.positions), "quarter_turns": turns}}

    def apply(self, compiled: Any, profile: Any, tools: Any) -> Applied:
        circuit = substitute(compiled.circuit, self.positions, self.quarter_turns)
        return Applied(dataclasses.replace(compiled, circuit=circuit), profile, 1.0)


register_transform(CliffordSubstitution)
