"""The command-line options every job shares, declared once.

``StudyArg`` and the job-specific aliases are typer ``Annotated`` types; the run options (seed,
shots, method, trajectories, cache, workers, cluster, quiet, out) are added to a command by
:func:`run_options`, which also turns them into one validated
:class:`noiselab.study.run_options.RunOptions` (imported on call: ``noiselab --help`` stays
fast) before the command body runs.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Annotated, Any

import typer

StudyArg = Annotated[
    Path,
    typer.Argument(
        help="Study file (YAML): molecule, device profile, shot budget, recipes.",
        show_default=False,
    ),
]
JsonOpt = Annotated[
    bool, typer.Option("--json", help="Print one JSON object to stdout instead of the table.")
]
TimingsOpt = Annotated[
    bool,
    typer.Option(
        "--timings", help="Add simulation counts and seconds (a 'run' object) to the JSON."
    ),
]
RecipesOpt = Annotated[
    list[str] | None,
    typer.Option(
        "--recipes",
        help="Recipe(s) of the study to follow (repeat the option). Default: all of the study's.",
        show_default=False,
    ),
]
#: Python argument -> command-line option, where the option is not ``--`` + the argument with
#: hyphens for underscores (errors raised by the study layer name the argument; the command line
#: shows the option: :meth:`noiselab.common.errors.NoiselabError.with_options`).
OPTION_OF_ARGUMENT = {"use_cache": "--no-cache", "copy": "--study-copy"}


#: Options renamed to the study file's spelling -> their present name (a "did you mean").
FORMER_OPTIONS = {
    "--vary": "--knob",
    "--from": "--start",
    "--to": "--stop",
    "--recipe": "--recipes",
    "--amplification": "--amplifier",
}


def option_of(argument: str) -> str:
    """The option that sets the job argument ``argument`` (``points``: ``--points``)."""
    return OPTION_OF_ARGUMENT.get(argument, "--" + argument.replace("_", "-"))


# Counts are read as text and validated by the study file's own bounds (RunOptions, or the
# job's own model), so --shots 1e6 works like shots: 1e6 in the file.
CountOpt = str | None


def _option(*names: str, help: str) -> Any:
    return typer.Option(*names, help=help, show_default=False)


def option(name: str, help: str) -> Any:
    """A job's own option with no default shown (use inside ``Annotated``)."""
    return _option(name, help=help)


def repeated(name: str, help: str) -> Any:
    """``Annotated`` type of an option given any number of times (a list, None when absent)."""
    return Annotated[list[str] | None, _option(name, help=help)]


EXIT_CODES = "Exit codes: 0 done, 1 failure, 2 bad input (one line naming the file and key)"
CLUSTER_CODES = (
    "Exit codes: 0 done, 1 failure, 2 bad input (also a --cluster address that is malformed "
    "or reaches no scheduler, and a missing dask install)"
)


def epilog(example: str, codes: str = EXIT_CODES, more: str = "") -> str:
    """A command's epilog: one example command line, then its exit codes."""
    return f"Example: {example}\n\n{codes}{more}."


