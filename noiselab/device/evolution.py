"""Always-on coherent terms written into a scheduled circuit as explicit gates.

Three profile channels act continuously, not after one gate, so they are written into the
scheduled circuit (every qubit's timeline from its delays and the profile's durations) before
any simulation, and the density matrix, the trajectory unraveller and an echo pulse inserted by
a transform all see the same evolution:

* always-on ZZ of a linked pair, rate nu (kHz): H = h nu Z x Z / 4, i.e. rzz(pi nu t) over a time
  t (conditional phase 2 pi nu t). It acts during idle windows and during every gate on either
  qubit except the pair's own two-qubit gate, whatever the gate (cz included, though it commutes
  with ZZ): the gate's calibration tunes its conditional phase with the static ZZ present, so
  that part is in the calibrated gate, and what calibration misses is ``zz_angle_rad`` (profile
  key ``zz_during_own_gate: in_calibration``, the default; ``extra`` lets it act then too, for a
  gate calibrated without the static ZZ present). Between
  two gates touching the pair it is one rzz; during a gate (or a run of overlapping gates) on
  the pair's qubits half of that time is put before and half after
  (midpoint rule: exact for instantaneous pulses, and a symmetric echo still cancels exactly);
* quasi-static detuning of a qubit, std sigma (kHz): rz(2 pi delta t) with delta constant in a
  shot and Gaussian N(0, sigma^2) between shots, placed like the ZZ. The emulated state is the
  average over delta by Gauss-Hermite quadrature (probabilists' nodes, one independent
  dimension per detuned qubit): :func:`evolution_ensemble` returns weighted circuits;
* spectator phase phi of a linked pair: after each two-qubit gate of the pair, rz(phi) on every
  other patch qubit linked to either of its qubits.

The basis-change layer before measurement (a few single-qubit gates) and the readout
calibration circuits see none of these terms: a small omission in the experiment's favour.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit.library import RZGate, RZZGate

from noiselab.common.errors import ProblemTooLargeError
from noiselab.device.profile import VIRTUAL_GATES, DeviceProfile, check_patch

_UNIT_SECONDS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9, "ps": 1e-12}
#: at most this many quadrature circuits per simulation (product over detuned qubits)
MAX_QUADRATURE_CIRCUITS = 4096
#: quadrature error target of each detuned qubit's phase average (see ``quadrature_nodes``)
QUADRATURE_TOLERANCE = 1e-10
MAX_NODES_PER_QUBIT = 48


@dataclass(frozen=True)
class EvolutionSpec:
    """Always-on terms on a patch (circuit indices): ZZ ``(i, j, nu_khz)``, detuning
    ``(i, sigma_khz)``, spectator phases ``(i, j, phi_rad)`` of linked pairs i < j, and the
    durations the schedule is read with (ns)."""

    zz: tuple[tuple[int, int, float], ...]
    detuning: tuple[tuple[int, float], ...]
    spectators: tuple[tuple[int, int, float], ...]
    links: tuple[tuple[int, int], ...]
    two_qubit_gate: str
    single_qubit_ns: float
    two_qubit_ns: float
    #: the profile's ``zz_during_own_gate``: "in_calibration" (the pair's own gate carries no
    #: extra ZZ) or "extra" (the ZZ acts during it too)
    zz_during_own_gate: str = "in_calibration"

    @property
    def is_empty(self) -> bool:
        return not (self.zz or self.detuning or self.spectators)


def evolution_spec(profile: DeviceProfile, patch: Sequence[int]) -> EvolutionSpec | None:
    """The always-on terms of ``profile`` on ``patch`` (circuit qubit i = ``patch[i]``), or None."""
    patch = check_patch(profile, patch)
    links = tuple(
        (i, j)
        for i in range(len(patch))
        for j in range(i + 1, len(patch))
        if profile.has_pair(patch[i], patch[j])
    )
    zz, spect = [], []
    for i, j in links:
        pp = profile.pair(patch[i], patch[j])
        if pp.zz_rate_khz != 0.0:
            zz.append((i, j, float(pp.zz_rate_khz)))
        if pp.spectator_phase_rad != 0.0:
            spect.append((i, j, float(pp.spectator_phase_rad)))
    det = [
        (i, float(profile.qubit(q).detuning_std_khz))
        for i, q in enumerate(patch)
        if profile.qubit(q).detuning_std_khz > 0.0
    ]
    d = profile.durations
    spec = EvolutionSpec(
        tuple(zz),
        tuple(det),
        tuple(spect),
        links,
        profile.two_qubit_gate,
        float(d.single_qubit_ns),
        float(d.two_qubit_ns),
        profile.zz_during_own_gate,
    )
    return None if spec.is_empty else spec


@dataclass(frozen=True)
class _Timed:
    start_ns: float
    end_ns: float
    name: str
    qubits: tuple[int, ...]
    index: int


def _duration_ns(op: object, nq: int, spec: EvolutionSpec) -> float:
    name = op.name  # type: ignore[attr-defined]
    if name == "delay":
        unit = getattr(op, "unit", "s")
        return float(op.duration) * _UNIT_SECONDS.get(unit, 1.0) * 1e9  # type: ignore[attr-defined]
    if name == "barrier" or name in VIRTUAL_GATES or name == "rzz":
        return 0.0
    return spec.two_qubit_ns if nq == 2 else spec.single_qubit_ns


def _timeline(circuit: QuantumCircuit, spec: EvolutionSpec) -> tuple[list[_Timed], float]:
    clock = [0.0] * circuit.num_qubits
    out = []
    for k, inst in enumerate(circuit.data):
        qs = tuple(circuit.find_bit(q).index for q in inst.qubits)
        if not qs:
            continue
        start = max(clock[q] for q in qs)
        end = start + _duration_ns(inst.operation, len(qs), spec)
        for q in qs:
            clock[q] = end
        out.append(_Timed(start, end, inst.operation.name, qs, k))
    return out, max(clock, default=0.0)


def _commutes_with_z(name: str) -> bool:
    return name in ("delay", "barrier", "rz", "rzz", "cz", "z", "s", "sdg", "t", "tdg")


def _phase_events(
    timed: list[_Timed], total_ns: float, qubits: tuple[int, ...], own_gate: str | None
) -> list[tuple[float, float]]:
    """(time ns, accumulated time ns) at which to place the term of ``qubits``: between runs of
    gates touching them, with each run's active time split half before, half after."""

    def own(t: _Timed) -> bool:
        return own_gate is not None and t.name == own_gate and set(t.qubits) == set(qubits)

    # the pair's own gate is a block even where it commutes with Z (cz): its time is taken out
    busy = sorted(
        (
            t
            for t in timed
            if set(t.qubits) & set(qubits) and (own(t) or not _commutes_with_z(t.name))
        ),
        key=lambda t: (t.start_ns, t.index),
    )
    blocks: list[list[float]] = []  # [start, end, time of the pair's own gate]
    for t in busy:
        own_ns = t.end_ns - t.start_ns if own(t) else 0.0
        if blocks and t.start_ns < blocks[-1][1]:
            blocks[-1][1] = max(blocks[-1][1], t.end_ns)
            blocks[-1][2] += own_ns
        else:
            blocks.append([t.start_ns, t.end_ns, own_ns])
    for b in blocks:  # active time: the run's span minus the pair's own gate (no overlap)
        b[2] = max(0.0, b[1] - b[0] - b[2])
    if not blocks:
        return [(0.0, total_ns)]
    events = [(blocks[0][0], blocks[0][0] + blocks[0][2] / 2)]
    for prev, nxt in itertools.pairwise(blocks):
        events.append((nxt[0], prev[2] / 2 + (nxt[0] - prev[1]) + nxt[2] / 2))
    last = blocks[-1]
    events.append((last[1], last[2] / 2 + (total_ns - last[1])))
    return events


