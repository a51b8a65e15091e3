"""``--report DIR`` of assess, sweep and budget: the proposal report (HTML and Markdown, with
the figures, tables, assumptions, cautions and provenance) of the finished job.

Only typer is imported at start-up; the report and study layers inside the functions.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

ReportOpt = Annotated[
    str | None,
    typer.Option(
        "--report",
        help="Also write the proposal report into this folder: report.html (one self-contained "
        "page), report.md, the figures (PNG, SVG, PDF) and the JSON with its provenance block.",
        show_default=False,
    ),
]


def check_report_dir(report: str | None, kind: str) -> Path | None:
    """``--report`` as a folder Path, refused in one line before any work when unusable."""
    if report is None:
        return None
    from noiselab.cli.options import option_of
    from noiselab.common.atomic import check_output_dir
    from noiselab.common.errors import InputError
    from noiselab.report.proposal import report_files

    try:
        return check_output_dir(report, report_files(kind))
    except InputError as exc:  # the folder check names its argument out; this is --report
        raise exc.with_options(
            lambda name: "--report" if name == "out" else option_of(name)
        ) from None


def job_provenance(study: Path, seed: Any) -> dict[str, Any]:
    """The provenance block of a job on ``study`` (a path or a shipped study's name)."""
    from noiselab.common.provenance import provenance
    from noiselab.study.spec import load_study

    st = load_study(study)  # the files as the job read them (already validated by the job)
    used = st.seed if seed is None else int(seed)
    return provenance({"study": st.source.resolve(), "profile": st.device_source}, used)


def emit_report(kind: str, result: Any, report_dir: Path | None, study: Path, seed: Any) -> None:
    """Write the report of a finished job (nothing when ``--report`` was not given)."""
    if report_dir is None:
        return
    from noiselab.common.atomic import write_output_set
    from noiselab.report.proposal import write_report

    prov = job_provenance(study, seed)
    written = write_output_set(report_dir, lambda d: write_report(kind, result, d, prov))
    typer.echo(f"Wrote the {kind} report to {report_dir / 'report.html'} ({len(written)} files)")
