"""Device noise profile: the YAML schema, its validation, per-qubit/per-pair resolution and scaling.

A profile file looks like this (units are in the key names; rates are probabilities 0..1)::

    schema_version: 1
    name: my-chip
    description: what this is
    qubit_count: 4
    links: [[0, 1], [1, 2], [2, 3]]      # undirected pairs, or the string all-to-all
    native_gates:
      single_qubit: [rz, sx, x]          # rz is virtual (zero duration, no error)
      two_qubit: cz                      # one of cz, cx, ecr
    durations:
      single_qubit_ns: 35
      two_qubit_ns: 300
      readout_ns: 1500
    qubits:
      default:
        t1_us: 100
        t2_us: 90
        gate_error: 3.0e-4               # average infidelity of sx/x, relaxation included
        flip_0to1: 0.015                 # P(read 1 | prepared 0)
        flip_1to0: 0.03                  # P(read 0 | prepared 1)
        over_rotation_fraction: 0.0      # optional: sx/x rotate by (1 + f) x their angle
        detuning_std_khz: 0.0            # optional: quasi-static frequency offset, std. (kHz)
      overrides:
        2: {t1_us: 60, t2_us: 45}
    couplers:
      default:
        gate_error: 8.0e-3               # average infidelity of the two-qubit gate
        zz_angle_rad: 0.0                # optional: residual exp(-i theta/2 ZZ) after each gate
        zz_rate_khz: 0.0                 # optional: always-on ZZ (kHz), idles and other gates
        spectator_phase_rad: 0.0         # optional: rz on each linked neighbour per gate
      overrides:
        - {pair: [1, 2], gate_error: 1.2e-2}
    readout_crosstalk:                   # optional
      - {pair: [0, 1], joint_flip: 0.004, flip_a_if_b_reads_1: 0.0, flip_b_if_a_reads_1: 0.0}
    zz_during_own_gate: in_calibration   # optional; or extra (ZZ also during the pair's gate)
    repetition_delay_us: 250             # optional; time between shots, reset included
    drift:                               # optional; day-to-day relative standard deviations
      t1_rel_std: 0.2                    # (these are the defaults; see noiselab.device.drift)
      t2_rel_std: 0.2
      single_qubit_error_rel_std: 0.2
      two_qubit_error_rel_std: 0.2
      readout_error_rel_std: 0.1

Readout crosstalk model (``joint_flip`` c for a linked pair (a, b)): after the independent
per-qubit assignment errors, with probability c both reported bits a and b are flipped
together (a common disturbance on a shared readout line). On a probability vector over the
measured qubits this is C_ab = (1 - c) I + c F_ab, F_ab the permutation k -> k ^ (1<<a) ^ (1<<b).
The full readout map is M = (prod over pairs of C_ab) @ (A_{n-1} x ... x A_0); the C_ab commute
with each other. A joint flip keeps the parity Z_a Z_b, so a per-qubit (tensor-product)
inversion, which sees it as an extra symmetric flip on each qubit, over-corrects correlations.

Outcome-dependent readout crosstalk of the pair [a, b]: ``flip_a_if_b_reads_1`` is the
probability that a's reported bit flips when b's reported bit (after b's own assignment error)
is 1, ``flip_b_if_a_reads_1`` the other way round. It is conditioned on what b *reads*, not on
the state b was in: the disturbance is b's readout signal (its resonator response, which the
same readout of b classifies), and a qubit that decays during readout also looks like 0 to its
neighbour; it also keeps the readout map a product of local terms. On a pair, the 4x4 map K_ab
(index bit_a + 2 bit_b) flips a and b independently given the bits before it. The full map is
M = (prod of C_ab) @ (prod of K_ab, pairs in ascending order) @ (A_{n-1} x ... x A_0): no longer
a tensor product, so only a full (2^n) inversion undoes it.

Always-on terms (see :mod:`noiselab.device.evolution`): ``zz_rate_khz`` nu of a linked pair acts
as exp(-i pi nu t Z x Z / 2) (conditional phase 2 pi nu t) during every idle window and every
gate except the pair's own two-qubit gate, whose calibration absorbs it (``zz_during_own_gate:
extra`` lets it act then too); ``detuning_std_khz``
sigma is a frequency offset constant within a shot, Gaussian between shots (free decay
exp(-(2 pi sigma t)^2 / 2) on top of T2, which stays the echo time); ``spectator_phase_rad``
phi: each two-qubit gate of the pair applies rz(phi) to every other qubit linked to it.
``twirled_two_qubit_gates`` (set by the ``twirl`` transform, not a device property) replaces each
two-qubit gate's error by its Pauli-twirled part.

Quoted gate errors are the stochastic part (relaxation during the gate included); coherent terms
(ZZ angle, over-rotation) come on top of them.

Over 400 lines: the schema of a profile file, its physical bounds (each with its reason), the
per-qubit / per-pair resolution, the plausibility warnings and ``scale_profile`` all read the
same pydantic models; split apart, each piece would import the others' private validators.
"""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PrivateAttr,
    StrictInt,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from noiselab.common.counts import Count
