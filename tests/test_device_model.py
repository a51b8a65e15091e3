"""The resolved device model: its arrays are the profile's resolved values, ``.scaled`` equals
``scale_profile`` bit for bit, and the channel registry covers every noise field of the schema."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from noiselab.device.aer_adapter import gate_error
from noiselab.device.channel_registry import CHANNEL_SPECS, CHANNELS, CIRCUIT_CHANNELS
from noiselab.device.model import DeviceModel
from noiselab.device.noise import (
    build_noise_model,
    gate_channel,
    noise_spec,
    readout_crosstalk,
    readout_matrices,
)
from noiselab.device.profile import (
    PairValues,
    QubitValues,
    load_profile,
    scale_profile,
)

DEVICES = ("rustbucket-6", "cobaltgrid-12", "amberline-10", "tallowtrap-8", "mossline-6")
SUBSETS = [None, *[(c,) for c in CHANNELS], CIRCUIT_CHANNELS, ("relaxation", "readout")]


def _inf(value: float | None) -> float:
    return np.inf if value is None else value


def _assert_same(a: DeviceModel, b: DeviceModel) -> None:
    for f in DeviceModel.__dataclass_fields__:
        x, y = getattr(a, f), getattr(b, f)
        if isinstance(x, np.ndarray):
            np.testing.assert_array_equal(x, y, err_msg=f)  # exact, not close
        else:
            assert x == y, f


@pytest.mark.parametrize("name", DEVICES)
def test_arrays_are_the_profiles_values(name: str) -> None:
    prof = load_profile(name)
    patch = tuple(reversed(range(min(prof.qubit_count, 5))))
    m = prof.resolve(patch)
    assert m.patch == patch
    for i, q in enumerate(patch):
        qp = prof.qubit(q)
        assert m.t1_us[i] == _inf(qp.t1_us) and m.t2_us[i] == _inf(qp.t2_us)
        assert m.gate_error[i] == qp.gate_error
        assert (m.flip_0to1[i], m.flip_1to0[i]) == (qp.flip_0to1, qp.flip_1to0)
        assert m.over_rotation_fraction[i] == qp.over_rotation_fraction
        assert m.detuning_std_khz[i] == qp.detuning_std_khz
    linked = [
        (i, j)
        for i, j in itertools.combinations(range(len(patch)), 2)
        if prof.has_pair(patch[i], patch[j])
    ]
    assert [tuple(p) for p in m.pairs] == linked
    for k, (i, j) in enumerate(linked):
        pp = prof.pair(patch[i], patch[j])
        assert m.pair_gate_error[k] == pp.gate_error and m.zz_angle_rad[k] == pp.zz_angle_rad
        assert m.zz_rate_khz[k] == pp.zz_rate_khz
        assert m.spectator_phase_rad[k] == pp.spectator_phase_rad
    assert m.two_qubit_ns == prof.durations.two_qubit_ns
    np.testing.assert_array_equal(m.readout_matrices(), readout_matrices(prof, patch))
    flips = {(i, j): c for i, j, c in readout_crosstalk(prof, patch)}
    assert {tuple(p): c for p, c in zip(m.pairs, m.joint_flip, strict=True) if c > 0} == flips
    with pytest.raises(ValueError):
        m.gate_error[0] = 0.1  # read-only


@pytest.mark.parametrize("name", DEVICES)
@pytest.mark.parametrize("factor", [0.0, 1e-300, 0.5, 1.0, 2.5, 400.0])
@pytest.mark.parametrize("channels", SUBSETS)
def test_scaled_equals_scale_profile(name: str, factor: float, channels) -> None:
    prof = load_profile(name)
    patch = tuple(range(min(prof.qubit_count, 4)))
    _assert_same(
        prof.resolve(patch).scaled(factor, channels),
        scale_profile(prof, factor, channels).resolve(patch),
    )


def test_scaled_refuses_bad_input() -> None:
    m = load_profile("rustbucket-6").resolve([0, 1])
    with pytest.raises(ValueError):
        m.scaled(-1.0)
    with pytest.raises(ValueError):
        m.scaled(2.0, ["gates"])


def test_registry_covers_every_noise_field() -> None:
    """Every number of the per-qubit and per-pair schema is owned by exactly one channel."""
    owned = [(f.section, f.key) for c in CHANNEL_SPECS.values() for f in c.fields]
    assert len(owned) == len(set(owned))
    assert {k for s, k in owned if s == "qubit"} == set(QubitValues.model_fields)
    assert {k for s, k in owned if s == "pair"} == set(PairValues.model_fields)
    assert "readout" not in CIRCUIT_CHANNELS


def test_noise_model_is_built_from_the_noise_spec() -> None:
    """Every rule of the spec is the error the aer model attaches to that gate and qubits."""
    prof = load_profile("rustbucket-6")
    patch = (2, 0, 1)
    spec = noise_spec(prof, patch)
    nm = build_noise_model(prof, patch)
    n1 = sum(g not in ("rz",) for g in prof.single_qubit_gates) * len(patch)
    linked = sum(prof.has_pair(a, b) for a, b in itertools.permutations(patch, 2))
    assert len(spec.gates) == n1 + linked
    for rule in spec.gates:
        want = gate_channel(prof, rule.gate, [patch[i] for i in rule.qubits])
        got = gate_error(nm, rule.gate, rule.qubits)
        assert got is not None and got == want
    assert spec.idle_coherence is not None and len(spec.idle_coherence) == len(patch)
    assert noise_spec(prof, patch, idle_relaxation=False).idle_coherence is None
