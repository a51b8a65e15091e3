"""Mitigation passes on synthetic data built with qiskit.quantum_info (H2, 4 qubits)."""

from __future__ import annotations

import numpy as np
import pytest
from helpers.synthetic import (
    assignment_matrix,
    depolarized,
    full_readout_matrix,
    make_synthetic_calibrator,
    make_synthetic_runner,
)
from hypothesis import given, settings
from hypothesis import strategies as st
from qiskit.quantum_info import DensityMatrix, Operator, SparsePauliOp, Statevector

from noiselab.common.errors import InputError
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.fits import (
    exponential_fit,
    fit_through,
    polynomial_coefficients,
    richardson_coefficients,
)
from noiselab.mitigate.passes.readout import apply_per_qubit, project_to_simplex
from noiselab.mitigate.plan import build_plan
from noiselab.mitigate.recipe import run_recipe
from noiselab.mitigate.registry import make_pass

P_GATE = 0.03  # depolarizing strength per unit noise scale of the synthetic model


@pytest.fixture(scope="module")
def h2():
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem

    spec = MoleculeSpec(geometry=[("H", 0, 0, 0), ("H", 0, 0, 0.7408)])
    return encode(compute_problem(spec), "jordan_wigner")


@pytest.fixture(scope="module")
def ground(h2) -> Statevector:
    w, v = np.linalg.eigh(h2.hamiltonian.to_matrix())
    i = int(np.argmin(np.abs(w - h2.exact_energy_ha)))
    return Statevector(v[:, i])


def _noisy_state(ground: Statevector, scale: float) -> DensityMatrix:
    """Coherent symmetry-breaking rotation, then global depolarizing of strength 1-(1-p)^scale."""
    n = ground.num_qubits
    kick = Operator(
        SparsePauliOp(["I" * n, "I" * (n - 1) + "X"], [np.cos(0.15), -1j * np.sin(0.15)])
    )
    psi = ground.evolve(kick)
    return depolarized(psi, 1 - (1 - P_GATE) ** scale)


@pytest.fixture(scope="module")
def readout_matrix() -> np.ndarray:
    mats = [assignment_matrix(0.01 + 0.005 * q, 0.03 + 0.01 * q) for q in range(4)]
    return full_readout_matrix(mats)


def _ctx(h2, shots: int = 20_000, allocation: str = "by_deviation") -> ExperimentContext:
    return ExperimentContext(
        problem=h2,
        compiled=None,
        profile=None,
        plan=build_plan(h2.hamiltonian),
        exact_energy_ha=h2.exact_energy_ha,
        ansatz_energy_ha=h2.exact_energy_ha,
        shots=shots,
        seed=11,
        allocation=allocation,
    )


@pytest.fixture(scope="module")
def setup(h2, ground, readout_matrix):
    ctx = _ctx(h2)

    def state(v):
        return _noisy_state(ground, v.nominal_scale)

    runner = make_synthetic_runner(state, ctx.measured_bases, readout_matrix)
    calibrator = make_synthetic_calibrator(readout_matrix, 4)
    return ctx, runner, calibrator, state


# ---- extrapolation coefficients ----------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(
    m=st.integers(min_value=2, max_value=5),
    seed=st.integers(min_value=0, max_value=10_000),
)
def test_richardson_exact_for_polynomials_below_m(m, seed):
    rng = np.random.default_rng(seed)
    scales = np.sort(rng.choice(np.arange(10, 60), size=m, replace=False) / 10.0)
    weights = richardson_coefficients(scales)
    # source: textbook Lagrange interpolation: the interpolant through m points evaluated at 0
    assert weights.sum() == pytest.approx(1.0, abs=1e-8)
    for degree in range(m):
        coeffs = rng.normal(size=degree + 1)
        values = np.polynomial.polynomial.polyval(scales, coeffs)
        assert weights @ values == pytest.approx(coeffs[0], abs=1e-7 * (1 + np.abs(coeffs).sum()))


def test_polynomial_fit_and_linear_are_least_squares():
    scales = np.array([1.0, 1.5, 2.0, 3.0])
    y = np.array([0.3, 0.5, 0.4, 0.9])
    g = polynomial_coefficients(scales, 1)
    # source: numpy.polynomial.polynomial.polyfit (least squares), value at zero
    assert g @ y == pytest.approx(np.polynomial.polynomial.polyfit(scales, y, 1)[0], abs=1e-12)


