"""Estimate arithmetic: ``+``, ``sum``, scalar ``*`` and ``/``, and ``/`` of two estimates give
what linear_combination and ratio give, to the last bit, and ratio's gradient is the derivative."""

from __future__ import annotations

import numpy as np
import pytest

from noiselab.mitigate.estimate import Estimate, linear_combination, ratio, total


def _random_estimate(rng: np.random.Generator, keys: list[str]) -> Estimate:
    return Estimate(float(rng.normal()), {k: rng.normal(size=4) for k in keys})


def _same(a: Estimate, b: Estimate) -> None:
    """Bit-identical value and influences, in the same key order."""
    assert a.value == b.value
    assert list(a.influence) == list(b.influence)
    for k in a.influence:
        assert np.array_equal(a.influence[k], b.influence[k])


@pytest.fixture
def three() -> tuple[Estimate, Estimate, Estimate]:
    rng = np.random.default_rng(17)
    # overlapping sources: "cal" is shared by all, "m1" by the first two
    return (
        _random_estimate(rng, ["m0", "cal", "m1"]),
        _random_estimate(rng, ["m1", "m2", "cal"]),
        _random_estimate(rng, ["cal", "m3"]),
    )


def test_sums_are_linear_combinations(three) -> None:
    a, b, c = three
    _same(a + b, linear_combination([1.0, 1.0], [a, b]))
    _same(a + b + c, linear_combination([1.0, 1.0, 1.0], [a, b, c]))
    _same(sum([a, b, c]), linear_combination([1.0, 1.0, 1.0], [a, b, c]))
    _same(total([a, b, c]), linear_combination([1.0, 1.0, 1.0], [a, b, c]))


def test_scalar_products_are_linear_combinations(three) -> None:
    a, b, c = three
    w = np.array([2.5, -1.5, 0.25])  # numpy scalars, as the extrapolation weights are
    _same(w[0] * a, linear_combination([w[0]], [a]))
    _same(a * w[0], linear_combination([w[0]], [a]))
    combined = sum(wi * e for wi, e in zip(w, [a, b, c], strict=True))
    _same(combined, linear_combination(list(w), [a, b, c]))


def test_constants_and_scalar_division(three) -> None:
    a, _, _ = three
    shifted = a + 0.125
    assert shifted.value == a.value + 0.125 and shifted.influence is a.influence
    halved = a / 4.0
    assert halved.value == a.value / 4.0
    for k, u in a.influence.items():
        assert np.array_equal(halved.influence[k], u / 4.0)


def test_division_of_estimates_is_the_ratio(three) -> None:
    a, b, _ = three
    _same(a / b, ratio(a, b))
    with pytest.raises(TypeError):
        _ = a * b  # a product of two estimates has no linear rule here


def test_ratio_gradient_is_the_derivative() -> None:
    # R(p) = (u . p) / (v . p) over one source p: the influence is dR/dp
    rng = np.random.default_rng(5)
    p = rng.dirichlet(np.ones(4))
    u, v = rng.normal(size=4), rng.uniform(0.5, 1.5, size=4)
    r = Estimate(float(u @ p), {"p": u}) / Estimate(float(v @ p), {"p": v})
    assert r.value == pytest.approx((u @ p) / (v @ p), rel=1e-14)
    h = 1e-6
    numeric = np.array(
        [
            ((u @ (p + h * e)) / (v @ (p + h * e)) - (u @ (p - h * e)) / (v @ (p - h * e)))
            / (2 * h)
            for e in np.eye(4)
        ]
    )
    # source: first-order Taylor expansion (delta method), checked by central differences
    assert r.influence["p"] == pytest.approx(numeric, rel=1e-6, abs=1e-9)
