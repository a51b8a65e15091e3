"""qiskit-aer noise model from a device profile, plus the channels it is built from.

Per native gate, the error channel applied after the ideal gate is, in this order:

1. thermal relaxation of every qubit the gate acts on, over the gate duration;
2. a depolarizing channel on all those qubits, with parameter p chosen so that (1)+(2) have the
   quoted average infidelity exactly. The average infidelity of a composition with a
   depolarizing channel is affine in p (see :mod:`noiselab.device.thermal`), so p is solved in
   closed form. When relaxation alone exceeds the quoted error, p = 0 (a profile warning);
3. coherent terms on top: exp(-i theta/2 Z x Z) after the two-qubit gate (``zz_angle_rad``) and
   rx(f * angle) after sx (angle pi/2) and x (angle pi) (``over_rotation_fraction``).

rz is virtual: no error, zero duration. Readout assignment errors are not in the noise model;
:mod:`noiselab.device.readout_map` describes them for the emulator (decay during the readout is
part of P(0|1); ``readout_ns`` only sets the Target's Measure duration); its functions are
re-exported here.

Idle qubits: scheduled circuits (see :mod:`noiselab.device.compile`) carry ``delay``
instructions. :func:`build_noise_model` registers a noise pass that aer runs on every circuit
containing delays (``idle_relaxation=True``, the default): after each delay of duration t on a
qubit it appends thermal relaxation over t. Delay units s/ms/us/ns/ps are converted exactly;
``dt`` needs ``dt_s``. Alternatively call :func:`attach_idle_relaxation` on the circuit yourself
and build the model with ``idle_relaxation=False`` (never both: that doubles the idle decay).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from qiskit import QuantumCircuit
from qiskit.circuit import Delay
from qiskit.circuit.library import RXGate, RZZGate
from qiskit.quantum_info import PTM, Kraus, Operator, SuperOp, average_gate_fidelity
from qiskit_aer.noise import NoiseModel, QuantumError, thermal_relaxation_error
from qiskit_aer.noise.passes import LocalNoisePass

from noiselab.common.errors import InputError, input_error
from noiselab.device import thermal
from noiselab.device.aer_adapter import add_noise_pass
from noiselab.device.evolution import EvolutionSpec, evolution_spec
from noiselab.device.profile import VIRTUAL_GATES, DeviceProfile, check_patch
from noiselab.device.readout_map import (  # re-exported: the readout half of the device's noise
    MAX_DENSE_READOUT_QUBITS as MAX_DENSE_READOUT_QUBITS,
)
from noiselab.device.readout_map import conditional_flip_matrix as conditional_flip_matrix
from noiselab.device.readout_map import readout_crosstalk as readout_crosstalk
from noiselab.device.readout_map import readout_matrices as readout_matrices
from noiselab.device.readout_map import readout_terms as readout_terms
from noiselab.device.readout_map import readout_transfer_matrix as readout_transfer_matrix

_UNIT_SECONDS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9, "ps": 1e-12}
_ROTATION_ANGLE_RAD = {"sx": math.pi / 2, "x": math.pi}


@dataclass(frozen=True)
class GateNoise:
    """How the error of one native gate on given physical qubits is made up."""

    gate: str
    qubits: tuple[int, ...]
    duration_ns: float
    quoted_error: float
    relaxation_infidelity: float
    depolarizing_param: float
    relaxation_limited: bool  # quoted error below the relaxation floor: relaxation alone used
    zz_angle_rad: float
    over_rotation_rad: float


def gate_noise(profile: DeviceProfile, gate: str, qubits: Sequence[int]) -> GateNoise:
    """Decompose the noise of native ``gate`` on physical ``qubits`` (pure, no qiskit)."""
    qubits = tuple(int(q) for q in qubits)
    duration_ns = profile.gate_duration_ns(gate)
    if gate in VIRTUAL_GATES:
        return GateNoise(gate, qubits, 0.0, 0.0, 0.0, 0.0, False, 0.0, 0.0)
    if gate == profile.two_qubit_gate:
        if len(qubits) != 2:
            raise input_error(
                profile.source, "native_gates.two_qubit", f"{gate} needs 2 qubits, got {qubits}"
            )
        pp = profile.pair(*qubits)
        quoted, zz, over = pp.gate_error, pp.zz_angle_rad, 0.0
    else:
        if len(qubits) != 1:
            raise input_error(
                profile.source, "native_gates.single_qubit", f"{gate} needs 1 qubit, got {qubits}"
            )
        qp = profile.qubit(qubits[0])
        quoted, zz = qp.gate_error, 0.0
        over = qp.over_rotation_fraction * _ROTATION_ANGLE_RAD[gate]
    coh = [(profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in qubits]
    r_relax = thermal.relaxation_infidelity(duration_ns, coh)
    p = thermal.depolarizing_for_total(r_relax, quoted, len(qubits))
    return GateNoise(gate, qubits, duration_ns, quoted, r_relax, p, quoted < r_relax, zz, over)


@functools.lru_cache(maxsize=8192)
def relaxation_error(t_ns: float, t1_us: float | None, t2_us: float | None) -> Any:
    """qiskit-aer thermal relaxation (to |0>) over ``t_ns``; ``None`` for infinite coherence.

    Cached (the idle pass asks for the same few delay lengths on every run); callers must not
    modify the returned error."""
    if t_ns <= 0.0 or (t1_us is None and t2_us is None):
        return None
    t1_s = math.inf if t1_us is None else t1_us * 1e-6
    t2_s = math.inf if t2_us is None else t2_us * 1e-6
    t2_s = min(t2_s, 2.0 * t1_s)  # guard rounding at T2 = 2 T1
    return thermal_relaxation_error(t1_s, t2_s, t_ns * 1e-9)


def _identity_error(num_qubits: int) -> Any:
    return QuantumError([(QuantumCircuit(num_qubits), 1.0)])


_PARTS = frozenset({"relaxation", "depolarizing", "coherent"})


@functools.lru_cache(maxsize=4096)
def _relaxation_superop(t_ns: float, t1_us: float | None, t2_us: float | None) -> Any:
    err = relaxation_error(t_ns, t1_us, t2_us)
    return SuperOp(np.eye(4)) if err is None else SuperOp(err.to_quantumchannel())


@functools.lru_cache(maxsize=4096)
def _noise_superop(
    duration_ns: float,
    coherence: tuple[tuple[float | None, float | None], ...],
    depolarizing_param: float,
    zz_angle_rad: float,
    over_rotation_rad: float,
    parts: frozenset[str],
) -> Any:
    k = len(coherence)
    d = 2**k
    total = SuperOp(np.eye(d * d))
    if "relaxation" in parts and duration_ns > 0.0:
        relax = _relaxation_superop(duration_ns, *coherence[0])
        for t1_us, t2_us in coherence[1:]:
            relax = relax.expand(_relaxation_superop(duration_ns, t1_us, t2_us))
        total = relax
    if "depolarizing" in parts and depolarizing_param > 0.0:
        # rho -> (1 - p) rho + p Tr(rho) I/d; Tr(rho) = <<I|rho>> in any vectorization
        vec_i = np.eye(d).reshape(-1)
        p = depolarizing_param
        total = total.compose(SuperOp((1.0 - p) * np.eye(d * d) + (p / d) * np.outer(vec_i, vec_i)))
    if "coherent" in parts:
        if zz_angle_rad != 0.0:
            total = total.compose(SuperOp(Operator(RZZGate(zz_angle_rad))))
        if over_rotation_rad != 0.0:
            total = total.compose(SuperOp(Operator(RXGate(over_rotation_rad))))
    return total


def _noise_key(profile: DeviceProfile, noise: GateNoise, parts: Iterable[str] | None) -> tuple:
    chosen = _PARTS if parts is None else frozenset(parts)
    unknown = chosen - _PARTS
    if unknown:
        raise InputError(
            f"parts: unknown {sorted(unknown)[0]!r}; allowed: {', '.join(sorted(_PARTS))}"
        )
    coh = tuple((profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in noise.qubits)
    return (
        noise.duration_ns,
        coh,
        noise.depolarizing_param,
        noise.zz_angle_rad,
        noise.over_rotation_rad,
        chosen,
    )


def _is_noiseless(key: tuple) -> bool:
    duration_ns, coh, p, zz, over, parts = key
    relax = "relaxation" in parts and duration_ns > 0.0 and any(t != (None, None) for t in coh)
    depol = "depolarizing" in parts and p > 0.0
    coherent = "coherent" in parts and (zz != 0.0 or over != 0.0)
    return not (relax or depol or coherent)


def channel_from_noise(
    profile: DeviceProfile, noise: GateNoise, parts: Iterable[str] | None = None
) -> Any:
    """qiskit-aer ``QuantumError`` (one Kraus instruction) for a :class:`GateNoise`; with
    ``profile.twirled_two_qubit_gates`` a two-qubit gate's error is its Pauli-twirled part."""
    key = _noise_key(profile, noise, parts)
    if _is_noiseless(key):
        return _identity_error(len(noise.qubits))
    twirled = profile.twirled_two_qubit_gates and len(noise.qubits) == 2
    chan = _twirled_superop(*key) if twirled else _noise_superop(*key)
    error = QuantumError(Kraus(chan))
    # known not to be the identity (_is_noiseless): skip aer's ideal() test, which tries a
    # Clifford conversion and formats every Kraus matrix into an exception message (most of the
    # time of building a noise model); the instance attribute shadows the method
    error.ideal = _not_ideal
    return error


