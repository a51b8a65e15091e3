"""qiskit interoperability: a profile as a ``qiskit.transpiler.Target`` and back, and an
``AerSimulator`` carrying noiselab's noise model.

:func:`profile_to_target`: every physical qubit, T1/T2 in ``QubitProperties`` (seconds); per
native gate and qubits an ``InstructionProperties`` with the duration (seconds) and the quoted
error (average infidelity, relaxation included; coherent terms on top, as in the profile);
``measure`` with the mean assignment error. Values a plain ``Target`` has no field for ride on
subclasses that qiskit keeps: :class:`GateProperties` (``over_rotation_fraction`` on sx/x,
``zz_angle_rad`` and the readout ``joint_flip`` of the pair on the two-qubit gate) and
:class:`ReadoutProperties` (``flip_0to1``, ``flip_1to0``). The profile's ``drift`` and
``repetition_delay_us`` describe no noise and are not carried; neither are the always-on terms
(``zz_rate_khz``, ``detuning_std_khz``, ``spectator_phase_rad``) and the outcome-dependent
readout flips (``flip_a_if_b_reads_1``, ``flip_b_if_a_reads_1``), for which a ``Target`` has
no place.

:func:`profile_from_target` reads any ``Target`` (one from :func:`profile_to_target` gives the
same profile back). The profile holds less than a ``Target`` can say; each choice is returned
as a note: one duration per gate kind (the longest), one single-qubit error per qubit (sx's;
x uses it too), one error per undirected pair (the larger of the two directions), readout
flips P(1|0) = P(0|1) = the measure error when only that is given.
"""

from __future__ import annotations

from collections.abc import Sequence
from decimal import Decimal
from typing import Any

from qiskit.circuit import Delay, Parameter
from qiskit.circuit.library import CXGate, CZGate, ECRGate, Measure, RZGate, SXGate, XGate
from qiskit.transpiler import InstructionProperties, QubitProperties, Target
from qiskit_aer import AerSimulator
from qiskit_aer.noise import ReadoutError

from noiselab.common.errors import InputError
from noiselab.device.noise import build_noise_model
from noiselab.device.profile import (
    SCHEMA_VERSION,
    DeviceProfile,
    check_patch,
    profile_from_mapping,
)
from noiselab.device.profile_import import defaults_and_overrides

_ONE = {"rz": RZGate(Parameter("theta")), "sx": SXGate(), "x": XGate()}
_TWO = {"cz": CZGate, "cx": CXGate, "ecr": ECRGate}
_TARGET = "<qiskit Target>"


class GateProperties(InstructionProperties):
    """Gate properties with the profile's coherent terms and the pair's readout joint flip."""

    def __new__(
        cls,
        duration: float | None = None,
        error: float | None = None,
        over_rotation_fraction: float = 0.0,
        zz_angle_rad: float = 0.0,
        joint_flip: float = 0.0,
    ) -> GateProperties:
        return super().__new__(cls, duration=duration, error=error)

    def __init__(
        self,
        duration: float | None = None,
        error: float | None = None,
        over_rotation_fraction: float = 0.0,
        zz_angle_rad: float = 0.0,
        joint_flip: float = 0.0,
    ) -> None:
        self.over_rotation_fraction = float(over_rotation_fraction)
        self.zz_angle_rad = float(zz_angle_rad)
        self.joint_flip = float(joint_flip)

    def __reduce__(self) -> tuple:  # copies and pickles keep the extra fields
        return (
            type(self),
            (
                self.duration,
                self.error,
                self.over_rotation_fraction,
                self.zz_angle_rad,
                self.joint_flip,
            ),
        )


class ReadoutProperties(InstructionProperties):
    """Measure properties with both assignment flips (``error`` is their mean)."""

    def __new__(
        cls,
        duration: float | None = None,
        error: float | None = None,
        flip_0to1: float = 0.0,
        flip_1to0: float = 0.0,
    ) -> ReadoutProperties:
        return super().__new__(cls, duration=duration, error=error)

    def __init__(
        self,
        duration: float | None = None,
        error: float | None = None,
        flip_0to1: float = 0.0,
        flip_1to0: float = 0.0,
    ) -> None:
        self.flip_0to1 = float(flip_0to1)
        self.flip_1to0 = float(flip_1to0)

    def __reduce__(self) -> tuple:
        return (type(self), (self.duration, self.error, self.flip_0to1, self.flip_1to0))


def _scaled(value: float, factor: str) -> float:
    """``value`` times a power of ten, in decimal arithmetic rounded once (so that 25 ns ->
    2.5e-08 s -> 25 ns exactly, and a round trip changes a value by at most one rounding)."""
    return float(Decimal(repr(float(value))) * Decimal(factor))


def _s(value_ns: float) -> float:
    return _scaled(value_ns, "1e-9")