def test_exponential_fit_recovers_an_exponential():
    scales = np.array([1.0, 2.0, 3.0, 4.0])
    a, b, k = -0.5, -0.6, 0.35
    y = a + b * np.exp(-k * scales)
    value, weights, params = exponential_fit(scales, y)
    assert value == pytest.approx(a + b, abs=1e-7)  # closed form: E(0) = a + b
    assert params[2] == pytest.approx(k, rel=1e-5)
    # first-order: a small change of the data moves E(0) by weights . dy (delta method)
    dy = 1e-6 * np.array([1.0, -2.0, 0.5, 1.0])
    v2, _, _ = exponential_fit(scales, y + dy)
    assert v2 - value == pytest.approx(weights @ dy, rel=1e-3, abs=1e-12)


def test_exponential_fit_falls_back_on_straight_lines():
    fit = fit_through("exponential", None, np.array([1.0, 2.0, 3.0]), np.array([1.0, 2.0, 3.0]))
    assert fit.warning and "linear fit used" in fit.warning
    assert fit.weights @ np.array([1.0, 2.0, 3.0]) == pytest.approx(0.0, abs=1e-12)  # the line at 0
    # the curve the fit reports is the line it used
    assert fit.curve(np.array([0.0, 4.0])) == pytest.approx([0.0, 4.0], abs=1e-12)


@pytest.mark.parametrize(
    ("fit", "degree"), [("richardson", None), ("linear", None), ("polynomial", 2)]
)
def test_fitted_curve_is_the_fit_and_meets_its_zero_noise_value(fit, degree):
    scales = np.array([1.0, 1.7, 2.5, 3.0])
    y = np.array([0.31, 0.52, 0.47, 0.93])
    zfit = fit_through(fit, degree, scales, y)
    xs = np.linspace(0.0, 3.0, 7)
    deg = {"richardson": len(scales) - 1, "linear": 1, "polynomial": 2}[fit]
    # source: numpy.polynomial.polynomial.polyfit (least squares; interpolation at degree m-1)
    expected = np.polynomial.polynomial.polyval(
        xs, np.polynomial.polynomial.polyfit(scales, y, deg)
    )
    assert zfit.curve(xs) == pytest.approx(expected, abs=1e-9)
    assert zfit.curve(np.array([0.0]))[0] == pytest.approx(zfit.weights @ y, abs=1e-12)


def test_exponential_curve_is_the_fitted_exponential():
    scales = np.array([1.0, 2.0, 3.0, 4.0])
    a, b, k = -0.5, -0.6, 0.35
    zfit = fit_through("exponential", None, scales, a + b * np.exp(-k * scales))
    # closed form: E(c) = a + b exp(-k c), E(0) = a + b
    assert zfit.curve(np.array([0.0, 2.5])) == pytest.approx(
        [a + b, a + b * np.exp(-k * 2.5)], abs=1e-7
    )
    assert zfit.value == pytest.approx(a + b, abs=1e-7)


# ---- readout -----------------------------------------------------------------------------------


def test_per_qubit_inverse_applies_the_kronecker_product():
    rng = np.random.default_rng(0)
    mats = [rng.uniform(size=(2, 2)) for _ in range(3)]
    vec = rng.normal(size=8)
    # source: numpy.kron (qiskit order: qubit 0 is the last factor)
    assert np.allclose(apply_per_qubit(mats, vec), full_readout_matrix(mats) @ vec, atol=1e-14)


def test_simplex_projection_matches_scipy():
    from scipy.optimize import minimize

    rng = np.random.default_rng(4)
    for _ in range(5):
        x = rng.normal(scale=0.3, size=8) + 1 / 8
        p = project_to_simplex(x)
        cons = ({"type": "eq", "fun": lambda z: z.sum() - 1},)
        ref = minimize(
            lambda z, x=x: np.sum((z - x) ** 2),
            np.full(8, 1 / 8),
            bounds=[(0, None)] * 8,
            constraints=cons,
            method="SLSQP",
            options={"ftol": 1e-14, "maxiter": 500},
        )
        # source: scipy.optimize SLSQP on the same convex problem (Smolin et al. 2012 definition)
        assert np.allclose(p, ref.x, atol=1e-6)
        assert p.min() >= 0 and p.sum() == pytest.approx(1.0)


