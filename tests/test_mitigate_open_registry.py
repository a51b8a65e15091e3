"""A pass written outside the package: one class and one ``register_pass`` call, then it runs
end to end through ``noiselab.assess`` with no change to package code (DEVELOPERS.md uses this
file as its "add a pass" example)."""

from __future__ import annotations

import json
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

import pytest
import yaml
from helpers import pass_contract as contract
from pydantic import Field

import noiselab
from noiselab.common.errors import InputError
from noiselab.mitigate.base import (
    STAGE_ESTIMATE,
    Estimated,
    MitigationPass,
    PassOptions,
    VariantData,
    Workspace,
    plan_estimate,
)
from noiselab.mitigate.registry import PASSES, register_pass
from noiselab.mitigate.reports import PassReport, ScoredRun
from noiselab.mitigate.variants import CircuitVariant
from noiselab.study.results import AssessResult, RunStats


class ShiftOptions(PassOptions):
    shift_mha: float = Field(default=0.0, allow_inf_nan=False, description="added to the energy")


@dataclass(frozen=True)
class ShiftReport(PassReport):
    kind: ClassVar[str] = "shift"  # the pass's name
    shift_mha: float
    energies_ha: tuple[float, ...]  # per variant, before the shift (tuples concatenate)

    def details(self, run: ScoredRun) -> dict[str, Any]:
        return {"shift_mha": self.shift_mha}  # its part of RecipeResult.details (the JSON)


class ShiftPass(MitigationPass):
    """The plan's estimate plus a constant: no random part, so no variance of its own."""

    name: ClassVar[str] = "shift"
    stage: ClassVar[int] = STAGE_ESTIMATE
    Options: ClassVar[type[PassOptions]] = ShiftOptions
    options: ShiftOptions

    def estimate(self, variant: CircuitVariant, data: VariantData, ws: Workspace) -> Estimated:
        plain = plan_estimate(ws.ctx, data)
        report = ShiftReport(self.options.shift_mha, (plain.value,))
        return Estimated(plain + self.options.shift_mha / 1000.0, report)


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
    # the typed report: on the result, in the JSON, and back from the results cache's record
    report = r["shifted"].report(ShiftReport)
    assert report is not None and report.shift_mha == 2.5
    assert report.energies_ha[0] == pytest.approx(r["raw"].energy_ha, abs=1e-12)
    assert result.to_json()["recipes"]["shifted"]["details"]["shift_mha"] == 2.5
    record = json.loads(json.dumps(result.to_record()))
    back = AssessResult.from_record(record, RunStats.reused_since(0.0))
    assert back.recipes["shifted"].report(ShiftReport) == report
    assert back.recipes["shifted"].variants == r["shifted"].variants


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
