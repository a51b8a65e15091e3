"""Noise written into circuits as superoperators: the same channels as the qiskit-aer noise
model, so circuits under different profiles can share one simulator call."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from qiskit.quantum_info import SuperOp
from qiskit_aer.noise import thermal_relaxation_error

from noiselab.device.drift import draw_profiles
from noiselab.device.profile import scale_profile
from noiselab.emulate.batch import emulate_written
from noiselab.emulate.calibration import calibration_distributions
from noiselab.emulate.engine import emulate_bases, engine_call_count
from noiselab.emulate.written import WrittenNoise, relaxation_superop, superop_tensor
from noiselab.study.context import build_context
from noiselab.study.spec import load_study

DEMO = Path(__file__).resolve().parents[1] / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.mark.parametrize(
    ("t_ns", "t1_us", "t2_us"),
    [(35.0, 80.0, 60.0), (300.0, 50.0, 100.0), (1000.0, 20.0, None), (60.0, None, 30.0)],
)
def test_relaxation_superop_equals_aer_thermal_relaxation(t_ns, t1_us, t2_us):
    t1 = np.inf if t1_us is None else t1_us * 1e-6
    t2 = np.inf if t2_us is None else t2_us * 1e-6
    # source: qiskit-aer thermal_relaxation_error (T2 capped at 2 T1 as the noise model does)
    ref = SuperOp(thermal_relaxation_error(t1, min(t2, 2 * t1), t_ns * 1e-9)).data
    np.testing.assert_allclose(relaxation_superop(t_ns, t1_us, t2_us), ref, atol=1e-14)


def test_superop_tensor_is_qiskits_expand():
    rng = np.random.default_rng(1)
    a, b = rng.normal(size=(4, 4)), rng.normal(size=(4, 4))
    # source: qiskit.quantum_info.SuperOp.expand (a on qubit 0, b on qubit 1)
    ref = SuperOp(a).expand(SuperOp(b)).data
    np.testing.assert_allclose(superop_tensor(a, b), ref, atol=1e-14)


@pytest.fixture(scope="module")
def demo():
    study = load_study(DEMO)
    ctx = build_context(study, verification=True)
    return study.profile, ctx.compiled, ctx.experiment.measured_bases


def test_written_circuits_equal_the_noise_model_runs_in_one_call(demo):
    profile, compiled, bases = demo
    profiles = [profile, *draw_profiles(profile, 3, 5), scale_profile(profile, 2.5)]
    calls = engine_call_count()
    got = emulate_written([(compiled, p) for p in profiles], bases)
    assert engine_call_count() - calls == 1
    written = WrittenNoise(profile, compiled.patch).written(compiled.circuit)
    assert set(written.count_ops()) == {"superop"}
    assert len(written.data) <= compiled.two_qubit_count + compiled.circuit.num_qubits
    for p, g in zip(profiles, got, strict=True):
        # reference: the qiskit-aer noise model (gate errors, relaxation pass on delays),
        # itself checked against qiskit.quantum_info.DensityMatrix in test_emulate_engine
        ref = emulate_bases(compiled, p, bases)
        np.testing.assert_allclose(g.probs, ref.probs, rtol=0, atol=1e-13)
        np.testing.assert_allclose(g.probs_ideal, ref.probs_ideal, rtol=0, atol=1e-13)


def test_written_calibration_equals_the_noise_model_one(demo):
    profile, compiled, _ = demo
    for p in (profile, draw_profiles(profile, 1, 9)[0]):
        kw = {"measured": list(compiled.logical_to_circuit)}
        ref = calibration_distributions(p, compiled.patch, "single", **kw)
        got = calibration_distributions(
            p, compiled.patch, "single", written=WrittenNoise(p, compiled.patch), **kw
        )
        np.testing.assert_allclose(got.probs, ref.probs, rtol=0, atol=1e-14)