def _not_ideal() -> bool:
    return False


def gate_channel(
    profile: DeviceProfile, gate: str, qubits: Sequence[int], parts: Iterable[str] | None = None
) -> Any:
    """The qiskit-aer ``QuantumError`` applied after native ``gate`` on physical ``qubits``.

    An identity error for rz and for noiseless gates (``error.ideal()`` is then true).
    ``error.to_quantumchannel()`` gives the ``qiskit.quantum_info`` channel for independent
    checks.
    """
    return channel_from_noise(profile, gate_noise(profile, gate, qubits), parts)


def pauli_twirl(channel: Any) -> Any:
    """The average of P^dagger E(P . P^dagger) P over the Pauli group: the channel whose Pauli
    transfer matrix is the diagonal of ``channel``'s (a ``SuperOp``; returns a ``SuperOp``)."""
    ptm = PTM(channel).data
    return SuperOp(PTM(np.diag(np.real(np.diag(ptm)))))


@functools.lru_cache(maxsize=1024)
def _twirled_superop(*key: Any) -> Any:
    return pauli_twirl(_noise_superop(*key))


def gate_infidelity(profile: DeviceProfile, gate: str, qubits: Sequence[int]) -> float:
    """Average infidelity of the full error channel of ``gate`` (quoted + coherent terms)."""
    noise = gate_noise(profile, gate, qubits)
    if noise.gate in VIRTUAL_GATES:
        return 0.0
    if noise.zz_angle_rad == 0.0 and noise.over_rotation_rad == 0.0:
        return max(noise.quoted_error, noise.relaxation_infidelity)
    chan = _noise_superop(*_noise_key(profile, noise, None))
    return float(max(0.0, 1.0 - average_gate_fidelity(chan)))