from noiselab.common.errors import InputError, from_validation_error, input_error, quote
from noiselab.common.shipped import looks_like_name, shipped_path
from noiselab.common.yamlio import load_yaml_mapping
from noiselab.device import thermal
from noiselab.device.channel_registry import (
    CHANNEL_SPECS,
    CHANNELS,
    MAX_DETUNING_STD_KHZ,
    MAX_JOINT_FLIP,
    MAX_OVER_ROTATION,
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
    MAX_ZZ_ANGLE_RAD,
    MAX_ZZ_RATE_KHZ,
    check_channels,
)
from noiselab.device.model import DeviceModel, resolve_device

SCHEMA_VERSION = 1
SINGLE_QUBIT_GATES: tuple[str, ...] = ("rz", "sx", "x")
TWO_QUBIT_GATES: tuple[str, ...] = ("cz", "cx", "ecr")
VIRTUAL_GATES: frozenset[str] = frozenset({"rz"})
#: ideal, zero-duration frames a transform writes (random twirl Paulis, merged into the
#: neighbouring single-qubit gates on a device): no error, no time, no noise rule
FRAME_GATES: frozenset[str] = frozenset({"pauli"})
ALL_TO_ALL = "all-to-all"

# physical maxima (MAX_*) and CHANNELS come from noiselab.device.channel_registry
MAX_QUBITS = 1000
# Coherence times: a T1 or T2 below 1 ns is shorter than any gate (and a subnormal one breaks
# the noise model's arithmetic); above 1000 s no qubit has been measured: both are typos.
MIN_COHERENCE_US = 1e-3
MAX_COHERENCE_US = 1e9
# Durations: from 1 ps to 1 ms; a gate or readout outside that range is a unit typo.
MIN_DURATION_NS = 1e-3
MAX_DURATION_NS = 1e6
# All-to-all links on more qubits than this make every routing and noise-model step quadratic.
MAX_ALL_TO_ALL_QUBITS = 64

_NAME_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,79}")
_CFG = ConfigDict(frozen=True, extra="forbid")
_CTX_ALLOW_INFINITE = "allow_infinite_coherence"


def _reject_bool(value: Any) -> Any:
    if isinstance(value, bool):
        raise ValueError("expected a number, got true/false")
    return value


def _num(lo: float | None = None, hi: float | None = None, gt: float | None = None) -> Any:
    return Annotated[
        float, BeforeValidator(_reject_bool), Field(ge=lo, le=hi, gt=gt, allow_inf_nan=False)
    ]


Rate1Q = _num(0.0, MAX_SINGLE_QUBIT_ERROR)
Rate2Q = _num(0.0, MAX_TWO_QUBIT_ERROR)
ReadoutRate = _num(0.0, MAX_READOUT_ERROR)
JointFlip = _num(0.0, MAX_JOINT_FLIP)
OverRotation = _num(-MAX_OVER_ROTATION, MAX_OVER_ROTATION)
ZZAngle = _num(-MAX_ZZ_ANGLE_RAD, MAX_ZZ_ANGLE_RAD)
ZZRate = _num(-MAX_ZZ_RATE_KHZ, MAX_ZZ_RATE_KHZ)
DetuningStd = _num(0.0, MAX_DETUNING_STD_KHZ)
SpectatorPhase = _num(-MAX_ZZ_ANGLE_RAD, MAX_ZZ_ANGLE_RAD)
def _coherence_in_range(value: float, info: ValidationInfo) -> float:
    if (info.context or {}).get(_CTX_ALLOW_INFINITE):
        return value  # a scaled profile: any positive time (scaling is bounded where it is asked)
    if not MIN_COHERENCE_US <= value <= MAX_COHERENCE_US:
        raise ValueError(
            f"{value:g} us; allowed: {MIN_COHERENCE_US:g} to {MAX_COHERENCE_US:g} us (below 1 ns "
            "is shorter than any gate, above 1000 s longer than any qubit: a unit typo?)"
        )
    return value


def _duration_in_range(value: float) -> float:
    if not MIN_DURATION_NS <= value <= MAX_DURATION_NS:
        raise ValueError(
            f"{value:g} ns; allowed: {MIN_DURATION_NS:g} to {MAX_DURATION_NS:g} ns (1 ps to 1 ms; "
            "outside, a unit typo?)"
        )
    return value


