"""The chain every job command repeats, once: open the results cache, run the study job under
progress bars with the run options, print its emulation notice, write its files as one set.

The run options were validated (``--out`` included) before this runs, so a refused option
never costs any work; the job itself resolves the study, makes its executor, builds the
context and the record (``noiselab.study``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from noiselab.cli.console import emit_notice, progress_bars

if TYPE_CHECKING:
    from noiselab.study.run_options import RunOptions


def run_job(
    job: Callable[..., Any],
    study: Any,
    run: RunOptions,
    *,
    write: Callable[[Any, Path], Sequence[Path]] | None = None,
    executor: bool = False,
    quiet: bool = False,
    keywords: dict[str, Any] | None = None,
    **options: Any,
) -> tuple[Any, list[Path]]:
    """(result, files written) of ``job(study, cache=..., progress=..., **overrides,
    **options)``; ``write(result, folder)`` writes the job's files when ``--out`` was given.

    ``executor``: the job makes an executor (``workers`` / ``cluster`` are passed);
    ``quiet``: no progress bars (``--json``); ``keywords``: the run options the job takes,
    when not the study overrides (rehearse takes only ``seed``).
    """
    given = run.job_keywords(executor) if keywords is None else keywords
    store = run.open_cache()
    with progress_bars(run.quiet or quiet) as hook:
        result = job(study, cache=store, progress=hook, **given, **options)
    emit_notice(result)
    written = run.write_outputs(lambda folder: write(result, folder)) if write else []
    return result, written
