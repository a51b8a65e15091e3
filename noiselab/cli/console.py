"""What the commands print: progress bars on stderr, tables, JSON and the files written.

rich is imported inside the functions (``noiselab --help`` stays fast).
"""

from __future__ import annotations

import contextlib
import json
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import typer

ProgressHook = Callable[[str, int, int], None]


def stdout_is_terminal() -> bool:
    return sys.stdout.isatty()


@contextlib.contextmanager
def progress_bars(quiet: bool) -> Iterator[ProgressHook | None]:
    """A progress hook ``(description, done, total)`` drawing a rich bar on stderr, or None."""
    if quiet or not sys.stderr.isatty():
        yield None
        return
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )

    console = Console(stderr=True)
    columns = (
        TextColumn("{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        TextColumn("ETA"),
        TimeRemainingColumn(),
    )
    tasks: dict[str, Any] = {}
    with Progress(*columns, console=console, transient=True) as bar:

        def hook(description: str, done: int, total: int) -> None:
            task = tasks.get(description)
            if task is None:
                task = tasks[description] = bar.add_task(description, total=max(total, 1))
            bar.update(task, completed=done, total=max(total, 1))

        yield hook


def console() -> Any:
    """A rich console for stdout: plain, 140 columns and no colour when not a terminal."""
    from rich.console import Console

    if stdout_is_terminal():
        return Console()
    return Console(no_color=True, highlight=False, width=140, soft_wrap=False)


def print_table(title: str, headers: tuple[str, ...], rows: list[tuple[str, ...]]) -> None:
    """A table whose numbers are never cut: a narrow terminal wraps the lines instead."""
    from rich import box
    from rich.table import Table

    terminal = stdout_is_terminal()
    table = Table(title=title, box=box.ROUNDED if terminal else box.ASCII, title_justify="left")
    for i, h in enumerate(headers):
        numeric = i > 0 and h != "setting"
        table.add_column(h, justify="right" if numeric else "left", no_wrap=numeric)
    for row in rows:
        table.add_row(*row)
    out = console()
    natural = out.measure(table, options=out.options.update(max_width=10_000)).maximum
    if natural > out.width:
        out.width = natural
    out.print(table)


def print_plain_table(headers: tuple[str, ...], rows: list[tuple[str, ...]], title: str) -> None:
    """A table in rich's default style (compare and scan)."""
    from rich.table import Table

    t = Table(title=title)
    for h in headers:
        t.add_column(h)
    for r in rows:
        t.add_row(*r)
    console().print(t)


def print_json(obj: dict[str, Any]) -> None:
    sys.stdout.write(json.dumps(obj, indent=2, sort_keys=False) + "\n")
    sys.stdout.flush()


def emit_notice(result: Any) -> None:
    """The job's emulation notice (auto switched to trajectories), once, on stderr."""
    notice = getattr(result, "emulation_notice", None)
    if notice:
        typer.echo(f"noiselab: note: {notice}", err=True)


def echo_written(written: list[Path]) -> None:
    """'Wrote N file(s) to FOLDER: names' (nothing when no file was written)."""
    if written:
        typer.echo(
            f"Wrote {len(written)} file(s) to {written[0].parent}: "
            + ", ".join(p.name for p in written)
        )
