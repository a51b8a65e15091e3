"""Noisy expectation values by Pauli propagation in the Heisenberg picture (no density matrix).

An observable is a real combination of Pauli strings (Hermitian Paulis; qiskit's qubit order).
It is carried backwards through the circuit, last instruction first: a Pauli rotation
``exp(-i theta/2 G)`` keeps a string that commutes with G and sends one that anticommutes to
``cos(theta) P + sin(theta) (i G P)`` (Clifford angles do not branch); a Pauli channel multiplies
each string by its Pauli fidelity. At the start the value on ``|0...0>`` is the sum of the
coefficients of the strings without X or Y. Aharonov, Gao, Landau, Liu and Vazirani (STOC 2023),
Schuster, Yin, Gao and Yao (2024), Rudolph, Jones, Teng, Angrisani and Holmes (2025).

**Noise is Pauli-twirled**: each gate's (and each idle window's) channel is replaced by its
Pauli-diagonal part (Wallman and Emerson 2016), so coherent errors (ZZ, over-rotation) and the
non-unital part of amplitude damping act only through their twirled fidelities. That is exact
for a recipe that twirls and an approximation otherwise; callers must say so.

**Truncation**: after every instruction, strings with ``|coefficient| < min_abs_coeff`` (or
weight above ``max_weight``) are dropped. Each dropped term ``c P`` changes the result by
``|c <P>_rho|`` for the state at that point, so the sum of the dropped ``|c|`` bounds the
truncation error (unital Pauli channels and unitaries never increase a Heisenberg operator's
norm). The bound is reported beside the value; it is loose by orders of magnitude (most dropped
strings are damped by the noise still ahead), so :mod:`noiselab.emulate.pauli_truncation`
estimates the error itself, with a standard error (``on_drop`` / ``inject`` / ``cut`` below
serve it).

Strings are two uint64 words (X bits, Z bits): at most 64 qubits. A string ``(x, z)`` is the
Hermitian operator ``i^{|x & z|} X^x Z^z`` (so ``(1, 1)`` is Y).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from noiselab.common.errors import ProblemTooLargeError
from noiselab.common.memory import format_bytes, memory_budget

MAX_PAULI_QUBITS = 64
_ONE = np.uint64(1)
#: Peak resident bytes per string alive, measured 218-222 (hchain-8 untruncated and at 1e-8:
#: 4.5e6 and 1.6e6 strings; the rotation's branches, the merge's sort), doubled for what the
#: truncation estimate keeps beside them.
BYTES_PER_LIVE_STRING = 512


@dataclass(frozen=True)
class PauliTerms:
    """Real combinations of Pauli strings: observable ``t`` is the sum of ``coeff[k] *
    P(x[k], z[k])`` over the k with ``tag[k] == t`` (several observables propagate together:
    numpy works on one long array instead of many short ones)."""

    x: np.ndarray  # uint64 (m,)
    z: np.ndarray  # uint64 (m,)
    coeff: np.ndarray  # float64 (m,)
    tag: np.ndarray  # int64 (m,)

    def __len__(self) -> int:
        return int(self.coeff.shape[0])

    def select(self, mask: np.ndarray) -> PauliTerms:
        return PauliTerms(self.x[mask], self.z[mask], self.coeff[mask], self.tag[mask])

    @staticmethod
    def join(parts: Sequence[PauliTerms]) -> PauliTerms:
        return PauliTerms(
            *(np.concatenate([getattr(p, f) for p in parts]) for f in ("x", "z", "coeff", "tag"))
        )

    @property
    def n_tags(self) -> int:
        return int(self.tag.max()) + 1 if len(self) else 0


@dataclass(frozen=True)
class Rotation:
    """``exp(-i theta/2 G)`` for the Pauli string ``G = (x, z)`` (theta in rad)."""

    x: int
    z: int
    theta: float


@dataclass(frozen=True)
class PauliDiagonal:
    """A Pauli channel on ``qubits``: string restricted to them (index ``sum_j (x_j + 2 z_j) 4^j``
    over ``qubits[j]``) is multiplied by ``fidelity[index]``."""

    qubits: tuple[int, ...]
    fidelity: np.ndarray  # float64 (4**k,)


Instruction = Rotation | PauliDiagonal


@dataclass(frozen=True)
class Truncation:
    """What is dropped after each instruction: ``|c| < min_abs_coeff``, weight > ``max_weight``;
    more than ``max_strings`` alive is refused (None: as many as the memory budget holds at
    :data:`BYTES_PER_LIVE_STRING` each)."""

    min_abs_coeff: float = 0.0
    max_weight: int | None = None
    max_strings: int | None = None


#: No truncation (the default).
EXACT = Truncation()


@dataclass(frozen=True)
class Propagated:
    """Value on ``|0...0>`` of each propagated observable (by tag) and the bound on what
    truncation lost from each; ``value`` / ``truncation_bound`` are those of tag 0."""

    values: np.ndarray  # float64 (n_tags,)
    bounds: np.ndarray  # float64 (n_tags,)
    peak_strings: int
    dropped_strings: int

    @property
    def value(self) -> float:
        return float(self.values[0])

    @property
    def truncation_bound(self) -> float:
        return float(self.bounds[0])


# ---- the Pauli algebra on bit words ---------------------------------------------------------


def popcount(words: np.ndarray) -> np.ndarray:
    """Set bits per uint64 word (int64)."""
    return np.bitwise_count(words).astype(np.int64)


def anticommutes(x: np.ndarray, z: np.ndarray, gx: int, gz: int) -> np.ndarray:
    """Which strings anticommute with ``G = (gx, gz)`` (symplectic product odd)."""
    s = popcount(x & np.uint64(gz)) + popcount(z & np.uint64(gx))
    return (s & 1).astype(bool)


def terms_from_labels(labels: Sequence[str], coeffs: Sequence[float]) -> PauliTerms:
    """Pauli labels (qiskit order: the last character is qubit 0) with real coefficients."""
    n = max((len(s) for s in labels), default=0)
    if n > MAX_PAULI_QUBITS:
        raise ProblemTooLargeError(
            f"pauli propagation: {n} qubits; allowed: at most {MAX_PAULI_QUBITS}"
        )
    xs = np.zeros(len(labels), dtype=np.uint64)
    zs = np.zeros(len(labels), dtype=np.uint64)
    for k, label in enumerate(labels):
        for q, ch in enumerate(reversed(label)):
            bit = _ONE << np.uint64(q)
            if ch in "XY":
                xs[k] |= bit
            if ch in "ZY":
                zs[k] |= bit
    coeff = np.asarray(coeffs, dtype=float)
    return merge(PauliTerms(xs, zs, coeff, np.zeros(len(labels), dtype=np.int64)))


def merge(terms: PauliTerms) -> PauliTerms:
    """Equal strings of one tag summed into one (sorted by tag, then string)."""
    if len(terms) == 0:
        return terms
    width = int((terms.x | terms.z).max()).bit_length()
    tag_bits = int(terms.tag.max()).bit_length()
    cols: tuple[np.ndarray, ...]
    if 2 * width + tag_bits <= 64:  # (tag, x, z) in one 64-bit key
        w = np.uint64(width)
        cols = ((terms.tag.astype(np.uint64) << (w + w)) | (terms.x << w) | terms.z,)
        # stable: a timsort, near linear on the few sorted runs a rotation leaves
        order = np.argsort(cols[0], kind="stable")
    else:
        cols = (terms.z, terms.x, terms.tag)
        order = np.lexsort(cols)  # the last key is the primary one
    same = np.ones(len(order) - 1, dtype=bool)
    for col in cols:
        sorted_col = col[order]
        same &= sorted_col[1:] == sorted_col[:-1]
    starts = np.concatenate([[True], ~same])
    coeff = np.bincount(np.cumsum(starts) - 1, weights=terms.coeff[order])
    first = order[starts]
    return PauliTerms(terms.x[first], terms.z[first], coeff, terms.tag[first])


# ---- one instruction, Heisenberg picture -----------------------------------------------------


def apply_rotation(terms: PauliTerms, rot: Rotation) -> PauliTerms:
    """``U^dagger O U`` for ``U = exp(-i theta/2 G)``."""
    anti = anticommutes(terms.x, terms.z, rot.x, rot.z)
    if not anti.any():
        return terms
    c, s = math.cos(rot.theta), math.sin(rot.theta)
    c = 0.0 if abs(c) < 1e-15 else c
    s = 0.0 if abs(s) < 1e-15 else s
    moved = terms.select(anti)
    # the cosine part in place (keeps the strings' order: the merge's sort meets sorted runs)
    kept = terms.select(~anti) if c == 0.0 else terms
    if c != 0.0:
        kept = PauliTerms(terms.x, terms.z, np.where(anti, c * terms.coeff, terms.coeff), terms.tag)
    parts = [kept]
    if s != 0.0:
        # i G P: the phase of G P is i^k with k odd for anticommuting strings: i^(k+1) = +-1
        k = (_phase_gp(moved.x, moved.z, rot.x, rot.z) + 1) % 4
        sign = np.where(k == 0, 1.0, -1.0)
        parts.append(
            PauliTerms(
                moved.x ^ np.uint64(rot.x),
                moved.z ^ np.uint64(rot.z),
                s * sign * moved.coeff,
                moved.tag,
            )
        )
    out = PauliTerms.join(parts)
    return merge(out) if c != 0.0 and s != 0.0 else out


def _phase_gp(x: np.ndarray, z: np.ndarray, gx: int, gz: int) -> np.ndarray:
    """Exponent k of ``G P = i^k P(gx ^ x, gz ^ z)`` per string P."""
    gxw, gzw = np.uint64(gx), np.uint64(gz)
    k = popcount(np.asarray(gxw & gzw)) + popcount(x & z) + 2 * popcount(gzw & x)
    return (k - popcount((x ^ gxw) & (z ^ gzw))) % 4


def apply_pauli_diagonal(terms: PauliTerms, channel: PauliDiagonal) -> PauliTerms:
    """Each string times the channel's fidelity of its restriction to the channel's qubits."""
    index = np.zeros(len(terms), dtype=np.int64)
    for j, q in enumerate(channel.qubits):
        qb = np.uint64(q)
        xb = ((terms.x >> qb) & _ONE).astype(np.int64)
        zb = ((terms.z >> qb) & _ONE).astype(np.int64)
        index += (xb + 2 * zb) << (2 * j)
    return PauliTerms(terms.x, terms.z, terms.coeff * channel.fidelity[index], terms.tag)


def _truncate(
    terms: PauliTerms,
    rule: Truncation,
    bounds: np.ndarray,
    cut: np.ndarray | None = None,
    roulette: Roulette | None = None,
    step: int = 0,
) -> tuple[PauliTerms, PauliTerms | None]:
    """Drop what ``rule`` drops (``cut[tag]``, when given, replaces ``min_abs_coeff``); each
    tag's dropped ``|c|`` is added to ``bounds``. Returns (kept, dropped or None). With
    ``roulette``, a term below the threshold survives with probability ``|c| / threshold`` as
    ``sign(c) * threshold`` (unbiased; what does not survive joins no bound)."""
    limit = rule.min_abs_coeff if cut is None else cut[terms.tag]
    keep = np.abs(terms.coeff) >= limit
    if roulette is not None and not keep.all():
        below = np.flatnonzero(~keep)
        sub = terms.select(below)
        lim = limit if np.isscalar(limit) else limit[below]
        live = roulette(step, sub) * lim < np.abs(sub.coeff)
        if live.any():
            coeff = terms.coeff.copy()
            coeff[below[live]] = np.sign(sub.coeff[live]) * (lim if np.isscalar(lim) else lim[live])
            terms = PauliTerms(terms.x, terms.z, coeff, terms.tag)
            keep[below[live]] = True
        keep &= terms.coeff != 0.0
        if rule.max_weight is not None:
            heavy = keep & (popcount(terms.x | terms.z) > rule.max_weight)
            bounds += np.bincount(
                terms.tag[heavy], weights=np.abs(terms.coeff[heavy]), minlength=len(bounds)
            )
            keep &= ~heavy
        return terms.select(keep), None
    keep &= terms.coeff != 0.0
    if rule.max_weight is not None:
        keep &= popcount(terms.x | terms.z) <= rule.max_weight
    if keep.all():
        return terms, None
    lost = ~keep
    bounds += np.bincount(terms.tag[lost], weights=np.abs(terms.coeff[lost]), minlength=len(bounds))
    return terms.select(keep), terms.select(lost & (terms.coeff != 0.0))


#: ``on_drop(step, dropped)``: what truncation dropped with ``program[:step]`` still ahead.
DropHook = Callable[[int, PauliTerms], None]
#: ``roulette(step, terms)``: one uniform number in [0, 1) per term (see ``_truncate``).
Roulette = Callable[[int, PauliTerms], np.ndarray]


def propagate(
    observable: PauliTerms,
    program: Sequence[Instruction],
    rule: Truncation = EXACT,
    *,
    cut: np.ndarray | None = None,
    on_drop: DropHook | None = None,
    inject: Mapping[int, PauliTerms] | None = None,
    roulette: Roulette | None = None,
) -> Propagated:
    """Value on ``|0...0>`` of each observable (tag) after ``program`` (circuit order), with its
    truncation bound (sum of dropped ``|c|``).

    ``cut[tag]``: a per-tag coefficient threshold instead of ``rule.min_abs_coeff``;
    ``on_drop``: called with everything truncation drops; ``inject[step]``: terms added to the
    propagated ones once ``program[step:]`` has been applied (``step == len(program)``: at the
    start), e.g. dropped strings carried on by :mod:`noiselab.emulate.pauli_truncation`;
    ``roulette``: truncation by Russian roulette instead of dropping (unbiased, random)."""
    inject = inject or {}
    n_tags = max([observable.n_tags, 1, *(t.n_tags for t in inject.values())])
    bounds = np.zeros(n_tags)
    steps = len(program)
    start = [observable, inject[steps]] if steps in inject else [observable]
    terms, lost = _truncate(merge(PauliTerms.join(start)), rule, bounds, cut, roulette, steps)
    dropped = _dropped(lost, steps, on_drop)
    peak = len(terms)
    cap = rule.max_strings if rule.max_strings is not None else budget_strings()
    for step in range(steps - 1, -1, -1):
        inst = program[step]
        if isinstance(inst, Rotation):
            terms = apply_rotation(terms, inst)
        else:
            terms = apply_pauli_diagonal(terms, inst)
        terms, lost = _truncate(terms, rule, bounds, cut, roulette, step)
        dropped += _dropped(lost, step, on_drop)
        if step in inject:
            terms = merge(PauliTerms.join([terms, inject[step]]))
        peak = max(peak, len(terms))
        if len(terms) > cap:
            need = format_bytes(len(terms) * BYTES_PER_LIVE_STRING)
            where = "the memory budget's share of this process"
            if rule.max_strings is None:
                where = memory_budget().describe()
            raise ProblemTooLargeError(
                f"pauli propagation: {len(terms)} Pauli strings alive (about {need}); allowed: at "
                f"most {cap} ({where}; raise emulation.truncation.min_abs_coeff or set max_weight)"
            )
    on_zero = terms.x == 0
    values = np.bincount(terms.tag[on_zero], weights=terms.coeff[on_zero], minlength=n_tags)
    return Propagated(values, bounds, peak, dropped)


def budget_strings(processes: int = 1) -> int:
    """Strings alive that the memory budget holds, shared by ``processes`` processes."""
    return max(1, memory_budget().usable // BYTES_PER_LIVE_STRING // max(1, processes))


def _dropped(lost: PauliTerms | None, step: int, on_drop: DropHook | None) -> int:
    if lost is None:
        return 0
    if on_drop is not None and len(lost):
        on_drop(step, lost)
    return len(lost)


# ---- channels to Pauli fidelities -----------------------------------------------------------

_SINGLE = {
    (0, 0): np.eye(2, dtype=complex),
    (1, 0): np.array([[0, 1], [1, 0]], dtype=complex),
    (0, 1): np.array([[1, 0], [0, -1]], dtype=complex),
    (1, 1): np.array([[0, -1j], [1j, 0]], dtype=complex),
}


@functools.lru_cache(maxsize=512)
def pauli_matrix(index: int, k: int) -> np.ndarray:
    """The Hermitian Pauli of ``index`` (``sum_j (x_j + 2 z_j) 4^j``) on k qubits, qiskit order
    (qubit 0 is the least significant tensor factor)."""
    out = np.eye(1, dtype=complex)
    for j in range(k):
        d = (index >> (2 * j)) & 3
        out = np.kron(_SINGLE[(d & 1, d >> 1)], out)
    out.setflags(write=False)  # shared by every caller (memoized)
    return out


def twirled_fidelities(kraus: Iterable[np.ndarray], k: int) -> np.ndarray:
    """Pauli fidelities ``Tr(P E^dagger(P)) / 2^k`` of a channel given by Kraus operators
    (the Heisenberg-picture diagonal; equal to the Schroedinger one, ``Tr(P E(P)) / 2^k``)."""
    ops = [np.asarray(a, dtype=complex) for a in kraus]
    d = 2**k
    out = np.empty(4**k)
    for i in range(4**k):
        p = pauli_matrix(i, k)
        image = sum(a @ p @ a.conj().T for a in ops)
        out[i] = float(np.real(np.trace(p @ image))) / d
    return out


def gate_rotations(name: str, params: Sequence[float], qubits: Sequence[int]) -> list[Rotation]:
    """A native gate as Pauli rotations in circuit order (equal up to a global phase)."""
    q = [int(v) for v in qubits]

    def z(*qs: int) -> int:
        return sum(1 << v for v in qs)

    half = math.pi / 2
    if name in ("rz", "p", "u1"):
        return [Rotation(0, z(q[0]), float(params[0]))]
    if name == "rx":
        return [Rotation(z(q[0]), 0, float(params[0]))]
    if name == "ry":
        return [Rotation(z(q[0]), z(q[0]), float(params[0]))]
    if name == "sx":
        return [Rotation(z(q[0]), 0, half)]
    if name == "sxdg":
        return [Rotation(z(q[0]), 0, -half)]
    if name == "x":
        return [Rotation(z(q[0]), 0, math.pi)]
    if name == "y":
        return [Rotation(z(q[0]), z(q[0]), math.pi)]
    if name == "z":
        return [Rotation(0, z(q[0]), math.pi)]
    if name == "s":
        return [Rotation(0, z(q[0]), half)]
    if name == "sdg":
        return [Rotation(0, z(q[0]), -half)]
    if name == "h":  # H ~ Rz(pi/2) Rx(pi/2) Rz(pi/2)
        return [Rotation(0, z(q[0]), half), Rotation(z(q[0]), 0, half), Rotation(0, z(q[0]), half)]
    if name == "cz":  # CZ ~ exp(i pi/4 (1 - Z_a - Z_b + Z_a Z_b))
        a, b = q
        return [Rotation(0, z(a), half), Rotation(0, z(b), half), Rotation(0, z(a, b), -half)]
    if name == "cx":  # CX ~ exp(i pi/4 (1 - Z_c - X_t + Z_c X_t))
        c, t = q
        return [Rotation(0, z(c), half), Rotation(z(t), 0, half), Rotation(z(t), z(c), -half)]
    if name in ("rzz",):
        a, b = q
        return [Rotation(0, z(a, b), float(params[0]))]
    if name in ("id", "delay", "barrier"):
        return []
    raise ValueError(f"pauli propagation: gate {name!r} is not supported")