@dataclass(frozen=True)
class _Placed:
    time_ns: float
    order: int
    seq: int
    gate: object
    qubits: tuple[int, ...]


def evolve_circuit(
    circuit: QuantumCircuit,
    spec: EvolutionSpec,
    detuning_khz: Sequence[float] | None = None,
) -> QuantumCircuit:
    """``circuit`` with the always-on ZZ, the spectator phases and (``detuning_khz[m]`` for
    ``spec.detuning[m]``, a fixed offset per shot) the detuning written in as rzz / rz gates."""
    timed, total_ns = _timeline(circuit, spec)
    placed: list[_Placed] = []
    for t in timed:
        inst = circuit.data[t.index]
        placed.append(_Placed(t.start_ns, 1, 2 * t.index, inst.operation, t.qubits))
        if t.name == spec.two_qubit_gate and len(t.qubits) == 2:
            a, b = sorted(t.qubits)
            for i, j, phi in spec.spectators:
                if (i, j) != (a, b):
                    continue
                for other in sorted({q for p in spec.links for q in p if set(p) & {a, b}} - {a, b}):
                    placed.append(_Placed(t.end_ns, 0, 2 * t.index + 1, RZGate(phi), (other,)))
    extra = 0
    for i, j, nu in spec.zz:
        own = spec.two_qubit_gate if spec.zz_during_own_gate == "in_calibration" else None
        for when, dt in _phase_events(timed, total_ns, (i, j), own):
            theta = math.pi * nu * dt * 1e-6  # kHz x ns
            if theta != 0.0:
                extra += 1
                placed.append(_Placed(when, 0, -extra, RZZGate(theta), (i, j)))
    if detuning_khz is not None:
        for (q, _), delta in zip(spec.detuning, detuning_khz, strict=True):
            for when, dt in _phase_events(timed, total_ns, (q,), None):
                angle = 2.0 * math.pi * delta * dt * 1e-6
                if angle != 0.0:
                    extra += 1
                    placed.append(_Placed(when, 0, -extra, RZGate(angle), (q,)))
    placed.sort(key=lambda p: (p.time_ns, p.order, p.seq))
    out = QuantumCircuit(circuit.num_qubits, name=circuit.name)
    for p in placed:
        out.append(p.gate, list(p.qubits))  # type: ignore[arg-type]
    return out


