"""A compiled circuit, its device noise and its measurement as a Pauli-propagation program.

Builds what :mod:`noiselab.emulate.pauli_propagation` runs: every native gate as Pauli
rotations followed by the Pauli-twirled channel the device's noise model attaches to it, every
idle window (``delay``) as the twirled relaxation channel the model's noise pass inserts, and
the measured observable of each measurement basis including the basis-change layer (its gates'
noise and the idle relaxation of qubits waiting for it, exactly, as single-qubit channels) and
the readout assignment matrix of each qubit. Readout crosstalk (joint flips) is left out: a
product of per-qubit observables cannot carry it (callers say so).

``pauli_energy(...)`` gives the energy a plan's grouped measurement would estimate, its variance
per shot of each group, and the truncation bound, without any density matrix.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from qiskit.quantum_info import Kraus

from noiselab.device.aer_adapter import gate_error, instruction_error, run_noise_passes
from noiselab.emulate.channels import BasisLayerSpec, EffectCache, layer_duration_ns
from noiselab.emulate.pauli_propagation import (
    EXACT,
    Instruction,
    PauliDiagonal,
    PauliTerms,
    Truncation,
    gate_rotations,
    merge,
    pauli_matrix,
    propagate,
    twirled_fidelities,
)

_ONE = np.uint64(1)


def circuit_program(circuit: object, noise_model: object | None) -> list[Instruction]:
    """The instructions of ``circuit`` (qiskit, native gates, scheduled) with twirled noise."""
    qc = run_noise_passes(circuit, noise_model) if noise_model is not None else circuit
    index = {bit: i for i, bit in enumerate(qc.qubits)}
    memo: dict[tuple[str, tuple[int, ...]], PauliDiagonal | None] = {}
    program: list[Instruction] = []
    for inst in qc.data:
        op = inst.operation
        qubits = tuple(index[b] for b in inst.qubits)
        if op.name in ("delay", "barrier", "measure"):
            continue
        if op.name == "quantum_channel":  # inserted by a noise pass (idle relaxation)
            program.append(_twirled(instruction_error(op), qubits))
            continue
        program.extend(gate_rotations(op.name, [float(p) for p in op.params], qubits))
        if noise_model is None:
            continue
        key = (op.name, qubits)
        if key not in memo:
            err = gate_error(noise_model, op.name, qubits)
            memo[key] = None if err is None else _twirled(err, qubits)
        if memo[key] is not None:
            program.append(memo[key])
    return program


def _twirled(error: object, qubits: tuple[int, ...]) -> PauliDiagonal:
    kraus = Kraus(error.to_quantumchannel()).data  # type: ignore[attr-defined]
    return PauliDiagonal(qubits, twirled_fidelities(kraus, len(qubits)))


def measured_qubit_observable(effects: np.ndarray, readout: np.ndarray | None) -> np.ndarray:
    """Pauli coefficients (index 0..3 as I, X, Z, Y by ``x + 2 z``) of the single-qubit
    observable ``sum_m (-1)^m sum_b R[m, b] E^b`` a measurement of this qubit reports.

    ``effects[b]`` (2x2): the Heisenberg image of ``|b><b|`` through the basis layer;
    ``readout[m, b]``: probability to report m when the qubit is in b (None: ideal)."""
    r = np.eye(2) if readout is None else np.asarray(readout, dtype=float)
    m_op = sum(((-1) ** m) * r[m, b] * effects[b] for m in (0, 1) for b in (0, 1))
    return np.array([np.real(np.trace(pauli_matrix(i, 1) @ m_op)) / 2 for i in range(4)])


def basis_observable(
    terms: Sequence[tuple[str, float]],
    qubit_observables: Mapping[int, np.ndarray],
    circuit_qubit: Sequence[int],
    width: int,
    min_abs_coeff: float = 0.0,
) -> PauliTerms:
    """``sum_t h_t prod_{q in supp t} M_q`` as Pauli strings on the circuit's qubits.

    ``terms``: (label over logical qubits, coefficient); ``qubit_observables[l]``: M of logical
    qubit l in this basis (from :func:`measured_qubit_observable`); ``circuit_qubit[l]``: its
    position in the circuit. Products below ``min_abs_coeff`` are dropped while expanding (their
    sum is not needed: they are far below any bound reported)."""
    xs: list[int] = []
    zs: list[int] = []
    cs: list[float] = []
    for label, h in terms:
        partial = [(0, 0, float(h))]
        for logical, ch in enumerate(reversed(label)):
            if ch == "I":
                continue
            m = qubit_observables[logical]
            q = int(circuit_qubit[logical])
            nxt = []
            for x, z, c in partial:
                for idx in range(4):
                    v = c * m[idx]
                    if v == 0.0 or abs(v) < min_abs_coeff:
                        continue
                    nxt.append((x | ((idx & 1) << q), z | ((idx >> 1) << q), v))
            partial = nxt
        for x, z, c in partial:
            xs.append(x)
            zs.append(z)
            cs.append(c)
    del width
    return merge(
        PauliTerms(np.array(xs, dtype=np.uint64), np.array(zs, dtype=np.uint64), np.array(cs))
    )


@dataclass(frozen=True)
class PauliEnergy:
    """Energy (Ha) of a grouped measurement by Pauli propagation, with its pieces."""

    energy_ha: float
    group_energy_ha: tuple[float, ...]
    group_variance_ha2: tuple[float, ...]  # per shot, of each group's estimator
    truncation_bound_ha: float  # on the energy (sum of the groups' bounds)
    peak_strings: int


def pauli_energy(
    circuit: object,
    noise_model: object | None,
    groups: Sequence[tuple[str, Sequence[tuple[str, float]]]],
    circuit_qubit: Sequence[int],
    layer: BasisLayerSpec,
    readout: Sequence[np.ndarray] | None,
    rule: Truncation = EXACT,
    constant_ha: float = 0.0,
) -> PauliEnergy:
    """Energy and per-shot variance of each measured group.

    ``groups``: (basis label over logical qubits, [(term label, coefficient), ...]) with every
    term qubit-wise compatible with its basis; ``readout[l]``: 2x2 assignment matrix of logical
    qubit l (None: ideal). The variance of a group's single-shot estimator ``sum_t h_t o_t`` is
    ``E[(sum h o)^2] - E[sum h o]^2``; each product ``o_t o_s`` of outcomes is the measured
    observable on the qubits where exactly one of t, s acts, so both moments are propagated."""
    width = int(circuit.num_qubits)  # type: ignore[attr-defined]
    program = circuit_program(circuit, noise_model)
    cache = EffectCache(noise_model, width, layer, noisy=noise_model is not None)
    energies, variances = [], []
    bound, peak = 0.0, 0
    for basis, terms in groups:
        measured = {int(circuit_qubit[l]): ch for l, ch in enumerate(reversed(basis)) if ch != "I"}
        layer_ns = layer_duration_ns(measured, layer)
        observables = {
            l: measured_qubit_observable(
                cache.get(int(circuit_qubit[l]), ch, layer_ns),
                None if readout is None else readout[l],
            )
            for l, ch in enumerate(reversed(basis))
            if ch != "I"
        }
        first = basis_observable(terms, observables, circuit_qubit, width)
        mean = propagate(first, program, rule)
        second = basis_observable(_squared_terms(terms), observables, circuit_qubit, width)
        moment = propagate(second, program, rule)
        energies.append(mean.value)
        variances.append(max(0.0, moment.value - mean.value**2))
        bound += mean.truncation_bound
        peak = max(peak, mean.peak_strings, moment.peak_strings)
    return PauliEnergy(
        float(constant_ha + sum(energies)),
        tuple(energies),
        tuple(variances),
        bound,
        peak,
    )


def _squared_terms(terms: Sequence[tuple[str, float]]) -> list[tuple[str, float]]:
    """``(sum_t h_t o_t)^2`` as outcome products: o_t o_s acts where exactly one of t, s does."""
    out: dict[str, float] = {}
    for lt, ht in terms:
        for ls, hs in terms:
            label = "".join(
                "I" if (a == "I") == (b == "I") else (a if a != "I" else b)
                for a, b in zip(lt, ls, strict=True)
            )
            out[label] = out.get(label, 0.0) + ht * hs
    return list(out.items())
