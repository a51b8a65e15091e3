"""The ``noiselab`` command: one typer app; each layer's commands live in their own module.

Only typer/rich are imported at start-up so that ``noiselab --help`` is fast; the command
modules import qiskit, pyscf and the rest inside the command functions.
"""

from __future__ import annotations

import os
import sys
from typing import Any

import typer
from typer.core import TyperCommand

from noiselab import __version__
from noiselab.cli import commands
from noiselab.cli.options import FORMER_OPTIONS, option_of
from noiselab.cli.values import ValuesCommand
from noiselab.common.errors import NoiselabError
from noiselab.common.wording import CAUTION

app = typer.Typer(
    name="noiselab",
    help=(
        "Plan energy experiments on noisy quantum devices: will this variational energy "
        "calculation reach chemical accuracy on this device, with which error mitigation "
        "and how many shots?\n\n" + CAUTION
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode="rich",
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version_callback(value: bool) -> None:
    if value:
        typer.echo(f"noiselab {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(
        False,
        "--version",
        callback=_version_callback,
        is_eager=True,
        help="Print the version and exit.",
    ),
) -> None:
    """noiselab command line."""


_COMMAND: list[Any] = []  # the click command built from ``app``, once per process


def _register_commands() -> None:
    """Add every command module's commands to ``app`` (once: a second call does nothing)."""
    if app.registered_commands:
        return
    # Each module defines ``register(app)``; keep this list in data-flow order.
    for register in commands.REGISTRY:
        register(app)
    _list_allowed_values(app)


def _list_allowed_values(typer_app: typer.Typer) -> None:
    """Every command's ``--help`` lists the allowed values of its fixed-set options
    (:class:`noiselab.cli.values.ValuesCommand`), sub-groups included."""
    for info in typer_app.registered_commands:
        if info.cls in (None, TyperCommand):
            info.cls = ValuesCommand
    for group in typer_app.registered_groups:
        if group.typer_instance is not None:
            _list_allowed_values(group.typer_instance)


def _command() -> Any:
    """The click command of ``app`` with every command registered, built on first use only
    (in-process callers such as the tests call :func:`main` many times)."""
    if not _COMMAND:
        _register_commands()
        _COMMAND.append(typer.main.get_command(app))
    return _COMMAND[0]


def _cli_error_classes() -> tuple[type[Exception], type[Exception]]:
    """The CLI library's usage-error and error base classes, from typer's public API alone.

    typer >= 0.20 vendors its own click and no longer depends on the ``click`` distribution;
    older typer re-exports click's classes. ``typer.BadParameter`` derives from both in either
    case, so its method resolution order names them without importing an undeclared package.
    """
    bases = {cls.__name__: cls for cls in typer.BadParameter.__mro__}
    return bases["UsageError"], bases["ClickException"]


def _usage_message(exc: Exception) -> str:
    """The usage error's message; an option renamed to follow the study file's key gets its
    present name as the suggestion."""
    name = getattr(exc, "option_name", None)
    if type(exc).__name__ == "NoSuchOption" and name in FORMER_OPTIONS:
        return f"No such option: {name} (did you mean `{FORMER_OPTIONS[name]}`?)"
    return str(exc.format_message())  # type: ignore[attr-defined]


INTERRUPTED = "noiselab: interrupted; finished results are kept in the cache"


def main(argv: list[str] | None = None) -> None:
    """Console entry point: one-line errors, exit 2 for bad input, 1 for failures."""
    usage_error, click_error = _cli_error_classes()
    command = _command()
    args = sys.argv[1:] if argv is None else argv
    try:
        rc = command.main(args=args, prog_name="noiselab", standalone_mode=False)
    except NoiselabError as exc:
        # the study layer names a job's arguments (``points``); here they are options
        typer.echo(f"noiselab: error: {exc.with_options(option_of).message}", err=True)
        sys.exit(exc.exit_code)
    except usage_error as exc:
        ctx = getattr(exc, "ctx", None)
        hint = f" (see '{ctx.command_path} --help')" if ctx is not None else ""
        typer.echo(f"noiselab: error: {_usage_message(exc)}{hint}", err=True)
        sys.exit(2)
    except (typer.Abort, KeyboardInterrupt):
        typer.echo(INTERRUPTED, err=True)
        sys.exit(130)
    except click_error as exc:
        typer.echo(f"noiselab: error: {exc.format_message()}", err=True)
        sys.exit(exc.exit_code)
    except Exception as exc:  # an internal failure: still one line unless debugging
        if os.environ.get("NOISELAB_DEBUG"):
            raise
        typer.echo(
            f"noiselab: internal error: {type(exc).__name__}: {exc} "
            "(set NOISELAB_DEBUG=1 to see the traceback)",
            err=True,
        )
        sys.exit(1)
    if rc == 130:  # typer turns Ctrl-C into a silent Exit(130) when not standalone
        typer.echo(INTERRUPTED, err=True)
    sys.exit(rc if isinstance(rc, int) else 0)


if __name__ == "__main__":  # python -m noiselab.cli.app
    main()
