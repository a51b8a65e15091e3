"""The list of command modules. Each exposes ``register(app: typer.Typer) -> None``."""

from __future__ import annotations

from collections.abc import Callable

import typer

REGISTRY: list[Callable[[typer.Typer], None]] = []
# Command modules append themselves here, in data-flow order, e.g.:
#   from noiselab.cli import profile_cmd; REGISTRY.append(profile_cmd.register)

from noiselab.cli import study_cmds  # noqa: E402  (assess, tune, demo)

REGISTRY.append(study_cmds.register)
from noiselab.cli import profile_cmd  # noqa: E402  (profile check, profile show)

REGISTRY.append(profile_cmd.register)
from noiselab.cli import sweep_cmds  # noqa: E402  (sweep, budget)

REGISTRY.append(sweep_cmds.register)
from noiselab.cli import shipped_cmd  # noqa: E402  (shipped)

REGISTRY.append(shipped_cmd.register)
from noiselab.cli import scan_cmds  # noqa: E402  (compare, scan)

REGISTRY.append(scan_cmds.register)
from noiselab.cli import rehearse_cmd  # noqa: E402  (rehearse)

REGISTRY.append(rehearse_cmd.register)
from noiselab.cli import study_keys_cmd  # noqa: E402  (study keys, study check)

REGISTRY.append(study_keys_cmd.register)
