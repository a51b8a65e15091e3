"""Circuit transforms: every way a recipe changes what runs on the device, as frozen values.

A :class:`CircuitTransform` is a frozen dataclass with a ``kind`` (its registered name), a
``label()`` for tables, ``key_fields()`` for cache keys and one method, ``apply(compiled,
profile, tools) -> Applied(compiled, profile, scale)``: the compiled circuit and device profile
that are emulated, and the noise scale factor the transform realizes (nominal for profile
changes, as reached for folds: gate counts are integers). A sequence of transforms is applied
in order by :class:`TransformRealizer`, which belongs to one experiment (one compiled circuit on
one profile) and keeps what it realized: the transformed circuits, the re-scheduling target and
the error budgets.

The set is open: a new transform is one frozen dataclass subclassing :class:`CircuitTransform`
plus ``register_transform(cls)``; nothing else names the built-ins.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, ClassVar

from noiselab.device.channel_registry import CHANNELS, CIRCUIT_CHANNELS
from noiselab.device.compile import build_target, estimate_error_budget
from noiselab.device.folding import fold_circuit, reschedule
from noiselab.device.profile import scale_profile

# pulse stretching slows the gates, not the measurement: readout stays as calibrated
# pulse stretching scales the channels acting in the circuit (the gates), not the measurement
STRETCH_CHANNELS: tuple[str, ...] = CIRCUIT_CHANNELS


@dataclass(frozen=True)
class Applied:
    """What one transform gives: the compiled circuit and profile to emulate, and the noise
    scale factor it realizes."""

    compiled: Any
    profile: Any
    scale: float


@dataclass(frozen=True)
class CircuitTransform:
    """Base of every transform (subclasses are frozen dataclasses; see the module docstring).

    ``changes_circuit``: whether ``apply`` returns another circuit (the realized noise scale is
    then measured by the error budget, not taken as nominal). ``absent_key``: the key fields a
    variant without this kind of transform reports (kept from the closed record this type
    replaced, so that cache keys stay the same; new kinds leave it empty).
    """

    kind: ClassVar[str] = ""
    changes_circuit: ClassVar[bool] = False
    #: changes only the readout error (the state simulation is that of the variant without it)
    readout_only: ClassVar[bool] = False
    absent_key: ClassVar[Mapping[str, Any]] = {}

    @property
    def is_identity(self) -> bool:
        """True when the transform changes nothing (a variant drops it)."""
        return False

    @property
    def nominal_scale(self) -> float:
        """The noise scale factor asked for (what contexts without a circuit use)."""
        return 1.0

    def label(self) -> str:
        fields = ",".join(f"{k}={v}" for k, v in dataclasses.asdict(self).items())
        return f"{self.kind}({fields})"

    def key_fields(self) -> dict[str, Any]:
        """JSON-serializable fields for a cache key, under names no other kind uses (default:
        the dataclass fields under the kind's name)."""
        return {self.kind: dataclasses.asdict(self)}

    def calibration(self) -> CircuitTransform | None:
        """What of this transform the readout-calibration circuits see (None: nothing)."""
        return None

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        raise NotImplementedError


TRANSFORMS: dict[str, type[CircuitTransform]] = {}


def register_transform(cls: type[CircuitTransform]) -> type[CircuitTransform]:
    """Add a transform class to :data:`TRANSFORMS` (a frozen dataclass with a free ``kind``)."""
    params = getattr(cls, "__dataclass_params__", None)
    if not (isinstance(cls, type) and issubclass(cls, CircuitTransform)):
        raise TypeError(f"{cls!r}: a transform subclasses CircuitTransform")
    if params is None or not params.frozen or "__dataclass_fields__" not in cls.__dict__:
        raise TypeError(f"{cls.__name__}: a transform is a frozen dataclass")
    if not cls.kind or (cls.kind in TRANSFORMS and TRANSFORMS[cls.kind] is not cls):
        raise ValueError(f"{cls.__name__}: kind {cls.kind!r} is empty or taken")
    TRANSFORMS[cls.kind] = cls
    return cls


def untransformed_key() -> dict[str, Any]:
    """Key fields of a circuit without transforms (the registered kinds' ``absent_key``)."""
    out: dict[str, Any] = {}
    for cls in TRANSFORMS.values():
        out.update(cls.absent_key)
    return out


# ---- built-in transforms ----------------------------------------------------------------------


@dataclass(frozen=True)
class NoiseStretch(CircuitTransform):
    """The device profile scaled by ``scale`` on ``channels`` (None: all), the circuit as is."""

    kind: ClassVar[str] = "stretch"
    absent_key: ClassVar[Mapping[str, Any]] = {"noise_scale": 1.0, "scaled_channels": None}
    scale: float
    channels: tuple[str, ...] | None = None

    def __post_init__(self) -> None:
        # normalize so that equal simulations compare (and hash) equal
        object.__setattr__(self, "scale", float(self.scale))
        chans = self.channels
        if chans is not None:
            chans = tuple(sorted(set(chans)))
            if chans == tuple(sorted(CHANNELS)):
                chans = None
        if self.scale == 1.0:
            chans = None
        object.__setattr__(self, "channels", chans)

    @property
    def is_identity(self) -> bool:
        return self.scale == 1.0

    @property
    def nominal_scale(self) -> float:
        return self.scale

    def label(self) -> str:
        chans = "all" if self.channels is None else "+".join(self.channels)
        return f"stretch={self.scale:g}[{chans}]"

    def key_fields(self) -> dict[str, Any]:
        chans = None if self.channels is None else list(self.channels)
        return {"noise_scale": self.scale, "scaled_channels": chans}

    def calibration(self) -> CircuitTransform | None:
        if self.channels is None or "readout" in self.channels:
            return NoiseStretch(self.scale, ("readout",))
        return None

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        return Applied(compiled, scale_profile(profile, self.scale, self.channels), self.scale)


@dataclass(frozen=True)
class GateFolding(CircuitTransform):
    """Unitary folding (``method``: "whole_circuit" | "two_qubit_gates") to ``scale``, in native
    gates, re-scheduled on the device (``device.folding``)."""

    kind: ClassVar[str] = "fold"
    changes_circuit: ClassVar[bool] = True
    absent_key: ClassVar[Mapping[str, Any]] = {"fold_method": "none", "fold_scale": 1.0}
    method: str
    scale: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "scale", float(self.scale))
        if self.method not in ("whole_circuit", "two_qubit_gates"):
            raise ValueError(f"unknown fold method {self.method!r}")

    @property
    def is_identity(self) -> bool:
        return self.scale == 1.0

    @property
    def nominal_scale(self) -> float:
        return self.scale

    def label(self) -> str:
        return f"folded_{self.method}={self.scale:g}"

    def key_fields(self) -> dict[str, Any]:
        return {"fold_method": self.method, "fold_scale": self.scale}

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        res = fold_circuit(compiled.circuit, self.method, self.scale)
        out = tools.reschedule(res.circuit, compiled, profile, expected_two_qubit=res.n_two_qubit)
        return Applied(out, profile, res.actual_scale)


