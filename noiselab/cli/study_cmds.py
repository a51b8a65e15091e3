"""``noiselab assess``, ``noiselab tune`` and ``noiselab demo``.

Only typer is imported here at start-up; the study layer (and through it qiskit and PySCF) is
imported inside the command functions so that ``noiselab --help`` stays fast.
"""

from __future__ import annotations

import contextlib
import json
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Annotated, Any

import typer

from noiselab.common.errors import InputError, input_error

# Deliberately lazy: the study and report layers and rich are imported inside the command
# functions (noiselab --help stays fast).

DEMO_DIR = "noiselab-demo"

StudyArg = Annotated[
    Path,
    typer.Argument(
        help="Study file (YAML): molecule, device profile, shot budget, recipes.",
        show_default=False,
    ),
]
CacheOpt = Annotated[
    Path | None,
    typer.Option(
        "--cache",
        help="Results cache file (SQLite). Default: noiselab's folder in the user cache directory.",
        show_default=False,
    ),
]
NoCacheOpt = Annotated[
    bool, typer.Option("--no-cache", help="Neither read nor write the results cache.")
]
# Counts are read as text and validated by the study file's own model (bounds included), so
# --shots 1e6 works like shots: 1e6 in the file.
SeedOpt = Annotated[
    str | None,
    typer.Option("--seed", help="Override the study's seed (0 to 2**32-1).", show_default=False),
]
ShotsOpt = Annotated[
    str | None,
    typer.Option(
        "--shots",
        help="Override the study's total shot budget per estimate (e.g. 1e6).",
        show_default=False,
    ),
]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="No progress bars.")]
JsonOpt = Annotated[
    bool, typer.Option("--json", help="Print one JSON object to stdout instead of the table.")
]
TimingsOpt = Annotated[
    bool,
    typer.Option(
        "--timings", help="Add simulation counts and seconds (a 'run' object) to the JSON."
    ),
]
WorkersOpt = Annotated[
    str | None,
    typer.Option(
        "--workers",
        help="Run independent simulations in N local processes.",
        show_default=False,
    ),
]
MethodOpt = Annotated[
    str | None,
    typer.Option(
        "--method",
        help="Emulation method: auto (density matrix while it fits in memory, else Monte Carlo "
        "trajectories), density_matrix (exact; refuse when too large) or trajectory. "
        "Default: the study's emulation.method, else auto.",
        show_default=False,
    ),
]
TrajectoriesOpt = Annotated[
    str | None,
    typer.Option(
        "--trajectories",
        help="Trajectories per circuit variant when the trajectory method runs. "
        "Default: the study's emulation.trajectories, else 256.",
        show_default=False,
    ),
]
ClusterOpt = Annotated[
    str | None,
    typer.Option(
        "--cluster",
        help="Run independent simulations on a running Dask scheduler, tcp://HOST:PORT "
        "(needs the 'cluster' extra). Not together with --workers.",
        show_default=False,
    ),
]
ListOpt = list[str] | None


# ---------------------------------------------------------------- helpers shared by the commands

ASSESS_FILES = (
    "assess.json",
    "assess.csv",
    "assess-bias.png",
    "assess-bias.svg",
    "assess-extrapolation.png",
    "assess-extrapolation.svg",
)
TUNE_FILES = ("tune.csv", "tune.json")


def check_out(out: str | None, names: tuple[str, ...]) -> Path | None:
    """``--out`` as a folder Path, refused in one line before any work when unusable."""
    from noiselab.common.atomic import check_output_dir

    return check_output_dir(out, names)


def publish(out: Path, write: Callable[[Path], list[Path]]) -> list[Path]:
    """Write a job's files into ``out`` as one set (staged, then moved into place)."""
    from noiselab.common.atomic import write_output_set

    return write_output_set(out, write)


def workers_count(workers: str | None) -> int | None:
    """``--workers`` as an int (None when not given); refused in one line when out of range."""
    if workers is None:
        return None
    from noiselab.common.counts import parse_count
    from noiselab.study.executor import MAX_WORKERS

    return parse_count(workers, "--workers", 1, MAX_WORKERS, "each worker is a full process")


def _check_method(method: str | None) -> None:
    """Refuse a bad --method before any work (one line, exit 2)."""
    if method is None:
        return
    from noiselab.study.spec import EMULATION_METHODS

    if method not in EMULATION_METHODS:
        raise input_error(None, "--method", f"{method!r}", ", ".join(EMULATION_METHODS))


def emit_notice(result: Any) -> None:
    """The job's emulation notice (auto switched to trajectories), once, on stderr."""
    notice = getattr(result, "emulation_notice", None)
    if notice:
        typer.echo(f"noiselab: note: {notice}", err=True)


def _open_cache(cache: Path | None, no_cache: bool) -> Any:
    from noiselab.study.cache import open_cache

    if no_cache and cache is not None:
        raise InputError("--cache: given together with --no-cache; allowed: one of them")
    return open_cache(cache, enabled=not no_cache)


