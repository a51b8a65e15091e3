"""error_cancellation: the learned Pauli model, its inverse and the exact emulation."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from helpers.pass_contract import h2_experiment
from qiskit.quantum_info import PTM, Kraus, Pauli, SuperOp
from qiskit_aer.noise import depolarizing_error, thermal_relaxation_error

from noiselab.common.errors import InputError
from noiselab.device.channel_registry import CHANNELS
from noiselab.device.profile import scale_profile
from noiselab.mitigate.experiment import make_calibrator, make_runner
from noiselab.mitigate.pauli_model import (
    fidelities,
    pauli_inverse,
    pauli_labels,
    twirled_rates,
)
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.study.context import replace_experiment

PEC = [{"pass": "error_cancellation"}]
#: the model taken as exactly known: no learning term in the error bar
PEC_EXACT = [{"pass": "error_cancellation", "learning_spread": 0.0}]


def _kraus(error) -> list[np.ndarray]:
    return Kraus(error.to_quantumchannel()).data


@pytest.mark.parametrize("p", [0.001, 0.05, 0.3])
def test_norm_of_single_qubit_depolarizing_is_the_closed_form(p: float) -> None:
    # qiskit-aer's depolarizing_error(p, 1) is rho -> (1 - p) rho + p I/2 (its documentation)
    inv = pauli_inverse(twirled_rates(_kraus(depolarizing_error(p, 1))))
    # source: Temme, Bravyi and Gambetta, PRL 119, 180509 (2017) (from memory; derived in
    # ../shared/REFERENCES.md): inverse fidelities 1/(1-p) give q_I = 1 + 3p/(4(1-p)),
    # q_X = q_Y = q_Z = -p/(4(1-p)), norm = (1 + p/2)/(1 - p)
    assert inv.norm == pytest.approx((1 + p / 2) / (1 - p), rel=1e-12)
    expected = [1 + 3 * p / (4 * (1 - p))] + [-p / (4 * (1 - p))] * 3
    np.testing.assert_allclose(inv.quasi, expected, rtol=1e-10, atol=1e-15)


def test_twirl_and_inverse_against_qiskit_channels() -> None:
    # a non-Pauli two-qubit channel: relaxation on both qubits, then depolarizing
    relax = thermal_relaxation_error(50e-6, 40e-6, 3e-6)
    error = relax.expand(relax).compose(depolarizing_error(0.02, 2))
    rates = twirled_rates(_kraus(error))
    # source: Wallman and Emerson, PRA 94, 052325 (2016): the twirl keeps the diagonal of the
    # Pauli transfer matrix; qiskit.quantum_info.PTM orders its basis like pauli_labels(2)
    ptm = PTM(error.to_quantumchannel()).data
    np.testing.assert_allclose(fidelities(rates), np.real(np.diag(ptm)), atol=1e-12)
    # the quasi-channel sum_P q_P P.P undoes the twirled channel (qiskit SuperOp algebra)
    labels = pauli_labels(2)
    twirled = sum(r * SuperOp(Pauli(lab)) for r, lab in zip(rates, labels, strict=True))
    inv = pauli_inverse(rates)
    inverse = sum(q * SuperOp(Pauli(lab)) for q, lab in zip(inv.quasi, labels, strict=True))
    np.testing.assert_allclose(inverse.compose(twirled).data, np.eye(16), atol=1e-12)
    # the sign-flagged Kraus form is CPTP and, read with the sign, is norm^-1 times the inverse
    flagged = Kraus(inv.signed_kraus())
    assert flagged.is_cptp()


def _with_channels(ctx, kept: tuple[str, ...]):
    """The demo experiment on its device with every channel but ``kept`` scaled to zero."""
    off = [c for c in CHANNELS if c not in kept]
    return replace_experiment(ctx, profile=scale_profile(ctx.profile, 0.0, off))


def _energy(recipe, ctx) -> float:
    return run_recipe(recipe, ctx, make_runner(ctx), calibrator=make_calibrator(ctx)).energy_ha


@pytest.fixture(scope="module")
def pauli_only():
    """The demo on a device whose only noise is its two-qubit gates' depolarizing error."""
    ctx, _, _ = h2_experiment()
    return _with_channels(ctx, ("two_qubit",))


def test_exact_model_recovers_the_noiseless_energy(pauli_only) -> None:
    raw = _energy([], pauli_only)
    pec = _energy(PEC, pauli_only)
    noiseless = pauli_only.ansatz_energy_ha  # the chem layer's statevector energy
    assert abs(raw - noiseless) > 5e-3  # the noise matters (tens of mHa)
    assert abs(pec - noiseless) < 1e-8


