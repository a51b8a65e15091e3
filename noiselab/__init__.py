"""noiselab: plan energy experiments on noisy quantum devices.

Heavy dependencies (qiskit, pyscf) are imported lazily: ``import noiselab`` is cheap.
The public study API (``noiselab.assess`` and friends) is resolved on first use.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

# name -> "module:attribute"; filled in by the study layer.
_LAZY: dict[str, str] = {
    "assess": "noiselab.study.assess:assess",
    "rehearse": "noiselab.study.rehearse:rehearse",
    "tune": "noiselab.study.tune:tune",
    "sweep": "noiselab.study.sweep:sweep",
    "budget": "noiselab.study.budget:budget",
    "scan": "noiselab.study.scan:scan",
    "load_study": "noiselab.study.spec:load_study",
    "load_profile": "noiselab.device.profile:load_profile",
    "profile_from_target": "noiselab.device.qiskit_target:profile_from_target",
    "profile_to_target": "noiselab.device.qiskit_target:profile_to_target",
    "aer_simulator": "noiselab.device.qiskit_target:aer_simulator",
    "study_keys": "noiselab.study.keys:study_keys",
    "profile_keys": "noiselab.study.keys:profile_keys",
    "describe_study": "noiselab.study.check:describe_study",
    "bias_figure": "noiselab.report.figures:bias_figure",
    "extrapolation_figure": "noiselab.report.figures:extrapolation_figure",
    "sweep_figure": "noiselab.report.figures:sweep_figure",
    "budget_figure": "noiselab.report.figures:budget_figure",
    "write_report": "noiselab.report.proposal:write_report",
    "figure_style": "noiselab.report.style:figure_style",
    "write_tuned_study": "noiselab.study.tuned_copy:write_tuned_study",
}


def __getattr__(name: str) -> Any:
    target = _LAZY.get(name)
    if target is None:
        raise AttributeError(f"module 'noiselab' has no attribute {name!r}")

    module_name, attr = target.split(":")
    return getattr(importlib.import_module(module_name), attr)


def __dir__() -> list[str]:
    return sorted([*globals(), *_LAZY])
