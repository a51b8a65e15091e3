"""``noiselab compare`` and ``noiselab scan`` (heavy layers imported inside the commands)."""

from __future__ import annotations

from typing import TYPE_CHECKING, Annotated

import typer

from noiselab.cli.console import echo_written
from noiselab.cli.console import print_plain_table as _table
from noiselab.cli.jobs import run_job
from noiselab.cli.options import (
    EXECUTOR_JOB,
    FIGURES,
    STUDY_JOB,
    CountOpt,
    RecipesOpt,
    StudyArg,
    run_options,
)
from noiselab.common.wording import CAUTION

if TYPE_CHECKING:
    from noiselab.study.run_options import RunOptions

OUT_HELP = {"out": "Folder for the CSV, JSON and figure files."}
FIGURE_EXTS = ("svg", "pdf", "png")
COMPARE_FILES = ("compare.json", "compare.csv", *(f"compare.{e}" for e in FIGURE_EXTS))
SCAN_FILES = ("scan.json", "scan.csv", *(f"scan.{e}" for e in FIGURE_EXTS))


@run_options((*STUDY_JOB, *FIGURES), files=COMPARE_FILES, helps=OUT_HELP)
def compare_cmd(
    ctx: typer.Context,
    study: StudyArg,
    run: RunOptions,
    devices: Annotated[
        list[str],
        typer.Option(
            "--devices",
            help="Device profiles (paths or shipped names): --devices a.yaml b.yaml.",
            show_default=False,
        ),
    ],
) -> None:
    """The same experiment on several devices, ranked; names the device to ask time on."""
    from noiselab.report.scan_figures import write_compare_outputs
    from noiselab.study.compare import compare

    result, written = run_job(
        compare, study, run, write=write_compare_outputs, devices=[*devices, *ctx.args]
    )
    _table(result.table_headers(), result.table_rows(), f"{result.study_name}: devices ranked")
    typer.echo(result.verdict)
    typer.echo(CAUTION)
    echo_written(written)


@run_options((*EXECUTOR_JOB, *FIGURES), files=SCAN_FILES, helps=OUT_HELP)
def scan_cmd(
    study: StudyArg,
    run: RunOptions,
    bond: Annotated[
        tuple[int, int] | None,
        typer.Option(
            "--bond", help="Atom indices I J: J's side moves along I-J.", show_default=False
        ),
    ] = None,
    scale: Annotated[
        bool, typer.Option("--scale", help="Scale every distance instead (values are factors).")
    ] = False,
    start: Annotated[
        float | None,
        typer.Option(
            "--start", help="First value (Angstrom, or factor with --scale).", show_default=False
        ),
    ] = None,
    stop: Annotated[
        float | None, typer.Option("--stop", help="Last value.", show_default=False)
    ] = None,
    points: Annotated[
        CountOpt, typer.Option("--points", help="Grid points (default 9).", show_default=False)
    ] = None,
    refine: Annotated[
        CountOpt,
        typer.Option(
            "--refine",
            help="Refinement rounds near the minimum, 2 points each (default 2).",
            show_default=False,
        ),
    ] = None,
    recipes: RecipesOpt = None,
) -> None:
    """Potential-energy curve under noise along one geometry coordinate."""
    from noiselab.report.scan_figures import write_scan_outputs
    from noiselab.study.scan import scan

    result, written = run_job(
        scan, study, run, write=write_scan_outputs, executor=True,
        bond=bond, scale=scale or None, start=start, stop=stop, points=points, refine=refine,
        recipes=recipes or None,
    )  # fmt: skip
    unit = result.axis.unit
    headers = ("coordinate", "exact (Ha)", "HF (Ha)", *(f"{n} bias (mHa)" for n in result.recipes))
    rows = [
        (
            f"{p.coordinate:.4g}", f"{p.exact_energy_ha:.6f}", f"{p.hf_energy_ha:.6f}",
            *(f"{e.bias_mha:+.3f} ± {e.std_mha:.3f}{' *' if e.reaches_target else ''}"
              for e in p.entries),
        )
        for p in result.points
    ]  # fmt: skip
    _table(headers, rows, f"{result.study_name}: {result.axis_label} (* reaches the target)")
    for f in result.fits:
        eq = "-" if f.equilibrium is None else f"{f.equilibrium:.4f} {unit}"
        if f.equilibrium_std:
            eq += f" ± {f.equilibrium_std:.4f}"
        typer.echo(
            f"{f.curve}: minimum at {eq}; E(first) - E(last) = {f.difference_mha:+.2f} ± "
            f"{f.difference_std_mha:.2f} mHa (error {f.difference_error_mha:+.2f} mHa)"
        )
    for note in result.notes:
        typer.echo(f"Note: {note}.")
    typer.echo(CAUTION)
    echo_written(written)


def register(app: typer.Typer) -> None:
    """Add compare and scan to the ``noiselab`` app."""
    app.command(
        "compare",
        context_settings={"allow_extra_args": True},
        epilog="Example: noiselab compare h2-equilibrium --devices cobaltgrid-12 "
        "--devices tallowtrap-8 --out results/compare. Exit codes: 0 done, 1 failure, 2 bad input.",
    )(compare_cmd)
    app.command(
        "scan",
        epilog="Example: noiselab scan h2-equilibrium --bond 0 1 --start 0.5 --stop 2.5 "
        "--points 9 --recipes zne_linear --out results/h2-scan. Exit codes: 0 done, 1 failure, "
        "2 bad input, 130 interrupted (finished points stay in the cache).",
    )(scan_cmd)