def test_learning_error_leaves_a_bias_of_the_first_order(pauli_only) -> None:
    raw = _energy([], pauli_only)
    noiseless = pauli_only.ansatz_energy_ha
    for e in (-0.2, 0.2):
        result = run_recipe(
            [{"pass": "error_cancellation", "learning_error": e}],
            pauli_only,
            make_runner(pauli_only),
            calibrator=make_calibrator(pauli_only),
        )
        residual = result.energy_ha - noiseless
        # common practice, no source: rates off by a factor 1 + e leave, to first order in the
        # error rates, -e times the unmitigated error (under-correction keeps its sign)
        assert residual == pytest.approx(-e * (raw - noiseless), rel=0.15)
        assert abs(result.bias_ansatz_mha) > 1.0
        assert result.details["error_cancellation"]["learning_error"] == e


def test_coherent_noise_left_out_of_the_model_biases() -> None:
    ctx, _, _ = h2_experiment()
    coherent = _with_channels(ctx, ("two_qubit", "coherent"))
    noiseless = ctx.ansatz_energy_ha
    without = run_recipe(
        [{"pass": "error_cancellation", "learned": ["relaxation", "depolarizing"]}],
        coherent,
        make_runner(coherent),
        calibrator=make_calibrator(coherent),
    )
    assert abs(without.energy_ha - noiseless) > 1e-6
    assert (
        "coherent part of the gate channels"
        in without.details["error_cancellation"]["out_of_model"]
    )


def test_norm_is_the_product_over_the_circuit_and_enters_the_variance() -> None:
    ctx, runner, cal = h2_experiment()
    raw = run_recipe([], ctx, runner, calibrator=cal)
    pec = run_recipe(PEC_EXACT, ctx, runner, calibrator=cal)
    info = pec.details["error_cancellation"]
    (norm,) = info["quasi_norm"].values()
    (g_gates,) = info["quasi_norm_gates"].values()
    (g_idle,) = info["quasi_norm_idle"].values()
    assert norm == pytest.approx(g_gates * g_idle, rel=1e-12) and norm > 1.0
    # per shot the estimator is norm * sign * w: its variance is about norm^2 the raw one
    # (common practice, no source: the PEC sampling overhead)
    ratio = (pec.std_mha / raw.std_mha) ** 2
    assert 0.5 * norm**2 < ratio < 2.0 * norm**2


def test_a_deep_circuit_is_unbiased_but_never_affordable(pauli_only) -> None:
    # sixty times the two-qubit error: the cost of each gate's inverse multiplies up
    deep = replace_experiment(
        pauli_only, profile=scale_profile(pauli_only.profile, 60.0, ["two_qubit"])
    )
    result = run_recipe(PEC_EXACT, deep, make_runner(deep), calibrator=make_calibrator(deep))
    (norm,) = result.details["error_cancellation"]["quasi_norm"].values()
    assert norm > 1e4
    assert abs(result.bias_ansatz_mha) < 1e-5  # still exact in expectation
    assert result.shots_needed is None and result.limited_by == "shots"  # the honest "never"


def test_sampled_spread_matches_the_analytic_error_at_a_large_norm(pauli_only) -> None:
    noisy = replace_experiment(
        pauli_only, profile=scale_profile(pauli_only.profile, 20.0, ["two_qubit"])
    )
    runner = make_runner(noisy)
    analytic = run_recipe(PEC, noisy, runner)
    (norm,) = analytic.details["error_cancellation"]["quasi_norm"].values()
    assert norm > 20.0
    rng = np.random.default_rng(7)
    draws = np.array(
        [run_recipe(PEC, noisy, runner, sampled=True, rng=rng).energy_ha for _ in range(60)]
    )
    # common practice, no source: the sample std of 60 normal draws is within 30 % of the true
    # one; the drawn signs and outcomes carry the whole norm^2 overhead
    assert draws.std(ddof=1) == pytest.approx(analytic.std_mha / 1000, rel=0.3)
    assert abs(draws.mean() - analytic.energy_ha) < 3 * analytic.std_mha / 1000


def test_refusals_are_one_line() -> None:
    ctx, _, _ = h2_experiment()
    with pytest.raises(InputError, match=r"recipe\[1\]\.pass: 'error_cancellation' must come"):
        parse_recipe([{"pass": "readout"}, {"pass": "error_cancellation"}])
    traj = dataclasses.replace(ctx, emulation_method="trajectory")
    with pytest.raises(InputError, match="density-matrix method") as info:
        run_recipe(PEC, traj, make_runner(traj))
    assert "\n" not in str(info.value)
