"""The ``rehearse:`` section of a study file (every key optional; defaults are small, so the
demo rehearsal runs in seconds)."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from noiselab.common.counts import MAX_SEED, Count
from noiselab.mitigate.optimizers import (
    CobylaOptions,
    NelderMeadOptions,
    OptimizerName,
    ParameterShiftOptions,
    SpsaOptions,
)
from noiselab.study.device_time import DEFAULT_CIRCUIT_OVERHEAD_S, DEFAULT_REPETITION_DELAY_US

__all__ = [
    "DEFAULT_CIRCUIT_OVERHEAD_S",
    "DEFAULT_REPETITION_DELAY_US",
    "RehearseGrid",
    "RehearseSettings",
]

#: the in-loop recipe when the study names none: readout correction + symmetry verification
DEFAULT_LOOP_RECIPE: tuple[dict[str, Any], ...] = (
    {"pass": "readout", "method": "per_qubit_inverse"},
    {"pass": "postselect", "mode": "verify"},
)


#: the in-loop recipe name ``rehearse.grid.loop_recipe`` uses for DEFAULT_LOOP_RECIPE
DEFAULT_LOOP_NAME = "default"
MAX_GRID_CELLS = 64


class RehearseGrid(BaseModel):
    """``rehearse.grid``: the settings ``rehearse --grid`` tries (every combination)."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    shots_per_evaluation: list[Annotated[Count, Field(ge=10, le=10**9)]] = Field(
        default=[500, 2000, 8000], min_length=1, max_length=16
    )
    optimizer: list[OptimizerName] = Field(default=["spsa", "cobyla"], min_length=1, max_length=4)
    #: study recipe names, or "default" (readout correction + symmetry verification)
    loop_recipe: list[str] = Field(default=[DEFAULT_LOOP_NAME], min_length=1, max_length=16)

    @model_validator(mode="after")
    def _check_size(self) -> RehearseGrid:
        n = len(self.shots_per_evaluation) * len(self.optimizer) * len(self.loop_recipe)
        if n > MAX_GRID_CELLS:
            raise ValueError(
                f"{n} combinations; allowed: at most {MAX_GRID_CELLS} "
                "(shots_per_evaluation x optimizer x loop_recipe)"
            )
        for key in ("shots_per_evaluation", "optimizer", "loop_recipe"):
            values = getattr(self, key)
            if len(set(values)) != len(values):
                raise ValueError(f"{key}: repeated entries; allowed: distinct values")
        return self


class RehearseSettings(BaseModel):
    """How the variational loop is rehearsed on the emulated device."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    optimizer: OptimizerName = "spsa"
    iterations: Count = Field(default=20, ge=1, le=100000)
    shots_per_evaluation: Count = Field(default=2000, ge=10, le=10**9)
    #: stop the loop once this many shots (calibration included) are spent; None: no cap
    max_shots: Count | None = Field(default=None, ge=1)
    start: Literal["hartree_fock", "perturbed_optimum", "random"] = "hartree_fock"
    #: rad: the std of the perturbation of the noiseless optimum (start perturbed_optimum)
    perturbation_rad: float = Field(default=0.2, gt=0, le=3.2, allow_inf_nan=False)
    repeats: Count = Field(default=8, ge=1, le=1000)
    seed: Count = Field(default=0, ge=0, le=MAX_SEED)
    #: the recipe of every in-loop evaluation (a list of passes, as under ``recipes:``)
    loop_recipe: list[dict[str, Any]] | None = None
    #: name of a study recipe for the final estimate at the study's shots; None: the loop recipe
    final_recipe: str | None = None
    circuit_overhead_s: float = Field(
        default=DEFAULT_CIRCUIT_OVERHEAD_S, ge=0, le=3600, allow_inf_nan=False
    )
    spsa: SpsaOptions = SpsaOptions()
    parameter_shift: ParameterShiftOptions = ParameterShiftOptions()
    cobyla: CobylaOptions = CobylaOptions()
    nelder_mead: NelderMeadOptions = NelderMeadOptions()
    #: what ``rehearse --grid`` tries; None: the defaults of RehearseGrid
    grid: RehearseGrid | None = None

    def loop_passes(self) -> tuple[dict[str, Any], ...]:
        return tuple(self.loop_recipe) if self.loop_recipe is not None else DEFAULT_LOOP_RECIPE

    def optimizer_options(self) -> Any:
        return getattr(self, self.optimizer)
