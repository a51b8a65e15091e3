"""Frequencies of the energy along each circuit parameter, for parameter-shift gradients.

A parameter x that enters one gate U(x) = exp(-i x G) (up to a fixed factor) gives an energy
E(x) that is a trigonometric polynomial whose frequencies are the differences of G's
eigenvalues (Wierichs, Izaac, Wang and Lin, Quantum 6, 677 (2022)). They are read here from the
eigenphases of U(t) U(0)^dagger at a small t; a single Pauli rotation rx(x) gives the one
frequency 1, a fermionic excitation the frequencies 1 and 2 (in its own units).
"""

from __future__ import annotations

import numpy as np
from qiskit import QuantumCircuit
from qiskit.quantum_info import Operator

from noiselab.common.errors import input_error

_PROBE = 1e-3  # rad: eigenphases stay far from the branch cut
_TOL = 1e-6


def parameter_frequencies(circuit: QuantumCircuit) -> list[tuple[float, int]]:
    """(base frequency, order) per parameter in ``circuit.parameters`` order: E along the
    parameter has frequencies that are multiples 1..order of the base (rad^-1).

    Refused in one line when a parameter enters more than one gate or the frequencies are not
    multiples of one base (parameter-shift rules need equidistant frequencies).
    """
    out = []
    for param in circuit.parameters:
        gates = [inst for inst in circuit.data if param in _params_of(inst.operation)]
        if len(gates) != 1:
            raise input_error(
                None, "rehearse.optimizer",
                f"parameter-shift gradients need each parameter in one gate ({param} is in "
                f"{len(gates)})", "spsa, cobyla, nelder_mead",
            )  # fmt: skip
        out.append(_frequencies(gates[0], param))
    return out


def _params_of(op: object) -> set:
    found: set = set()
    for p in getattr(op, "params", ()):
        found |= set(getattr(p, "parameters", ()))
    return found


def _frequencies(inst: object, param: object) -> tuple[float, int]:
    op = inst.operation  # type: ignore[attr-defined]
    k = op.num_qubits
    sub = QuantumCircuit(k)
    sub.append(op, range(k))
    u0 = Operator(sub.assign_parameters({param: 0.0})).data
    u1 = Operator(sub.assign_parameters({param: _PROBE})).data
    phases = np.angle(np.linalg.eigvals(u1 @ u0.conj().T)) / _PROBE
    diffs = np.abs(phases[:, None] - phases[None, :]).ravel()
    freqs = np.unique(np.round(diffs[diffs > _TOL], 6))
    if freqs.size == 0:
        return 1.0, 1  # the energy does not depend on the parameter: any rule gives 0
    base = float(freqs.min())
    ratios = freqs / base
    if np.any(np.abs(ratios - np.round(ratios)) > 1e-4):
        raise input_error(
            None, "rehearse.optimizer",
            f"parameter {param} has frequencies {freqs.tolist()} that are not multiples of one",
            "spsa, cobyla, nelder_mead",
        )  # fmt: skip
    return base, round(float(ratios.max()))
