"""Outcome-dependent readout crosstalk (profile keys ``flip_a_if_b_reads_1`` /
``flip_b_if_a_reads_1``): the readout map, its correction and its measurement twirl."""

from __future__ import annotations

import functools

import numpy as np
import pytest

from noiselab.common.errors import InputError
from noiselab.device.noise import readout_transfer_matrix
from noiselab.device.profile import DeviceProfile, profile_from_mapping, scale_profile
from noiselab.device.suppression import MeasureTwirl, _with_profile_values
from noiselab.emulate.device_inputs import logical_readout
from noiselab.emulate.readout import apply_readout
from noiselab.mitigate.experiment import make_runner
from noiselab.mitigate.recipe import run_recipe
from noiselab.study.context import replace_experiment
from tests.helpers.pass_contract import h2_experiment


def line(crosstalk: list[dict], n: int = 4) -> DeviceProfile:
    """An n-qubit line with readout error only (asymmetric per-qubit flips)."""
    data = {
        "schema_version": 1,
        "name": "readout-line",
        "qubit_count": n,
        "links": [[q, q + 1] for q in range(n - 1)],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
        "durations": {"single_qubit_ns": 30, "two_qubit_ns": 200, "readout_ns": 1000},
        "qubits": {
            "default": {
                "t1_us": 100,
                "t2_us": 100,
                "gate_error": 1e-4,
                "flip_0to1": 0.02,
                "flip_1to0": 0.05,
            },
            "overrides": {1: {"flip_0to1": 0.01, "flip_1to0": 0.08}},
        },
        "couplers": {"default": {"gate_error": 1e-3}},
        "readout_crosstalk": crosstalk,
    }
    return profile_from_mapping(data, "line.yaml")


def test_conditional_flip_by_hand() -> None:
    """Perfect per-qubit readout; pair [1, 0]: qubit 1 flips with 0.1 when qubit 0 reads 1,
    qubit 0 with 0.3 when qubit 1 reads 1. Entries written out from the definition."""
    prof = scale_profile(line([], n=2), 0.0, ["readout"])  # per-qubit flips off
    prof = _with_profile_values(
        prof,
        **{
            "readout_crosstalk": [
                {"pair": [1, 0], "flip_a_if_b_reads_1": 0.1, "flip_b_if_a_reads_1": 0.3}
            ]
        },
    )
    m = readout_transfer_matrix(prof, (0, 1))
    # from the key's definition (device/profile.py docstring): flips are independent, each
    # conditioned on the other bit as read before the crosstalk; index = bit0 + 2 bit1
    expected = np.array(
        [
            [1.0, 0.0, 0.0, 0.3 * 0.1],
            [0.0, 1.0 - 0.1, 0.0, 0.7 * 0.1],  # read q0=1, q1=0
            [0.0, 0.0, 1.0 - 0.3, 0.3 * 0.9],
            [0.0, 0.1, 0.3, 0.7 * 0.9],
        ]
    )
    np.testing.assert_allclose(m, expected, atol=1e-15)
    mats, terms = logical_readout(prof, (0, 1), [0, 1])
    p = np.array([0.1, 0.2, 0.3, 0.4])
    np.testing.assert_allclose(apply_readout(p, mats, terms), expected @ p, atol=1e-15)


def test_full_map_is_no_tensor_product_and_matches_the_dense_reference() -> None:
    xt = [
        {"pair": [0, 1], "flip_a_if_b_reads_1": 0.04, "flip_b_if_a_reads_1": 0.01},
        {"pair": [2, 1], "flip_a_if_b_reads_1": 0.03, "joint_flip": 0.005},
    ]
    prof = line(xt)
    patch = (0, 1, 2, 3)
    m = readout_transfer_matrix(prof, patch)
    np.testing.assert_allclose(m.sum(axis=0), 1.0, atol=1e-14)  # column-stochastic
    # a tensor product A x B has rank-1 blocks once reshaped (Van Loan-Pitsianis rearrangement,
    # from memory): split qubit 0 from the rest
    r = m.reshape(8, 2, 8, 2).transpose(1, 3, 0, 2).reshape(4, 64)
    assert np.linalg.svd(r, compute_uv=False)[1] > 1e-3
    for order in ([0, 1, 2, 3], [3, 1, 0, 2]):  # logical order differs from the patch's
        mats, terms = logical_readout(prof, patch, order)
        p = np.random.default_rng(4).dirichlet(np.ones(16))
        perm = np.array([sum(((k >> l) & 1) << c for l, c in enumerate(order)) for k in range(16)])
        # the dense map above, with logical bit l = circuit bit order[l]
        dense_logical = m[np.ix_(perm, perm)]
        np.testing.assert_allclose(apply_readout(p, mats, terms), dense_logical @ p, atol=1e-14)


