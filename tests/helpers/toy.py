"""A small hand-built noisy device (qiskit-aer noise model + transpiler target) for tests and
benchmarks of the emulation layer that must not depend on the profile schema (test helper, not
part of the package).

Natives rz (virtual, 0 ns), sx and x (35 ns), cx (300 ns) on a line of qubits; relaxation
(T1, T2 in us) after every gate and on every delay, depolarizing error after gates.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.circuit import Delay, Parameter
from qiskit.circuit.library import CXGate, RZGate, SXGate, XGate
from qiskit.transpiler import InstructionProperties, Target
from qiskit_aer.noise import NoiseModel, depolarizing_error, thermal_relaxation_error
from qiskit_aer.noise.passes import RelaxationNoisePass

from noiselab.device.aer_adapter import add_noise_pass
from noiselab.emulate.channels import BasisLayerSpec
from noiselab.emulate.readout import assignment_matrix

SX_NS = 35.0
CX_NS = 300.0


@dataclass(frozen=True)
class ToyDevice:
    """Noise model, scheduling target, basis-layer spec and readout matrices of a line device."""

    num_qubits: int
    noise_model: Any
    target: Any
    layer: BasisLayerSpec
    readout: tuple[np.ndarray, ...]


def toy_device(
    num_qubits: int,
    *,
    scale: float = 1.0,
    t1_us: float = 80.0,
    t2_us: float = 60.0,
    p1: float = 5e-4,
    p2: float = 8e-3,
    readout_seed: int = 3,
) -> ToyDevice:
    """A line device; ``scale`` multiplies every error rate (and divides T1, T2)."""
    k = num_qubits
    rng = np.random.default_rng(readout_seed)
    t1 = [t1_us * (1 + 0.2 * rng.random()) * 1e-6 / max(scale, 1e-12) for _ in range(k)]
    t2 = [
        min(t2_us * (1 + 0.2 * rng.random()) * 1e-6 / max(scale, 1e-12), 2 * t1[q])
        for q in range(k)
    ]
    nm = NoiseModel(basis_gates=["rz", "sx", "x", "cx"])
    if scale > 0:
        for q in range(k):
            relax = thermal_relaxation_error(t1[q], t2[q], SX_NS * 1e-9)
            err = depolarizing_error(p1 * scale, 1).compose(relax)
            nm.add_quantum_error(err, ["sx", "x"], [q])
        for q in range(k - 1):
            for a, b in ((q, q + 1), (q + 1, q)):
                ra = thermal_relaxation_error(t1[a], t2[a], CX_NS * 1e-9)
                rb = thermal_relaxation_error(t1[b], t2[b], CX_NS * 1e-9)
                err = depolarizing_error(p2 * scale, 2).compose(rb.expand(ra))
                nm.add_quantum_error(err, ["cx"], [a, b])
        add_noise_pass(nm, RelaxationNoisePass(t1, t2, op_types=[Delay]))
    target = Target(num_qubits=k, dt=None)
    theta = Parameter("theta")
    target.add_instruction(
        RZGate(theta), {(q,): InstructionProperties(duration=0.0) for q in range(k)}
    )
    target.add_instruction(
        SXGate(), {(q,): InstructionProperties(duration=SX_NS * 1e-9) for q in range(k)}
    )
    target.add_instruction(
        XGate(), {(q,): InstructionProperties(duration=SX_NS * 1e-9) for q in range(k)}
    )
    pairs = [(q, q + 1) for q in range(k - 1)] + [(q + 1, q) for q in range(k - 1)]
    target.add_instruction(
        CXGate(), {p: InstructionProperties(duration=CX_NS * 1e-9) for p in pairs}
    )
    target.add_instruction(Delay(Parameter("t")), {(q,): None for q in range(k)})
    durations = {}
    for q in range(k):
        durations[("sx", q)] = SX_NS
        durations[("x", q)] = SX_NS
        durations[("rz", q)] = 0.0
    layer = BasisLayerSpec(native_1q=("rz", "sx", "x"), durations_ns=durations)
    readout = tuple(
        assignment_matrix(
            min(0.5, scale * (0.005 + 0.01 * rng.random())),
            min(0.5, scale * (0.01 + 0.03 * rng.random())),
        )
        for _ in range(k)
    )
    return ToyDevice(k, nm, target, layer, readout)


def toy_circuit(num_qubits: int, layers: int = 2, seed: int = 7) -> Any:
    """A layered hardware-efficient circuit (ry, rz, cx ladder) with random bound angles."""
    rng = np.random.default_rng(seed)
    qc = QuantumCircuit(num_qubits)
    for _ in range(layers):
        for q in range(num_qubits):
            qc.ry(rng.uniform(0, np.pi), q)
            qc.rz(rng.uniform(0, 2 * np.pi), q)
        for q in range(num_qubits - 1):
            qc.cx(q, q + 1)
    for q in range(num_qubits):
        qc.ry(rng.uniform(0, np.pi), q)
    return qc


def compile_toy(circuit: Any, device: ToyDevice, seed: int = 11) -> Any:
    """Transpile and ALAP-schedule ``circuit`` for ``device`` (delays inserted on idle qubits)."""
    return transpile(
        circuit,
        target=device.target,
        scheduling_method="alap",
        optimization_level=1,
        seed_transpiler=seed,
    )
