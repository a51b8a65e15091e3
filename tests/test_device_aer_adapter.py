"""The qiskit-aer adapter (the one module reading aer's private noise-model fields): each access
still works on the installed aer, and no other module of the package or tests reads them."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit import Delay
from qiskit.quantum_info import DensityMatrix, SuperOp
from qiskit_aer import AerSimulator
from qiskit_aer.noise import NoiseModel, depolarizing_error, thermal_relaxation_error
from qiskit_aer.noise.passes import LocalNoisePass

from noiselab.device.aer_adapter import (
    add_noise_pass,
    gate_error,
    instruction_error,
    noise_passes,
    run_noise_passes,
    superop_instruction,
)

ROOT = Path(__file__).resolve().parents[1]
PRIVATE = re.compile(
    r"_local_quantum_errors|_default_quantum_errors|_custom_noise_passes|\._quantum_error\b"
    r"|_pass_manager\("
)


def test_gate_error_local_first_then_all_qubit() -> None:
    nm = NoiseModel(basis_gates=["rz", "sx", "cx"])
    local = depolarizing_error(0.1, 1)
    default = depolarizing_error(0.01, 1)
    nm.add_quantum_error(local, "sx", [1])
    nm.add_all_qubit_quantum_error(default, "sx")
    assert gate_error(nm, "sx", (1,)) == local
    assert gate_error(nm, "sx", (0,)) == default
    assert gate_error(nm, "cx", (0, 1)) is None
    assert gate_error(None, "sx", (0,)) is None


def test_noise_pass_round_trip() -> None:
    nm = NoiseModel()
    assert noise_passes(nm) is None
    err = thermal_relaxation_error(50e-6, 40e-6, 100e-9)
    add_noise_pass(nm, LocalNoisePass(lambda op, qubits: err, op_types=Delay, method="append"))
    qc = QuantumCircuit(1)
    qc.delay(100, 0, unit="ns")
    out = run_noise_passes(qc, nm)
    channels = [i.operation for i in out.data if i.operation.name == "quantum_channel"]
    assert len(channels) == 1
    assert instruction_error(channels[0]) == err


def test_no_private_aer_access_outside_the_adapter() -> None:
    offenders = [
        str(p.relative_to(ROOT))
        for folder in ("noiselab", "tests")
        for p in sorted((ROOT / folder).rglob("*.py"))
        if p.name not in ("aer_adapter.py", Path(__file__).name)
        and PRIVATE.search(p.read_text(encoding="utf-8"))
    ]
    assert offenders == []


def test_superop_instruction_runs_as_that_channel() -> None:
    chan = SuperOp(thermal_relaxation_error(30e-6, 20e-6, 5e-6))
    qc = QuantumCircuit(2)
    qc.h(0)
    qc.cx(0, 1)
    qc.append(superop_instruction(chan.expand(chan).data), [0, 1])
    ref = QuantumCircuit(2)
    ref.h(0)
    ref.cx(0, 1)
    # source: qiskit.quantum_info DensityMatrix.evolve with the same channel
    expected = DensityMatrix(ref).evolve(chan.expand(chan), [0, 1])
    qc.save_density_matrix(label="rho")
    rho = AerSimulator(method="density_matrix").run(qc, shots=1).result().data(0)["rho"]
    np.testing.assert_allclose(np.asarray(rho), expected.data, atol=1e-12)
