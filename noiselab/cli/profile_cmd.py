"""``noiselab profile check``, ``show`` and ``import``: validate, inspect, import device profiles.

Only typer is imported at start-up; pydantic/rich and the device layer are imported inside the
command functions.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

from noiselab.common.errors import InputError

# Deliberately lazy: the device layer and rich are imported inside the command functions
# (noiselab --help stays fast).

ProfileArg = Annotated[
    Path, typer.Argument(help="Device noise profile (YAML).", show_default=False)
]

IDLE_TARGET_INFIDELITY = 0.01  # the "coherence-limited time": idle error reaches 1 %


def _fmt(value: float | None, spec: str = ".3g") -> str:
    return "inf" if value is None else format(value, spec)


def check(
    file: ProfileArg,
    strict: Annotated[
        bool, typer.Option("--strict", help="Treat warnings as errors (exit code 2).")
    ] = False,
) -> None:
    """Validate a device profile; print warnings; exit 0 when valid, 2 when not.

    Example: noiselab profile check configs/devices/amberline-10.yaml
    """
    from noiselab.device.profile import load_profile, profile_warnings

    profile = load_profile(file)
    warnings = profile_warnings(profile)
    for line in warnings:
        typer.echo(f"noiselab: warning: {line}", err=True)
    if strict and warnings:
        raise InputError(f"{file}: {len(warnings)} warning(s) with --strict; allowed: none")
    typer.echo(
        f"ok: {file}: device '{profile.name}', {profile.qubit_count} qubits, "
        f"{len(profile.pairs())} links, natives {', '.join(profile.native_gate_names)}; "
        f"{len(warnings)} warning(s)"
    )


def _qubit_table(profile: Any) -> Any:
    from rich.table import Table

    from noiselab.device import thermal
    from noiselab.device.profile import VIRTUAL_GATES, relaxation_gate_infidelity

    gate = next((g for g in profile.single_qubit_gates if g not in VIRTUAL_GATES), None)
    table = Table(title=f"Qubits of {profile.name}")
    for head in (
        "qubit",
        "T1 (us)",
        "T2 (us)",
        "1q error",
        "1q relaxation-only error",
        "flip 0->1 (probability)",
        "flip 1->0 (probability)",
        "over-rotation (fraction)",
        "idle time to 1% error (us)",
    ):
        table.add_column(head, justify="right")
    for q in range(profile.qubit_count):
        qp = profile.qubit(q)
        relax = relaxation_gate_infidelity(profile, gate, (q,)) if gate else 0.0
        t_ns = thermal.idle_time_for_infidelity_ns(IDLE_TARGET_INFIDELITY, qp.t1_us, qp.t2_us)
        table.add_row(
            str(q),
            _fmt(qp.t1_us),
            _fmt(qp.t2_us),
            _fmt(qp.gate_error),
            _fmt(relax),
            _fmt(qp.flip_0to1),
            _fmt(qp.flip_1to0),
            _fmt(qp.over_rotation_fraction),
            _fmt(None if t_ns is None else t_ns * 1e-3),
        )
    return table


def _pair_table(profile: Any) -> Any:
    from rich.table import Table

    from noiselab.device.profile import relaxation_gate_infidelity

    g2 = profile.two_qubit_gate
    table = Table(title=f"Linked pairs of {profile.name} ({g2})")
    for head in (
        "pair",
        "2q error",
        "2q relaxation-only error",
        "ZZ angle (rad)",
        "readout joint flip (probability)",
        "readout flip a | b reads 1, b | a reads 1 (probability)",
    ):
        table.add_column(head, justify="right")
    for a, b in profile.pairs():
        pp = profile.pair(a, b)
        table.add_row(
            f"{a}-{b}",
            _fmt(pp.gate_error),
            _fmt(relaxation_gate_infidelity(profile, g2, (a, b))),
            _fmt(pp.zz_angle_rad),
            _fmt(profile.joint_flip(a, b)),
            " / ".join(_fmt(f) for f in profile.conditional_flips(a, b)),
        )
    return table


def _summary_table(profile: Any) -> Any:
    from rich.table import Table

    from noiselab.device import thermal

    d = profile.durations
    idle = [
        thermal.idle_time_for_infidelity_ns(
            IDLE_TARGET_INFIDELITY, profile.qubit(q).t1_us, profile.qubit(q).t2_us
        )
        for q in range(profile.qubit_count)
    ]
    finite = [t for t in idle if t is not None]
    worst_ns = min(finite) if finite else None
    table = Table(title=f"Device {profile.name}", show_header=True)
    table.add_column("quantity")
    table.add_column("value", justify="right")
    table.add_row("qubits", str(profile.qubit_count))
    table.add_row("links", "all-to-all" if profile.is_all_to_all else str(len(profile.pairs())))
    table.add_row("native gates", ", ".join(profile.native_gate_names))
    table.add_row("single-qubit gate (ns)", _fmt(d.single_qubit_ns, "g"))
    table.add_row("two-qubit gate (ns)", _fmt(d.two_qubit_ns, "g"))
    table.add_row("readout (ns)", _fmt(d.readout_ns, "g"))
    table.add_row(
        "coherence-limited time, worst qubit idle to 1% error (us)",
        _fmt(None if worst_ns is None else worst_ns * 1e-3),
    )
    table.add_row(
        "two-qubit gate layers within that time",
        "inf" if worst_ns is None else str(int(worst_ns // d.two_qubit_ns)),
    )
    dr = profile.drift
    table.add_row(
        "drift between days, relative std. (T1, T2, 1q error, 2q error, readout)",
        ", ".join(
            f"{v:.0%}"
            for v in (
                dr.t1_rel_std,
                dr.t2_rel_std,
                dr.single_qubit_error_rel_std,
                dr.two_qubit_error_rel_std,
                dr.readout_error_rel_std,
            )
        ),
    )
    return table


def show(file: ProfileArg) -> None:
    """Print a device profile as tables: qubits, linked pairs, derived thermal limits.

    Example: noiselab profile show configs/devices/amberline-10.yaml
    """
    from rich.console import Console

    from noiselab.device.profile import load_profile, profile_warnings

    profile = load_profile(file)
    console = Console(width=max(120, Console().width))
    if profile.description:
        console.print(profile.description)
    console.print(_summary_table(profile))
    console.print(_qubit_table(profile))
    console.print(_pair_table(profile))
    for line in profile_warnings(profile):
        typer.echo(f"noiselab: warning: {line}", err=True)


def _drift_table(imported: Any) -> Any:
    from rich.table import Table

    table = Table(
        title=f"Day-to-day spread per channel over {imported.tables} calibration tables "
        "(relative std., pooled over qubits or pairs)"
    )
    for head in ("drift key", "relative std.", "elements", "smallest", "largest"):
        table.add_column(head, justify="right")
    for row in imported.drift:
        table.add_row(
            row.key,
            "-" if row.rel_std is None else f"{row.rel_std:.3g}",
            str(row.elements),
            "-" if row.smallest is None else f"{row.smallest:.3g}",
            "-" if row.largest is None else f"{row.largest:.3g}",
        )
    return table


def import_tables(
    tables: Annotated[
        list[Path],
        typer.Argument(
            help="Calibration table files (.csv or .json), one per calibration (day).",
            show_default=False,
        ),
    ],
    out: Annotated[
        Path,
        typer.Option("--to", help="Profile YAML file to write (.yaml).", show_default=False),
    ],
    name: Annotated[
        str | None,
        typer.Option(
            "--name", help="Device name (default: the --to file's name).", show_default=False
        ),
    ] = None,
    two_qubit_gate: Annotated[
        str, typer.Option("--two-qubit-gate", help="Native two-qubit gate.")
    ] = "cz",
    description: Annotated[
        str | None, typer.Option("--description", help="Description line of the profile.")
    ] = None,
) -> None:
    """Write a device profile from calibration tables (format: noiselab.device.caltable).

    Several tables (days): per-qubit medians and a drift block of the measured spreads.
    Prints what the tables could not fill, the profile's warnings and the spread table.

    Example: noiselab profile import configs/calibration/lanternfield-5-day*.* --to lf5.yaml
    """
    from rich.console import Console

    from noiselab.common.atomic import write_text_atomic
    from noiselab.device.caltable import read_calibration_table
    from noiselab.device.profile_import import profile_from_tables

    if out.suffix.lower() not in (".yaml", ".yml") or out.is_dir():
        raise InputError(f"--to: {out}: not a .yaml file path; allowed: a file ending in .yaml")
    read = [read_calibration_table(t) for t in tables]
    imported = profile_from_tables(
        read, name if name is not None else out.stem, str(out), two_qubit_gate, description
    )
    write_text_atomic(out, imported.text)
    for line in imported.notes:
        typer.echo(f"import note: {line}")
    for line in imported.warnings:
        typer.echo(f"noiselab: warning: {line}", err=True)
    if imported.drift:
        Console(width=max(100, Console().width)).print(_drift_table(imported))
    p = imported.profile
    typer.echo(
        f"wrote {out}: device '{p.name}', {p.qubit_count} qubits, {len(p.pairs())} links, "
        f"from {imported.tables} table(s); {len(imported.warnings)} warning(s)"
    )


def register(app: typer.Typer) -> None:
    """Add the ``profile`` command group to the main app."""
    group = typer.Typer(
        name="profile",
        help="Validate, inspect and import device noise profiles (YAML).",
        no_args_is_help=True,
        add_completion=False,
    )
    group.command("check")(check)
    group.command("show")(show)
    group.command("import")(import_tables)
    app.add_typer(group, name="profile")