PositiveTime = _num(gt=0.0)
CoherenceTime = Annotated[PositiveTime, AfterValidator(_coherence_in_range)]
Duration = Annotated[PositiveTime, AfterValidator(_duration_in_range)]
Pair = tuple[StrictInt, StrictInt]


class ProfileCheckError(InputError):
    """A cross-field problem found after the schema check; carries the key path."""

    def __init__(self, path: str, problem: str, allowed: str | None = None) -> None:
        self.path = path
        self.problem = problem
        self.allowed = allowed
        super().__init__(str(input_error(None, path, problem, allowed)))

    def with_source(self, source: str) -> InputError:
        return input_error(source, self.path, self.problem, self.allowed)


def _coherence_time_check(
    value: float | None, info: ValidationInfo, required: bool
) -> float | None:
    if value is None:
        ctx = info.context or {}
        if required and not ctx.get(_CTX_ALLOW_INFINITE, False):
            raise ValueError("a positive time is required (infinite coherence only via scaling)")
    return value


class QubitValues(BaseModel):
    """Per-qubit parameters (all qubits unless overridden). Times in us, rates 0..1."""

    model_config = _CFG
    t1_us: CoherenceTime | None
    t2_us: CoherenceTime | None
    gate_error: Rate1Q
    flip_0to1: ReadoutRate
    flip_1to0: ReadoutRate
    over_rotation_fraction: OverRotation = 0.0
    detuning_std_khz: DetuningStd = 0.0

    @field_validator("t1_us", "t2_us", mode="after")
    @classmethod
    def _finite_unless_scaled(cls, v: float | None, info: ValidationInfo) -> float | None:
        return _coherence_time_check(v, info, required=True)


class QubitOverride(BaseModel):
    """Per-qubit overrides; a key left out keeps the default."""

    model_config = _CFG
    t1_us: CoherenceTime | None = None
    t2_us: CoherenceTime | None = None
    gate_error: Rate1Q | None = None
    flip_0to1: ReadoutRate | None = None
    flip_1to0: ReadoutRate | None = None
    over_rotation_fraction: OverRotation | None = None
    detuning_std_khz: DetuningStd | None = None

    @model_validator(mode="before")
    @classmethod
    def _no_nulls(cls, data: Any, info: ValidationInfo) -> Any:
        if isinstance(data, Mapping) and not (info.context or {}).get(_CTX_ALLOW_INFINITE):
            for key, value in data.items():
                if value is None:
                    raise ValueError(f"{key}: empty value; give a number or leave the key out")
        return data


class QubitSection(BaseModel):
    model_config = _CFG
    default: QubitValues
    overrides: dict[StrictInt, QubitOverride] = Field(default_factory=dict)


class PairValues(BaseModel):
    """Two-qubit gate parameters for every linked pair unless overridden."""

    model_config = _CFG
    gate_error: Rate2Q
    zz_angle_rad: ZZAngle = 0.0
    zz_rate_khz: ZZRate = 0.0
    spectator_phase_rad: SpectatorPhase = 0.0


class PairOverride(BaseModel):
    model_config = _CFG
    pair: Pair
    gate_error: Rate2Q | None = None
    zz_angle_rad: ZZAngle | None = None
    zz_rate_khz: ZZRate | None = None
    spectator_phase_rad: SpectatorPhase | None = None


class PairSection(BaseModel):
    model_config = _CFG
    default: PairValues
    overrides: tuple[PairOverride, ...] = ()


class CrosstalkEntry(BaseModel):
    """Correlated readout error on a linked pair ``[a, b]``: both bits flip together with
    ``joint_flip``; a's bit flips with ``flip_a_if_b_reads_1`` when b reads 1 (and the other
    way round)."""

    model_config = _CFG
    pair: Pair
    joint_flip: JointFlip = 0.0
    flip_a_if_b_reads_1: JointFlip = 0.0
    flip_b_if_a_reads_1: JointFlip = 0.0


RelStd = _num(0.0, 2.0)


class DriftSpec(BaseModel):
    """Relative standard deviations of the device's values between calibrations ("days").

    Defaults (common practice, no single source): T1 and T2 of superconducting qubits move by
    tens of percent from day to day, gate errors by a similar relative amount, readout errors
    less. Coherent terms (ZZ, over-rotation), readout crosstalk and durations do not drift.
    """

    model_config = _CFG
    t1_rel_std: RelStd = 0.2
    t2_rel_std: RelStd = 0.2
    single_qubit_error_rel_std: RelStd = 0.2
    two_qubit_error_rel_std: RelStd = 0.2
    readout_error_rel_std: RelStd = 0.1