# ---- idle relaxation on delays --------------------------------------------------------------


def delay_seconds(op: Any, dt_s: float | None = None) -> float:
    """Duration of a ``delay`` instruction in seconds, whatever its unit."""
    unit = getattr(op, "unit", "dt")
    duration = op.duration
    try:
        duration = float(duration)
    except TypeError:
        raise InputError(
            f"delay: duration {duration!r} is not a number; bind parameters first"
        ) from None
    if unit == "dt":
        if dt_s is None:
            raise InputError(
                "delay: duration in 'dt' units but no dt_s given; "
                "allowed: s, ms, us, ns, ps or dt_s"
            )
        return duration * dt_s
    if unit not in _UNIT_SECONDS:
        raise InputError(f"delay: unknown unit {unit!r}; allowed: dt, {', '.join(_UNIT_SECONDS)}")
    return duration * _UNIT_SECONDS[unit]


def idle_relaxation_pass(
    profile: DeviceProfile, patch: Sequence[int], dt_s: float | None = None
) -> Any:
    """A qiskit-aer ``LocalNoisePass`` appending thermal relaxation after every delay.

    Circuit qubit i has the coherence of physical qubit ``patch[i]``.
    """
    patch = check_patch(profile, patch)
    coherence = [(profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in patch]

    def func(op: Any, qubits: Sequence[int]) -> Any:
        t_ns = delay_seconds(op, dt_s) * 1e9
        if t_ns <= 0.0:
            return None
        errs = [relaxation_error(t_ns, *coherence[q]) for q in qubits]
        if all(e is None for e in errs):
            return None
        out = errs[0] or _identity_error(1)
        for e in errs[1:]:
            out = out.expand(e or _identity_error(1))
        return out

    return LocalNoisePass(func, op_types=Delay, method="append")


def attach_idle_relaxation(
    circuit: Any, profile: DeviceProfile, patch: Sequence[int], dt_s: float | None = None
) -> Any:
    """Return a copy of ``circuit`` with relaxation error instructions after each delay."""
    return idle_relaxation_pass(profile, patch, dt_s)(circuit)


# ---- the noise model ------------------------------------------------------------------------


@dataclass(frozen=True)
class GateRule:
    """After native ``gate`` on circuit ``qubits`` (physical ``noise.qubits``) acts ``noise``."""

    gate: str
    qubits: tuple[int, ...]
    noise: GateNoise


@dataclass(frozen=True)
class NoiseSpec:
    """The device's noise on a patch, independent of any simulator: one rule per native gate and
    circuit qubits, and the idle rule (thermal relaxation after every ``delay``, with each circuit
    qubit's (T1, T2) in us; ``idle_coherence`` is None without idle relaxation)."""

    patch: tuple[int, ...]
    native_gates: tuple[str, ...]
    gates: tuple[GateRule, ...]
    idle_coherence: tuple[tuple[float | None, float | None], ...] | None
    dt_s: float | None = None
    evolution: EvolutionSpec | None = None  # always-on terms, written into the circuit


def noise_spec(
    profile: DeviceProfile,
    patch: Sequence[int],
    *,
    idle_relaxation: bool = True,
    dt_s: float | None = None,
) -> NoiseSpec:
    """The noise specification of ``profile`` on ``patch`` (circuit qubit i = ``patch[i]``):
    every non-virtual single-qubit native on each qubit, the two-qubit gate in both directions of
    each linked pair, and (``idle_relaxation``, some finite coherence) the idle rule."""
    patch = check_patch(profile, patch)
    rules = [
        GateRule(gate, (i,), gate_noise(profile, gate, (q,)))
        for i, q in enumerate(patch)
        for gate in profile.single_qubit_gates
        if gate not in VIRTUAL_GATES
    ]
    g2 = profile.two_qubit_gate
    rules += [
        GateRule(g2, (i, j), gate_noise(profile, g2, (qi, qj)))
        for i, qi in enumerate(patch)
        for j, qj in enumerate(patch)
        if i != j and profile.has_pair(qi, qj)
    ]
    coherence = tuple((profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in patch)
    idle = idle_relaxation and any(t != (None, None) for t in coherence)
    return NoiseSpec(
        patch,
        profile.native_gate_names,
        tuple(rules),
        coherence if idle else None,
        dt_s,
        evolution_spec(profile, patch),
    )


def noise_model_from_spec(profile: DeviceProfile, spec: NoiseSpec) -> Any:
    """The qiskit-aer ``NoiseModel`` of a :class:`NoiseSpec` (noiseless rules left out)."""
    model = NoiseModel(basis_gates=list(spec.native_gates))
    for rule in spec.gates:
        err = channel_from_noise(profile, rule.noise)
        if not err.ideal():
            model.add_quantum_error(err, rule.gate, list(rule.qubits))
    if spec.idle_coherence is not None:
        # aer runs these passes on circuits that contain delays (as NoiseModel.from_backend does)
        add_noise_pass(model, idle_relaxation_pass(profile, spec.patch, spec.dt_s))
    return model


def build_noise_model(
    profile: DeviceProfile,
    patch: Sequence[int],
    *,
    idle_relaxation: bool = True,
    dt_s: float | None = None,
) -> Any:
    """qiskit-aer ``NoiseModel`` on circuit qubits 0..k-1, circuit qubit i = physical ``patch[i]``.

    Built from :func:`noise_spec`: gate errors on every native gate of the patch (both directions
    of each linked pair) and, with ``idle_relaxation``, relaxation on delays (a noise pass aer
    applies at run time).
    """
    spec = noise_spec(profile, patch, idle_relaxation=idle_relaxation, dt_s=dt_s)
    return noise_model_from_spec(profile, spec)
