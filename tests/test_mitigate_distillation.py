"""distillation: the two-copy estimator against closed forms, on the demo, and its refusals."""

from __future__ import annotations

import numpy as np
import pytest
from helpers.pass_contract import h2_experiment
from qiskit.quantum_info import (
    DensityMatrix,
    Statevector,
    partial_trace,
    random_density_matrix,
    random_unitary,
)

from noiselab.common.errors import InputError
from noiselab.device.profile import load_profile
from noiselab.mitigate.base import Workspace, meas_key, raw_distribution
from noiselab.mitigate.passes.distillation import (
    DistillationOptions,
    DistillationPass,
    _rotated_probs,
    reduced_logical_state,
    two_copy_state,
)
from noiselab.mitigate.recipe import parse_recipe, run_recipe
from noiselab.mitigate.variants import CircuitVariant
from noiselab.study.context import replace_experiment


def test_reduced_state_follows_the_logical_order() -> None:
    rho = random_density_matrix(8, seed=5)
    # logical 0 = circuit qubit 2, logical 1 = circuit qubit 0; circuit qubit 1 traced out
    expected = partial_trace(rho, [1]).reverse_qargs()  # source: qiskit.quantum_info
    np.testing.assert_allclose(reduced_logical_state(rho.data, [2, 0]), expected.data, atol=1e-14)


def _distilled(ctx, rho: np.ndarray) -> float:
    """The pass's estimate on the ideal two-copy measurement of ``rho``."""
    sigma = two_copy_state(rho, 0.0, 0.0)
    variant = CircuitVariant()
    data = {
        b: raw_distribution(meas_key(variant, b), _rotated_probs(sigma, b, 0.0))
        for b in ctx.plan.bases
    }
    ws = Workspace(ctx=ctx, measured={}, calibration=None)
    return DistillationPass(DistillationOptions()).estimate(variant, data, ws).estimate.value


@pytest.mark.parametrize("p", [0.0, 0.1, 0.4])
def test_purified_value_of_a_depolarized_pure_state(p: float) -> None:
    ctx, _, _ = h2_experiment()
    h = ctx.problem.hamiltonian
    d = 2**h.num_qubits
    psi = Statevector.from_int(0, d).evolve(random_unitary(d, seed=3))
    rho = (1 - p) * DensityMatrix(psi).data + p * np.eye(d) / d
    e_psi = float(np.real(psi.expectation_value(h)))  # source: qiskit.quantum_info
    tr_h = float(np.real(np.trace(h.to_matrix())))
    # source: Huggins et al. PRX 11, 041036 (2021) / ../shared/REFERENCES.md: for
    # rho = (1-p)|psi><psi| + p I/d, Tr(rho^2 H)/Tr(rho^2) =
    # [((1-p)^2 + 2p(1-p)/d) <H> + p^2/d^2 Tr H] / [(1-p)^2 + 2p(1-p)/d + p^2/d]
    a = (1 - p) ** 2 + 2 * p * (1 - p) / d
    expected = (a * e_psi + p**2 / d**2 * tr_h) / (a + p**2 / d)
    assert _distilled(ctx, rho) == pytest.approx(expected, abs=1e-10)
    plain = float(np.real(np.trace(rho @ h.to_matrix())))
    if p > 0:
        assert abs(expected - e_psi) < abs(plain - e_psi)  # purification helps


def test_on_the_demo_it_cuts_the_bias_and_reports_the_copy_noise() -> None:
    ctx, runner, cal = h2_experiment()
    raw = run_recipe([], ctx, runner, calibrator=cal)
    ideal = run_recipe([{"pass": "distillation", "copy_noise": False}], ctx, runner)
    noisy = run_recipe([{"pass": "distillation"}], ctx, runner)
    assert abs(ideal.bias_exact_mha) < 0.5 * abs(raw.bias_exact_mha)
    info = noisy.details["distillation"]
    assert info["copy_noise"] is True and info["qubits_used"] == 2 * ctx.plan.num_qubits + 1
    (purity_noisy,) = info["purity"].values()
    (purity_ideal,) = ideal.details["distillation"]["purity"].values()
    assert purity_noisy < purity_ideal <= 1.0  # the copy circuit's noise lowers the purity read
    assert noisy.bias_exact_mha != pytest.approx(ideal.bias_exact_mha, abs=0.1)


def test_refusals_are_one_line() -> None:
    ctx, runner, _ = h2_experiment()
    with pytest.raises(InputError, match=r"recipe\[1\]\.pass: 'distillation' cannot share"):
        parse_recipe([{"pass": "readout"}, {"pass": "distillation"}])
    with pytest.raises(InputError, match=r"'distillation' cannot share a recipe with 'error_c"):
        parse_recipe([{"pass": "error_cancellation"}, {"pass": "distillation"}])
    with pytest.raises(InputError, match=r"recipe\[1\]\.pass: only one estimator"):
        parse_recipe([{"pass": "postselect"}, {"pass": "distillation"}])
    small = replace_experiment(ctx, profile=load_profile("tallowtrap-8"))
    with pytest.raises(InputError, match=r"needs 2n \+ 1 = 9 qubits .* the device has 8") as info:
        run_recipe([{"pass": "distillation"}], small, runner)
    assert "\n" not in str(info.value)
