"""``noiselab study keys`` and ``noiselab study check``: the study file's reference, and a check
of a study without running it.

Only typer is imported at start-up; the study layer (and through it PySCF and qiskit) is
imported inside the command functions so that ``noiselab --help`` stays fast.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from noiselab.cli.values import KEY_SETS

# Deliberately lazy: the study layer and rich are imported inside the command functions.


def keys(
    markdown: Annotated[
        bool,
        typer.Option("--markdown", help="Print the reference page (Markdown) instead of tables."),
    ] = False,
    which: Annotated[
        str,
        typer.Option("--which", help="Which keys.", show_default=True),
    ] = "both",
) -> None:
    """Every key of a study file and of a device profile: type, default, unit, allowed values,
    meaning (read from the models the files are validated by).

    Example: noiselab study keys --which study
    """
    from noiselab.common.errors import input_error
    from noiselab.study.keys import HEADERS, key_cells, keys_markdown, profile_keys, study_keys

    if which not in KEY_SETS:
        raise input_error(None, "--which", repr(which), ", ".join(KEY_SETS))
    if markdown:
        sys.stdout.write(keys_markdown())
        return
    from rich import box
    from rich.console import Console
    from rich.markup import escape
    from rich.table import Table

    terminal = sys.stdout.isatty()
    console = Console() if terminal else Console(no_color=True, highlight=False, width=200)
    parts = []
    if which in ("study", "both"):
        parts.append(("Study file keys", study_keys()))
    if which in ("profile", "both"):
        parts.append(("Device profile keys (also a study's inline device:)", profile_keys()))
    for title, rows in parts:
        table = Table(title=title, box=box.ROUNDED if terminal else box.ASCII, title_justify="left")
        for head in HEADERS:
            table.add_column(head, overflow="fold", no_wrap=head == "key")
        for row in rows:
            table.add_row(*(escape(c) for c in key_cells(row)))
        console.print(table)


def check(
    study: Annotated[Path, typer.Argument(help="Study file (YAML).", show_default=False)],
) -> None:
    """Validate a study without running it and print what it resolves to: molecule, qubits,
    device and patch, recipes, budget, and an estimate of the work, memory and time.

    Exit 0 when valid, 2 with the same one-line message as assess when not.
    Example: noiselab study check configs/studies/h2-equilibrium.yaml
    """
    from noiselab.study.check import describe_study
    from noiselab.study.spec import load_study

    outline = describe_study(load_study(study))
    typer.echo(f"ok: {outline.lines[0]}")
    for line in outline.lines[1:]:
        typer.echo(line if line.startswith("  ") else f"  {line}")


def register(app: typer.Typer) -> None:
    """Add the ``study`` command group to the main app."""
    group = typer.Typer(
        name="study",
        help="The study file's reference (keys) and a check without running (check).",
        no_args_is_help=True,
        add_completion=False,
    )
    group.command("keys")(keys)
    group.command("check")(check)
    app.add_typer(group, name="study")
