"""Every pass of the registry meets the same contract (tests/helpers/pass_contract.py).

Parametrized over ``noiselab.mitigate.registry.PASSES`` as it stands when the tests are
collected, so a newly registered pass is checked without touching this file.
"""

from __future__ import annotations

import pytest
from helpers import pass_contract as contract

from noiselab.mitigate.registry import PASSES

REGISTERED = sorted(PASSES)


def test_the_registry_holds_the_built_in_passes() -> None:
    assert {"readout", "postselect", "extrapolate"} <= set(REGISTERED)


@pytest.mark.parametrize("name", REGISTERED)
def test_interface(name: str) -> None:
    contract.check_interface(PASSES[name])


@pytest.mark.parametrize("name", REGISTERED)
def test_validates_its_options(name: str) -> None:
    assert contract.check_validates_options(PASSES[name]) >= 1  # every built-in has options


@pytest.mark.parametrize("name", REGISTERED)
def test_refuses_unknown_keys(name: str) -> None:
    contract.check_refuses_unknown_keys(PASSES[name])


@pytest.mark.parametrize("name", REGISTERED)
def test_reports_a_stable_cache_key(name: str) -> None:
    contract.check_cache_key(PASSES[name])


@pytest.mark.parametrize("name", REGISTERED)
def test_composes_in_a_recipe(name: str) -> None:
    contract.check_composes(PASSES[name])


@pytest.mark.parametrize("name", REGISTERED)
def test_analytic_and_sampled_paths_agree(name: str) -> None:
    contract.check_analytic_matches_sampled(PASSES[name])
