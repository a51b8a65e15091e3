"""Longer (or shorter) coherence with the gate errors following it.

``scale_profile(profile, s, ["relaxation"])`` divides T1 and T2 by s and keeps every quoted
gate error as it is. :func:`scale_coherence_with_gates` also moves the part of each quoted gate
error that T1/T2 cause over the gate's duration:

    error(T1', T2') = relaxation part(T1', T2') + (quoted - relaxation part(T1, T2))

The relaxation part is the average infidelity of amplitude and phase damping over the gate
(:func:`noiselab.device.thermal.relaxation_infidelity`: for one qubit the standard
F = 1/2 + (exp(-t/T1) + 2 exp(-t/T2))/6, Nielsen & Chuang sec. 8.3 with Nielsen, Phys. Lett.
A 303, 249 (2002); for a two-qubit gate the entanglement fidelities of the two qubits
multiply and F = (4 F_e + 1)/5). The rest (control, leakage, ...) is held fixed. Where the
quoted error is below the relaxation part the rest is taken as 0 (clipped; the caller is told),
and a new error above the physical maximum is clipped to it.
"""

from __future__ import annotations

import copy
import dataclasses

from noiselab.device.channel_registry import MAX_SINGLE_QUBIT_ERROR, MAX_TWO_QUBIT_ERROR
from noiselab.device.profile import (
    VIRTUAL_GATES,
    DeviceProfile,
    profile_from_mapping,
    relaxation_gate_infidelity,
    scale_profile,
)


@dataclasses.dataclass(frozen=True)
class CoherenceScaled:
    """A profile with T1/T2 divided by ``factor`` and the relaxation part of its gate errors
    moved with them. ``clipped``: where the quoted error was below its relaxation part (rest
    taken as 0) or the new error above the maximum, one short phrase each."""

    profile: DeviceProfile
    clipped: tuple[str, ...]


def _moved(quoted: float, old_part: float, new_part: float, top: float) -> tuple[float, str]:
    rest = quoted - old_part
    note = ""
    if rest < 0.0:
        rest, note = 0.0, "below its relaxation part"
    new = new_part + rest
    if new > top:
        new, note = top, "above the maximum"
    return new, note


def scale_coherence_with_gates(profile: DeviceProfile, factor: float) -> CoherenceScaled:
    """T1 and T2 divided by ``factor`` (0: infinite), every quoted gate error's relaxation part
    recomputed from the new times and the gate duration, the rest held fixed."""
    relaxed = scale_profile(profile, factor, ["relaxation"])
    data = copy.deepcopy(relaxed.model_dump(exclude_unset=True))
    clipped: list[str] = []
    physical = [g for g in profile.single_qubit_gates if g not in VIRTUAL_GATES]
    if physical:
        gate = physical[0]  # every physical single-qubit gate has the one duration
        overrides = data["qubits"].setdefault("overrides", {})
        for q in range(profile.qubit_count):
            new, note = _moved(
                profile.qubit(q).gate_error,
                relaxation_gate_infidelity(profile, gate, (q,)),
                relaxation_gate_infidelity(relaxed, gate, (q,)),
                MAX_SINGLE_QUBIT_ERROR,
            )
            overrides.setdefault(q, {})["gate_error"] = new
            if note:
                clipped.append(f"qubit {q} gate error {note}")
    gate2 = profile.two_qubit_gate
    entries = list(data["couplers"].get("overrides", ()))
    data["couplers"]["overrides"] = entries
    by_pair = {tuple(sorted(e["pair"])): e for e in entries}
    for a, b in profile.pairs():
        new, note = _moved(
            profile.pair_error(a, b),
            relaxation_gate_infidelity(profile, gate2, (a, b)),
            relaxation_gate_infidelity(relaxed, gate2, (a, b)),
            MAX_TWO_QUBIT_ERROR,
        )
        entry = by_pair.get((a, b))
        if entry is None:
            entry = {"pair": [a, b]}
            entries.append(entry)
        entry["gate_error"] = new
        if note:
            clipped.append(f"pair {a}-{b} gate error {note}")
    out = profile_from_mapping(data, profile.source, allow_infinite_coherence=True)
    return CoherenceScaled(out, tuple(clipped))
