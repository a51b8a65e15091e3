"""Pauli channels: the Pauli twirl of a channel, a learned model of it, and its inverse as a
quasi-probability distribution over Pauli corrections (probabilistic error cancellation).

Conventions: a Pauli channel on m qubits is rho -> sum_P p_P P rho P over the 4**m Pauli labels
(qiskit order: the rightmost letter acts on the first qubit). Its Pauli fidelities are
f_Q = sum_P p_P s(P, Q), with s = +1 where P and Q commute and -1 where they anticommute; the
map p -> f is inverted by p_P = 4**-m sum_Q s(P, Q) f_Q. The Pauli twirl of a channel with Kraus
operators K keeps the diagonal of its process matrix, p_P = sum_K |Tr(P K)|**2 / 4**m.

The inverse of a Pauli channel is the Pauli quasi-channel with fidelities 1/f_Q, i.e.
q_P = 4**-m sum_Q s(P, Q) / f_Q; its sampling cost is the 1-norm C = sum_P |q_P| (Temme,
Bravyi and Gambetta, PRL 119, 180509 (2017)). A model "learned" with a relative error e has
every error rate p_P (P != I) multiplied by 1 + e (a systematic, deterministic error of the
learning).
"""

from __future__ import annotations

import functools
import itertools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from qiskit.quantum_info import Pauli


@functools.lru_cache(maxsize=4)
def pauli_labels(m: int) -> tuple[str, ...]:
    """The 4**m Pauli labels on m qubits, identity first."""
    return tuple("".join(t) for t in itertools.product("IXYZ", repeat=m))


@functools.lru_cache(maxsize=4)
def pauli_matrices(m: int) -> np.ndarray:
    """(4**m, 2**m, 2**m) matrices of :func:`pauli_labels`."""
    return np.array([Pauli(lab).to_matrix() for lab in pauli_labels(m)])


@functools.lru_cache(maxsize=4)
def commutation_signs(m: int) -> np.ndarray:
    """s[P, Q] = +1 where P and Q commute, -1 where they anticommute."""
    paulis = [Pauli(lab) for lab in pauli_labels(m)]
    return np.array([[1.0 if a.commutes(b) else -1.0 for b in paulis] for a in paulis])


def twirled_rates(kraus: Sequence[np.ndarray]) -> np.ndarray:
    """Error probabilities p_P of the Pauli twirl of the channel with Kraus operators ``kraus``."""
    ops = [np.asarray(k, dtype=complex) for k in kraus]
    d = ops[0].shape[0]
    m = d.bit_length() - 1
    paulis = pauli_matrices(m)
    # Tr(P K) for every P and K: P is Hermitian, so Tr(P K) = sum_ij conj(P_ji) ... = vdot
    coeffs = np.array([[np.trace(p @ k) for k in ops] for p in paulis])
    rates = np.sum(np.abs(coeffs) ** 2, axis=1) / d**2
    return rates / rates.sum()  # removes rounding; the twirl of a CPTP map sums to one


def fidelities(rates: np.ndarray) -> np.ndarray:
    """Pauli fidelities f_Q of the Pauli channel with error probabilities ``rates``."""
    m = (len(rates).bit_length() - 1) // 2
    return commutation_signs(m) @ rates


def learned_rates(rates: np.ndarray, learning_error: float) -> np.ndarray:
    """The model's error probabilities: every p_P (P != I) times 1 + ``learning_error``."""
    out = np.asarray(rates, dtype=float) * (1.0 + learning_error)
    out[0] = 1.0 - out[1:].sum()
    return out


@dataclass(frozen=True, eq=False)
class Inverse:
    """The inverse of a Pauli channel on m qubits as a quasi-probability distribution:
    ``quasi[P]`` over :func:`pauli_labels` (sum 1), ``norm`` = sum |quasi| (the sampling cost C)."""

    quasi: np.ndarray
    norm: float

    @property
    def num_qubits(self) -> int:
        return (len(self.quasi).bit_length() - 1) // 2

    def signed_kraus(self) -> list[np.ndarray]:
        """Kraus operators on the m qubits plus one flag qubit (the last, most significant):
        sqrt(|q_P| / C) P, with the flag flipped where q_P < 0. Sampling a correction with
        probability |q_P| / C and recording its sign, as a CPTP map."""
        m = self.num_qubits
        flip = np.array([[0.0, 1.0], [1.0, 0.0]])
        out = []
        for q, p in zip(self.quasi, pauli_matrices(m), strict=True):
            if abs(q) <= 1e-16:
                continue
            flag = flip if q < 0 else np.eye(2)
            out.append(np.sqrt(abs(q) / self.norm) * np.kron(flag, p))
        return out


def pauli_inverse(rates: np.ndarray) -> Inverse:
    """The inverse of the Pauli channel ``rates`` (ValueError when a fidelity is <= 0)."""
    f = fidelities(rates)
    if np.any(f <= 1e-12):
        raise ValueError("a Pauli fidelity of the model is <= 0: the channel is not invertible")
    m = (len(rates).bit_length() - 1) // 2
    quasi = commutation_signs(m) @ (1.0 / f) / 4**m
    return Inverse(quasi, float(np.sum(np.abs(quasi))))
