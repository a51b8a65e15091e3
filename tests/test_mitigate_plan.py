"""Measurement plan, estimator variance, shot allocation and the target probability."""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers.synthetic import basis_distributions
from qiskit.quantum_info import DensityMatrix, SparsePauliOp, random_density_matrix

from noiselab.common.errors import InputError
from noiselab.mitigate.estimate import (
    group_energy,
    sample_counts,
    single_shot_variance,
    standard_error,
)
from noiselab.mitigate.plan import allocate_shots, build_plan
from noiselab.mitigate.target import assess_target, p_within


def _random_op(n: int, terms: int, seed: int) -> SparsePauliOp:
    rng = np.random.default_rng(seed)
    labels = {"".join(rng.choice(list("IXYZ"), size=n)) for _ in range(terms)}
    labels.add("I" * n)
    labels = sorted(labels)
    return SparsePauliOp(labels, rng.normal(size=len(labels)))


@pytest.fixture(scope="module")
def op_and_state() -> tuple[SparsePauliOp, DensityMatrix]:
    return _random_op(4, 30, 1), random_density_matrix(16, seed=7)


def test_plan_energy_matches_quantum_info(op_and_state):
    op, rho = op_and_state
    plan = build_plan(op)
    probs = basis_distributions(rho, plan.bases)
    energy = plan.constant + sum(
        group_energy(p, g.weights) for p, g in zip(probs, plan.groups, strict=True)
    )
    # source: qiskit.quantum_info DensityMatrix.expectation_value
    assert energy == pytest.approx(rho.expectation_value(op).real, abs=1e-12)
    # every non-identity term is measured exactly once
    labels = sorted(lab for g in plan.groups for lab in g.labels)
    assert labels == sorted(lab for lab in op.paulis.to_labels() if lab != "IIII")


def test_basis_has_z_where_all_terms_are_identity():
    plan = build_plan(SparsePauliOp(["IXIX", "IIIX"], [1.0, 0.5]))
    assert plan.bases == ("ZXZX",)  # common practice, no source: idle qubits read in Z


def test_group_variance_matches_operator_variance(op_and_state):
    op, rho = op_and_state
    plan = build_plan(op)
    probs = basis_distributions(rho, plan.bases)
    for p, g in zip(probs, plan.groups, strict=True):
        hg = SparsePauliOp(list(g.labels), g.coeffs)
        mean = rho.expectation_value(hg).real
        second = rho.expectation_value((hg @ hg).simplify()).real
        # source: qiskit.quantum_info; single-shot variance of a commuting sum = <H_g^2> - <H_g>^2
        assert single_shot_variance(p, g.weights) == pytest.approx(second - mean**2, abs=1e-10)


def test_by_deviation_allocation_is_the_lagrange_optimum():
    rng = np.random.default_rng(3)
    sig = rng.uniform(0.1, 2.0, size=6)
    total = 100_000
    shots = allocate_shots(sig, total, "by_deviation")
    assert shots.sum() == total and shots.min() >= 1
    best = standard_error(sig**2, shots) ** 2
    # source: Lagrange multipliers (Wecker, Hastings, Troyer 2015): min sum s^2/N = (sum s)^2 / N
    assert best == pytest.approx(sig.sum() ** 2 / total, rel=1e-3)
    for _ in range(20):
        other = np.maximum(1, (rng.dirichlet(np.ones(6)) * total).astype(int))
        assert standard_error(sig**2, other) ** 2 >= best * (1 - 1e-9)
    uni = allocate_shots(sig, 10, "uniform")
    assert uni.sum() == 10 and uni.max() - uni.min() <= 1


def test_allocation_keeps_one_shot_each_and_refuses_tiny_budgets():
    shots = allocate_shots([1e-9, 5.0, 0.0], 50, "by_deviation")
    assert shots.sum() == 50 and shots.min() >= 1
    with pytest.raises(InputError, match="shots"):
        allocate_shots([1.0, 1.0, 1.0], 2, "uniform")