def quadrature_nodes(max_phase_rad: float) -> int:
    """Gauss-Hermite nodes so that E[exp(i x z)], z ~ N(0, 1), |x| <= ``max_phase_rad``, is
    integrated to ``QUADRATURE_TOLERANCE`` (more than ``MAX_NODES_PER_QUBIT``: refused by the
    caller): the m-node rule is exact to degree 2m - 1, and the
    Taylor remainder is bounded by x^(2m) (2m-1)!! / (2m)! = x^(2m) / (2^m m!)."""
    x2 = max_phase_rad**2
    log_tol = math.log(QUADRATURE_TOLERANCE)
    m = 2
    log_fact = math.log(2.0)  # log(m!), kept incrementally
    while m <= MAX_NODES_PER_QUBIT and m * math.log(x2 / 2.0 + 1e-300) - log_fact >= log_tol:
        m += 1
        log_fact += math.log(m)
    return m


def evolution_ensemble(
    circuit: QuantumCircuit, spec: EvolutionSpec | None
) -> tuple[tuple[float, QuantumCircuit], ...]:
    """Weighted circuits whose weighted state average is the emulated state: one circuit without
    detuning, else the Gauss-Hermite product rule over the detuned qubits."""
    if spec is None or spec.is_empty:
        return ((1.0, circuit),)
    if not spec.detuning:
        return ((1.0, evolve_circuit(circuit, spec)),)
    _, total_ns = _timeline(circuit, spec)
    rules = []
    count = 1
    for _, sigma in spec.detuning:
        m = quadrature_nodes(2.0 * math.pi * sigma * total_ns * 1e-6)
        z, w = np.polynomial.hermite_e.hermegauss(min(m, MAX_NODES_PER_QUBIT + 1))
        rules.append((sigma * z, w / w.sum()))
        count *= m
    if count > MAX_QUADRATURE_CIRCUITS or any(len(r[0]) > MAX_NODES_PER_QUBIT for r in rules):
        raise ProblemTooLargeError(
            f"qubits.detuning_std_khz: quasi-static detuning on {len(spec.detuning)} qubits "
            f"needs {count} quadrature circuits for this {total_ns:.0f} ns circuit; allowed: at "
            f"most {MAX_QUADRATURE_CIRCUITS} (detuning on fewer qubits, or smaller)"
        )
    out = []
    for combo in itertools.product(*(range(len(r[0])) for r in rules)):
        weight = float(np.prod([rules[k][1][n] for k, n in enumerate(combo)]))
        deltas = [rules[k][0][n] for k, n in enumerate(combo)]
        out.append((weight, evolve_circuit(circuit, spec, deltas)))
    return tuple(out)
