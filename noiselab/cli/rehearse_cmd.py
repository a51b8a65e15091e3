"""``noiselab rehearse``: the variational loop rehearsed on the emulated device.

The study layer is imported inside the command (``noiselab --help`` stays fast).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from noiselab.cli.study_cmds import (
    CacheOpt,
    JsonOpt,
    NoCacheOpt,
    QuietOpt,
    StudyArg,
    _open_cache,
    _print_json,
    _print_table,
    _progress,
    echo_written,
)
from noiselab.common.errors import InputError

_HELP = (
    "Rehearse the variational loop on the emulated device: every energy evaluation is drawn "
    "from the noisy distributions at finite shots and corrected by the in-loop recipe; the "
    "final parameters are assessed with the final recipe at the study's budget. Reports the "
    "final error split into ansatz, optimizer and noise parts, P(final within target), total "
    "shots and device hours. Defaults come from the study's rehearse: section."
)


def rehearse_cmd(
    study: StudyArg,
    out: Annotated[
        Path | None,
        typer.Option("--out", help="Folder for rehearse.json, rehearse_traces.csv and "
                     "rehearse.png. Default: ./rehearse-<study name>.", show_default=False),
    ] = None,
    optimizer: Annotated[
        str | None,
        typer.Option("--optimizer", help="spsa, parameter_shift, cobyla or nelder_mead.",
                     show_default=False),
    ] = None,
    iterations: Annotated[
        int | None, typer.Option("--iterations", help="Optimizer iterations.", show_default=False)
    ] = None,
    shots_per_evaluation: Annotated[
        int | None,
        typer.Option("--shots-per-evaluation", help="Measured shots of one in-loop energy "
                     "evaluation.", show_default=False),
    ] = None,
    max_shots: Annotated[
        int | None,
        typer.Option("--max-shots", help="Stop a loop after this many shots.", show_default=False),
    ] = None,
    repeats: Annotated[
        int | None, typer.Option("--repeats", help="Runs of the loop.", show_default=False)
    ] = None,
    start: Annotated[
        str | None,
        typer.Option("--start", help="hartree_fock, perturbed_optimum or random.",
                     show_default=False),
    ] = None,
    seed: Annotated[
        int | None, typer.Option("--seed", help="Seed of the first run.", show_default=False)
    ] = None,
    grid: Annotated[
        bool,
        typer.Option("--grid", help="Rehearse every setting of the study's rehearse.grid "
                     "(shots per evaluation x optimizer x in-loop recipe) and rank them by "
                     "P(final within target), then device hours; writes rehearse_grid.json "
                     "and .csv."),
    ] = False,
    cache: CacheOpt = None,
    no_cache: NoCacheOpt = False,
    quiet: QuietOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Rehearse the study's variational loop and write its outputs."""
    from noiselab.report.rehearse_figure import write_rehearse_outputs
    from noiselab.study.rehearse import rehearse

    store = _open_cache(cache, no_cache)
    if grid:
        _grid(study, out, store, quiet or json_out, json_out, optimizer, shots_per_evaluation,
              dict(iterations=iterations, max_shots=max_shots, repeats=repeats, start=start,
                   seed=seed))  # fmt: skip
        return
    with _progress(quiet or json_out) as hook:
        result = rehearse(
            study, cache=store, progress=hook, optimizer=optimizer, iterations=iterations,
            shots_per_evaluation=shots_per_evaluation, max_shots=max_shots, repeats=repeats,
            start=start, seed=seed,
        )  # fmt: skip
    folder = out if out is not None else Path(f"rehearse-{result.study}")
    written = write_rehearse_outputs(result, folder)
    if json_out:
        _print_json(result.to_json())
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
    _print_table(
        f"{result.study}: rehearsed loop ({result.loop_recipe} in the loop, "
        f"{result.final_recipe} final); ansatz error {ansatz:+.3g} mHa",
        headers, rows,
    )  # fmt: skip
    typer.echo(result.verdict)
    echo_written(written)


def _grid(
    study: Path, out: Path | None, store: object, quiet: bool, json_out: bool,
    optimizer: str | None, shots: int | None, overrides: dict[str, object],
) -> None:  # fmt: skip
    """``rehearse --grid``: every setting of the study's grid, ranked."""
    from noiselab.study.rehearse_grid import rehearse_grid, write_grid_data

    for flag, value in (("--optimizer", optimizer), ("--shots-per-evaluation", shots)):
        if value is not None:
            raise InputError(f"{flag}: not with --grid; allowed: the axes of rehearse.grid")
    with _progress(quiet) as hook:
        result = rehearse_grid(study, cache=store, progress=hook, **overrides)
    folder = out if out is not None else Path(f"rehearse-{result.study}")
    written = write_grid_data(result, folder)
    if json_out:
        _print_json(result.to_json())
        return
    _print_table(
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
        epilog=(
            "Example: noiselab rehearse configs/studies/h2-equilibrium.yaml --iterations 20\n\n"
            "Exit codes: 0 done, 1 failure, 2 bad input (one line naming the file and key)."
        ),
    )(rehearse_cmd)