def test_weighted_split_across_circuits():
    # three circuits of a combination sum_i w_i E_i, one basis each: sigma of w_i E_i is |w_i| s_i
    w, sig = np.array([3.0, -3.0, 1.0]), np.array([1.0, 1.2, 1.5])
    rows = (np.abs(w) * sig)[:, None]
    shots = allocate_shots(rows, 10_000, "by_deviation", "weighted")
    assert shots.shape == (3, 1)
    # source: Lagrange multipliers: N_i proportional to |w_i| sigma_i
    expected = 10_000 * np.abs(w) * sig / np.sum(np.abs(w) * sig)
    assert np.all(np.abs(shots[:, 0] - expected) <= 1.0 + 1e-9)
    assert allocate_shots(rows, 9, "by_deviation", "equal")[:, 0].tolist() == [3, 3, 3]


def test_two_level_allocation_minimizes_the_total_variance():
    # two circuits, three bases each: the within-circuit rule and the weighted split together
    sig = np.array([[0.5, 1.0, 2.0], [3.0, 0.2, 0.8]])
    total = 60_000
    shots = allocate_shots(sig, total, "by_deviation", "weighted")
    assert shots.sum() == total and shots.min() >= 1
    best = float(np.sum(sig**2 / shots))
    # source: Lagrange multipliers over all six sources: min sum s^2/N = (sum s)^2 / N
    assert best == pytest.approx(sig.sum() ** 2 / total, rel=1e-3)
    equal = allocate_shots(sig, total, "by_deviation", "equal")
    assert equal[0].sum() == equal[1].sum() == total // 2
    with pytest.raises(InputError, match="shot_split"):
        allocate_shots(sig, total, "by_deviation", "halves")


def test_sample_counts_is_seeded_multinomial():
    p = np.array([0.1, 0.2, 0.7])
    a = sample_counts(p, 1000, np.random.default_rng(5))
    b = sample_counts(p, 1000, np.random.default_rng(5))
    assert a.sum() == 1000 and np.array_equal(a, b)


def test_p_within_closed_form():
    # source: textbook normal distribution, P(|Z s| < t) = erf(t / (s sqrt 2)) for zero bias
    assert p_within(0.0, 1.0, 1.6) == pytest.approx(math.erf(1.6 / math.sqrt(2)), abs=1e-12)
    # source: from memory, Phi(1.959964) = 0.975
    assert p_within(0.0, 1.0, 1.959964) == pytest.approx(0.95, abs=1e-6)
    assert p_within(2.0, 0.0, 1.6) == 0.0 and p_within(1.0, 0.0, 1.6) == 1.0


def test_shots_needed_and_limits():
    t, conf = 1.6, 0.95
    # bias 0.5 mHa, single-shot std 100 mHa
    res = assess_target(0.5, 100.0**2, 0.0, 1000, t, conf)
    assert res.limited_by == "shots" and res.shots_needed > 1000
    n = res.shots_needed
    assert p_within(0.5, 100 / math.sqrt(n), t) >= conf > p_within(0.5, 100 / math.sqrt(n - 1), t)
    assert assess_target(0.5, 100.0**2, 0.0, n, t, conf).limited_by == "none"
    biased = assess_target(2.0, 1.0, 0.0, 10**6, t, conf)
    assert biased.limited_by == "bias" and biased.shots_needed is None
    # a calibration noise floor (std 1 mHa, fixed) keeps P(|Z| < 1.6) = 0.89 < 0.95 at any
    # measurement budget although the bias is zero: limited by calibration, not by bias
    floor = assess_target(0.0, 1.0, 1.0**2, 10**6, t, conf)
    assert floor.limited_by == "calibration" and floor.shots_needed is None
    # the same floor with a bias beyond the target is limited by the bias
    assert assess_target(1.7, 1.0, 1.0**2, 10**6, t, conf).limited_by == "bias"
