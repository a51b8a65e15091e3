"""A pass written outside the package: one class and one ``register_pass`` call, then it runs
end to end through ``noiselab.assess`` with no change to package code (DEVELOPERS.md uses this
file as its "add a pass" example)."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import ClassVar

import pytest
import yaml
from helpers import pass_contract as contract
from pydantic import Field

import noiselab
from noiselab.common.errors import InputError
from noiselab.mitigate.base import (
    STAGE_ESTIMATE,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
    plan_estimate,
)
from noiselab.mitigate.estimate import Estimate
from noiselab.mitigate.registry import PASSES, register_pass
from noiselab.mitigate.variants import CircuitVariant


class ShiftOptions(PassOptions):
    shift_mha: float = Field(default=0.0, allow_inf_nan=False, description="added to the energy")


class ShiftPass(MitigationPass):
    """The plan's estimate plus a constant: no random part, so no variance of its own."""

    name: ClassVar[str] = "shift"
    stage: ClassVar[int] = STAGE_ESTIMATE
    Options: ClassVar[type[PassOptions]] = ShiftOptions
    options: ShiftOptions

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimate:
        plain = plan_estimate(ws.ctx, data)
        return Estimate(plain.value + self.options.shift_mha / 1000.0, plain.influence)


@pytest.fixture
def shift() -> Iterator[type[ShiftPass]]:
    """ShiftPass registered for one test (the registry is process-wide)."""
    register_pass(ShiftPass)
    yield ShiftPass
    PASSES.pop(ShiftPass.name)


def _study_with(tmp_path: Path, recipes: dict) -> Path:
    """The shipped demo study with other recipes (device path made absolute)."""
    data = yaml.safe_load(contract.DEMO.read_text(encoding="utf-8"))
    # the demo names its device (a shipped profile), so the copy can live anywhere
    data["recipes"] = recipes
    data.pop("tune", None)
    data.pop("sweep", None)
    path = tmp_path / "shifted.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def test_toy_pass_runs_end_to_end_through_assess(shift, tmp_path: Path) -> None:
    path = _study_with(
        tmp_path,
        {
            "raw": [],
            "shifted": [{"pass": "shift", "shift_mha": 2.5}],
            "readout": [{"pass": "readout"}],
            "readout_shifted": [{"pass": "readout"}, {"pass": "shift", "shift_mha": -1.25}],
        },
    )
    result = noiselab.assess(path, cache=False)
    r = result.recipes
    # a constant shift moves the energy by itself and leaves the error bar alone
    assert r["shifted"].bias_exact_mha == pytest.approx(r["raw"].bias_exact_mha + 2.5, abs=1e-9)
    assert r["shifted"].std_mha == pytest.approx(r["raw"].std_mha, rel=1e-12)
    shifted = r["readout_shifted"].bias_exact_mha
    assert shifted == pytest.approx(r["readout"].bias_exact_mha - 1.25, abs=1e-9)
    assert r["readout_shifted"].std_mha == pytest.approx(r["readout"].std_mha, rel=1e-12)
    passes = result.to_json()["recipes"]["shifted"]["passes"]
    assert passes == [{"pass": "shift", "shift_mha": 2.5}]


def test_toy_pass_meets_the_contract(shift) -> None:
    contract.check_all(shift)


def test_unregistered_pass_is_refused_in_the_study_file(tmp_path: Path) -> None:
    path = _study_with(tmp_path, {"raw": [], "shifted": [{"pass": "shift"}]})
    with pytest.raises(InputError, match=r"recipes\.shifted\[0\]\.pass: unknown pass 'shift'"):
        noiselab.assess(path, cache=False)


def test_register_pass_checks_the_interface(shift) -> None:
    with pytest.raises(ValueError, match="taken"):

        class Other(ShiftPass):
            pass

        register_pass(Other)
    with pytest.raises(TypeError, match="not a MitigationPass"):
        register_pass(dict)  # type: ignore[arg-type]
