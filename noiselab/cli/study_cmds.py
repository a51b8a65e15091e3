"""``noiselab assess``, ``noiselab tune`` and ``noiselab demo``.

Only typer is imported here at start-up; the study layer (and through it qiskit and PySCF) is
imported inside the command functions so that ``noiselab --help`` stays fast.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from noiselab.cli.console import echo_written, print_json, print_table
from noiselab.cli.jobs import run_job
from noiselab.cli.options import (
    CLUSTER_CODES,
    EXECUTOR_JOB,
    FIGURES,
    CountOpt,
    JsonOpt,
    StudyArg,
    TimingsOpt,
    epilog,
    repeated,
    run_options,
)
from noiselab.cli.report_opt import ReportOpt
from noiselab.common.errors import input_error

if TYPE_CHECKING:
    from noiselab.study.run_options import RunOptions

# Deliberately lazy: the study and report layers and rich are imported inside the command
# functions (noiselab --help stays fast).

DEMO_DIR = "noiselab-demo"

ASSESS_FILES = (
    "assess.json",
    "assess.csv",
    "assess-bias.png",
    "assess-bias.svg",
    "assess-bias.pdf",
    "assess-extrapolation.png",
    "assess-extrapolation.svg",
    "assess-extrapolation.pdf",
    "assess-drift.png",
    "assess-drift.svg",
    "assess-drift.pdf",
)
TUNE_FILES = ("tune.csv", "tune.json")

# tune's grid axes, each given any number of times
ReadoutOpt = repeated("--readout", "Readout correction method(s) to try (repeat the option).")
PostselectOpt = repeated("--postselect", "Symmetry post-selection mode(s) to try.")
AmplifierOpt = repeated("--amplifier", "Noise amplifier(s) to try.")
ScalesOpt = repeated("--scales", "Noise scale set(s) to try, comma-separated, e.g. 1,2,3.")
FitOpt = repeated("--fit", "Extrapolation fit(s) to try.")
FamilyOpt = repeated("--family", "Mitigation family(ies) to try besides the stack.")
SuppressOpt = repeated(
    "--suppress",
    "Suppression to try before mitigation (passes joined by +).",
)


def _context_lines(ctx: Any) -> list[str]:
    c = ctx
    return [
        f"Study {c.study}: {c.qubits} qubits ({c.encoding}), {c.ansatz} ansatz with "
        f"{c.n_parameters} parameters, device {c.device} (patch {list(c.patch)}, "
        f"{c.two_qubit_count} two-qubit gates, {c.duration_ns / 1000:.2f} us)",
        f"Energies (Ha): exact {c.exact_energy_ha:.6f}{_spin(c.exact_spin_squared)}, "
        f"Hartree-Fock {c.hf_energy_ha:.6f}, noiseless ansatz {c.ansatz_energy_ha:.6f} "
        f"({c.ansatz_error_mha:+.3f} mHa from exact{_spin(c.ansatz_spin_squared, ', ')}; "
        f"{c.optimizer_starts} optimizer start(s))",
        *(f"Warning: {w}" for w in getattr(c, "warnings", ())),
        *(f"Warning: {w}" for w in getattr(c, "device_warnings", ())),
    ]


def _spin(s2: float | None, sep: str = " ") -> str:
    """' (S^2 0.000)' beside an energy; empty when unknown."""
    if s2 is None:
        return ""
    return f"{sep}S^2 {s2:.3f}" if sep != " " else f" (S^2 {s2:.3f})"


def _write_assess_outputs(result: Any, out: Path, prov: dict[str, Any] | None = None) -> list[Path]:
    """assess.json, assess.csv and the figures (from noiselab.report) into ``out``."""
    from noiselab.report.outputs import write_assess_figures
    from noiselab.study.assess import write_assess_data

    return [*write_assess_data(result, out, prov), *write_assess_figures(result, out)]


# ---------------------------------------------------------------- assess


@run_options(
    # --workers / --cluster: used by pauli_propagation (one task per group)
    (*EXECUTOR_JOB, *FIGURES),
    files=ASSESS_FILES,
    helps={"out": "Folder for assess.json, assess.csv and figures."},
)
def assess_cmd(
    study: StudyArg,
    run: RunOptions,
    json_out: JsonOpt = False,
    timings: TimingsOpt = False,
    drift: Annotated[
        CountOpt,
        typer.Option(
            "--drift",
            help="Also assess every recipe on N device profiles drawn with the profile's drift: "
            "spreads (seeded by the study's seed): how many drawn days reach the target "
            "(1 to 1000).",
            show_default=False,
        ),
    ] = None,
    report: ReportOpt = None,
) -> None:
    """Emulate the study's experiment on its device and score every recipe at the shot budget."""
    from noiselab.cli.report_opt import check_report_dir, emit_report, job_provenance
    from noiselab.common.counts import parse_count
    from noiselab.study.assess import assess
    from noiselab.study.drift import MAX_DRAWS

    report_dir = check_report_dir(report, "assess")
    draws = None if drift is None else parse_count(drift, "--drift", 1, MAX_DRAWS)

    def write(res: Any, folder: Path) -> list[Path]:
        # the files carry the provenance block; --json (a stream compared between runs) does not
        return _write_assess_outputs(res, folder, job_provenance(study, res.seed))

    result, written = run_job(
        assess, study, run, write=write, executor=True, quiet=json_out, drift=draws
    )
    if json_out:
        print_json(result.to_json(with_stats=timings))
        emit_report("assess", result, report_dir, study, result.seed)
        return
    _show_assess(result, written)
    emit_report("assess", result, report_dir, study, result.seed)