def _run_job(
    job: Callable[..., Any],
    study: Path,
    *,
    cache: Path | None,
    no_cache: bool,
    quiet: bool,
    method: str | None,
    **options: Any,
) -> Any:
    """What every study command does around its job: refuse a bad --method, open the results
    cache, run ``job(study, ...)`` under progress bars, print its emulation notice."""
    _check_method(method)
    store = _open_cache(cache, no_cache)
    with _progress(quiet) as hook:
        result = job(study, cache=store, progress=hook, method=method, **options)
    emit_notice(result)
    return result


def echo_written(written: list[Path]) -> None:
    """'Wrote N file(s) to FOLDER: names' (nothing when no file was written)."""
    if written:
        typer.echo(
            f"Wrote {len(written)} file(s) to {written[0].parent}: "
            + ", ".join(p.name for p in written)
        )


def _stdout_is_terminal() -> bool:
    return sys.stdout.isatty()


@contextlib.contextmanager
def _progress(quiet: bool) -> Iterator[Callable[[str, int, int], None] | None]:
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


def _console() -> Any:
    from rich.console import Console

    if _stdout_is_terminal():
        return Console()
    return Console(no_color=True, highlight=False, width=140, soft_wrap=False)


def _print_table(title: str, headers: tuple[str, ...], rows: list[tuple[str, ...]]) -> None:
    from rich import box
    from rich.table import Table

    terminal = _stdout_is_terminal()
    table = Table(title=title, box=box.ROUNDED if terminal else box.ASCII, title_justify="left")
    for i, h in enumerate(headers):
        numeric = i > 0 and h != "setting"
        table.add_column(h, justify="right" if numeric else "left", no_wrap=numeric)
    for row in rows:
        table.add_row(*row)
    console = _console()
    natural = console.measure(table, options=console.options.update(max_width=10_000)).maximum
    if natural > console.width:  # never cut numbers: let a narrow terminal wrap the lines
        console.width = natural
    console.print(table)


def _print_json(obj: dict[str, Any]) -> None:
    sys.stdout.write(json.dumps(obj, indent=2, sort_keys=False) + "\n")
    sys.stdout.flush()


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


def _write_assess_outputs(result: Any, out: Path) -> list[Path]:
    """assess.json, assess.csv and the figures (from noiselab.report) into ``out``."""
    from noiselab.report.outputs import write_assess_figures
    from noiselab.study.assess import write_assess_data

    return [*write_assess_data(result, out), *write_assess_figures(result, out)]


# ---------------------------------------------------------------- assess


def assess_cmd(
    study: StudyArg,
    json_out: JsonOpt = False,
    out: Annotated[
        str | None,
        typer.Option(
            "--out", help="Folder for assess.json, assess.csv and figures.", show_default=False
        ),
    ] = None,
    cache: CacheOpt = None,
    no_cache: NoCacheOpt = False,
    seed: SeedOpt = None,
    shots: ShotsOpt = None,
    quiet: QuietOpt = False,
    timings: TimingsOpt = False,
    method: MethodOpt = None,
    trajectories: TrajectoriesOpt = None,
    drift: Annotated[
        int | None,
        typer.Option(
            "--drift",
            min=1,
            max=1000,
            help="Also assess every recipe on N device profiles drawn with the profile's drift: "
            "spreads (seeded by the study's seed): how many drawn days reach the target.",
            show_default=False,
        ),
    ] = None,
) -> None:
    """Emulate the study's experiment on its device and score every recipe at the shot budget."""
    from noiselab.study.assess import assess

    out_dir = check_out(out, ASSESS_FILES)
    result = _run_job(
        assess,
        study,
        cache=cache,
        no_cache=no_cache,
        quiet=quiet or json_out,
        method=method,
        seed=seed,
        shots=shots,
        trajectories=trajectories,
        drift=drift,
    )
    written = (
        publish(out_dir, lambda d: _write_assess_outputs(result, d)) if out_dir is not None else []
    )
    if json_out:
        _print_json(result.to_json(with_stats=timings))
        return
    _show_assess(result, written)


def _show_assess(result: Any, written: list[Path]) -> None:
    from noiselab.study.results import format_count

    for line in _context_lines(result.context):
        typer.echo(line)
    title = (
        f"{result.study}: {format_count(result.shots)} shots per estimate, target "
        f"±{result.target_mha:.4g} mHa at confidence {result.confidence:g}"
    )
    _print_table(title, result.table_headers(), result.table_rows())
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


