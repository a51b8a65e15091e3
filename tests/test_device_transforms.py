"""Circuit transforms are an open set: a toy transform defined here (one frozen dataclass plus
registration, no package change) runs through the study's runner; the realizer's cache lives
on the experiment context."""

from __future__ import annotations

import dataclasses
import pickle
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pytest
from qiskit import QuantumCircuit

from noiselab.device.folding import unitary_instructions
from noiselab.device.transforms import (
    TRANSFORMS,
    Applied,
    CircuitTransform,
    GateFolding,
    NoiseStretch,
    TransformRealizer,
    register_transform,
)
from noiselab.mitigate.variants import CircuitVariant, folded, stretched

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"


@dataclass(frozen=True)
class IdentityPairs(CircuitTransform):
    """Appends ``pairs`` x-x pairs on every qubit (the identity, with the x gates' noise)."""

    kind: ClassVar[str] = "identity_pairs"
    changes_circuit: ClassVar[bool] = True
    pairs: int = 1

    @property
    def is_identity(self) -> bool:
        return self.pairs == 0

    def apply(self, compiled: Any, profile: Any, tools: TransformRealizer) -> Applied:
        circ = compiled.circuit
        out = QuantumCircuit(*circ.qregs, name=circ.name)
        out.global_phase = circ.global_phase
        for inst in unitary_instructions(circ):
            out.append(inst.operation, inst.qubits)
        for _ in range(self.pairs):
            for q in range(circ.num_qubits):
                out.x(q)
                out.x(q)
        n2 = compiled.two_qubit_count
        return Applied(
            tools.reschedule(out, compiled, profile, expected_two_qubit=n2), profile, 1.0
        )


register_transform(IdentityPairs)


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory):
    from noiselab.study.cache import CachingRunner, open_cache
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    store = open_cache(tmp_path_factory.mktemp("transforms") / "cache.db")
    ctx = build_context(load_study(DEMO), cache=store)
    return ctx.experiment, CachingRunner(ctx.experiment, store)


def test_toy_transform_is_a_value_with_a_key_and_a_label() -> None:
    v = CircuitVariant((IdentityPairs(2),))
    assert v == CircuitVariant((IdentityPairs(2),)) and hash(v) == hash(
        CircuitVariant((IdentityPairs(2),))
    )
    assert CircuitVariant((IdentityPairs(0),)).is_base  # identity transforms are dropped
    assert v.label() == "identity_pairs(pairs=2)"
    key = v.as_dict()
    assert key["identity_pairs"] == {"pairs": 2}
    # the built-ins' key fields read as for an untransformed circuit
    assert {k: key[k] for k in CircuitVariant().as_dict()} == CircuitVariant().as_dict()
    # order matters for several transforms
    a = CircuitVariant((IdentityPairs(1), NoiseStretch(2.0)))
    b = CircuitVariant((NoiseStretch(2.0), IdentityPairs(1)))
    assert a != b and a.as_dict() != b.as_dict()


def test_builtin_variants_keep_their_labels_and_key_fields() -> None:
    # labels and key fields as the closed record they replace wrote them (cache keys unchanged)
    assert CircuitVariant().as_dict() == {
        "noise_scale": 1.0,
        "scaled_channels": None,
        "fold_method": "none",
        "fold_scale": 1.0,
    }
    s = stretched(2, ("two_qubit", "relaxation"))
    assert s.label() == "stretch=2[relaxation+two_qubit]"
    assert s.as_dict()["scaled_channels"] == ["relaxation", "two_qubit"]
    assert stretched(1.0, ("readout",)) == CircuitVariant()
    f = folded("whole_circuit", 3)
    assert f.label() == "folded_whole_circuit=3"
    assert f.as_dict() == {
        "noise_scale": 1.0,
        "scaled_channels": None,
        "fold_method": "whole_circuit",
        "fold_scale": 3.0,
    }
    assert stretched(2.0).calibration_variant() == stretched(2.0, ("readout",))
    assert f.calibration_variant() == CircuitVariant()


def test_registration_refuses_what_is_not_a_free_frozen_transform() -> None:
    class Plain(CircuitTransform):  # not itself a dataclass
        kind: ClassVar[str] = "plain_toy"

    @dataclass(frozen=True)
    class Taken(CircuitTransform):
        kind: ClassVar[str] = "fold"

    with pytest.raises(TypeError, match="frozen dataclass"):
        register_transform(Plain)
    with pytest.raises(ValueError, match="taken"):
        register_transform(Taken)
    assert TRANSFORMS["fold"] is GateFolding and "plain_toy" not in TRANSFORMS


def test_toy_transform_runs_through_the_study_runner(demo) -> None:
    from noiselab.device.profile import scale_profile
    from noiselab.mitigate.experiment import make_runner, realized_scales, variant_inputs

    exp, runner = demo
    base, toy = CircuitVariant(), CircuitVariant((IdentityPairs(2),))
    assert runner.key(toy) != runner.key(base)
    d_base, d_toy = runner(base), runner(toy)
    assert d_toy.bases == d_base.bases
    # the x gates are noisy: the distributions move, and the realized scale says how much
    assert np.max(np.abs(np.asarray(d_toy.probs) - np.asarray(d_base.probs))) > 1e-6
    scales = realized_scales(exp, toy)
    assert scales["total"] > 1.0 and scales["single_qubit"] > 1.0
    assert scales["two_qubit"] == pytest.approx(1.0, rel=1e-12)  # no two-qubit gate added
    compiled = variant_inputs(exp, toy)[0]
    assert compiled.two_qubit_count == exp.compiled.two_qubit_count
    assert compiled.duration_ns > exp.compiled.duration_ns  # re-scheduled with the pairs

    # noiseless device: x x = 1 (from memory: X^2 = I), so the toy changes no distribution
    quiet = dataclasses.replace(exp, profile=scale_profile(exp.profile, 0.0))
    run = make_runner(quiet)
    q_base, q_toy = np.asarray(run(base).probs), np.asarray(run(toy).probs)
    assert np.max(np.abs(q_toy - q_base)) < 1e-10


def test_realized_circuits_are_kept_by_the_context_not_the_module(demo) -> None:
    exp, _ = demo
    v = folded("two_qubit_gates", 3)
    first = exp.realizer.realize(v.transforms)
    assert exp.realizer.realize(v.transforms) is first  # memoized on the context's realizer
    copy = dataclasses.replace(exp)  # another context: its own, empty realizer
    assert copy.realizer is not exp.realizer
    assert not copy.realizer._realized
    thawed = pickle.loads(pickle.dumps(exp))  # shipped to a worker: caches stay behind
    assert not thawed.realizer._realized
    assert thawed.realizer.realize(v.transforms).scale == first.scale


def test_replaced_context_shares_the_realizer_only_for_the_same_circuit_and_profile(demo) -> None:
    from noiselab.device.profile import scale_profile
    from noiselab.study.context import replace_experiment

    exp, _ = demo
    kept = exp.realizer
    assert replace_experiment(exp, shots=1000).realizer is kept
    quiet = replace_experiment(exp, profile=scale_profile(exp.profile, 0.5))
    assert quiet.realizer is not exp.realizer and quiet.realizer.profile is quiet.profile
