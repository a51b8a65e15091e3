"""Device drift: profiles drawn around the nominal one with the profile's ``drift:`` spreads.

Each drawn profile is one plausible "day": every qubit's T1, T2, single-qubit gate error and
readout errors (P(1|0) and P(0|1) together), and every linked pair's two-qubit gate error, are
multiplied by independent log-normal factors of mean 1 and relative standard deviation
``sigma`` (``exp(s z - s^2 / 2)``, ``s^2 = ln(1 + sigma^2)``, z standard normal; log-normal keeps
times and rates positive). T2 is then capped at 2 T1 and rates at their physical maxima. A
spread of 0 gives a factor of exactly 1: with every spread 0 a drawn profile equals the nominal
one. The draw order is fixed (all qubits' T1, then T2, 1q error, readout; then the pairs in
sorted order), so a seed reproduces the days.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from noiselab.device.profile import (
    _CTX_ALLOW_INFINITE,
    MAX_READOUT_ERROR,
    MAX_SINGLE_QUBIT_ERROR,
    MAX_TWO_QUBIT_ERROR,
    DeviceProfile,
)


def lognormal_factors(rng: np.random.Generator, rel_std: float, size: int) -> np.ndarray:
    """``size`` factors of mean 1 and relative standard deviation ``rel_std`` (exactly 1 at 0).

    Always draws ``size`` normals, so later draws do not depend on which spreads are zero.
    """
    z = rng.standard_normal(size)
    if rel_std == 0.0:
        return np.ones(size)
    s2 = math.log1p(rel_std**2)
    return np.exp(math.sqrt(s2) * z - 0.5 * s2)


def draw_profile(profile: DeviceProfile, rng: np.random.Generator) -> DeviceProfile:
    """One drifted copy of ``profile`` (see the module text); only changed values are written."""
    d = profile.drift
    n = profile.qubit_count
    pairs = profile.pairs()
    f_t1 = lognormal_factors(rng, d.t1_rel_std, n)
    f_t2 = lognormal_factors(rng, d.t2_rel_std, n)
    f_1q = lognormal_factors(rng, d.single_qubit_error_rel_std, n)
    f_ro = lognormal_factors(rng, d.readout_error_rel_std, n)
    f_2q = lognormal_factors(rng, d.two_qubit_error_rel_std, len(pairs))

    data: dict[str, Any] = copy.deepcopy(profile.model_dump(exclude_unset=True))
    q_over: dict[int, dict[str, Any]] = data["qubits"].setdefault("overrides", {})
    for q in range(n):
        rq = profile.qubit(q)
        entry: dict[str, Any] = {}
        t1 = rq.t1_us
        if t1 is not None and f_t1[q] != 1.0:
            t1 = t1 * float(f_t1[q])
            entry["t1_us"] = t1
        if rq.t2_us is not None and t1 is not None:
            t2 = min(rq.t2_us * float(f_t2[q]), 2.0 * t1)
            if t2 != rq.t2_us:
                entry["t2_us"] = t2
        if f_1q[q] != 1.0:
            entry["gate_error"] = min(rq.gate_error * float(f_1q[q]), MAX_SINGLE_QUBIT_ERROR)
        if f_ro[q] != 1.0:
            for key in ("flip_0to1", "flip_1to0"):
                entry[key] = min(getattr(rq, key) * float(f_ro[q]), MAX_READOUT_ERROR)
        if entry:
            q_over.setdefault(q, {}).update(entry)
    p_over: list[dict[str, Any]] = list(data["couplers"].get("overrides", ()))
    data["couplers"]["overrides"] = p_over
    for (a, b), f in zip(pairs, f_2q, strict=True):
        if f == 1.0:
            continue
        value = min(profile.pair_error(a, b) * float(f), MAX_TWO_QUBIT_ERROR)
        for ov in p_over:
            if tuple(sorted(ov["pair"])) == (a, b):
                ov["gate_error"] = value
                break
        else:
            p_over.append({"pair": (a, b), "gate_error": value})
    if not q_over:
        data["qubits"].pop("overrides")
    if not p_over:
        data["couplers"].pop("overrides")
    out = DeviceProfile.model_validate(data, context={_CTX_ALLOW_INFINITE: True})
    out = out.model_copy(update={"drift": d})  # the spreads are not in the dump: carry them
    out._source = profile.source
    return out


def draw_profiles(
    profile: DeviceProfile, draws: int, seed: int | Sequence[int]
) -> list[DeviceProfile]:
    """``draws`` drifted profiles from ``numpy.random.default_rng(seed)``."""
    rng = np.random.default_rng(seed)
    return [draw_profile(profile, rng) for _ in range(int(draws))]