def profile_to_target(profile: DeviceProfile) -> Target:
    """The whole device as a qiskit ``Target`` (physical qubit ids; see the module text)."""
    n = profile.qubit_count
    qprops = []
    for q in range(n):
        p = profile.qubit(q)
        qprops.append(
            QubitProperties(
                t1=None if p.t1_us is None else _scaled(p.t1_us, "1e-6"),
                t2=None if p.t2_us is None else _scaled(p.t2_us, "1e-6"),
            )
        )
    target = Target(num_qubits=n, description=profile.name, qubit_properties=qprops)
    for gate in profile.single_qubit_gates:
        props: dict[tuple[int, ...], Any] = {}
        for q in range(n):
            p = profile.qubit(q)
            if gate == "rz":
                props[(q,)] = InstructionProperties(duration=0.0, error=0.0)
            else:
                props[(q,)] = GateProperties(
                    _s(profile.durations.single_qubit_ns),
                    p.gate_error,
                    over_rotation_fraction=p.over_rotation_fraction,
                )
        target.add_instruction(_ONE[gate], props)
    pair_props = {}
    for a, b in profile.pairs():
        pp = profile.pair(a, b)
        for key in ((a, b), (b, a)):
            pair_props[key] = GateProperties(
                _s(profile.durations.two_qubit_ns),
                pp.gate_error,
                zz_angle_rad=pp.zz_angle_rad,
                joint_flip=profile.joint_flip(a, b),
            )
    if pair_props:
        target.add_instruction(_TWO[profile.two_qubit_gate](), pair_props)
    target.add_instruction(Delay(Parameter("t")), {(q,): None for q in range(n)})
    meas = {}
    for q in range(n):
        p = profile.qubit(q)
        meas[(q,)] = ReadoutProperties(
            _s(profile.durations.readout_ns),
            0.5 * (p.flip_0to1 + p.flip_1to0),
            flip_0to1=p.flip_0to1,
            flip_1to0=p.flip_1to0,
        )
    target.add_instruction(Measure(), meas)
    return target


def _refuse(key: str, problem: str, allowed: str) -> InputError:
    return InputError(f"{_TARGET}: {key}: {problem}; allowed: {allowed}")


def _props(target: Target, name: str) -> dict[tuple[int, ...], Any]:
    return {k: v for k, v in target[name].items() if k is not None}


def _ns(value: float | None, what: str) -> float:
    if value is None:
        raise _refuse(what, "no duration", "a duration in seconds on every instruction")
    return _scaled(value, "1e9")


def _longest(values: Sequence[float], what: str, notes: list[str]) -> float:
    hi = max(values)
    if min(values) != hi:
        notes.append(
            f"{what} durations differ ({min(values):g} to {hi:g} ns); the profile "
            f"holds the longest, {hi:g} ns"
        )
    return hi