@pytest.mark.parametrize("method", ["per_qubit_inverse", "full_inverse"])
def test_exact_inversion_recovers_the_noiseless_distribution(setup, method):
    ctx, runner, calibrator, _ = setup
    from noiselab.mitigate.base import Workspace, raw_distribution
    from noiselab.mitigate.variants import CircuitVariant

    v = CircuitVariant()
    d = runner(v)
    p = make_pass({"pass": "readout", "method": method, "calibration_shots": 0})

    def cal(variant, states, shots):
        return calibrator(variant.calibration_variant(), states)

    ws = Workspace(ctx=ctx, measured={}, calibration=cal)
    data = {b: raw_distribution(("meas", v, b), d.probs[i]) for i, b in enumerate(d.bases)}
    out = p.correct(v, data, ws).data
    for i, b in enumerate(d.bases):
        # source: the distribution before readout, computed by qiskit.quantum_info
        assert np.max(np.abs(out[b].probs - d.probs_ideal[i])) < 1e-10


def test_readout_only_noise_is_removed_exactly(h2, ground, readout_matrix):
    ctx = _ctx(h2)
    runner = make_synthetic_runner(
        lambda v: DensityMatrix(ground), ctx.measured_bases, readout_matrix
    )
    cal = make_synthetic_calibrator(readout_matrix, 4)
    raw = run_recipe([], ctx, runner, calibrator=cal)
    fixed = run_recipe([{"pass": "readout", "calibration_shots": 0}], ctx, runner, calibrator=cal)
    assert abs(raw.bias_exact_mha) > 1.0
    # source: PySCF FCI (h2.exact_energy_ha) for the noiseless ground state
    assert abs(fixed.energy_ha - h2.exact_energy_ha) < 1e-8


# ---- post-selection ----------------------------------------------------------------------------


def _projector(labels_eigs, n):
    """prod (1 + lambda S)/2 from qiskit Paulis (independent of the pass)."""
    p = np.eye(2**n, dtype=complex)
    for lab, eig in labels_eigs:
        p = p @ (np.eye(2**n) + eig * SparsePauliOp(lab).to_matrix()) / 2
    return p


def test_verify_equals_projected_expectation(setup, h2):
    ctx, runner, calibrator, state = setup
    from noiselab.mitigate.variants import CircuitVariant

    rho = state(CircuitVariant()).data
    syms = [(s.pauli.paulis.to_labels()[0], s.eigenvalue) for s in h2.symmetries]
    proj = _projector(syms, 4)
    h = h2.hamiltonian.to_matrix()
    # source: qiskit.quantum_info matrices; Bonet-Monroig et al. 2018: Tr(P rho P H)/Tr(P rho)
    expected = np.trace(proj @ rho @ proj @ h).real / np.trace(proj @ rho).real
    res = run_recipe(
        [{"pass": "readout", "calibration_shots": 0}, {"pass": "postselect", "mode": "verify"}],
        ctx,
        runner,
        calibrator=calibrator,
    )
    assert res.energy_ha == pytest.approx(expected, abs=1e-10)
    raw = run_recipe(
        [{"pass": "readout", "calibration_shots": 0}], ctx, runner, calibrator=calibrator
    )
    assert abs(res.bias_exact_mha) < abs(raw.bias_exact_mha)


def test_verify_with_one_symmetry_is_the_published_formula(setup, h2):
    ctx, runner, calibrator, state = setup
    from noiselab.mitigate.variants import CircuitVariant

    rho = DensityMatrix(state(CircuitVariant()))
    sym = h2.symmetries[0]
    s_op, lam = sym.pauli, sym.eigenvalue
    hs = (h2.hamiltonian @ s_op).simplify()
    # source: Bonet-Monroig et al., PRA 98, 062339: (<H> + lambda <HS>) / (1 + lambda <S>)
    expected = (
        rho.expectation_value(h2.hamiltonian).real + lam * rho.expectation_value(hs).real
    ) / (1 + lam * rho.expectation_value(s_op).real)
    res = run_recipe(
        [
            {"pass": "readout", "calibration_shots": 0},
            {"pass": "postselect", "mode": "verify", "symmetries": [sym.name]},
        ],
        ctx,
        runner,
        calibrator=calibrator,
    )
    assert res.energy_ha == pytest.approx(expected, abs=1e-10)


