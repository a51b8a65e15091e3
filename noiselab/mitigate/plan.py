"""Measurement plan: qubit-wise commuting groups, one basis each, weight vectors, shot allocation.

Conventions (qiskit's): qubit 0 is the rightmost character of a Pauli label and the least
significant bit of an outcome index. A basis label has one of X, Y, Z per qubit; outcome bit q is 0
for the +1 eigenvalue of the basis Pauli on qubit q.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
from qiskit.quantum_info import SparsePauliOp

from noiselab.common.errors import InputError

_IMAG_TOL = 1e-9


@dataclass(frozen=True, eq=False)
class MeasurementGroup:
    """Terms measured in one basis; ``weights[k]``: their summed eigenvalue on outcome k (Ha).

    ``dense_weights``: that vector of 2**n entries when built eagerly; None: computed on first
    use of ``weights`` (a method without distributions, such as Pauli propagation, never asks;
    a 20-qubit plan with ~1400 groups would otherwise hold ~12 GB)."""

    basis: str
    labels: tuple[str, ...]
    coeffs: np.ndarray
    dense_weights: np.ndarray | None = None

    @property
    def weights(self) -> np.ndarray:
        if self.dense_weights is None:
            n = len(self.basis)
            object.__setattr__(self, "dense_weights", weight_vector(self.labels, self.coeffs, n))
        return self.dense_weights  # type: ignore[return-value]


@dataclass(frozen=True, eq=False)
class MeasurementPlan:
    """A Pauli-sum observable split into a constant (Ha) and qubit-wise commuting groups."""

    num_qubits: int
    constant: float
    groups: tuple[MeasurementGroup, ...]

    @property
    def bases(self) -> tuple[str, ...]:
        return tuple(g.basis for g in self.groups)

    @property
    def n_groups(self) -> int:
        return len(self.groups)

    def weights(self) -> dict[str, np.ndarray]:
        """Weight vector per basis label."""
        return {g.basis: g.weights for g in self.groups}


def _real_coeffs(op: SparsePauliOp, what: str) -> np.ndarray:
    coeffs = np.asarray(op.coeffs)
    if np.max(np.abs(coeffs.imag), initial=0.0) > _IMAG_TOL:
        raise InputError(f"{what}: coefficients must be real (a Hermitian Pauli sum)")
    return coeffs.real.astype(float)


def support_mask(label: str) -> int:
    """Bit mask of the qubits where a Pauli label is not the identity."""
    n = len(label)
    return sum(1 << q for q in range(n) if label[n - 1 - q] != "I")


def parity_signs(masks: Sequence[int] | np.ndarray, num_qubits: int) -> np.ndarray:
    """Array (n_masks, 2**n) of (-1)**popcount(k & mask): eigenvalues of Z-strings on outcomes k."""
    k = np.arange(2**num_qubits, dtype=np.uint64)
    m = np.asarray(masks, dtype=np.uint64).reshape(-1, 1)
    parity = np.bitwise_count(k[None, :] & m) & 1
    return 1.0 - 2.0 * parity.astype(float)


def weight_vector(labels: Sequence[str], coeffs: np.ndarray, num_qubits: int) -> np.ndarray:
    """w[k] = sum_t c_t (-1)**(parity of the bits of k on term t's support)."""
    if len(labels) == 0:
        return np.zeros(2**num_qubits)
    masks = [support_mask(lab) for lab in labels]
    return np.asarray(coeffs, dtype=float) @ parity_signs(masks, num_qubits)


def basis_of(labels: Iterable[str], num_qubits: int) -> str:
    """Basis of qubit-wise commuting labels: their letter per qubit, Z where all are I."""
    chars = ["Z"] * num_qubits
    for lab in labels:
        for i, ch in enumerate(lab):
            if ch != "I":
                if chars[i] != "Z" and chars[i] != ch:
                    raise ValueError(f"labels do not commute qubit-wise at position {i}")
                chars[i] = ch
    return "".join(chars)


def measurable_in(label: str, basis: str) -> bool:
    """True when a Pauli label's eigenvalue is read off a measurement in ``basis``."""
    return all(a == "I" or a == b for a, b in zip(label, basis, strict=True))


def _split_constant(op: SparsePauliOp, what: str) -> tuple[float, SparsePauliOp | None]:
    op = op.simplify(atol=1e-14)
    labels = op.paulis.to_labels()
    coeffs = _real_coeffs(op, what)
    n = op.num_qubits
    ident = "I" * n
    constant = float(sum(c for lab, c in zip(labels, coeffs, strict=True) if lab == ident))
    keep = [i for i, lab in enumerate(labels) if lab != ident]
    if not keep:
        return constant, None
    return constant, SparsePauliOp([labels[i] for i in keep], coeffs[keep])


def _groups_from(op: SparsePauliOp, dense: bool = True) -> list[MeasurementGroup]:
    n = op.num_qubits
    groups = []
    for part in op.group_commuting(qubit_wise=True):
        labels = tuple(part.paulis.to_labels())
        coeffs = part.coeffs.real.astype(float)
        groups.append(
            MeasurementGroup(
                basis=basis_of(labels, n),
                labels=labels,
                coeffs=coeffs,
                dense_weights=weight_vector(labels, coeffs, n) if dense else None,
            )
        )
    # deterministic order, independent of the colouring's order
    groups.sort(key=lambda g: g.basis)
    merged: dict[str, MeasurementGroup] = {}
    for g in groups:
        if g.basis in merged:  # two colour classes may share a basis; measure them once
            h = merged[g.basis]
            labels = h.labels + g.labels
            coeffs = np.concatenate([h.coeffs, g.coeffs])
            summed = h.weights + g.weights if dense else None
            merged[g.basis] = MeasurementGroup(g.basis, labels, coeffs, summed)
        else:
            merged[g.basis] = g
    return list(merged.values())


def build_plan(op: SparsePauliOp, what: str = "hamiltonian", dense: bool = True) -> MeasurementPlan:
    """Measurement plan of a Hermitian Pauli sum (coefficients in Ha); ``dense=False`` leaves
    every group's 2**n weight vector to be computed on first use."""
    constant, rest = _split_constant(op, what)
    groups = _groups_from(rest, dense) if rest is not None else []
    return MeasurementPlan(num_qubits=op.num_qubits, constant=constant, groups=tuple(groups))


def first_compatible(labels: Sequence[str], bases: Sequence[str]) -> np.ndarray:
    """Index of the first basis each label is measurable in, -1 for none (``measurable_in``,
    vectorized: the verification bases of a 12-qubit problem compare ~4000 terms to ~800 bases)."""
    out = np.full(len(labels), -1, dtype=int)
    if not labels or not bases:
        return out
    lab = np.frombuffer("".join(labels).encode("ascii"), dtype=np.uint8).reshape(len(labels), -1)
    bas = np.frombuffer("".join(bases).encode("ascii"), dtype=np.uint8).reshape(len(bases), -1)
    chunk = 512  # keeps the (terms, bases, qubits) mask small
    for s in range(0, len(labels), chunk):
        part = lab[s : s + chunk]
        ok = ((part[:, None, :] == bas[None, :, :]) | (part[:, None, :] == ord("I"))).all(axis=2)
        out[s : s + chunk] = np.where(ok.any(axis=1), ok.argmax(axis=1), -1)
    return out


def assign_to_bases(
    op: SparsePauliOp, bases: Sequence[str], what: str = "operator"
) -> tuple[float, dict[str, np.ndarray], tuple[str, ...]]:
    """Spread the terms of ``op`` over existing ``bases``; group the rest into new bases.

    Returns the constant, a weight vector per basis that receives terms (existing or new), and the
    new basis labels (in a deterministic order). Each term goes to the first compatible basis.
    """
    n = op.num_qubits
    constant, rest = _split_constant(op, what)
    weights: dict[str, np.ndarray] = {}
    if rest is None:
        return constant, weights, ()
    per_basis: dict[str, tuple[list[str], list[float]]] = {}
    left_labels: list[str] = []
    left_coeffs: list[float] = []
    labels = rest.paulis.to_labels()
    first = first_compatible(labels, list(bases))
    for lab, c, j in zip(labels, rest.coeffs.real, first, strict=True):
        if j >= 0:
            b = bases[j]
            per_basis.setdefault(b, ([], []))
            per_basis[b][0].append(lab)
            per_basis[b][1].append(float(c))
        else:
            left_labels.append(lab)
            left_coeffs.append(float(c))
    for b, (labs, cs) in per_basis.items():
        weights[b] = weight_vector(labs, np.array(cs), n)
    new: list[str] = []
    if left_labels:
        for g in _groups_from(SparsePauliOp(left_labels, np.array(left_coeffs))):
            weights[g.basis] = weights.get(g.basis, 0.0) + g.weights
            new.append(g.basis)
    return constant, weights, tuple(new)


def largest_remainder(shares: np.ndarray, total: int, minimum: int = 1) -> np.ndarray:
    """Integers >= ``minimum`` summing to ``total``, close to ``total * shares / sum(shares)``."""
    shares = np.asarray(shares, dtype=float)
    m = len(shares)
    if m == 0:
        return np.zeros(0, dtype=int)
    if total < minimum * m:
        raise InputError(
            f"shots: a budget of {total} shots cannot give {minimum} shot(s) to each of {m} "
            f"circuits; allowed: at least {minimum * m}"
        )
    shares = np.where(np.isfinite(shares) & (shares > 0), shares, 0.0)
    if shares.sum() <= 0:
        shares = np.ones(m)
    free = total - minimum * m
    ideal = free * shares / shares.sum()
    base = np.floor(ideal).astype(int)
    remainder = free - int(base.sum())
    order = np.argsort(-(ideal - base), kind="stable")
    base[order[:remainder]] += 1
    return base + minimum


def allocate_shots(
    sigmas: Sequence[float] | Sequence[Sequence[float]] | np.ndarray,
    total: int,
    rule: str = "by_deviation",
    split: str = "equal",
) -> np.ndarray:
    """Integer shots per measured basis summing to ``total`` (at least one each); the one
    allocation of noiselab (recipes use it for every estimate).

    ``sigmas``: single-shot standard deviations sigma_b of the estimate's part measured in each
    basis (Ha), one row per circuit (a 1-d array: one circuit); the result has their shape.
    Within a circuit, ``rule`` ``"uniform"``: equal shares; ``"by_deviation"``: N_b proportional
    to sigma_b, which minimizes sum_b sigma_b**2 / N_b at fixed sum N_b (Lagrange multipliers;
    Wecker, Hastings and Troyer, PRA 92, 042303 (2015)); a circuit whose sigmas are all zero gets
    equal shares. Across circuits, ``split`` ``"equal"``: the same share each; ``"weighted"``:
    N_i proportional to sqrt(C_i), the minimizer of sum_i C_i / N_i, with C_i the variance of
    circuit i's part at one shot in all (C_i = (sum_b sigma_b)**2 by deviation, m sum_b
    sigma_b**2 for m bases shared equally).
    """
    if rule not in ("uniform", "by_deviation"):
        raise InputError(f"allocation: unknown rule {rule!r}; allowed: uniform, by_deviation")
    if split not in ("equal", "weighted"):
        raise InputError(f"shot_split: unknown rule {split!r}; allowed: equal, weighted")
    sig = np.asarray(sigmas, dtype=float)
    rows = np.atleast_2d(sig)
    k, m = rows.shape
    within: list[np.ndarray] = []
    cost: list[float] = []
    for sd in rows:
        if rule == "uniform" or sd.sum() <= 0:
            within.append(np.full(m, 1.0 / m))
            cost.append(m * float(np.sum(sd * sd)))
        else:
            within.append(sd / sd.sum())
            cost.append(float(sd.sum()) ** 2)
    if split == "weighted" and sum(cost) > 0:
        frac = np.sqrt(np.array(cost))
        frac = frac / frac.sum()
    else:
        frac = np.full(k, 1.0 / k)
    shares = np.concatenate([frac[i] * within[i] for i in range(k)])
    return largest_remainder(shares, int(total)).reshape(sig.shape)
