"""Many parameter sets in one qiskit-aer call give what binding and emulating each gives."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from noiselab.device.compile import compile_to_device
from noiselab.device.profile import scale_profile
from noiselab.emulate.batch import emulate_parameter_sets, idle_noise_written
from noiselab.emulate.channels import effect_cache_for
from noiselab.emulate.device_inputs import layer_spec_for, noise_model_for
from noiselab.emulate.engine import emulate_bases, engine_call_count
from noiselab.study.context import build_context
from noiselab.study.spec import load_study

DEMO = Path(__file__).resolve().parents[1] / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.fixture(scope="module")
def parameterized():
    study = load_study(DEMO)
    ctx = build_context(study, verification=True)
    compiled = compile_to_device(
        ctx.ansatz_circuit, study.profile, layout=list(ctx.compiled.patch),
        seed=ctx.ensemble.chosen_seed,
    )  # fmt: skip
    return study.profile, compiled, ctx.experiment.measured_bases


def test_parameter_sets_equal_the_bound_circuits(parameterized):
    profile, compiled, bases = parameterized
    assert compiled.circuit.parameters
    rng = np.random.default_rng(2)
    sets = [rng.uniform(-1, 1, len(compiled.parameters)) for _ in range(5)]
    calls = engine_call_count()
    batch = emulate_parameter_sets(compiled, profile, bases, sets)
    assert engine_call_count() - calls == 1  # one simulator run for all five sets
    for x, got in zip(sets, batch, strict=True):
        # the reference path: bind, then one aer run with the noise model and its idle pass
        # (itself checked against qiskit.quantum_info.DensityMatrix in test_emulate_engine)
        ref = emulate_bases(compiled.bind(x), profile, bases)
        assert got.bases == ref.bases
        np.testing.assert_allclose(got.probs, ref.probs, rtol=0, atol=1e-13)
        np.testing.assert_allclose(got.probs_ideal, ref.probs_ideal, rtol=0, atol=1e-13)
    assert emulate_parameter_sets(compiled, profile, bases, []) == []


def test_idle_noise_is_written_once_per_circuit_without_delays(parameterized):
    profile, compiled, _ = parameterized
    nm = noise_model_for(profile, compiled.patch)
    written = idle_noise_written(compiled.circuit, nm)
    assert idle_noise_written(compiled.circuit, nm) is written
    ops = written.count_ops()
    assert "delay" not in ops
    # one relaxation channel after every delay of a qubit with finite coherence
    assert ops["superop"] == compiled.circuit.count_ops()["delay"]


def test_effect_tables_are_shared_per_noise_model(parameterized):
    profile, compiled, _ = parameterized
    nm = noise_model_for(profile, compiled.patch)
    k = compiled.circuit.num_qubits
    spec = layer_spec_for(profile, k)
    first = effect_cache_for(nm, k, spec)
    assert effect_cache_for(nm, k, spec) is first
    assert effect_cache_for(nm, k, spec, noisy=False) is not first
    other = noise_model_for(scale_profile(profile, 2.0), compiled.patch)
    assert effect_cache_for(other, k, spec) is not first