def test_discard_equals_per_group_projected_expectation(setup, h2):
    ctx, runner, calibrator, state = setup
    from noiselab.mitigate.variants import CircuitVariant

    rho = state(CircuitVariant()).data
    syms = [(s.pauli.paulis.to_labels()[0], s.eigenvalue) for s in h2.symmetries]
    expected = ctx.plan.constant
    n_revealing = 0
    for g in ctx.plan.groups:
        # a Z-string is read off a basis iff the basis has Z on all of its support qubits
        revealed = [
            (lab, e)
            for lab, e in syms
            if all(b == "Z" for a, b in zip(lab, g.basis, strict=True) if a != "I")
        ]
        n_revealing += bool(revealed)
        proj = _projector(revealed, 4)
        hg = SparsePauliOp(list(g.labels), g.coeffs).to_matrix()
        # source: qiskit.quantum_info matrices; derivation in passes/postselect.py docstring
        expected += np.trace(proj @ rho @ proj @ hg).real / np.trace(proj @ rho).real
    assert n_revealing >= 1
    res = run_recipe(
        [{"pass": "readout", "calibration_shots": 0}, {"pass": "postselect", "mode": "discard"}],
        ctx,
        runner,
        calibrator=calibrator,
    )
    assert res.energy_ha == pytest.approx(expected, abs=1e-10)
    assert 0 < res.details["acceptance_rate"] < 1
    assert res.details["effective_shots"] < ctx.shots


# ---- sampled estimates against the analytic standard error ------------------------------------

RECIPES = {
    "raw": [],
    "readout": [{"pass": "readout", "calibration_shots": 5000}],
    "full_inverse": [{"pass": "readout", "method": "full_inverse", "calibration_shots": 5000}],
    "discard": [{"pass": "readout", "calibration_shots": 5000}, {"pass": "postselect"}],
    "extrapolated": [
        {"pass": "readout", "calibration_shots": 5000},
        {"pass": "postselect", "mode": "verify"},
        {"pass": "extrapolate", "scales": [1, 2, 3], "fit": "richardson"},
    ],
}


@pytest.mark.parametrize("name", list(RECIPES))
def test_sampled_spread_matches_analytic_error(h2, ground, readout_matrix, name):
    ctx = _ctx(h2, shots=6000)

    def state(v):
        return _noisy_state(ground, v.nominal_scale)

    runner = make_synthetic_runner(state, ctx.measured_bases, readout_matrix)
    cal = make_synthetic_calibrator(readout_matrix, 4)
    recipe = RECIPES[name]
    analytic = run_recipe(recipe, ctx, runner, calibrator=cal)
    # the expectation of the estimator to first order: exact calibration
    exact_cal = [dict(p, calibration_shots=0) if p["pass"] == "readout" else p for p in recipe]
    centre = run_recipe(exact_cal, ctx, runner, calibrator=cal).energy_ha
    rng = np.random.default_rng(2024)
    reps = 250
    values = np.array(
        [
            run_recipe(recipe, ctx, runner, sampled=True, rng=rng, calibrator=cal).energy_ha
            for _ in range(reps)
        ]
    )
    std_ha = analytic.std_mha / 1000
    # source: common practice: the mean of R draws has standard error std/sqrt(R)
    assert abs(values.mean() - centre) < 3 * std_ha / np.sqrt(reps)
    # the sample std of 250 normal draws is within 15% of the true std (about 3.4 sigma)
    assert values.std(ddof=1) == pytest.approx(std_ha, rel=0.15)


# ---- options refused ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("spec", "match"),
    [
        ({"pass": "extrapolate", "scales": [0.5, 1, 2]}, r"recipe\[0\]\.scales.*>= 1"),
        ({"pass": "extrapolate", "scales": [1, 1, 2]}, r"recipe\[0\]\.scales.*distinct"),
        (
            {"pass": "extrapolate", "scales": [1, 2], "fit": "exponential"},
            r"scales: fit 'exponential' needs at least 3",
        ),
        (
            {"pass": "extrapolate", "fit": "polynomial", "degree": 3},
            r"scales: fit 'polynomial' needs at least 4",
        ),
        ({"pass": "extrapolate", "fit": "polynomial"}, r"degree"),
        ({"pass": "extrapolate", "fit": "cubic"}, r"recipe\[0\]\.fit"),
        ({"pass": "readout", "method": "magic"}, r"recipe\[0\]\.method"),
        ({"pass": "readout", "calibration_shots": -5}, r"recipe\[0\]\.calibration_shots"),
        ({"pass": "readout", "colour": "red"}, r"recipe\[0\]\.colour: unknown key"),
        ({"pass": "postselect", "mode": "maybe"}, r"recipe\[0\]\.mode"),
        (
            {"pass": "zne"},
            r"recipe\[0\]\.pass: unknown pass 'zne'; allowed: .*readout, postselect, extrapolate",
        ),
        ({"method": "full_inverse"}, r"recipe\[0\]\.pass: required key"),
    ],
)
def test_bad_options_are_refused_in_one_line(setup, spec, match):
    ctx, runner, calibrator, _ = setup
    with pytest.raises(InputError, match=match) as info:
        run_recipe([spec], ctx, runner, calibrator=calibrator)
    assert "\n" not in str(info.value)


