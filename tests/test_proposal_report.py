"""The proposal report (--report DIR): one self-contained HTML page and a Markdown file with
the verdict, tables, figures, assumptions, cautions and provenance."""

from __future__ import annotations

import base64
import hashlib
import json
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from test_report_figures import PNG_SIGNATURE, _hand_budget, _hand_sweep

from noiselab.common.provenance import LIBRARIES, provenance
from noiselab.common.wording import CAUTION
from noiselab.report.proposal import write_report

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
PROFILE = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"
VOID = {"meta", "img", "br", "hr", "link", "input"}  # source: HTML Living Standard, void elements


class _Checker(HTMLParser):
    """Well-formedness (every non-void element closed in order) and the images' sources."""

    def __init__(self) -> None:
        super().__init__()
        self.stack: list[str] = []
        self.images: list[str] = []
        self.problems: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "img":
            self.images.append(dict(attrs).get("src") or "")
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def check_html(page: Path) -> _Checker:
    """Parse the page; assert it is well formed and every image it shows exists."""
    text = page.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    checker = _Checker()
    checker.feed(text)
    checker.close()
    assert checker.problems == [] and checker.stack == []
    for src in checker.images:
        if src.startswith("data:image/png;base64,"):
            data = base64.b64decode(src.removeprefix("data:image/png;base64,"), validate=True)
            assert data[:8] == PNG_SIGNATURE  # source: PNG specification (RFC 2083), sec. 3.1
        else:
            assert "://" not in src and (page.parent / src).is_file(), src
    return checker


def _prov() -> dict:
    return provenance({"study": DEMO, "profile": PROFILE}, 11)


def test_provenance_block() -> None:
    block = _prov()
    # source: hashlib's SHA-256 (FIPS 180-4) of the file's bytes
    assert block["files"]["study"]["sha256"] == hashlib.sha256(DEMO.read_bytes()).hexdigest()
    assert block["files"]["profile"]["sha256"] == hashlib.sha256(PROFILE.read_bytes()).hexdigest()
    assert block["seed"] == 11 and block["noiselab_version"]
    assert set(LIBRARIES) <= set(block["libraries"]) and block["machine"]["cpus"]
    assert block["date_utc"].endswith("+00:00")
    inline = provenance({"study": DEMO, "profile": "<inline>"}, 0)
    assert inline["files"]["profile"]["sha256"] is None


@pytest.mark.parametrize("kind", ["budget", "sweep"])
def test_report_is_valid_html_with_every_figure(kind: str, tmp_path: Path) -> None:
    result = _hand_budget() if kind == "budget" else _hand_sweep()
    written = write_report(kind, result, tmp_path, _prov())
    names = {p.name for p in written}
    assert {"report.html", "report.md"} <= names
    pngs = sorted(p for p in written if p.suffix == ".png")
    assert pngs and all(p.with_suffix(".svg").is_file() and p.with_suffix(".pdf").is_file()
                        for p in pngs)  # fmt: skip
    checker = check_html(tmp_path / "report.html")
    assert len(checker.images) == len(pngs)  # every figure, embedded
    text = " ".join(checker.text)
    verdict = result.sentence if kind == "budget" else result.crossings[0].sentence
    assert verdict in text and CAUTION in text
    assert hashlib.sha256(DEMO.read_bytes()).hexdigest() in text  # the provenance block
    md = (tmp_path / "report.md").read_text(encoding="utf-8")
    for p in pngs:
        assert f"]({p.name})" in md and (tmp_path / p.name).is_file()
    assert "## Provenance" in md and "## Assumptions" in md and "## Cautions" in md
    data = json.loads((tmp_path / f"{'budget' if kind == 'budget' else 'sweep-two_qubit_error'}"
                                   ".json").read_text())  # fmt: skip
    assert data["provenance"]["files"]["study"]["path"] == str(DEMO)


def test_goldens_ignore_the_provenance_block() -> None:
    sys.path.insert(0, str(ROOT / "tests" / "golden"))
    from make_golden import strip_volatile

    assert "provenance" not in strip_volatile({"a": 1, "provenance": _prov()})


@pytest.mark.slow
def test_demo_report_from_the_command_line(tmp_path: Path) -> None:
    out = tmp_path / "report"
    run = subprocess.run(
        [sys.executable, "-m", "noiselab", "assess", str(DEMO), "--quiet",
         "--cache", str(tmp_path / "c.db"), "--report", str(out)],
        capture_output=True, text=True, timeout=900,
    )  # fmt: skip
    assert run.returncode == 0, run.stderr[-2000:]
    checker = check_html(out / "report.html")
    text = " ".join(checker.text)
    data = json.loads((out / "assess.json").read_text())
    assert data["verdict"] in text
    assert data["provenance"]["files"]["study"]["sha256"] in text
    pngs = sorted(out.glob("*.png"))
    assert {p.name for p in pngs} == {"assess-bias.png", "assess-extrapolation.png"}
    assert len(checker.images) == len(pngs)


@pytest.mark.parametrize("command", ["assess", "sweep", "budget"])
def test_unusable_report_folder_is_refused_before_any_work(
    command: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from noiselab.cli.app import main

    blocker = tmp_path / "a-file"
    blocker.write_text("x", encoding="utf-8")
    with pytest.raises(SystemExit) as info:
        main([command, str(DEMO), "--no-cache", "--quiet", "--report", str(blocker)])
    err = capsys.readouterr().err.strip()
    assert info.value.code == 2 and len(err.splitlines()) == 1
    assert f"--report: {blocker} is a file" in err and "a folder path" in err