def tune_cmd(
    study: StudyArg,
    readout: Annotated[
        ListOpt,
        typer.Option(
            "--readout",
            help="Readout correction method(s) to try (repeat the option).",
            show_default=False,
        ),
    ] = None,
    postselect: Annotated[
        ListOpt,
        typer.Option(
            "--postselect", help="Symmetry post-selection mode(s) to try.", show_default=False
        ),
    ] = None,
    amplification: Annotated[
        ListOpt,
        typer.Option(
            "--amplification", help="Noise amplification method(s) to try.", show_default=False
        ),
    ] = None,
    scales: Annotated[
        ListOpt,
        typer.Option(
            "--scales",
            help="Noise scale set(s) to try, comma-separated, e.g. 1,2,3.",
            show_default=False,
        ),
    ] = None,
    fit: Annotated[
        ListOpt, typer.Option("--fit", help="Extrapolation fit(s) to try.", show_default=False)
    ] = None,
    top: Annotated[str, typer.Option("--top", help="How many settings to print.")] = "10",
    out: Annotated[
        str | None,
        typer.Option(
            "--out", help="Folder for tune.csv (ranked) and tune.json.", show_default=False
        ),
    ] = None,
    json_out: JsonOpt = False,
    cache: CacheOpt = None,
    no_cache: NoCacheOpt = False,
    seed: SeedOpt = None,
    shots: ShotsOpt = None,
    workers: WorkersOpt = None,
    cluster: ClusterOpt = None,
    quiet: QuietOpt = False,
    timings: TimingsOpt = False,
    method: MethodOpt = None,
    trajectories: TrajectoriesOpt = None,
) -> None:
    """Rank a grid of mitigation settings by the probability of reaching the target."""
    from noiselab.common.counts import parse_count
    from noiselab.study.tune import GridOverride, tune, write_tune_outputs

    _check_method(method)  # before --scales is parsed
    n_top = parse_count(top, "--top", 1, 10**6)
    out_dir = check_out(out, TUNE_FILES)
    n_workers = workers_count(workers)

    override = GridOverride(
        readout=readout or None,
        postselect=postselect or None,
        amplification=amplification or None,
        scales=_parse_scale_sets(scales),
        fit=fit or None,
    )
    result = _run_job(
        tune,
        study,
        cache=cache,
        no_cache=no_cache,
        quiet=quiet or json_out,
        method=method,
        grid=override,
        seed=seed,
        shots=shots,
        workers=n_workers,
        cluster=cluster,
        trajectories=trajectories,
    )
    written = (
        publish(out_dir, lambda d: write_tune_outputs(result, d)) if out_dir is not None else []
    )
    if json_out:
        _print_json(result.to_json(with_stats=timings))
        return
    from noiselab.study.results import TUNE_HEADERS, format_count

    for line in _context_lines(result.context):
        typer.echo(line)
    title = (
        f"{result.context.study}: top {min(n_top, len(result.entries))} of {len(result.entries)} "
        f"settings at {format_count(result.shots)} shots, target ±{result.target_mha:.4g} mHa"
    )
    _print_table(title, TUNE_HEADERS, result.table_rows(n_top))
    if result.emulation_method == "trajectory":
        from noiselab.study.results import trajectory_std_of

        shown = [trajectory_std_of(e.result) or 0.0 for e in result.entries[:n_top]]
        typer.echo(
            "Emulated with Monte Carlo trajectories: the bias of each setting carries a "
            f"trajectory error of up to {max(shown, default=0.0):.3g} mHa (tune.csv: "
            "trajectory_std_mha), apart from the shot-noise standard error."
        )
    typer.echo(result.verdict)
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


def demo_cmd(
    out: Annotated[
        str, typer.Option("--out", help="Folder for the demo's files (in the current directory).")
    ] = DEMO_DIR,
    cache: CacheOpt = None,
    no_cache: NoCacheOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Assess the shipped demo study (H2 on an invented chip) and write its table and figures."""
    from noiselab.study.assess import assess, demo_study_path

    out_dir = check_out(out, ASSESS_FILES)
    assert out_dir is not None
    path = demo_study_path()
    typer.echo(f"Demo study: {path}")
    store = _open_cache(cache, no_cache)
    with _progress(quiet) as hook:
        result = assess(path, cache=store, progress=hook)
    written = publish(out_dir, lambda d: _write_assess_outputs(result, d))
    _show_assess(result, [])
    typer.echo(f"Demo files are in {out_dir.resolve()}: " + ", ".join(p.name for p in written))


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
    "The grid is readout method x post-selection mode x amplification method x scale set x "
    "fit, from the options here, else the study's tune: section, else a built-in grid of "
    "more than 50 settings. Settings that need the same circuits share their simulations."
)


def register(app: typer.Typer) -> None:
    """Add assess, tune and demo to the ``noiselab`` app."""
    app.command(
        "assess",
        help=_ASSESS_HELP,
        epilog=(
            "Example: noiselab assess configs/studies/h2-equilibrium.yaml --out results/h2\n\n"
            "Exit codes: 0 done, 1 failure, 2 bad input (one line naming the file and key)."
        ),
    )(assess_cmd)
    app.command(
        "tune",
        help=_TUNE_HELP,
        epilog=(
            "Example: noiselab tune configs/studies/h2-equilibrium.yaml --fit linear "
            "--fit richardson --scales 1,2,3 --scales 1,3,5 --out results/h2-tune\n\n"
            "Exit codes: 0 done, 1 failure, 2 bad input (also a --cluster address that is "
            "malformed or reaches no scheduler, and a missing dask install)."
        ),
    )(tune_cmd)
    app.command(
        "demo",
        epilog="Example: noiselab demo --out my-demo",
    )(demo_cmd)