def test_recipe_order_and_duplicates_refused(setup):
    ctx, runner, calibrator, _ = setup
    with pytest.raises(InputError, match=r"recipe\[1\]\.pass: 'readout'.*must come before"):
        run_recipe(
            [{"pass": "postselect"}, {"pass": "readout"}], ctx, runner, calibrator=calibrator
        )
    with pytest.raises(InputError, match="appears twice"):
        run_recipe([{"pass": "readout"}, {"pass": "readout"}], ctx, runner, calibrator=calibrator)


def test_symmetry_removed_by_reduction_is_refused(h2, setup):
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem

    _, runner, calibrator, _ = setup
    spec = MoleculeSpec(geometry=[("H", 0, 0, 0), ("H", 0, 0, 0.7408)])
    reduced = encode(compute_problem(spec), "parity", drop_fixed_parity_qubits=True)
    ctx = _ctx(reduced)
    with pytest.raises(
        InputError, match=r"recipe\[0\]\.symmetries: this encoding keeps no symmetry"
    ):
        run_recipe([{"pass": "postselect"}], ctx, runner, calibrator=calibrator)
    ctx4 = _ctx(h2)
    with pytest.raises(
        InputError, match=r"recipe\[0\]\.symmetries: 'spin'.*allowed: number_parity"
    ):
        run_recipe(
            [{"pass": "postselect", "symmetries": ["spin"]}], ctx4, runner, calibrator=calibrator
        )


def test_full_inverse_refuses_many_qubits():
    from types import SimpleNamespace

    p = make_pass({"pass": "readout", "method": "full_inverse"})
    fake = SimpleNamespace(plan=SimpleNamespace(num_qubits=12))
    with pytest.raises(InputError, match=r"recipe\[0\]\.method: full_inverse.*limited to 10"):
        p.check(fake, "recipe[0]")


def test_verify_with_extra_bases_lih():
    """LiH (2 electrons in 3 orbitals, 6 qubits, JW): some terms of H P need bases of their own."""
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import MoleculeSpec, compute_problem

    spec = MoleculeSpec(
        geometry=[("Li", 0, 0, 0), ("H", 0, 0, 1.6)],
        active_space={"electrons": 2, "orbitals": 3},
    )
    qp = encode(compute_problem(spec), "jordan_wigner")
    w, v = np.linalg.eigh(qp.hamiltonian.to_matrix())
    ground = Statevector(v[:, int(np.argmin(np.abs(w - qp.exact_energy_ha)))])
    ctx = _ctx(qp, shots=50_000)
    rho = _noisy_state(ground, 1.0)
    runner = make_synthetic_runner(lambda _v: rho, ctx.measured_bases)
    res = run_recipe([{"pass": "postselect", "mode": "verify"}], ctx, runner)
    syms = [(s.pauli.paulis.to_labels()[0], s.eigenvalue) for s in qp.symmetries]
    proj = _projector(syms, 6)
    h = qp.hamiltonian.to_matrix()
    # source: qiskit.quantum_info matrices; Bonet-Monroig et al. 2018
    expected = np.trace(proj @ rho.data @ proj @ h).real / np.trace(proj @ rho.data).real
    assert res.energy_ha == pytest.approx(expected, abs=1e-10)
    extra = res.details["extra_bases"]
    assert extra and set(extra) <= set(ctx.measured_bases) - set(ctx.plan.bases)
    assert res.n_circuits == ctx.plan.n_groups + len(extra)
    assert 0 < res.details["extra_basis_shots"] < ctx.shots
