"""Realistic noise amplification: realized scales of folded circuits, the spread of the realized
scale in the standard error (analytic, checked by sampling) and the stretch offset in the bias."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from noiselab.mitigate.passes.extrapolate import ExtrapolateOptions, ExtrapolatePass

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
LINEAR = [
    {"pass": "readout", "method": "per_qubit_inverse"},
    {"pass": "postselect", "mode": "verify"},
    {"pass": "extrapolate", "amplifier": "stretch", "scales": [1, 3, 5], "fit": "linear"},
]


def _hand_profile():
    """Two qubits, no relaxation, no coherent terms: each gate's error is its quoted error."""
    from noiselab.device.profile import profile_from_mapping

    return profile_from_mapping(
        {
            "schema_version": 1,
            "name": "hand-chip",
            "qubit_count": 2,
            "links": [[0, 1]],
            "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
            "durations": {"single_qubit_ns": 35, "two_qubit_ns": 300, "readout_ns": 1000},
            "qubits": {
                "default": {
                    "t1_us": None,
                    "t2_us": None,
                    "gate_error": 1e-3,
                    "flip_0to1": 0.01,
                    "flip_1to0": 0.02,
                }
            },
            "couplers": {"default": {"gate_error": 1e-2}},
        },
        allow_infinite_coherence=True,
    )


def _hand_context():
    from qiskit import QuantumCircuit
    from qiskit.quantum_info import SparsePauliOp

    from noiselab.device.compile import compile_to_device
    from noiselab.mitigate.experiment import ExperimentContext
    from noiselab.mitigate.plan import build_plan

    profile = _hand_profile()
    qc = QuantumCircuit(2)
    qc.sx(0)
    qc.sx(1)
    qc.cz(0, 1)
    qc.sx(0)
    compiled = compile_to_device(qc, profile, layout=[0, 1], optimization_level=0)
    assert compiled.two_qubit_count == 1
    return ExperimentContext(
        problem=None,
        compiled=compiled,
        profile=profile,
        plan=build_plan(SparsePauliOp(["ZZ"], [1.0])),
        exact_energy_ha=-1.0,
        ansatz_energy_ha=-1.0,
        shots=1000,
    )


def test_realized_scale_is_the_ratio_of_estimated_circuit_error_by_hand() -> None:
    from noiselab.mitigate.experiment import realized_scales
    from noiselab.mitigate.variants import folded

    ctx = _hand_context()
    # hand computation: 3 sx at 1e-3 and 1 cz at 1e-2 = 0.013; folding the cz to 3 (5) copies
    # gives 0.033 (0.053): realized scales 0.033/0.013 and 0.053/0.013, below the nominal 3, 5;
    # folding the whole circuit triples every gate: exactly 3
    two3 = realized_scales(ctx, folded("two_qubit_gates", 3))
    two5 = realized_scales(ctx, folded("two_qubit_gates", 5))
    whole3 = realized_scales(ctx, folded("whole_circuit", 3))
    assert two3["total"] == pytest.approx(0.033 / 0.013, rel=1e-9)
    assert two5["total"] == pytest.approx(0.053 / 0.013, rel=1e-9)
    assert two3["two_qubit"] == pytest.approx(3.0) and two3["single_qubit"] == pytest.approx(1.0)
    assert whole3["total"] == pytest.approx(3.0, rel=1e-9)


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory):
    from noiselab.study.cache import CachingRunner, open_cache
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    store = open_cache(tmp_path_factory.mktemp("amp") / "cache.db")
    ctx = build_context(load_study(DEMO), cache=store, verification=True)
    return ctx.experiment, CachingRunner(ctx.experiment, store)


def _run(demo, recipe, **changes):
    from noiselab.mitigate.recipe import run_recipe

    exp, runner = demo
    exp = dataclasses.replace(exp, **changes)
    return run_recipe(recipe, exp, runner, calibrator=runner.calibrator)


def test_two_qubit_folding_realizes_less_than_nominal_on_the_demo(demo) -> None:
    from noiselab.device.compile import estimate_error_budget
    from noiselab.mitigate.experiment import realized_scales, variant_inputs

    exp, _ = demo
    p = ExtrapolatePass(ExtrapolateOptions(amplifier="two_qubit_gates", scales=(1, 3, 5)))
    base = sum(
        estimate_error_budget(exp.compiled.circuit, exp.profile, exp.compiled.patch).values()
    )
    for v, nominal in zip(p.variants(exp)[1:], (3.0, 5.0), strict=True):
        got = realized_scales(exp, v)
        assert 1.0 < got["total"] < nominal  # single-qubit gates and idle time do not triple
        folded = variant_inputs(exp, v)[0]
        assert folded.two_qubit_count == nominal * exp.compiled.two_qubit_count
        ratio = sum(estimate_error_budget(folded.circuit, exp.profile, folded.patch).values())
        assert got["total"] == pytest.approx(ratio / base, rel=1e-12)


