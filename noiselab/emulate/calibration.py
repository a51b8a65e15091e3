"""Readout-calibration circuits: exact outcome distributions of prepared basis states.

Each circuit prepares a computational basis state with the device's noisy X gates, all in one
layer (qubits left in 0 idle meanwhile, with relaxation), then measures; readout assignment error
(:mod:`noiselab.emulate.readout`) is applied to the result. The mitigation layer samples finite
shots from these distributions to estimate assignment matrices.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from noiselab.common.errors import InputError
from noiselab.emulate.channels import native_basis_change, qubit_layer_superop
from noiselab.emulate.device_inputs import layer_spec_for, logical_readout, noise_model_for
from noiselab.emulate.readout import apply_readout
from noiselab.emulate.written import WrittenNoise

#: Largest number of measured qubits for calibration over all 2**n basis states.
MAX_FULL_CALIBRATION_QUBITS = 10


@dataclass(frozen=True, eq=False)  # arrays inside: compare fields explicitly
class CalibrationDistributions:
    """Exact outcome distributions of readout-calibration circuits.

    Each circuit prepares the computational basis state ``states[i]`` (``bit_l = (s >> l) & 1``
    for measured qubit l) with the device's noisy X gates, all in one layer (qubits left in 0
    idle meanwhile, with relaxation), then measures. ``probs_ideal[i]``: before readout error;
    ``probs[i]``: after it (per-qubit confusion and crosstalk), shape ``(n_states, 2**n)``.
    ``measured[l]``: circuit position of measured qubit l (physical ``patch[measured[l]]``).
    """

    states: tuple[int, ...]
    probs_ideal: np.ndarray
    probs: np.ndarray
    num_qubits: int
    patch: tuple[int, ...]
    measured: tuple[int, ...]

    def row(self, state: int) -> np.ndarray:
        return self.probs[self.states.index(state)]


def calibration_states(kind: str | Sequence[int | str], num_qubits: int) -> tuple[int, ...]:
    """States of a calibration set.

    ``"per_qubit"``: all zeros and all ones; ``"single"``: all zeros, then each qubit alone in 1;
    ``"full"``: all 2**n basis states (n <= 10); or explicit states (ints, or bit strings in
    qiskit order: qubit 0 rightmost).
    """
    n = num_qubits
    if isinstance(kind, str):
        if kind == "per_qubit":
            return (0, 2**n - 1)
        if kind == "single":
            return (0, *(1 << q for q in range(n)))
        if kind == "full":
            if n > MAX_FULL_CALIBRATION_QUBITS:
                raise InputError(
                    f"calibration: 'full' on {n} qubits ({2**n} circuits); allowed: at most "
                    f"{MAX_FULL_CALIBRATION_QUBITS} qubits, or 'per_qubit' / 'single'"
                )
            return tuple(range(2**n))
        raise InputError(
            f"calibration: states: {kind!r}; allowed: per_qubit, single, full or a list of states"
        )
    out = []
    for s in kind:
        if isinstance(s, str):
            if len(s) != n or set(s) - {"0", "1"}:
                raise InputError(f"calibration: state {s!r}; allowed: {n} characters 0/1")
            s = int(s, 2)
        if not 0 <= int(s) < 2**n:
            raise InputError(f"calibration: state {s}; allowed: 0..{2**n - 1}")
        out.append(int(s))
    return tuple(out)


def calibration_distributions(
    profile: Any,
    patch: Sequence[int],
    states: str | Sequence[int | str] = "per_qubit",
    *,
    measured: Sequence[int] | None = None,
    noise_model: Any = None,
    written: WrittenNoise | None = None,
) -> CalibrationDistributions:
    """Exact distributions of readout-calibration circuits on ``patch`` of ``profile``.

    ``measured``: circuit positions to read out, in output-bit order (default every patch
    position; pass ``compiled.logical_to_circuit`` for logical order matching
    :class:`~noiselab.emulate.engine.BasisDistributions`). The mitigation layer samples finite
    shots from ``probs`` to estimate assignment matrices; state-preparation error (noisy X
    gates, relaxation during them) is part of the result. ``written``: take the channels from
    these numpy channels of the same profile instead of a qiskit-aer noise model (no noise
    model is built; equal to rounding).
    """
    patch = tuple(int(q) for q in patch)
    k = len(patch)
    qubits = list(range(k)) if measured is None else [int(c) for c in measured]
    n = len(qubits)
    if len(set(qubits)) != n or any(not 0 <= c < k for c in qubits):
        raise InputError(f"calibration: measured: {qubits}; allowed: distinct positions 0..{k - 1}")
    chosen = calibration_states(states, n)
    nm = None
    if written is None:
        nm = noise_model_for(profile, patch) if noise_model is None else noise_model
    spec = layer_spec_for(profile, k)
    flip = native_basis_change("FLIP", spec.native_1q)
    flip_ns = {c: sum(spec.duration_ns(g, c) for g, _ in flip) for c in qubits}
    ground = np.array([1.0, 0, 0, 0], dtype=complex)  # vec(|0><0|), column stacking
    cache: dict[tuple[int, int, float], np.ndarray] = {}

    def populations(c: int, bit: int, layer_ns: float) -> np.ndarray:
        key = (c, bit, layer_ns)
        if key not in cache:
            gates = flip if bit else ()
            if written is not None:
                sop = written.layer_superop(c, gates, layer_ns, spec)
            else:
                sop = qubit_layer_superop(nm, k, c, gates, layer_ns, spec)
            rho = (sop @ ground).reshape(2, 2, order="F")
            cache[key] = np.clip(np.real(np.diag(rho)), 0.0, 1.0)
        return cache[key]

    ideal = np.empty((len(chosen), 2**n))
    for i, s in enumerate(chosen):
        bits = [(s >> l) & 1 for l in range(n)]
        layer_ns = max((flip_ns[qubits[l]] for l in range(n) if bits[l]), default=0.0)
        p = np.ones(1)
        for l in range(n):
            p = np.kron(populations(qubits[l], bits[l], layer_ns), p)
        ideal[i] = p / p.sum()
    mats, terms = logical_readout(profile, patch, qubits)
    return CalibrationDistributions(
        states=chosen,
        probs_ideal=ideal,
        probs=apply_readout(ideal, mats, terms),
        num_qubits=n,
        patch=patch,
        measured=tuple(qubits),
    )


def per_qubit_matrices(p_all0: np.ndarray, p_all1: np.ndarray, n: int) -> list[np.ndarray]:
    """2x2 assignment matrices A_q[measured, prepared] from the all-0 and all-1 calibration runs."""
    k = np.arange(2**n)
    mats = []
    for q in range(n):
        bit = (k >> q) & 1
        e0 = float(np.dot(p_all0, bit))  # P(1 | 0)
        e1 = float(np.dot(p_all1, 1 - bit))  # P(0 | 1)
        mats.append(np.array([[1.0 - e0, e1], [e0, 1.0 - e1]]))
    return mats


def per_qubit_assignment(
    profile: Any, patch: Sequence[int], measured: Sequence[int], noise_model: Any = None
) -> list[np.ndarray]:
    """Exact 2x2 matrices ``A_l[reported, prepared]`` that the all-0 and all-1 calibration
    circuits of :func:`calibration_distributions` give for each measured qubit l (its
    marginals), without forming any 2**n distribution; readout crosstalk (joint and
    outcome-dependent flips) is left out, so this equals the marginals of
    ``calibration_distributions`` only without crosstalk."""
    patch = tuple(int(q) for q in patch)
    k = len(patch)
    qubits = [int(c) for c in measured]
    nm = noise_model_for(profile, patch) if noise_model is None else noise_model
    spec = layer_spec_for(profile, k)
    flip = native_basis_change("FLIP", spec.native_1q)
    flip_ns = {c: sum(spec.duration_ns(g, c) for g, _ in flip) for c in qubits}
    layer_ns = max(flip_ns.values(), default=0.0)  # the all-1 state flips every qubit at once
    ground = np.array([1.0, 0, 0, 0], dtype=complex)
    mats, _ = logical_readout(profile, patch, qubits)
    out = []
    for l, c in enumerate(qubits):
        cols = []
        for gates, ns in (((), 0.0), (flip, layer_ns)):
            sop = qubit_layer_superop(nm, k, c, gates, ns, spec)
            rho = (sop @ ground).reshape(2, 2, order="F")
            pop = np.clip(np.real(np.diag(rho)), 0.0, 1.0)
            cols.append(np.asarray(mats[l], dtype=float) @ (pop / pop.sum()))
        out.append(np.column_stack(cols))
    return out
