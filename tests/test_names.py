"""Names of our own: names spelt as in existing programs of this kind appear nowhere in the tree.

Renamed (no alias kept): the parity flag is ``drop_fixed_parity_qubits``; readout rates are
``flip_0to1`` / ``flip_1to0`` (YAML and JSON); fold methods are named as the amplifiers
(``whole_circuit``, ``two_qubit_gates``; labels ``folded_<method>=<scale>``); the shipped
folding recipe is ``zne_two_qubit_gates``; extrapolation coefficients are ``weights``.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
#: Where the old names must not appear (tests and benchmarks too, this file excepted).
SCANNED = ("noiselab", "configs", "notebooks", "README.md", "DEVELOPERS.md", "tests", "benchmarks")
SUFFIXES = {".py", ".yaml", ".yml", ".md", ".ipynb", ".json", ".csv", ".toml", ".txt"}
# split so that this file does not spell them whole
OLD_NAMES = re.compile(
    "|".join(
        "".join(parts)
        for parts in (
            ("two_qubit", "_reduction"),
            ("p_read1", "_prep0"),
            ("p_read0", "_prep1"),
            ("p1_", "given0"),
            ("p0_", "given1"),
            ("fold", "_global"),
            ("fold", "_two_qubit"),
            ("zne", "_folding"),
            ("gam", "ma"),
        )
    ),
    re.IGNORECASE,
)


def scanned_files() -> list[Path]:
    out: list[Path] = []
    for name in SCANNED:
        path = ROOT / name
        if path.is_file():
            out.append(path)
        elif path.is_dir():
            out += [
                p
                for p in sorted(path.rglob("*"))
                if p.is_file() and p.suffix in SUFFIXES and "__pycache__" not in p.parts
            ]
    return [p for p in out if p.resolve() != Path(__file__).resolve()]


def old_name_hits(paths: list[Path], root: Path = ROOT) -> list[str]:
    """``file:line: name`` for every old name found (file relative to ``root``)."""
    hits = []
    for path in paths:
        text = path.read_text(encoding="utf-8", errors="replace")
        for i, line in enumerate(text.splitlines(), start=1):
            where = f"{path.relative_to(root)}:{i}"
            hits += [f"{where}: {m.group(0)}" for m in OLD_NAMES.finditer(line)]
    return hits


def test_scanner_finds_an_old_name(tmp_path: Path) -> None:
    old = "".join(("zne", "_folding"))
    probe = tmp_path / "study.yaml"
    probe.write_text(f"keep: 1\nrecipes:\n  {old.upper()}: []\n")
    assert old_name_hits([probe], tmp_path) == [f"study.yaml:3: {old.upper()}"]
    probe.write_text("keep: 1\n")
    assert old_name_hits([probe], tmp_path) == []


def test_no_old_names_remain() -> None:
    files = scanned_files()
    assert len(files) > 50  # the scan sees the tree
    hits = old_name_hits(files)
    assert not hits, "old names found:\n" + "\n".join(hits[:40])
