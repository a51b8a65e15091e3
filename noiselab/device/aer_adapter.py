"""The one place that touches qiskit-aer's private noise-model fields.

qiskit-aer (0.15-0.18) has no public API for what the device and emulator layers need from a
``NoiseModel``; every private access in noiselab goes through this module, so an aer upgrade
is checked here only (``tests/test_device_aer_adapter.py`` pins each function):

* ``NoiseModel._custom_noise_passes`` (list): the only way to give a model a run-time noise pass
  (relaxation on delays); ``NoiseModel.from_backend`` itself appends to it.
* ``NoiseModel._pass_manager()``: the passes as one ``PassManager``; aer applies it only to
  circuits that contain delays, so we run it ourselves where we write noise into circuits.
* ``NoiseModel._local_quantum_errors`` / ``_default_quantum_errors`` (dicts by gate name, then
  qubits): the error aer attaches after a gate. The public ``to_dict()`` serializes every error
  (slow, lossy); we read the same ``QuantumError`` objects aer uses.
* ``QuantumChannelInstruction._quantum_error``: the ``QuantumError`` behind an instruction a noise
  pass inserted; its public ``params`` hold only aer's internal encoding.
* an instruction named ``superop`` whose one parameter is the superoperator matrix: aer's circuit
  compiler runs it as a superoperator in the density-matrix method (no public class builds one
  for a circuit; ``SuperOp.to_instruction`` converts to Kraus operators).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from qiskit.circuit import Instruction


def add_noise_pass(noise_model: Any, noise_pass: Any) -> None:
    """Register a run-time noise pass (a qiskit-aer ``LocalNoisePass``) on ``noise_model``."""
    noise_model._custom_noise_passes.append(noise_pass)


def noise_passes(noise_model: Any) -> Any:
    """The model's run-time noise passes as one ``PassManager``, or ``None`` (no model/passes)."""
    if noise_model is None:
        return None
    return noise_model._pass_manager()


def run_noise_passes(circuit: Any, noise_model: Any) -> Any:
    """``circuit`` with the model's noise passes applied, whatever instructions it holds.

    Unlike aer's own run (which skips circuits without delays), a gate-triggered pass is never
    skipped."""
    passes = noise_passes(noise_model)
    return circuit if passes is None else passes.run(circuit)


def gate_error(noise_model: Any, name: str, qubits: Sequence[int]) -> Any:
    """The ``QuantumError`` aer attaches after gate ``name`` on ``qubits`` (local first, then the
    all-qubit one), or ``None``."""
    if noise_model is None:
        return None
    err = noise_model._local_quantum_errors.get(name, {}).get(tuple(qubits))
    if err is None:
        err = noise_model._default_quantum_errors.get(name)
    return err


def instruction_error(op: Any) -> Any:
    """The ``QuantumError`` of a ``quantum_channel`` instruction inserted by a noise pass."""
    return op._quantum_error


def superop_instruction(matrix: np.ndarray) -> Any:
    """A circuit instruction that qiskit-aer's density-matrix method applies as the
    superoperator ``matrix`` (qiskit's column stacking, on the qubits it is appended to)."""
    num_qubits = (int(matrix.shape[0]).bit_length() - 1) // 2  # dimension 4**k
    return Instruction("superop", num_qubits, 0, [np.asarray(matrix)])