#: name -> (type, typer option, default) of each run option, in the order --help shows them.
_RUN: dict[str, tuple[Any, Any, Any]] = {
    "out": (str | None, _option("--out", help="Folder for the job's files."), None),
    "cache": (
        Path | None,
        _option(
            "--cache",
            help="Results cache file (SQLite). Default: noiselab's folder in the user cache "
            "directory.",
        ),
        None,
    ),
    "no_cache": (
        bool,
        typer.Option("--no-cache", help="Neither read nor write the results cache."),
        False,
    ),
    "seed": (CountOpt, _option("--seed", help="Override the study's seed (0 to 2**32-1)."), None),
    "shots": (
        CountOpt,
        _option("--shots", help="Override the study's total shot budget per estimate (e.g. 1e6)."),
        None,
    ),
    "workers": (
        CountOpt,
        _option("--workers", help="Run independent simulations in N local processes."),
        None,
    ),
    "cluster": (
        str | None,
        _option(
            "--cluster",
            help="Run independent simulations on a running Dask scheduler, tcp://HOST:PORT "
            "(needs the 'cluster' extra). Not together with --workers.",
        ),
        None,
    ),
    "quiet": (bool, typer.Option("--quiet", "-q", help="No progress bars."), False),
    "method": (
        str | None,
        _option(
            "--method",
            help="Emulation method: auto is the density matrix while it fits in memory, else "
            "Monte Carlo trajectories; pauli_propagation: assess and compare only (twirled "
            "noise, raw and per-qubit readout recipes). Default: the study's emulation.method, "
            "else auto.",
        ),
        None,
    ),
    "trajectories": (
        CountOpt,
        _option(
            "--trajectories",
            help="Trajectories per circuit variant when the trajectory method runs. "
            "Default: the study's emulation.trajectories, else 256.",
        ),
        None,
    ),
    "style": (
        str,
        _option(
            "--style",
            help="Look of the figures written: paper is for a document (the default), talk for "
            "slides (larger type, thicker lines, larger figures).",
        ),
        "paper",
    ),
}

#: The run options of a study job without and with an executor.
STUDY_JOB = ("out", "cache", "no_cache", "seed", "shots", "quiet", "method", "trajectories")
EXECUTOR_JOB = (*STUDY_JOB, "workers", "cluster")
#: Add to a command's run options when it writes figures.
FIGURES = ("style",)


def run_options(
    names: Sequence[str] = STUDY_JOB,
    *,
    files: Sequence[str] | Callable[[], Sequence[str]] = (),
    helps: dict[str, str] | None = None,
    defaults: dict[str, Any] | None = None,
) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """Give a command the shared options ``names`` and its body one ``run: RunOptions``.

    The command function declares its own options and a ``run`` parameter; the options named
    here are appended to its signature (typer reads ``__signature__``), validated together
    as a ``RunOptions`` (bounds of the study file; ``--out`` checked against the job's
    ``files``, or a function giving them, called then) and passed as ``run`` before the body
    runs. ``helps`` / ``defaults`` replace an
    option's help text or default for this command.
    """
    helps = helps or {}
    defaults = defaults or {}

    def decorate(command: Callable[..., Any]) -> Callable[..., Any]:
        # ``run``'s type is imported for type checkers only (the study layer loads on call)
        own = inspect.signature(command, eval_str=True, locals={"RunOptions": Any})
        kept = [p for p in own.parameters.values() if p.name != "run"]
        added = []
        for name in names:
            kind, option, default = _RUN[name]
            if name in helps or name in defaults:
                option = typer.Option(
                    *option.param_decls,
                    help=helps.get(name, option.help),
                    show_default=name in defaults,
                )
            added.append(
                inspect.Parameter(
                    name,
                    inspect.Parameter.KEYWORD_ONLY,
                    annotation=Annotated[kind, option],
                    default=defaults.get(name, default),
                )
            )

        @functools.wraps(command)
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            from noiselab.study.run_options import RunOptions

            given = {name: kwargs.pop(name) for name in names}
            style = given.pop("style", None)
            if style is None:
                names_out = files() if callable(files) else files
                run = RunOptions.from_command_line(out_files=names_out, **given)
                return command(*args, run=run, **kwargs)
            # figures are drawn and saved in the style asked for (report layer: on call)
            from noiselab.report.style import figure_style, get_style

            get_style(style)  # an unknown style is refused before any work
            names_out = files() if callable(files) else files
            run = RunOptions.from_command_line(out_files=names_out, **given)
            with figure_style(style):
                return command(*args, run=run, **kwargs)

        params = [p for p in kept if p.kind != inspect.Parameter.KEYWORD_ONLY]
        params += [p for p in kept if p.kind == inspect.Parameter.KEYWORD_ONLY] + added
        wrapper.__signature__ = own.replace(parameters=params)  # type: ignore[attr-defined]
        wrapper.__annotations__ = {p.name: p.annotation for p in params}
        return wrapper

    return decorate
