"""``noiselab rehearse``: the variational loop rehearsed on the emulated device.

The study layer is imported inside the command (``noiselab --help`` stays fast).
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from noiselab.cli.console import echo_written, print_json, print_table
from noiselab.cli.jobs import run_job
from noiselab.cli.options import (
    FIGURES,
    CountOpt,
    JsonOpt,
    StudyArg,
    epilog,
    option,
    run_options,
)

if TYPE_CHECKING:
    from noiselab.study.run_options import RunOptions

_HELP = (
    "Rehearse the variational loop on the emulated device: every energy evaluation is drawn "
    "from the noisy distributions at finite shots and corrected by the in-loop recipe; the "
    "final parameters are assessed with the final recipe at the study's budget. Reports the "
    "final error split into ansatz, optimizer and noise parts, P(final within target), total "
    "shots and device hours. Defaults come from the study's rehearse: section."
)
REHEARSE_FILES = ("rehearse.json", "rehearse_traces.csv", "rehearse.png")
GRID_FILES = ("rehearse_grid.json", "rehearse_grid.csv")


@run_options(
    ("out", "seed", "cache", "no_cache", "quiet", *FIGURES),
    files=(*REHEARSE_FILES, *GRID_FILES),
    helps={
        "out": "Folder for rehearse.json, rehearse_traces.csv and rehearse.png. "
        "Default: ./rehearse-<study name>.",
        "seed": "Seed of the first run.",
    },
)
def rehearse_cmd(
    study: StudyArg,
    run: RunOptions,
    optimizer: Annotated[
        str | None, option("--optimizer", "Optimizer of the loop.")
    ] = None,
    iterations: Annotated[CountOpt, option("--iterations", "Optimizer iterations.")] = None,
    shots_per_evaluation: Annotated[
        CountOpt,
        option("--shots-per-evaluation", "Measured shots of one in-loop energy evaluation."),
    ] = None,
    max_shots: Annotated[
        CountOpt, option("--max-shots", "Stop a loop after this many shots.")
    ] = None,
    repeats: Annotated[CountOpt, option("--repeats", "Runs of the loop.")] = None,
    start: Annotated[
        str | None, option("--start", "Parameters the loop starts from.")
    ] = None,
    grid: Annotated[
        bool,
        typer.Option(
            "--grid",
            help="Rehearse every setting of the study's rehearse.grid (shots per evaluation x "
            "optimizer x in-loop recipe) and rank them by P(final within target), then device "
            "hours; writes rehearse_grid.json and .csv.",
        ),
    ] = False,
    json_out: JsonOpt = False,
) -> None:
    """Rehearse the study's variational loop and write its outputs."""
    from noiselab.report.rehearse_figure import write_rehearse_outputs
    from noiselab.study.rehearse import rehearse

    loop = {"iterations": iterations, "max_shots": max_shots, "repeats": repeats, "start": start}
    if grid:
        _grid(study, run, json_out, optimizer, shots_per_evaluation, loop)
        return
    result, written = run_job(
        rehearse, study, run, keywords={"seed": run.seed}, quiet=json_out,
        write=write_rehearse_outputs, optimizer=optimizer,
        shots_per_evaluation=shots_per_evaluation, **loop,
    )  # fmt: skip
    written = written or _write_default(run, result, write_rehearse_outputs, REHEARSE_FILES)
    if json_out:
        print_json(result.to_json())
        return
    headers = ("seed", "final error (mHa)", "optimizer error (mHa)", "noise bias (mHa)",
               "std (mHa)", "P within", "shots", "device hours")  # fmt: skip
    rows = [
        (str(r.seed), f"{r.final_error_mha:+.3f}", f"{r.optimizer_error_mha:+.3f}",
         f"{r.noise_bias_mha:+.3f}", f"{r.std_mha:.3f}", f"{r.p_within_target:.3f}",
         f"{r.total_shots:.3g}", f"{r.device_hours:.3g}")
        for r in result.repeats
    ]  # fmt: skip
    ansatz = (result.ansatz_energy_ha - result.exact_energy_ha) * 1000.0
    print_table(
        f"{result.study}: rehearsed loop ({result.loop_recipe} in the loop, "
        f"{result.final_recipe} final); ansatz error {ansatz:+.3g} mHa",
        headers, rows,
    )  # fmt: skip
    typer.echo(result.verdict)
    echo_written(written)


def _write_default(run: RunOptions, result: Any, write: Any, files: tuple[str, ...]) -> list[Path]:
    """Without --out: the files into ./rehearse-<study name> (known only once the job ran)."""
    if run.out is not None:
        return []
    from noiselab.common.atomic import check_output_dir

    folder = check_output_dir(Path(f"rehearse-{result.study}"), files)
    return run.model_copy(update={"out": folder}).write_outputs(lambda d: write(result, d))


def _grid(
    study: Path, run: RunOptions, json_out: bool, optimizer: str | None,
    shots: str | None, loop: dict[str, Any],
) -> None:  # fmt: skip
    """``rehearse --grid``: every setting of the study's grid, ranked."""
    from noiselab.common.errors import InputError
    from noiselab.study.rehearse_grid import rehearse_grid, write_grid_data

    for flag, value in (("--optimizer", optimizer), ("--shots-per-evaluation", shots)):
        if value is not None:
            raise InputError(f"{flag}: not with --grid; allowed: the axes of rehearse.grid")
    result, written = run_job(
        rehearse_grid, study, run, keywords={"seed": run.seed}, quiet=json_out,
        write=write_grid_data, **loop,
    )  # fmt: skip
    written = written or _write_default(run, result, write_grid_data, GRID_FILES)
    if json_out:
        print_json(result.to_json())
        return
    print_table(
        f"{result.study}: loop settings ranked ({result.iterations} iterations, "
        f"{result.reused_evaluations} of {result.evaluations} in-loop evaluations shared)",
        result.table_headers(), result.table_rows(),
    )  # fmt: skip
    typer.echo(result.verdict)
    echo_written(written)


def register(app: typer.Typer) -> None:
    """Add rehearse to the ``noiselab`` app."""
    app.command(
        "rehearse",
        help=_HELP,
        epilog=epilog("noiselab rehearse configs/studies/h2-equilibrium.yaml --iterations 20"),
    )(rehearse_cmd)
