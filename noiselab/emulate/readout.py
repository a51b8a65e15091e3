"""Readout assignment error applied analytically to exact distributions.

Convention (REFERENCES.md, readout): a per-qubit assignment matrix ``A[measured, prepared]``,
``A = [[1 - P(1|0), P(0|1)], [P(1|0), 1 - P(0|1)]]`` (columns are the prepared state, each column
sums to 1). Uncorrelated errors act on a distribution as ``A_{n-1} x ... x A_0``; we never build
that 2**n x 2**n matrix but apply each 2x2 along its own axis of the reshaped vector.

Correlated readout (crosstalk) acts on a pair of qubits ``(a, b)`` after the per-qubit matrices.
A term is ``(a, b, c)`` with a number c, the device layer's joint flip (both reported bits flip
together with probability c: ``p -> (1 - c) p + c p[m ^ (1<<a) ^ (1<<b)]``, see
:mod:`noiselab.device.profile`), or ``(a, b, M)`` with a general 4x4 column-stochastic matrix
indexed ``i = bit_a + 2 * bit_b`` (``a`` the lower bit inside the pair).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from noiselab.common.errors import InputError

#: A crosstalk term: (qubit a, qubit b, joint-flip probability or 4x4 matrix on the pair).
PairMatrix = tuple[int, int, "float | np.ndarray"]


def joint_flip_matrix(c: float) -> np.ndarray:
    """4x4 pair matrix (index bit_a + 2*bit_b) of a joint flip with probability ``c``."""
    flip = np.zeros((4, 4))
    for i in range(4):
        flip[i ^ 3, i] = 1.0
    return (1.0 - c) * np.eye(4) + c * flip


def _num_qubits_of(length: int) -> int:
    n = int(length).bit_length() - 1
    if n < 0 or (1 << n) != length:
        raise InputError(f"probabilities: last axis has length {length}; allowed: a power of 2")
    return n


def apply_on_axis(x: np.ndarray, m: np.ndarray, axis: int) -> np.ndarray:
    """``m`` (2x2) applied along ``axis`` (length 2): y[.., i, ..] = sum_j m[i, j] x[.., j, ..].

    Four scaled adds on strided views: no transposed copies (faster than tensordot here).
    """
    shape = x.shape
    a = int(np.prod(shape[:axis], dtype=np.int64))
    v = x.reshape(a, 2, -1)
    y = np.empty(v.shape, dtype=np.result_type(x.dtype, m.dtype))
    x0, x1 = v[:, 0, :], v[:, 1, :]
    for i in (0, 1):
        np.multiply(x0, m[i, 0], out=y[:, i, :])
        y[:, i, :] += m[i, 1] * x1
    return y.reshape(shape)


def _axis(batch_ndim: int, n: int, q: int) -> int:
    # qubit 0 is the least significant bit, i.e. the last axis of the C-ordered reshape
    return batch_ndim + (n - 1 - q)


def apply_readout(
    probs: np.ndarray,
    matrices: Sequence[np.ndarray],
    crosstalk: Sequence[PairMatrix] = (),
) -> np.ndarray:
    """Apply per-qubit assignment matrices, then pair crosstalk, to distributions ``(..., 2**n)``.

    ``matrices[q]`` is qubit q's 2x2 assignment matrix (``None`` skips that qubit). Returns a new
    array of the same shape; leading axes are batch axes.
    """
    p = np.asarray(probs, dtype=float)
    n = _num_qubits_of(p.shape[-1])
    if len(matrices) != n:
        raise InputError(
            f"readout: {len(matrices)} assignment matrices for {n} qubits; allowed: one per qubit"
        )
    batch = p.shape[:-1]
    x = p.reshape(*batch, *(2,) * n)
    nb = len(batch)
    for q, a in enumerate(matrices):
        if a is None:
            continue
        a = np.asarray(a, dtype=float)
        if a.shape != (2, 2):
            raise InputError(f"readout: matrix of qubit {q} has shape {a.shape}; allowed: (2, 2)")
        x = apply_on_axis(x, a, _axis(nb, n, q))
    for qa, qb, m in crosstalk:
        if qa == qb or not (0 <= qa < n and 0 <= qb < n):
            raise InputError(
                f"readout: crosstalk pair ({qa}, {qb}); allowed: two different qubits 0..{n - 1}"
            )
        m4 = np.asarray(m, dtype=float)
        if m4.ndim == 0:
            m4 = joint_flip_matrix(float(m4))
        if m4.shape != (4, 4):
            raise InputError(f"readout: crosstalk matrix has shape {m4.shape}; allowed: (4, 4)")
        # m4[i_out, i_in] with i = bit_a + 2*bit_b  ->  t[out_b, out_a, in_b, in_a]
        t = m4.reshape(2, 2, 2, 2)
        axb, axa = _axis(nb, n, qb), _axis(nb, n, qa)
        y = np.tensordot(t, x, axes=([2, 3], [axb, axa]))
        x = np.moveaxis(y, [0, 1], [axb, axa])
    return np.ascontiguousarray(x.reshape(p.shape))


def assignment_matrix(p1_given_0: float, p0_given_1: float) -> np.ndarray:
    """2x2 assignment matrix ``A[measured, prepared]`` from the two flip probabilities."""
    return np.array([[1.0 - p1_given_0, p0_given_1], [p1_given_0, 1.0 - p0_given_1]])


def kron_readout_matrix(matrices: Sequence[np.ndarray]) -> np.ndarray:
    """The full 2**n x 2**n matrix ``A_{n-1} x ... x A_0`` (small n only; for tests and checks)."""
    n = len(matrices)
    if n > 10:
        raise InputError(f"readout: full matrix for {n} qubits; allowed: at most 10 qubits")
    out = np.ones((1, 1))
    for a in matrices:
        out = np.kron(np.asarray(a, dtype=float), out)
    return out


# ---- readout calibration ---------------------------------------------------------------------

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
) -> CalibrationDistributions:
    """Exact distributions of readout-calibration circuits on ``patch`` of ``profile``.

    ``measured``: circuit positions to read out, in output-bit order (default every patch
    position; pass ``compiled.logical_to_circuit`` for logical order matching
    :class:`~noiselab.emulate.engine.BasisDistributions`). The mitigation layer samples finite
    shots from ``probs`` to estimate assignment matrices; state-preparation error (noisy X
    gates, relaxation during them) is part of the result.
    """
    from noiselab.emulate.channels import native_basis_change, qubit_layer_superop
    from noiselab.emulate.engine import layer_spec_for, logical_readout, noise_model_for

    patch = tuple(int(q) for q in patch)
    k = len(patch)
    qubits = list(range(k)) if measured is None else [int(c) for c in measured]
    n = len(qubits)
    if len(set(qubits)) != n or any(not 0 <= c < k for c in qubits):
        raise InputError(f"calibration: measured: {qubits}; allowed: distinct positions 0..{k - 1}")
    chosen = calibration_states(states, n)
    nm = noise_model_for(profile, patch) if noise_model is None else noise_model
    spec = layer_spec_for(profile, k)
    flip = native_basis_change("FLIP", spec.native_1q)
    flip_ns = {c: sum(spec.duration_ns(g, c) for g, _ in flip) for c in qubits}
    ground = np.array([1.0, 0, 0, 0], dtype=complex)  # vec(|0><0|), column stacking
    cache: dict[tuple[int, int, float], np.ndarray] = {}

    def populations(c: int, bit: int, layer_ns: float) -> np.ndarray:
        key = (c, bit, layer_ns)
        if key not in cache:
            sop = qubit_layer_superop(nm, k, c, flip if bit else (), layer_ns, spec)
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