def _show_assess(result: Any, written: list[Path]) -> None:
    from noiselab.study.results import format_count

    for line in _context_lines(result.context):
        typer.echo(line)
    title = (
        f"{result.study}: {format_count(result.shots)} shots per estimate, target "
        f"±{result.target_mha:.4g} mHa at confidence {result.confidence:g}"
    )
    print_table(title, result.table_headers(), result.table_rows())
    if getattr(result, "uses_trajectories", False):
        from noiselab.study.results import trajectory_std_of

        worst = max((trajectory_std_of(r) or 0.0 for r in result.recipes.values()), default=0.0)
        more = (
            f" The largest ({worst:.3g} mHa) exceeds the target: the bias and the verdict are "
            "uncertain; raise --trajectories (emulation.trajectories)."
            if worst > result.target_mha
            else ""
        )
        typer.echo(
            "Emulated with Monte Carlo trajectories: 'trajectory error' is the emulator's own "
            "standard error, apart from the shot-noise standard error." + more
        )
    typer.echo(result.verdict)
    typer.echo(result.caution)
    s = result.stats
    if s.reused:
        typer.echo("(result of an identical earlier run, read from the results cache)")
    else:
        typer.echo(
            f"({s.simulations} new simulation(s), {s.cache_hits} from cache, "
            f"{s.wall_seconds:.1f} s)"
        )
    echo_written(written)


# ---------------------------------------------------------------- tune


def _parse_scale_sets(values: list[str] | None) -> list[list[float]] | None:
    if not values:
        return None
    out = []
    for text in values:
        try:
            out.append([float(x) for x in text.replace(" ", "").split(",") if x])
        except ValueError:
            raise input_error(
                None, "--scales", f"{text!r} is not a comma-separated list of numbers", "e.g. 1,2,3"
            ) from None
    return out


