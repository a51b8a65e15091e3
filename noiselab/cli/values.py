"""The allowed values of the command-line options that take a name from a fixed set, read from
the registries and ``Literal`` types the lower layers validate with, so ``--help`` cannot drift
from what a command accepts.

Each provider imports its registry when called (deliberately lazy: only the ``--help`` of the
command that has the option reads it, through :class:`ValuesCommand`; ``noiselab --help`` stays
fast). ``tests/test_vocabulary.py`` checks every option here against its command's validation
and the README's lists of values.
"""

from __future__ import annotations

import typing
from collections.abc import Callable
from typing import Any

from typer.core import TyperCommand


def _literal(model: Any, field: str) -> tuple[str, ...]:
    """The values of a pydantic model field typed ``Literal[...]``."""
    return tuple(str(v) for v in typing.get_args(model.model_fields[field].annotation))


def _tune_axis(axis: str) -> Callable[[], tuple[str, ...]]:
    def values() -> tuple[str, ...]:
        from noiselab.study.grid import axis_values

        return axis_values()[axis]

    return values


def knobs() -> tuple[str, ...]:
    """The sweep's knobs (``--knob``, ``sweep.knob``)."""
    from noiselab.study.knobs import KNOBS

    return tuple(KNOBS)


def emulation_methods() -> tuple[str, ...]:
    """``--method`` (``emulation.method``)."""
    from noiselab.study.spec import EmulationSettings

    return _literal(EmulationSettings, "method")


def optimizers() -> tuple[str, ...]:
    """rehearse's ``--optimizer`` (``rehearse.optimizer``)."""
    from noiselab.study.rehearse_spec import RehearseSettings

    return _literal(RehearseSettings, "optimizer")


def loop_starts() -> tuple[str, ...]:
    """rehearse's ``--start`` (``rehearse.start``)."""
    from noiselab.study.rehearse_spec import RehearseSettings

    return _literal(RehearseSettings, "start")


def figure_styles() -> tuple[str, ...]:
    """``--style`` (the figures' look)."""
    from noiselab.report.style import STYLES

    return tuple(STYLES)


def coherence_modes() -> tuple[str, ...]:
    """sweep's ``--coherence-gate-errors`` (``sweep.coherence_gate_errors``)."""
    from noiselab.study.spec import SweepDefaults

    field = SweepDefaults.model_fields["coherence_gate_errors"].annotation
    return tuple(str(v) for t in typing.get_args(field) for v in typing.get_args(t))


def two_qubit_gates() -> tuple[str, ...]:
    """profile import's ``--two-qubit-gate``."""
    from noiselab.device.profile import TWO_QUBIT_GATES

    return TWO_QUBIT_GATES


#: study keys' ``--which`` (the one list the command checks against)
KEY_SETS = ("study", "profile", "both")

#: option, or "command option" where commands differ, -> its allowed values
ALLOWED: dict[str, Callable[[], tuple[str, ...]]] = {
    "--readout": _tune_axis("readout"),
    "--postselect": _tune_axis("postselect"),
    "--amplifier": _tune_axis("amplifier"),
    "--fit": _tune_axis("fit"),
    "--family": _tune_axis("family"),
    "--suppress": _tune_axis("suppress"),
    "--knob": knobs,
    "--method": emulation_methods,
    "--optimizer": optimizers,
    "rehearse --start": loop_starts,
    "--two-qubit-gate": two_qubit_gates,
    "--style": figure_styles,
    "--coherence-gate-errors": coherence_modes,
    "--which": lambda: KEY_SETS,
}


def allowed_values(command: str, options: Any) -> tuple[str, ...] | None:
    """The allowed values of the option called ``options`` (its names) on ``command``; None
    when it takes no value from a fixed set."""
    for name in options:
        provider = ALLOWED.get(f"{command} {name}") or ALLOWED.get(name)
        if provider is not None:
            return provider()
    return None


def allowed_sentence(values: tuple[str, ...]) -> str:
    """' Allowed: a, b, c.' as the end of an option's help."""
    return f" Allowed: {', '.join(values)}."


class ValuesCommand(TyperCommand):
    """A command whose ``--help`` ends each option of :data:`ALLOWED` with its allowed values
    (read when the help is shown, not at start-up)."""

    def format_help(self, ctx: Any, formatter: Any) -> None:
        for param in self.params:
            values = allowed_values(str(self.name), getattr(param, "opts", ()))
            help_text = getattr(param, "help", None)
            if values and help_text is not None and " Allowed: " not in help_text:
                param.help = help_text.rstrip() + allowed_sentence(values)
        super().format_help(ctx, formatter)