def test_keys_validated_scaled_and_resolved() -> None:
    with pytest.raises(InputError, match=r"readout_crosstalk.*flip_a_if_b_reads_1"):
        line([{"pair": [0, 1], "flip_a_if_b_reads_1": 0.7}])
    with pytest.raises(InputError, match=r"untwirled_readout_flips\[0\].*qubit 9"):
        _with_profile_values(line([]), untwirled_readout_flips=[[9, 0.01, 0.02]])
    prof = line([{"pair": [1, 0], "flip_a_if_b_reads_1": 0.04}])
    assert prof.conditional_flips(1, 0) == (0.04, 0.0)
    assert prof.conditional_flips(0, 1) == (0.0, 0.04)
    doubled = scale_profile(prof, 2.0, ["readout"])
    assert doubled.conditional_flips(1, 0) == pytest.approx((0.08, 0.0))
    assert scale_profile(prof, 2.0, ["coherent"]).conditional_flips(1, 0) == (0.04, 0.0)
    model = prof.resolve((0, 1, 2))
    assert model.flip_i_if_j_reads_1[0] == 0.0 and model.flip_j_if_i_reads_1[0] == 0.04
    scaled = model.scaled(2.0, ["readout"])
    assert scaled.flip_j_if_i_reads_1[0] == pytest.approx(0.08)


def test_measure_twirl_symmetrizes_a_correlated_map() -> None:
    xt = [
        {"pair": [0, 1], "flip_a_if_b_reads_1": 0.04, "flip_b_if_a_reads_1": 0.01},
        {"pair": [1, 2], "flip_b_if_a_reads_1": 0.03, "joint_flip": 0.005},
    ]
    prof = line(xt)
    patch = (0, 1, 2, 3)
    twirled = MeasureTwirl().apply(None, prof, None).profile  # type: ignore[arg-type]
    got = readout_transfer_matrix(twirled, patch)
    m = readout_transfer_matrix(prof, patch)
    # source: definition of measurement twirling: the average over bit flips s of X_s M X_s,
    # computed from the untwirled matrix; closed form: entry (y, x) depends on x ^ y only
    idx = np.arange(16)
    avg = sum(m[np.ix_(idx ^ s, idx ^ s)] for s in range(16)) / 16
    np.testing.assert_allclose(got, avg, atol=1e-12)
    np.testing.assert_allclose(got, got.T, atol=1e-12)
    t = np.array([m[np.arange(16), np.arange(16) ^ d].mean() for d in range(16)])
    np.testing.assert_allclose(got, t[idx[:, None] ^ idx[None, :]], atol=1e-12)
    assert not np.allclose(m, m.T)
    mats, terms = logical_readout(twirled, patch, [0, 1, 2, 3])
    p = np.random.default_rng(3).dirichlet(np.ones(16))
    np.testing.assert_allclose(apply_readout(p, mats, terms), avg @ p, atol=1e-12)


CROSSTALK = [
    {"pair": [0, 1], "flip_a_if_b_reads_1": 0.03, "flip_b_if_a_reads_1": 0.02},
    {"pair": [1, 2], "flip_a_if_b_reads_1": 0.025},
    {"pair": [2, 3], "flip_b_if_a_reads_1": 0.03},
]
FULL = {"pass": "readout", "method": "full_inverse", "calibration_shots": 0}
PER_QUBIT = {"pass": "readout", "method": "per_qubit_inverse", "calibration_shots": 0}


@functools.lru_cache(maxsize=8)
def bias_mha(recipe: tuple[str, ...], crosstalk: bool) -> float:
    """Bias of the demo H2 study on a readout-only copy of its device (with or without the
    outcome-dependent flips on the patch's linked pairs)."""
    ctx0, _, _ = h2_experiment()
    prof = scale_profile(ctx0.profile, 0.0, ["relaxation", "single_qubit", "two_qubit", "coherent"])
    if crosstalk:
        patch = ctx0.compiled.patch
        entries = [{**e, "pair": [patch[e["pair"][0]], patch[e["pair"][1]]]} for e in CROSSTALK]
        prof = _with_profile_values(prof, readout_crosstalk=entries)
    ctx = replace_experiment(ctx0, profile=prof)
    steps = {"full": FULL, "per_qubit": PER_QUBIT, "measure_twirl": {"pass": "measure_twirl"}}
    return run_recipe([steps[k] for k in recipe], ctx, make_runner(ctx)).bias_ansatz_mha


def test_full_inversion_corrects_outcome_dependent_crosstalk_per_qubit_does_not() -> None:
    raw = bias_mha((), True)
    assert abs(raw) > abs(bias_mha((), False)) + 1.0  # the crosstalk moves the energy
    # source: linear algebra: the calibration of all 2^n states is the exact readout map here
    # (no other error, no shot noise), so its inverse recovers the noiseless distribution
    assert abs(bias_mha(("full",), True)) < 1e-10
    assert abs(bias_mha(("measure_twirl", "full"), True)) < 1e-10
    # a per-qubit (tensor-product) inverse cannot undo a map that is no tensor product: exact
    # without crosstalk, a bias left with it, reported as such
    assert abs(bias_mha(("per_qubit",), False)) < 1e-10
    assert abs(bias_mha(("per_qubit",), True)) > 0.1
    assert abs(bias_mha(("measure_twirl", "per_qubit"), True)) > 0.1