@run_options(
    EXECUTOR_JOB,
    files=TUNE_FILES,
    helps={"out": "Folder for tune.csv (ranked) and tune.json."},
)
def tune_cmd(
    study: StudyArg,
    run: RunOptions,
    readout: ReadoutOpt = None,
    postselect: PostselectOpt = None,
    amplifier: AmplifierOpt = None,
    scales: ScalesOpt = None,
    fit: FitOpt = None,
    family: FamilyOpt = None,
    suppress: SuppressOpt = None,
    top: Annotated[str, typer.Option("--top", help="How many settings to print.")] = "10",
    json_out: JsonOpt = False,
    timings: TimingsOpt = False,
    study_copy: Annotated[
        Path | None,
        typer.Option(
            "--study-copy",
            help="Also write a copy of the study to this YAML file with the first-ranked "
            "setting added under recipes (as 'tuned'); never the study file itself.",
            show_default=False,
        ),
    ] = None,
) -> None:
    """Rank a grid of mitigation settings by the probability of reaching the target."""
    from noiselab.common.counts import parse_count
    from noiselab.study.tune import GridOverride, tune, write_tune_outputs
    from noiselab.study.tuned_copy import check_copy_target, write_tuned_study

    n_top = parse_count(top, "--top", 1, 10**6)
    if study_copy is not None:
        check_copy_target(study, study_copy)  # refused before any work
    override = GridOverride(
        readout=readout or None,
        postselect=postselect or None,
        amplifier=amplifier or None,
        scales=_parse_scale_sets(scales),
        fit=fit or None,
        family=family or None,
        suppress=suppress or None,
    )
    result, written = run_job(
        tune, study, run, write=write_tune_outputs, executor=True, quiet=json_out, grid=override
    )
    if study_copy is not None:
        written = [*written, write_tuned_study(result, study, study_copy)]
    if json_out:
        print_json(result.to_json(with_stats=timings))
        return
    from noiselab.study.results import TUNE_HEADERS, format_count

    for line in _context_lines(result.context):
        typer.echo(line)
    title = (
        f"{result.context.study}: top {min(n_top, len(result.entries))} of {len(result.entries)} "
        f"settings at {format_count(result.shots)} shots, target ±{result.target_mha:.4g} mHa"
    )
    print_table(title, TUNE_HEADERS, result.table_rows(n_top))
    if result.emulation_method == "trajectory":
        from noiselab.study.results import trajectory_std_of

        shown = [trajectory_std_of(e.result) or 0.0 for e in result.entries[:n_top]]
        typer.echo(
            "Emulated with Monte Carlo trajectories: the bias of each setting carries a "
            f"trajectory error of up to {max(shown, default=0.0):.3g} mHa (tune.csv: "
            "trajectory_std_mha), apart from the shot-noise standard error."
        )
    typer.echo(result.verdict)
    typer.echo("The first-ranked setting as a recipe to paste under the study's recipes:")
    typer.echo(result.recipe_yaml())
    typer.echo(result.caution)
    s = result.stats
    if s.reused:
        typer.echo(
            f"({len(result.entries)} settings: result of an identical earlier run, read from "
            "the results cache)"
        )
    else:
        typer.echo(
            f"({len(result.entries)} settings from {result.distinct_variants} distinct circuit "
            f"variant(s): {s.simulations} new simulation(s), {s.cache_hits} from cache, "
            f"{s.wall_seconds:.1f} s, {s.executor})"
        )
    if written:
        typer.echo(f"Wrote {', '.join(str(p) for p in written)}")


# ---------------------------------------------------------------- demo


@run_options(
    ("out", "cache", "no_cache", "quiet", *FIGURES),
    files=ASSESS_FILES,
    helps={"out": "Folder for the demo's files (in the current directory)."},
    defaults={"out": DEMO_DIR},
)
def demo_cmd(run: RunOptions) -> None:
    """Assess the shipped demo study (H2 on an invented chip) and write its table and figures."""
    from noiselab.study.assess import assess, demo_study_path

    path = demo_study_path()
    typer.echo(f"Demo study: {path}")
    result, written = run_job(assess, path, run, keywords={}, write=_write_assess_outputs)
    _show_assess(result, [])
    assert run.out is not None
    typer.echo(f"Demo files are in {run.out.resolve()}: " + ", ".join(p.name for p in written))


# ---------------------------------------------------------------- registration


_ASSESS_HELP = (
    "Emulate the study's experiment on its device and score every recipe at the shot budget.\n\n"
    "Prints per recipe the mitigated energy, the bias against the exact energy, the standard "
    "error at the budget, the probability of landing within the target, the shots needed and "
    "what limits it; then a verdict line naming the best recipe. The study is prepared once "
    "(exact energy, noiseless optimum, compilation) and every simulation goes through the "
    "results cache, so a repeated run is fast."
)
_TUNE_HELP = (
    "Rank a grid of mitigation settings by the probability of reaching the target.\n\n"
    "The grid is suppression x readout method x post-selection mode x amplifier x scale set "
    "x fit, plus the families error cancellation and distillation, from the options here, else "
    "the study's tune: section, else the built-in grid (several hundred settings; suppression "
    "that changes nothing on the profile is left out with a note). Settings that need the same "
    "circuits share their simulations."
)


def register(app: typer.Typer) -> None:
    """Add assess, tune and demo to the ``noiselab`` app."""
    app.command(
        "assess",
        help=_ASSESS_HELP,
        epilog=epilog("noiselab assess configs/studies/h2-equilibrium.yaml --out results/h2"),
    )(assess_cmd)
    app.command(
        "tune",
        help=_TUNE_HELP,
        epilog=epilog(
            "noiselab tune configs/studies/h2-equilibrium.yaml --fit linear --fit richardson "
            "--scales 1,2,3 --scales 1,3,5 --out results/h2-tune",
            CLUSTER_CODES,
        ),
    )(tune_cmd)
    app.command(
        "demo",
        epilog="Example: noiselab demo --out my-demo",
    )(demo_cmd)
