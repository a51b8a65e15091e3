"""The resolved device model: a profile's values on one patch as read-only numpy arrays.

``resolve_device(profile, patch)`` (also ``profile.resolve(patch)``) merges defaults and
overrides once. Circuit qubit i is physical ``patch[i]``; per-qubit arrays have length k, per-pair
arrays one entry per linked pair ``pairs[m] = (i, j)``, i < j circuit indices. Infinite
coherence is ``inf``. ``.scaled(s, channels)`` applies the rules of
:mod:`noiselab.device.channel_registry` to the arrays: it equals resolving
``scale_profile(profile, s, channels)`` bit for bit.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from noiselab.device.channel_registry import CHANNEL_SPECS, check_channels


def _frozen(values: Any, dtype: Any = float) -> np.ndarray:
    out = np.array(values, dtype=dtype)
    out.setflags(write=False)
    return out


def _time(value: float | None) -> float:
    return math.inf if value is None else float(value)


@dataclass(frozen=True, eq=False)
class DeviceModel:
    """A device profile resolved on a patch (times in us and ns, rates 0..1, angles in rad)."""

    patch: tuple[int, ...]
    single_qubit_ns: float
    two_qubit_ns: float
    readout_ns: float
    # per qubit (length k)
    t1_us: np.ndarray
    t2_us: np.ndarray
    gate_error: np.ndarray
    flip_0to1: np.ndarray
    flip_1to0: np.ndarray
    over_rotation_fraction: np.ndarray
    detuning_std_khz: np.ndarray
    # per linked pair within the patch (length m)
    pairs: np.ndarray  # (m, 2) circuit indices, i < j
    pair_gate_error: np.ndarray
    zz_angle_rad: np.ndarray
    joint_flip: np.ndarray
    flip_i_if_j_reads_1: np.ndarray  # pair (i, j): P(i's bit flips | j reads 1)
    flip_j_if_i_reads_1: np.ndarray
    zz_rate_khz: np.ndarray
    spectator_phase_rad: np.ndarray

    @property
    def num_qubits(self) -> int:
        return len(self.patch)

    def scaled(self, factor: float, channels: Iterable[str] | None = None) -> DeviceModel:
        """A new model with the chosen channels' fields scaled by ``factor`` (``None``: all)."""
        s = float(factor)
        if not math.isfinite(s) or s < 0.0:
            raise ValueError(f"noise scale factor {factor!r}; allowed: a finite number >= 0")
        updates = {
            f.attr: _frozen(f.scale_array(getattr(self, f.attr), s))
            for name in check_channels(channels)
            for f in CHANNEL_SPECS[name].fields
        }
        return dataclasses.replace(self, **updates)

    def readout_matrices(self) -> np.ndarray:
        """Per-qubit assignment matrices (k, 2, 2), columns the prepared state."""
        out = np.empty((self.num_qubits, 2, 2))
        out[:, 0, 0] = 1.0 - self.flip_0to1
        out[:, 0, 1] = self.flip_1to0
        out[:, 1, 0] = self.flip_0to1
        out[:, 1, 1] = 1.0 - self.flip_1to0
        return out


def resolve_device(profile: Any, patch: Sequence[int] | None = None) -> DeviceModel:
    """Resolve ``profile`` (a ``DeviceProfile``) on ``patch`` (``None``: every qubit in order)."""
    patch_t = tuple(range(profile.qubit_count)) if patch is None else tuple(int(q) for q in patch)
    qs = [profile.qubit(q) for q in patch_t]
    pairs = [
        (i, j)
        for i in range(len(patch_t))
        for j in range(i + 1, len(patch_t))
        if profile.has_pair(patch_t[i], patch_t[j])
    ]
    pps = [profile.pair(patch_t[i], patch_t[j]) for i, j in pairs]
    conds = [profile.conditional_flips(patch_t[i], patch_t[j]) for i, j in pairs]
    d = profile.durations
    return DeviceModel(
        patch=patch_t,
        single_qubit_ns=float(d.single_qubit_ns),
        two_qubit_ns=float(d.two_qubit_ns),
        readout_ns=float(d.readout_ns),
        t1_us=_frozen([_time(q.t1_us) for q in qs]),
        t2_us=_frozen([_time(q.t2_us) for q in qs]),
        gate_error=_frozen([q.gate_error for q in qs]),
        flip_0to1=_frozen([q.flip_0to1 for q in qs]),
        flip_1to0=_frozen([q.flip_1to0 for q in qs]),
        over_rotation_fraction=_frozen([q.over_rotation_fraction for q in qs]),
        detuning_std_khz=_frozen([q.detuning_std_khz for q in qs]),
        pairs=_frozen(np.array(pairs, dtype=int).reshape(-1, 2), dtype=int),
        pair_gate_error=_frozen([p.gate_error for p in pps]),
        zz_angle_rad=_frozen([p.zz_angle_rad for p in pps]),
        joint_flip=_frozen([profile.joint_flip(patch_t[i], patch_t[j]) for i, j in pairs]),
        flip_i_if_j_reads_1=_frozen([cond[0] for cond in conds]),
        flip_j_if_i_reads_1=_frozen([cond[1] for cond in conds]),
        zz_rate_khz=_frozen([p.zz_rate_khz for p in pps]),
        spectator_phase_rad=_frozen([p.spectator_phase_rad for p in pps]),
    )
