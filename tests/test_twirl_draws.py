"""``twirl`` with ``draws``: a finite number of random Pauli twirls, their spread in the error
bar, the bias the exact twirl average (noiselab/device/suppression.TwirlDraw)."""

from __future__ import annotations

import functools
import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from helpers.pass_contract import h2_experiment
from helpers.twirl import explicit_twirl
from qiskit import QuantumCircuit
from qiskit.circuit.library import CXGate, CZGate, ECRGate
from qiskit.quantum_info import Kraus, Operator, Pauli, SuperOp

from noiselab.common.errors import InputError
from noiselab.device.noise import gate_channel
from noiselab.device.profile import load_profile, scale_profile
from noiselab.device.suppression import _with_profile_values, frame_before, twirl_draw_circuit
from noiselab.mitigate.experiment import make_runner
from noiselab.mitigate.recipe import run_recipe
from noiselab.study.context import replace_experiment

AMBERLINE = Path(__file__).resolve().parents[1] / "configs" / "devices" / "amberline-10.yaml"
LABELS = ["".join(p) for p in itertools.product("IXYZ", repeat=2)]


@pytest.mark.parametrize("gate", [CZGate(), CXGate(), ECRGate()])
def test_frames_average_to_the_twirl_of_the_real_channel(gate) -> None:
    profile = load_profile(AMBERLINE)  # ZZ angles and T1 on its pairs: not Pauli-diagonal
    noise = SuperOp(gate_channel(profile, "cz", (2, 3)).to_quantumchannel())
    ideal = SuperOp(Operator(gate))
    total = np.zeros_like(noise.data)
    for after in LABELS:
        before = frame_before(gate, after)
        # the frames leave the ideal gate unchanged (up to a global phase); source: qiskit
        framed = Operator(Pauli(before)).compose(Operator(gate)).compose(Operator(Pauli(after)))
        assert framed.equiv(Operator(gate))
        instance = (
            SuperOp(Operator(Pauli(before))).compose(ideal).compose(noise)
            .compose(SuperOp(Operator(Pauli(after))))
        )
        total += instance.data / 16
    # source: Wallman and Emerson, PRA 94, 052325 (2016): the average over the Pauli frames is
    # the Pauli twirl of the error channel (explicit twirl: tests/helpers/twirl.py)
    twirled = SuperOp(explicit_twirl(list(Kraus(noise).data), 2))
    expected = ideal.compose(twirled)
    assert np.max(np.abs(total - expected.data)) < 1e-12
    assert np.max(np.abs(noise.data - twirled.data)) > 1e-4  # the twirl did change the channel


def test_drawn_circuit_is_the_ideal_circuit() -> None:
    qc = QuantumCircuit(3)
    qc.cz(2, 0)
    qc.sx(1)
    qc.cz(0, 1)
    qc.rz(0.3, 2)
    qc.cz(1, 2)
    for seed in range(5):
        out = twirl_draw_circuit(qc, "cz", np.random.default_rng([7, seed]))
        assert Operator(out).equiv(Operator(qc))  # source: qiskit.quantum_info
        assert [i.operation.name for i in out.data].count("pauli") == 6


def _only_zz_angle(profile):
    off = scale_profile(profile, 0.0, ["relaxation", "single_qubit", "two_qubit", "readout"])
    off = scale_profile(off, 0.0, ["coherent"])
    return _with_profile_values(off, **{"couplers.default.zz_angle_rad": 0.08})


@functools.lru_cache(maxsize=1)
def _coherent_context():
    ctx0, _, _ = h2_experiment()
    ctx = replace_experiment(ctx0, profile=_only_zz_angle(ctx0.profile))
    return ctx, make_runner(ctx)


def test_finite_draws_approach_the_exact_twirl_and_their_spread_shrinks() -> None:
    ctx, runner = _coherent_context()
    exact = run_recipe([{"pass": "twirl"}], ctx, runner)
    raw = run_recipe([], ctx, runner)
    stds, offsets = {}, {}
    for n in (4, 16, 64):
        r = run_recipe([{"pass": "twirl", "draws": n}], ctx, runner)
        # bias = expectation: the exact twirl average, whatever the draws
        assert r.bias_exact_mha == exact.bias_exact_mha
        stds[n] = r.details["std_twirl_mha"]
        offsets[n] = r.details["twirl_mean_offset_mha"]
        assert r.details["twirl_instances"] == n
        # the spread is in the error bar (fixed variance added to the rest)
        assert math.isclose(r.std_mha**2, exact.std_mha**2 + stds[n] ** 2, rel_tol=1e-9)
    # a coherent ZZ error: each random instance differs from the average (nothing to test
    # otherwise), and the twirl changes the energy
    assert stds[64] > 1e-3
    assert abs(exact.bias_exact_mha - raw.bias_exact_mha) > 1e-3
    # statistical checks with the study's fixed seed (common practice, no source): the mean of
    # n draws lies within 4 reported standard errors of the exact twirl (Wallman and Emerson
    # 2016: the exact twirl is the draws' expectation), and the reported spread shrinks like
    # 1/sqrt(n): sqrt(n) x spread estimates the one-draw standard deviation, the same for every n
    for n in stds:
        assert abs(offsets[n]) <= 4.0 * stds[n]
    one_draw = {n: stds[n] * math.sqrt(n) for n in stds}
    assert 0.5 < one_draw[16] / one_draw[64] < 2.0
    assert 0.25 < one_draw[4] / one_draw[64] < 3.0
    assert 1.3 < stds[16] / stds[64] < 3.2  # expected 2


def test_sampled_run_reports_the_mean_of_its_draws() -> None:
    ctx, runner = _coherent_context()
    plain = run_recipe([{"pass": "twirl"}], ctx, runner, sampled=True)
    drawn = run_recipe([{"pass": "twirl", "draws": 8}], ctx, runner, sampled=True)
    offset = drawn.details["twirl_mean_offset_mha"]
    # same shots (same rng), the realized draws' mean in place of the exact average
    assert math.isclose(drawn.energy_ha, plain.energy_ha + offset / 1000.0, abs_tol=1e-12)


def test_draws_refused_where_not_emulated() -> None:
    ctx, runner = _coherent_context()
    with pytest.raises(InputError, match=r"recipe\[0\]\.draws.*allowed: 0"):
        run_recipe([{"pass": "twirl", "draws": 1}], ctx, runner)
    zz = replace_experiment(
        ctx, profile=_with_profile_values(ctx.profile, **{"couplers.default.zz_rate_khz": 20.0})
    )
    with pytest.raises(InputError, match=r"recipe\[0\]\.draws: 4 random twirls .* always-on"):
        run_recipe([{"pass": "twirl", "draws": 4}], zz, make_runner(zz))


def test_spread_of_few_draws_can_limit_the_verdict() -> None:
    import dataclasses

    ctx, runner = _coherent_context()
    exact = run_recipe([{"pass": "twirl"}], ctx, runner)
    # a target just above the exact twirl's |bias|: the draws' spread (several mHa at 4 draws)
    # keeps P below the confidence at any shot count (P from the normal model, target.py)
    near = dataclasses.replace(ctx, target_mha=abs(exact.bias_exact_mha) + 2.0)
    r = run_recipe([{"pass": "twirl", "draws": 4}], near, runner)
    assert r.limited_by == "twirl" and r.shots_needed is None
    assert run_recipe([{"pass": "twirl"}], near, runner).limited_by in ("none", "shots")