def test_spread_adds_the_analytic_term_in_quadrature(demo) -> None:
    ideal = _run(demo, LINEAR, amplification_spread=0.0)
    real = _run(demo, LINEAR, amplification_spread=0.05)
    assert real.energy_ha == ideal.energy_ha  # the spread is random: never in the bias
    assert ideal.details["std_amplification_mha"] == 0.0
    ex = real.details["extrapolation"]
    s = np.array(ex["scales"])
    e = np.array(ex["energies_ha"])

    # independent: the intercept of numpy.polynomial.polynomial.polyfit (least squares) as a
    # function of the abscissae, differentiated by central differences
    def intercept(x: np.ndarray) -> float:
        return float(np.polynomial.polynomial.polyfit(x, e, 1)[0])

    var = 0.0
    for i in (1, 2):  # the amplified points (scale 1 is the device itself)
        h = 1e-5
        up, down = s.copy(), s.copy()
        up[i] += h
        down[i] -= h
        slope = (intercept(up) - intercept(down)) / (2 * h)
        var += (slope * 0.05 * s[i] * 1000) ** 2
    # source: propagation of independent errors in quadrature (textbook, first order)
    assert real.std_mha**2 == pytest.approx(ideal.std_mha**2 + var, rel=1e-6)
    assert real.details["std_amplification_mha"] ** 2 == pytest.approx(var, rel=1e-6)

    # sampled check: 500 draws of the realized scales, refitted with the energies fixed
    rng = np.random.default_rng(3)
    draws = np.array(
        [intercept(s * (1 + np.r_[0.0, rng.normal(0.0, 0.05, 2)])) for _ in range(500)]
    )
    sampled_std = draws.std(ddof=1) * 1000
    # source: common practice: the sample std of N normal draws has std sigma / sqrt(2 N)
    assert abs(sampled_std - np.sqrt(var)) < 3 * np.sqrt(var) / np.sqrt(2 * 500)


def test_spread_matches_resampled_energies_on_an_analytic_curve() -> None:
    """E(c) = a + b c + q c^2, Richardson over 1, 2, 3 (exact for a quadratic): energies taken at
    drawn realized scales and fitted against the nominal ones scatter as the analytic term says."""
    a, b, q = -1.1, 0.04, 0.006
    spread = 0.03
    scales = np.array([1.0, 2.0, 3.0])
    p = ExtrapolatePass(ExtrapolateOptions(scales=(1, 2, 3), fit="richardson"))
    energies = a + b * scales + q * scales**2
    sens, fit = p.scale_sensitivity(scales, energies)
    weights = fit.weights
    assert fit.value is None and float(weights @ energies) == pytest.approx(a, abs=1e-12)
    analytic = float(np.sqrt(np.sum((sens[1:] * spread * scales[1:]) ** 2)))
    rng = np.random.default_rng(11)
    draws = []
    for _ in range(500):
        real = scales * (1 + np.r_[0.0, rng.normal(0.0, spread, 2)])
        draws.append(float(weights @ (a + b * real + q * real**2)))
    sampled = float(np.std(draws, ddof=1))
    # source: common practice: the sample std of N normal draws has std sigma / sqrt(2 N)
    assert abs(sampled - analytic) < 3 * analytic / np.sqrt(2 * 500)


def test_stretch_offset_enters_the_bias(demo) -> None:
    off = _run(demo, LINEAR, amplification_spread=0.0, amplification_offset=0.05)
    ideal = _run(demo, LINEAR, amplification_spread=0.0)
    ex = off.details["extrapolation"]
    assert ex["scales"] == [1.0, 3.0, 5.0] and ex["amplification_offset"] == 0.05
    assert sorted(off.details["variants"]) != sorted(ideal.details["variants"])
    # the amplified points were emulated at c (1 + 0.05) ...
    emulated = sorted(v["scale"] for v in off.details["variants"].values())
    assert emulated == pytest.approx([1.0, 3.15, 5.25])
    # ... and fitted against c: a least-squares line through (c, E) at zero (numpy polyfit)
    fit = np.polynomial.polynomial.polyfit([1.0, 3.0, 5.0], ex["energies_ha"], 1)[0]
    assert off.energy_ha == pytest.approx(fit, abs=1e-12)
    assert abs(off.bias_exact_mha - ideal.bias_exact_mha) > 0.1