class NativeGates(BaseModel):
    model_config = _CFG
    single_qubit: tuple[Literal["rz", "sx", "x"], ...]
    two_qubit: Literal["cz", "cx", "ecr"]


class Durations(BaseModel):
    """Gate and readout durations in ns (rz is virtual: zero)."""

    model_config = _CFG
    single_qubit_ns: Duration
    two_qubit_ns: Duration
    readout_ns: Duration


@dataclass(frozen=True)
class QubitParams:
    """Resolved parameters of one physical qubit (times in us; None = infinite)."""

    index: int
    t1_us: float | None
    t2_us: float | None
    gate_error: float
    flip_0to1: float
    flip_1to0: float
    over_rotation_fraction: float
    detuning_std_khz: float = 0.0


@dataclass(frozen=True)
class PairParams:
    """Resolved parameters of one linked pair (a < b)."""

    pair: tuple[int, int]
    gate_error: float
    zz_angle_rad: float
    zz_rate_khz: float = 0.0
    spectator_phase_rad: float = 0.0


def _norm(a: int, b: int) -> tuple[int, int]:
    return (a, b) if a <= b else (b, a)


class DeviceProfile(BaseModel):
    """A device noise profile (see the module docstring for the YAML layout)."""

    model_config = _CFG
    schema_version: Literal[1]
    name: str
    description: str = ""
    qubit_count: Count = Field(ge=1, le=MAX_QUBITS)
    links: Literal["all-to-all"] | tuple[tuple[int, int], ...]
    native_gates: NativeGates
    durations: Durations
    qubits: QubitSection
    couplers: PairSection
    readout_crosstalk: tuple[CrosstalkEntry, ...] = ()
    #: set by the ``twirl`` transform (not a device property): two-qubit gate errors are
    #: replaced by their Pauli-twirled part
    twirled_two_qubit_gates: bool = False
    #: whether the always-on ZZ of a pair acts during the pair's own two-qubit gate:
    #: "in_calibration" (no: the gate was calibrated with it present; its residual is
    #: zz_angle_rad) or "extra" (yes, on top of the calibrated gate)
    zz_during_own_gate: Literal["in_calibration", "extra"] = "in_calibration"
    #: set by the ``measure_twirl`` transform (not a device property): (qubit, P(1|0), P(0|1))
    #: before twirling, of the qubits with a conditional readout flip, whose flips the twirled
    #: profile has made symmetric; readout then applies the exact twirl average
    untwirled_readout_flips: tuple[tuple[StrictInt, ReadoutRate, ReadoutRate], ...] = ()
    #: not part of the noise: excluded from dumps, the fingerprint and simulation cache keys
    drift: DriftSpec = Field(default_factory=DriftSpec, exclude=True)
    #: time between shots, reset included (us); None: the rehearse job's common-practice
    #: default. Not part of the noise: excluded like ``drift``
    repetition_delay_us: float | None = Field(
        default=None, gt=0, le=1e7, allow_inf_nan=False, exclude=True
    )
    _source: str = PrivateAttr(default="<profile>")

    @field_validator("name", mode="after")
    @classmethod
    def _check_name(cls, value: str) -> str:
        if not _NAME_RE.fullmatch(value):
            raise ValueError(
                f"{quote(value)} is not a device name; allowed: 1-80 characters, letters, digits, "
                "'.', '_' or '-', starting with a letter or digit"
            )
        return value

    @field_validator("links", mode="before")
    @classmethod
    def _parse_links(cls, value: Any) -> Any:
        if isinstance(value, str):
            if value != ALL_TO_ALL:
                raise ValueError(
                    f"unknown connectivity {quote(value)}; allowed: a list of pairs or {ALL_TO_ALL}"
                )
            return value
        if not isinstance(value, list | tuple):
            raise ValueError(f"expected a list of pairs or {ALL_TO_ALL}")
        out = []
        for i, item in enumerate(value):
            ok = (
                isinstance(item, list | tuple)
                and len(item) == 2
                and all(isinstance(x, int) and not isinstance(x, bool) for x in item)
            )
            if not ok:
                raise ValueError(
                    f"entry [{i}] is {quote(item)}; allowed: a pair of qubit indices like [0, 1]"
                )
            out.append((int(item[0]), int(item[1])))
        return tuple(out)

    @model_validator(mode="after")
    def _check(self) -> DeviceProfile:
        _check_semantics(self)
        return self

    def __hash__(self) -> int:  # the overrides mapping is a dict: hash the canonical JSON
        return hash(self.fingerprint)

    @property
    def fingerprint(self) -> str:
        """SHA-256 of the canonical JSON of every value (for cache keys); source not included."""
        text = json.dumps(self.model_dump(mode="json"), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()

    # ---- resolution helpers -------------------------------------------------------------
    @property
    def source(self) -> str:
        """Where the profile came from (file path), for messages."""
        return self._source

    @property
    def single_qubit_gates(self) -> tuple[str, ...]:
        return self.native_gates.single_qubit

    @property
    def two_qubit_gate(self) -> str:
        return self.native_gates.two_qubit

    @property
    def native_gate_names(self) -> tuple[str, ...]:
        return (*self.native_gates.single_qubit, self.native_gates.two_qubit)

    @property
    def is_all_to_all(self) -> bool:
        return self.links == ALL_TO_ALL

    def qubit(self, q: int) -> QubitParams:
        """Resolved parameters of physical qubit ``q`` (default merged with its override)."""
        if not 0 <= q < self.qubit_count:
            raise input_error(
                self._source, "qubit", f"qubit {q} does not exist", f"0..{self.qubit_count - 1}"
            )
        values = self.qubits.default.model_dump()
        override = self.qubits.overrides.get(q)
        if override is not None:
            values.update(
                {k: v for k, v in override.model_dump().items() if k in override.model_fields_set}
            )
        return QubitParams(index=q, **values)

    def pairs(self) -> tuple[tuple[int, int], ...]:
        """All linked pairs, each as (a, b) with a < b, sorted."""
        if self.is_all_to_all:
            return tuple(itertools.combinations(range(self.qubit_count), 2))
        return tuple(sorted(_norm(a, b) for a, b in self.links))

    def has_pair(self, a: int, b: int) -> bool:
        if a == b or not (0 <= a < self.qubit_count and 0 <= b < self.qubit_count):
            return False
        if self.is_all_to_all:
            return True
        return _norm(a, b) in set(self.pairs())

    def neighbours(self, q: int) -> tuple[int, ...]:
        """Physical qubits linked to ``q``, sorted."""
        out = set()
        for a, b in self.pairs():
            if a == q:
                out.add(b)
            elif b == q:
                out.add(a)
        return tuple(sorted(out))

    def pair(self, a: int, b: int) -> PairParams:
        """Resolved two-qubit parameters of the linked pair (a, b), either order."""
        if not self.has_pair(a, b):
            raise input_error(
                self._source, "links", f"qubits ({a}, {b}) are not linked", "a pair listed in links"
            )
        key = _norm(a, b)
        values = self.couplers.default.model_dump()
        for ov in self.couplers.overrides:
            if _norm(*ov.pair) == key:
                values.update(
                    {
                        k: getattr(ov, k)
                        for k in PairValues.model_fields
                        if k in ov.model_fields_set
                    }
                )
        return PairParams(pair=key, **values)

    def pair_error(self, a: int, b: int) -> float:
        """Quoted two-qubit gate error of the linked pair (a, b)."""
        return self.pair(a, b).gate_error

    def joint_flip(self, a: int, b: int) -> float:
        """Readout joint-flip probability of pair (a, b); 0.0 when none is given."""
        key = _norm(a, b)
        for entry in self.readout_crosstalk:
            if _norm(*entry.pair) == key:
                return entry.joint_flip
        return 0.0

    def conditional_flips(self, a: int, b: int) -> tuple[float, float]:
        """(P(a's bit flips | b reads 1), P(b's bit flips | a reads 1)) of pair (a, b), in the
        order asked; (0.0, 0.0) when none is given."""
        for entry in self.readout_crosstalk:
            if tuple(entry.pair) == (a, b):
                return entry.flip_a_if_b_reads_1, entry.flip_b_if_a_reads_1
            if tuple(entry.pair) == (b, a):
                return entry.flip_b_if_a_reads_1, entry.flip_a_if_b_reads_1
        return 0.0, 0.0

    def resolve(self, patch: Iterable[int] | None = None) -> DeviceModel:
        """The profile on ``patch`` (default: every qubit) as read-only arrays (``DeviceModel``)."""
        return resolve_device(self, None if patch is None else check_patch(self, patch))

    def gate_duration_ns(self, gate: str) -> float:
        """Duration of a native gate in ns (0 for the virtual rz)."""
        if gate in VIRTUAL_GATES:
            return 0.0
        if gate == self.native_gates.two_qubit:
            return self.durations.two_qubit_ns
        if gate in self.native_gates.single_qubit:
            return self.durations.single_qubit_ns
        raise input_error(
            self._source,
            "native_gates",
            f"{gate!r} is not a native gate",
            ", ".join(self.native_gate_names),
        )


def _qubit_key_owner(p: DeviceProfile, q: int, keys: tuple[str, ...]) -> str:
    """Key path of the section that sets ``keys`` for qubit ``q`` (its override or the default)."""
    ov = p.qubits.overrides.get(q)
    if ov is not None and any(k in ov.model_fields_set for k in keys):
        return f"qubits.overrides[{q}]"
    return "qubits.default"


def _check_semantics(p: DeviceProfile) -> None:
    n = p.qubit_count
    allowed_q = f"qubit indices 0..{n - 1}"

    def check_qubits(path: str, pair: tuple[int, int]) -> None:
        for q in pair:
            if not 0 <= q < n:
                raise ProfileCheckError(path, f"qubit {q} does not exist", allowed_q)
        if pair[0] == pair[1]:
            raise ProfileCheckError(
                path, f"pair {list(pair)} links a qubit to itself", "two different qubits"
            )

    gates = p.native_gates.single_qubit
    if len(set(gates)) != len(gates):
        raise ProfileCheckError(
            "native_gates.single_qubit", "a gate is listed twice", "each of rz, sx, x at most once"
        )
    for needed in ("rz", "sx"):
        if needed not in gates:
            raise ProfileCheckError(
                "native_gates.single_qubit",
                f"{needed} is missing",
                "a set containing rz and sx (x optional)",
            )

    if p.is_all_to_all and n > MAX_ALL_TO_ALL_QUBITS:
        raise ProfileCheckError(
            "links",
            f"all-to-all on {n} qubits ({n * (n - 1) // 2} pairs)",
            f"all-to-all on at most {MAX_ALL_TO_ALL_QUBITS} qubits (every pair is routed and "
            "modelled), or a list of pairs",
        )
    if not p.is_all_to_all:
        seen: dict[tuple[int, int], int] = {}
        for i, pair in enumerate(p.links):
            check_qubits(f"links[{i}]", pair)
            key = _norm(*pair)
            if key in seen:
                raise ProfileCheckError(
                    f"links[{i}]",
                    f"pair {list(pair)} repeats links[{seen[key]}]",
                    "each undirected pair once",
                )
            seen[key] = i
        if n >= 2 and not p.links:
            raise ProfileCheckError(
                "links", "no pairs given", f"at least one pair, or {ALL_TO_ALL}"
            )
    linked = set(p.pairs())

    for q in p.qubits.overrides:
        if not 0 <= q < n:
            raise ProfileCheckError(
                f"qubits.overrides[{q}]", f"qubit {q} does not exist", allowed_q
            )

    def check_linked_list(section: str, entries: Iterable[Any]) -> None:
        seen_pairs: dict[tuple[int, int], int] = {}
        for i, entry in enumerate(entries):
            path = f"{section}[{i}].pair"
            check_qubits(path, entry.pair)
            key = _norm(*entry.pair)
            if key not in linked:
                raise ProfileCheckError(
                    path, f"pair {list(entry.pair)} is not in links", "a linked pair"
                )
            if key in seen_pairs:
                raise ProfileCheckError(
                    path,
                    f"pair {list(entry.pair)} repeats {section}[{seen_pairs[key]}]",
                    "each pair once",
                )
            seen_pairs[key] = i

    check_linked_list("couplers.overrides", p.couplers.overrides)
    check_linked_list("readout_crosstalk", p.readout_crosstalk)
    for i, entry in enumerate(p.untwirled_readout_flips):
        if not 0 <= entry[0] < n:
            raise ProfileCheckError(
                f"untwirled_readout_flips[{i}]", f"qubit {entry[0]} does not exist", f"0..{n - 1}"
            )

    for q in range(n):
        rq = p.qubit(q)
        where = _qubit_key_owner(p, q, ("t1_us", "t2_us"))
        if rq.t1_us is None and rq.t2_us is not None:
            raise ProfileCheckError(f"{where}.t2_us", "finite T2 with infinite T1", "T2 <= 2 T1")
        if rq.t1_us is not None and rq.t2_us is None:
            raise ProfileCheckError(f"{where}.t2_us", "infinite T2 with finite T1", "T2 <= 2 T1")
        if (
            rq.t1_us is not None
            and rq.t2_us is not None
            and rq.t2_us > 2.0 * rq.t1_us * (1 + 1e-12)
        ):
            raise ProfileCheckError(
                f"{where}.t2_us",
                f"T2 = {rq.t2_us:g} us exceeds 2 T1 = {2 * rq.t1_us:g} us on qubit {q}",
                "T2 <= 2 T1 (Nielsen & Chuang sec. 8.3)",
            )


def check_patch(
    profile: DeviceProfile, patch: Iterable[Any], what: str = "patch"
) -> tuple[int, ...]:
    """Validate an ordered tuple of distinct, existing physical qubits; return it as ints."""
    items = list(patch)
    out = []
    n = profile.qubit_count
    for i, q in enumerate(items):
        if isinstance(q, bool) or not isinstance(q, int):
            raise input_error(
                profile.source,
                f"{what}[{i}]",
                f"{q!r} is not a qubit index",
                f"integers 0..{n - 1}",
            )
        if not 0 <= q < n:
            raise input_error(
                profile.source,
                f"{what}[{i}]",
                f"qubit {q} does not exist on '{profile.name}'",
                f"0..{n - 1}",
            )
        out.append(int(q))
    if len(set(out)) != len(out):
        raise input_error(
            profile.source, what, f"qubits repeat in {out}", "distinct physical qubits"
        )
    if not out:
        raise input_error(profile.source, what, "no qubits given", "at least one physical qubit")
    return tuple(out)


# ---- loading --------------------------------------------------------------------------------


def profile_from_mapping(
    data: Mapping[str, Any], source: str = "<profile>", *, allow_infinite_coherence: bool = False
) -> DeviceProfile:
    """Validate a mapping into a :class:`DeviceProfile`; one-line :class:`InputError` on failure."""
    if not isinstance(data, Mapping):
        raise input_error(
            source, None, f"top level is a {type(data).__name__}, not a mapping", "a YAML mapping"
        )
    try:
        profile = DeviceProfile.model_validate(
            dict(data), context={_CTX_ALLOW_INFINITE: allow_infinite_coherence}
        )
    except ValidationError as exc:
        raise from_validation_error(exc, source, model=DeviceProfile) from None
    except ProfileCheckError as exc:
        raise exc.with_source(source) from None
    except (TypeError, ValueError, OverflowError, RecursionError) as exc:  # defensive: odd inputs
        raise input_error(source, None, f"invalid profile ({type(exc).__name__}: {exc})") from None
    profile._source = source
    return profile


def load_profile(path: str | Path) -> DeviceProfile:
    """Read and validate a device profile YAML file (a path, or a shipped profile's name)."""

    if not Path(path).exists() and looks_like_name(str(path)):
        path = shipped_path("devices", str(path), str(path), "device profile")
    data = load_yaml_mapping(path, what="device profile")
    return profile_from_mapping(data, str(path))


# ---- warnings -------------------------------------------------------------------------------


def relaxation_gate_infidelity(profile: DeviceProfile, gate: str, qubits: tuple[int, ...]) -> float:
    """Average infidelity T1/T2 alone cause over the duration of ``gate`` on physical ``qubits``."""
    t_ns = profile.gate_duration_ns(gate)
    if t_ns == 0.0:
        return 0.0
    coh = [(profile.qubit(q).t1_us, profile.qubit(q).t2_us) for q in qubits]
    return thermal.relaxation_infidelity(t_ns, coh)


#: A two-qubit gate error above this is more likely a percentage typed as a fraction.
TYPO_TWO_QUBIT_ERROR = 0.2
#: T2 this close to its maximum 2 T1 (relative) is more likely copied or computed than measured.
TYPO_T2_NEAR_2T1 = 0.01


def profile_warnings(profile: DeviceProfile) -> list[str]:
    """One line per implausible value a typo produces, and per quoted gate error below what
    relaxation alone causes over the gate (the noise model then uses relaxation alone there):
    a two-qubit gate error above 0.2, a qubit with no link, T2 within 1 % of 2 T1."""
    out = _typo_warnings(profile)
    physical_1q = [g for g in profile.single_qubit_gates if g not in VIRTUAL_GATES]
    if physical_1q:
        gate = physical_1q[0]
        for q in range(profile.qubit_count):
            quoted = profile.qubit(q).gate_error
            floor = relaxation_gate_infidelity(profile, gate, (q,))
            if quoted < floor:
                where = _qubit_key_owner(profile, q, ("gate_error",))
                out.append(
                    f"{profile.source}: {where}.gate_error: qubit {q}: quoted {quoted:.3g} "
                    f"is below the {floor:.3g} that T1/T2 alone cause over "
                    f"{profile.durations.single_qubit_ns:g} ns; "
                    "relaxation alone is used for this gate"
                )
    g2 = profile.two_qubit_gate
    override_pairs = {
        _norm(*ov.pair) for ov in profile.couplers.overrides if "gate_error" in ov.model_fields_set
    }
    for a, b in profile.pairs():
        quoted = profile.pair_error(a, b)
        floor = relaxation_gate_infidelity(profile, g2, (a, b))
        if quoted < floor:
            where = "couplers.overrides" if (a, b) in override_pairs else "couplers.default"
            out.append(
                f"{profile.source}: {where}.gate_error: pair ({a}, {b}): quoted {quoted:.3g} "
                f"is below the {floor:.3g} that T1/T2 alone cause over "
                f"{profile.durations.two_qubit_ns:g} ns; "
                "relaxation alone is used for this gate"
            )
    return out


def _typo_warnings(profile: DeviceProfile) -> list[str]:
    out: list[str] = []
    src = profile.source
    entries = [("couplers.default", profile.couplers.default.gate_error)]
    entries += [
        (f"couplers.overrides[{i}]", ov.gate_error)
        for i, ov in enumerate(profile.couplers.overrides)
        if ov.gate_error is not None
    ]
    for where, value in entries:
        if value > TYPO_TWO_QUBIT_ERROR:
            out.append(
                f"{src}: {where}.gate_error: {value:g} is above {TYPO_TWO_QUBIT_ERROR:g} (a "
                f"percentage typed as a fraction? {value:g} % is {value / 100:g})"
            )
    if profile.qubit_count > 1 and not profile.is_all_to_all:
        linked = {q for pair in profile.pairs() for q in pair}
        lonely = [q for q in range(profile.qubit_count) if q not in linked]
        if lonely:
            shown = ", ".join(map(str, lonely[:10])) + (" ..." if len(lonely) > 10 else "")
            out.append(
                f"{src}: links: qubit(s) {shown} have no link (a missing pair?); "
                "two-qubit gates can never reach them"
            )
    for q in range(profile.qubit_count):
        rq = profile.qubit(q)
        t1, t2 = rq.t1_us, rq.t2_us
        if t1 is not None and t2 is not None and abs(t2 - 2 * t1) <= TYPO_T2_NEAR_2T1 * 2 * t1:
            where = _qubit_key_owner(profile, q, ("t1_us", "t2_us"))
            out.append(
                f"{src}: {where}.t2_us: qubit {q}: T2 = {t2:g} us is within 1 % of "
                f"2 T1 = {2 * t1:g} us (no pure dephasing at all: T2 computed from "
                "T1 rather than measured?)"
            )
    return out


# ---- scaling ----------------------------------------------------------------------------------


def scale_profile(
    profile: DeviceProfile, factor: float, channels: Iterable[str] | None = None
) -> DeviceProfile:
    """Scale the noise of chosen channel groups by ``factor`` s >= 0 (``None``: all CHANNELS).

    Each channel's fields and rules come from ``CHANNEL_SPECS`` (``channel_registry``):

    * relaxation: T1 and T2 divided by s (s = 0: infinite coherence, stored as ``None``);
    * single_qubit / two_qubit: quoted gate errors times s, clipped at 0.5 / 0.75 (the
      average infidelity of full depolarization);
    * coherent: ZZ angles and over-rotation fractions times s, clipped at +-pi / +-0.5;
    * readout: P(1|0), P(0|1) and joint flips times s, clipped at 0.5.

    s = 0 on all channels is noiseless; s = 1 returns an equal profile.
    """
    try:
        s = float(factor)
    except (TypeError, ValueError):
        raise input_error(
            None, "noise scale factor", f"{factor!r} is not a number", "a number >= 0"
        ) from None
    if not math.isfinite(s) or s < 0.0:
        raise input_error(
            None, "noise scale factor", f"{factor!r} is not allowed", "a finite number >= 0"
        )
    try:
        chosen = check_channels(channels)
    except ValueError as exc:
        raise input_error(
            None, "channels", f"unknown channel {str(exc)!r}", ", ".join(CHANNELS)
        ) from None

    data = copy.deepcopy(profile.model_dump(exclude_unset=True))
    overrides = list(data["qubits"].get("overrides", {}).values())
    sections: dict[str, list[dict[str, Any]]] = {
        "qubit": [data["qubits"]["default"], *overrides],
        "pair": [data["couplers"]["default"], *data["couplers"].get("overrides", [])],
        "crosstalk": list(data.get("readout_crosstalk", [])),
    }
    for name in chosen:
        for f in CHANNEL_SPECS[name].fields:
            for e in sections[f.section]:
                if f.key in e:
                    e[f.key] = f.scale(e[f.key], s)
            if f.rule == "time" and s == 0.0 and f.section == "qubit":
                for e in overrides:  # an override of an infinite time is the (infinite) default
                    e.pop(f.key, None)
    try:
        out = DeviceProfile.model_validate(data, context={_CTX_ALLOW_INFINITE: True})
    except ValidationError as exc:  # pragma: no cover - scaling keeps values in range
        raise from_validation_error(exc, profile.source) from None
    out._source = profile.source
    return out
