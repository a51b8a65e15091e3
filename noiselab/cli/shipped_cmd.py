"""``noiselab shipped``: the device profiles and studies that come with noiselab, one line each."""

from __future__ import annotations

from pathlib import Path

import typer


def _headline(text: str | None, stop: str, width: int = 64) -> str:
    """The description up to its first ``stop`` (or sentence end), at most ``width`` characters."""
    line = " ".join((text or "").split())
    head = line.split(stop)[0].split(". ")[0].rstrip(".,; ")
    return head if len(head) <= width else head[: width - 3].rstrip() + "..."


def _device_line(path: Path) -> str:
    from noiselab.device.profile import load_profile

    profile = load_profile(path)
    return f"{path.stem:<20} {profile.qubit_count:>3} qubits  {_headline(profile.description, ':')}"


def _study_line(path: Path) -> str:
    from noiselab.study.spec import load_study

    study = load_study(path)
    return (
        f"{path.stem:<20} {study.num_qubits:>3} qubits  on {study.profile.name:<14} "
        f"{_headline(study.description, ' (')}"
    )


def shipped() -> None:
    """List the shipped device profiles and studies: name, qubits, what it is.

    Use a name wherever a file is asked for: `noiselab assess h2-stretched`,
    `noiselab profile show amberline-10`, or `device: cobaltgrid-12` in a study file.
    """
    from noiselab.common.shipped import shipped_files, shipped_root

    typer.echo(f"Shipped with noiselab (in {shipped_root()}); every number is illustrative.")
    typer.echo("Device profiles:")
    for path in shipped_files("devices"):
        typer.echo("  " + _device_line(path))
    typer.echo("Studies:")
    for path in shipped_files("studies"):
        typer.echo("  " + _study_line(path))


def register(app: typer.Typer) -> None:
    """Add the ``shipped`` command to the main app."""
    app.command("shipped")(shipped)
