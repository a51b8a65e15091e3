"""``noiselab sweep`` and ``noiselab budget``.

Only typer is imported at start-up; the study layer (qiskit, PySCF) and matplotlib are imported
inside the command functions so that ``noiselab --help`` stays fast.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Annotated, Any

import typer

from noiselab.cli.console import console, echo_written
from noiselab.cli.jobs import run_job
from noiselab.cli.options import (
    CLUSTER_CODES,
    EXECUTOR_JOB,
    FIGURES,
    CountOpt,
    RecipesOpt,
    StudyArg,
    epilog,
    run_options,
)
from noiselab.cli.report_opt import ReportOpt
from noiselab.common.wording import CAUTION

if TYPE_CHECKING:
    from noiselab.study.run_options import RunOptions

# Deliberately lazy: the study and report layers are imported inside the command functions
# (noiselab --help stays fast).

KNOB_HELP = (
    "The knob to vary: errors are probabilities 0..1 (shown in %), coherence_us is T1 in us "
    "(T2 scaled with it), noise_scale scales every channel (1 = device as profiled)."
)

TRAJECTORY_NOTE = (
    "Note: emulated with Monte Carlo trajectories; '± std' is shot noise only, the "
    "trajectory error of each value is in the JSON (trajectory_std_mha)."
)

OUT_HELP = {"out": "Folder for the CSV, JSON and figure files."}


def sweep_files() -> tuple[str, ...]:
    """Every file a sweep may write (one set per knob)."""
    from noiselab.study.knobs import KNOBS

    return tuple(f"sweep-{k}.{ext}" for k in KNOBS for ext in ("csv", "json", "svg", "pdf", "png"))


BUDGET_FILES = tuple(f"budget.{ext}" for ext in ("csv", "json", "png", "svg", "pdf"))


def _print(table: Any) -> None:
    console().print(table)


@run_options((*EXECUTOR_JOB, *FIGURES), files=sweep_files, helps=OUT_HELP)
def sweep_cmd(
    study: StudyArg,
    run: RunOptions,
    knob: Annotated[
        str | None,
        typer.Option(
            "--knob",
            help=KNOB_HELP + " Default: the study's sweep.knob, else noise_scale.",
            show_default=False,
        ),
    ] = None,
    start: Annotated[
        float | None,
        typer.Option(
            "--start",
            help="First knob value (base units: probability, us or factor). "
            "Default: the study's sweep.start, else a quarter of the device's value.",
            show_default=False,
        ),
    ] = None,
    stop: Annotated[
        float | None,
        typer.Option(
            "--stop",
            help="Last knob value. Default: the study's sweep.stop, else four times the "
            "device's value.",
            show_default=False,
        ),
    ] = None,
    points: Annotated[
        CountOpt,
        typer.Option(
            "--points",
            help="Number of knob values (2 to 200). Default: the study's, else 5.",
            show_default=False,
        ),
    ] = None,
    log: Annotated[
        bool | None,
        typer.Option(
            "--log/--linear",
            help="Log or even spacing of the values (and the figure's axis). "
            "Default: the study's, else even.",
            show_default=False,
        ),
    ] = None,
    recipes: RecipesOpt = None,
    coherence_gate_errors: Annotated[
        str | None,
        typer.Option(
            "--coherence-gate-errors",
            help="With --knob coherence_us: follow (the relaxation part of every quoted gate "
            "error moves with T1/T2, the rest is held); fixed: quoted gate errors kept. "
            "Default: the study's sweep.coherence_gate_errors, else follow.",
            show_default=False,
        ),
    ] = None,
    report: ReportOpt = None,
) -> None:
    """Energy error against one device-noise knob, raw and mitigated, and the target crossings."""
    from noiselab.cli.report_opt import check_report_dir, emit_report, job_provenance
    from noiselab.report.outputs import write_sweep_outputs
    from noiselab.study.sweep import get_knob, sweep

    if knob is not None:
        get_knob(knob)  # a bad knob fails before any work
    report_dir = check_report_dir(report, "sweep")

    def write(res: Any, folder: Any) -> list[Any]:
        prov = job_provenance(study, run.seed)
        return write_sweep_outputs(res, folder, provenance=prov)

    result, written = run_job(
        sweep,
        study,
        run,
        write=write,
        executor=True,
        knob=knob,
        start=start,
        stop=stop,
        points=points,
        log=log,
        recipes=recipes or None,
        coherence_gate_errors=coherence_gate_errors,
    )
    from noiselab.report.tables import sweep_table

    _print(sweep_table(result))
    for c in result.crossings:
        typer.echo(c.sentence + ".")
    typer.echo(f"{result.crossing_method[0].upper()}{result.crossing_method[1:]}.")
    for note in result.notes():
        typer.echo(f"Note: {note}.")
    if result.emulation_method == "trajectory":
        typer.echo(TRAJECTORY_NOTE)
    typer.echo(CAUTION)
    if result.stats is not None:
        s = result.stats
        typer.echo(
            f"({s.simulations} new simulation(s), {s.cache_hits} from cache, "
            f"{s.wall_seconds:.1f} s, {s.executor})"
        )
    echo_written(written)
    emit_report("sweep", result, report_dir, study, run.seed)


@run_options((*EXECUTOR_JOB, *FIGURES), files=BUDGET_FILES, helps=OUT_HELP)
def budget_cmd(
    study: StudyArg,
    run: RunOptions,
    recipe: Annotated[
        str | None,
        typer.Option(
            "--recipe",
            help="A mitigated recipe of the study to budget beside the raw energy.",
            show_default=False,
        ),
    ] = None,
    report: ReportOpt = None,
) -> None:
    """Error budget: the energy error with each noise channel alone and with each removed."""
    from noiselab.cli.report_opt import check_report_dir, emit_report, job_provenance
    from noiselab.report.outputs import write_budget_outputs
    from noiselab.study.budget import budget

    report_dir = check_report_dir(report, "budget")

    def write(res: Any, folder: Any) -> list[Any]:
        prov = job_provenance(study, run.seed)
        return write_budget_outputs(res, folder, provenance=prov)

    result, written = run_job(
        budget, study, run, write=write, executor=True, recipe=recipe
    )
    from noiselab.report.tables import budget_table

    _print(budget_table(result))
    typer.echo(result.sentence + ".")
    if result.emulation_method == "trajectory":
        typer.echo(TRAJECTORY_NOTE)
    typer.echo(CAUTION)
    echo_written(written)
    emit_report("budget", result, report_dir, study, run.seed)


_SWEEP_HELP = (
    "Energy error against one device-noise knob, raw and mitigated.\n\n"
    "Each point scales the device's own values of the knob's channel (overrides keep their "
    "ratios); the knob value is the device's mean over the qubits or pairs the circuit uses. "
    "The compiled circuit and measurement plan stay fixed; only the noise changes. Every "
    "simulation goes through the results cache: an interrupted sweep picks up where it stopped. "
    "Prints where each recipe's error crosses the target, in the knob's units, and with --out "
    "writes CSV, JSON and the figure as SVG, PDF and PNG."
)
_BUDGET_HELP = (
    "Error budget: which noise channel costs how much energy error.\n\n"
    "For relaxation, single_qubit, two_qubit, coherent and readout: the energy error with that "
    "channel alone and with that channel removed, beside the device as profiled and the "
    "noiseless limit (the ansatz error). States the dominant source in one line."
)


def register(app: typer.Typer) -> None:
    """Add sweep and budget to the ``noiselab`` app."""
    app.command(
        "sweep",
        help=_SWEEP_HELP,
        epilog=epilog(
            "noiselab sweep configs/studies/h2-equilibrium.yaml --knob two_qubit_error "
            "--start 0.001 --stop 0.03 --points 7 --log --out results/h2-sweep",
            CLUSTER_CODES,
            ", 130 interrupted (finished points stay in the cache)",
        ),
    )(sweep_cmd)
    app.command(
        "budget",
        help=_BUDGET_HELP,
        epilog=(
            "Example: noiselab budget configs/studies/h2-equilibrium.yaml --recipe zne_linear "
            "--out results/h2-budget"
        ),
    )(budget_cmd)