def profile_from_target(
    target: Target, name: str = "from-target", notes: list[str] | None = None
) -> DeviceProfile:
    """A profile from a qiskit ``Target``; each modelling choice is appended to ``notes``."""
    notes = notes if notes is not None else []
    n = int(target.num_qubits or 0)
    names = set(target.operation_names)
    natives = [g for g in ("rz", "sx", "x") if g in names]
    if "rz" not in natives or "sx" not in natives:
        raise _refuse("operations", f"{sorted(names)}", "rz and sx (x optional) among them")
    twos = [g for g in _TWO if g in names]
    if len(twos) > 1:
        raise _refuse("operations", f"two-qubit gates {twos}", "one of cz, cx, ecr")
    ignored = sorted(names - {*natives, *twos, "measure", "delay"})
    if ignored:
        notes.append(f"operations {', '.join(ignored)}: not in the profile (not used)")
    qprops = target.qubit_properties or [None] * n
    per_q: dict[int, dict[str, float]] = {}
    sx, x = _props(target, "sx"), (_props(target, "x") if "x" in natives else {})
    meas = _props(target, "measure") if "measure" in names else {}
    durations_1q, durations_ro = [], []
    split = False
    for q in range(n):
        qp = qprops[q] if q < len(qprops) else None
        if qp is None or qp.t1 is None or qp.t2 is None:
            raise _refuse(f"qubit_properties[{q}]", "no T1/T2", "t1 and t2 (seconds) per qubit")
        if (q,) not in sx or sx[(q,)] is None or sx[(q,)].error is None:
            raise _refuse(f"sx[{q}]", "no error", "an error on sx for every qubit")
        s = sx[(q,)]
        durations_1q.append(_ns(s.duration, f"sx[{q}]"))
        if (q,) in x and x[(q,)] is not None:
            durations_1q.append(_ns(x[(q,)].duration, f"x[{q}]"))
            if x[(q,)].error is not None and x[(q,)].error != s.error:
                notes.append(
                    f"qubit {q}: x error {x[(q,)].error:.3g} differs from sx's "
                    f"{s.error:.3g}; the profile's one gate_error is sx's"
                )
        m = meas.get((q,))
        if m is None or m.error is None:
            raise _refuse(f"measure[{q}]", "no error", "an error on measure for every qubit")
        durations_ro.append(_ns(m.duration, f"measure[{q}]"))
        if isinstance(m, ReadoutProperties):
            f01, f10 = m.flip_0to1, m.flip_1to0
        else:
            f01 = f10 = float(m.error)
            split = True
        per_q[q] = {
            "t1_us": _scaled(qp.t1, "1e6"),
            "t2_us": _scaled(qp.t2, "1e6"),
            "gate_error": float(s.error),
            "flip_0to1": f01,
            "flip_1to0": f10,
            "over_rotation_fraction": float(getattr(s, "over_rotation_fraction", 0.0)),
        }
    if split:
        notes.append("measure errors are taken as P(1|0) = P(0|1) = the quoted error")
    per_p: dict[tuple[int, int], dict[str, float]] = {}
    joint: dict[tuple[int, int], float] = {}
    durations_2q = []
    for (a, b), props in (_props(target, twos[0]) if twos else {}).items():
        if props is None or props.error is None:
            raise _refuse(f"{twos[0]}[{a}, {b}]", "no error", "an error on every pair")
        key = (min(a, b), max(a, b))
        durations_2q.append(_ns(props.duration, f"{twos[0]}[{a}, {b}]"))
        err = float(props.error)
        if key in per_p and per_p[key]["gate_error"] != err:
            notes.append(
                f"pair {key[0]}-{key[1]}: the two directions differ "
                f"({per_p[key]['gate_error']:.3g}, {err:.3g}); the larger is used"
            )
            err = max(err, per_p[key]["gate_error"])
        per_p[key] = {"gate_error": err, "zz_angle_rad": float(getattr(props, "zz_angle_rad", 0.0))}
        if getattr(props, "joint_flip", 0.0):
            joint[key] = float(props.joint_flip)
    q_keys = {k: k for k in per_q[0]} if per_q else {}
    q_default, q_over = defaults_and_overrides(per_q, q_keys)
    p_default, p_over = (
        defaults_and_overrides(per_p, {"gate_error": "gate_error", "zz_angle_rad": "zz_angle_rad"})
        if per_p
        else ({"gate_error": 0.0}, {})
    )
    mapping = {
        "schema_version": SCHEMA_VERSION,
        "name": name,
        "description": f"Imported from a qiskit Target ({target.description or 'no description'})",
        "qubit_count": n,
        "links": [list(p) for p in sorted(per_p)],
        "native_gates": {"single_qubit": natives, "two_qubit": twos[0] if twos else "cz"},
        "durations": {
            "single_qubit_ns": _longest(durations_1q, "single-qubit gate", notes),
            "two_qubit_ns": _longest(durations_2q, "two-qubit gate", notes)
            if durations_2q
            else max(durations_1q),
            "readout_ns": _longest(durations_ro, "readout", notes),
        },
        "qubits": {"default": q_default, "overrides": q_over},
        "couplers": {
            "default": p_default,
            "overrides": [{"pair": list(k), **v} for k, v in sorted(p_over.items())],
        },
        "readout_crosstalk": [{"pair": list(k), "joint_flip": v} for k, v in sorted(joint.items())],
    }
    return profile_from_mapping(mapping, _TARGET)


def aer_simulator(
    profile: DeviceProfile,
    patch: Sequence[int] | None = None,
    *,
    method: str = "density_matrix",
    seed: int | None = None,
) -> AerSimulator:
    """An ``AerSimulator`` with noiselab's noise model of ``profile`` on ``patch`` (default:
    every qubit; circuit qubit i = physical ``patch[i]``).

    Gate noise as in noiselab's emulator (``build_noise_model``), relaxation on every ``delay``
    (so run circuits scheduled by ``compile_to_device``: an unscheduled circuit has no idle
    periods), and per-qubit readout errors P(1|0), P(0|1) on sampled measurements (aer applies
    them to counts, not to saved states; readout joint flips are not modelled by aer).
    """
    qubits = check_patch(profile, range(profile.qubit_count) if patch is None else patch)
    model = build_noise_model(profile, qubits)
    for i, q in enumerate(qubits):
        p = profile.qubit(q)
        if p.flip_0to1 or p.flip_1to0:
            model.add_readout_error(
                ReadoutError([[1 - p.flip_0to1, p.flip_0to1], [p.flip_1to0, 1 - p.flip_1to0]]),
                [i],
            )
    return AerSimulator(method=method, noise_model=model, seed_simulator=seed)