register_transform(NoiseStretch)
register_transform(GateFolding)


# ---- realizing transforms for one experiment ----------------------------------------------------


@dataclass(frozen=True)
class Realized:
    """A sequence of transforms as realized: circuit and profile to emulate, the product of
    the scale factors, and that of the profile-only transforms (``profile_scale``)."""

    compiled: Any
    profile: Any
    scale: float
    profile_scale: float
    changes_circuit: bool


class TransformRealizer:
    """Applies transforms to one experiment's compiled circuit and profile, and keeps what it
    realized for its own lifetime (one per experiment context; dropped when pickled).

    ``compiled`` None (synthetic contexts in tests): nothing is applied, scales are nominal.
    """

    def __init__(self, compiled: Any, profile: Any) -> None:
        self.compiled = compiled
        self.profile = profile
        self._realized: dict[tuple[CircuitTransform, ...], Realized] = {}
        self._budgets: dict[tuple[CircuitTransform, ...], dict[str, float] | None] = {}
        self._targets: dict[tuple[str, tuple[int, ...]], Any] = {}

    def __getstate__(self) -> dict[str, Any]:
        return {"compiled": self.compiled, "profile": self.profile}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.__init__(state["compiled"], state["profile"])  # type: ignore[misc]

    def target(self, profile: Any, patch: Sequence[int]) -> Any:
        """The transpiler target of ``profile`` on ``patch`` (building one evaluates every gate
        channel: kept, the latest only)."""
        key = (profile.model_dump_json(), tuple(patch))
        if key not in self._targets:
            self._targets.clear()
            self._targets[key] = build_target(profile, patch)
        return self._targets[key]

    def reschedule(
        self, circuit: Any, like: Any, profile: Any, *, expected_two_qubit: int | None = None
    ) -> Any:
        """``circuit`` (native gates on ``like``'s patch) re-scheduled as a CompiledCircuit."""
        target = self.target(profile, like.patch)
        return reschedule(circuit, like, profile, target, expected_two_qubit=expected_two_qubit)

    def realize(self, transforms: tuple[CircuitTransform, ...]) -> Realized:
        """Apply ``transforms`` in order (memoized by value)."""
        if transforms not in self._realized:
            compiled, profile = self.compiled, self.profile
            scale = profile_scale = 1.0
            changes = False
            for t in transforms:
                if compiled is None:  # synthetic context: nominal scale, nothing emulated
                    scale *= t.nominal_scale
                    continue
                applied = t.apply(compiled, profile, self)
                compiled, profile = applied.compiled, applied.profile
                scale *= applied.scale
                if t.changes_circuit:
                    changes = True
                else:
                    profile_scale *= applied.scale
            self._realized[transforms] = Realized(compiled, profile, scale, profile_scale, changes)
        return self._realized[transforms]

    def error_budget(self, transforms: tuple[CircuitTransform, ...]) -> dict[str, float] | None:
        """Estimated error per kind of operation of the transformed circuit on the untransformed
        profile (``device.compile.estimate_error_budget``); None without a circuit."""
        if transforms not in self._budgets:
            compiled = self.realize(transforms).compiled
            budget = None
            if compiled is not None and self.profile is not None:
                budget = estimate_error_budget(compiled.circuit, self.profile, compiled.patch)
            self._budgets[transforms] = budget
        return self._budgets[transforms]

    def realized_scales(self, transforms: tuple[CircuitTransform, ...]) -> dict[str, float]:
        """The noise scale realized relative to the untransformed circuit: ``"total"`` and one
        entry per kind of operation ("two_qubit", "single_qubit", "idle"; absent where the base
        circuit has no such error).

        Transformed circuits: the ratio of the estimated errors (sum of the operations' average
        infidelities) to the base circuit's, times the profile-only factors. Otherwise, and
        without a compiled circuit: the scale as applied.
        """
        real = self.realize(transforms)
        if not real.changes_circuit:
            return {"total": real.scale}
        base, changed = self.error_budget(()), self.error_budget(transforms)
        if base is None or changed is None or sum(base.values()) <= 0.0:
            return {"total": real.scale}
        factor = real.profile_scale
        out = {"total": factor * sum(changed.values()) / sum(base.values())}
        for kind, err in base.items():
            if err > 0.0:
                out[kind] = factor * changed[kind] / err
        return out
