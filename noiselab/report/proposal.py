"""The proposal report of a job (``--report DIR`` on assess, sweep and budget).

``write_report(kind, result, out_dir, provenance)`` writes into ``out_dir``: the job's figures
(PNG, SVG, PDF), ``<kind>.json`` (the result with its provenance block), ``report.md`` (verdict,
tables, figures referenced by relative path, assumptions and cautions, provenance) and
``report.html``, one self-contained page (the PNG figures embedded as data URIs, no script, no
outside resource).
"""

from __future__ import annotations

import base64
import html
import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from noiselab.common.atomic import write_text_atomic
from noiselab.common.wording import CAUTION
from noiselab.report.outputs import (
    FIGURE_FORMATS,
    with_provenance,
    write_assess_figures,
    write_budget_outputs,
    write_sweep_outputs,
)
from noiselab.report.tables import assess_rows, budget_rows, sweep_rows
from noiselab.study.results import jsonable

REPORT_KINDS = ("assess", "sweep", "budget")


@dataclass(frozen=True)
class ReportContent:
    """What a report says, independent of its format."""

    title: str
    verdict: tuple[str, ...]
    tables: tuple[tuple[str, list[dict[str, Any]]], ...]
    figures: tuple[Path, ...]  # PNG files in the report folder
    assumptions: tuple[str, ...]
    cautions: tuple[str, ...]
    provenance: dict[str, Any]


def _common_assumptions(shots: int, target_mha: float, confidence: float) -> list[str]:
    return [
        "The device is the noise profile named in the provenance, as written (no drift unless "
        "stated).",
        "Biases are expectations (no random draw); every random part (shot noise, calibration "
        "shots, amplification spread) is in the error bar, at the shot budget of "
        f"{shots:,} shots per estimate.",
        f"Target: within ±{target_mha:.4g} mHa of the exact energy in the basis, with probability "
        f"at least {confidence:g}.",
    ]


def _assess_content(result: Any, out: Path, prov: dict[str, Any]) -> ReportContent:
    written = write_assess_figures(result, out)
    ctx = result.context
    verdict = [result.verdict]
    assumptions = _common_assumptions(result.shots, result.target_mha, result.confidence)
    assumptions.append(
        f"{ctx.qubits} qubits ({ctx.encoding}), {ctx.ansatz} ansatz, device {ctx.device} patch "
        f"{list(ctx.patch)}; emulation {getattr(result, 'emulation_method', 'density_matrix')}."
    )
    cautions = [*getattr(ctx, "warnings", ()), result.caution]
    return ReportContent(
        title=f"assess: {result.study}",
        verdict=tuple(verdict),
        tables=(("Recipes at the shot budget", assess_rows(result)),),
        figures=tuple(p for p in written if p.suffix == ".png"),
        assumptions=tuple(assumptions),
        cautions=tuple(cautions),
        provenance=prov,
    )


def _sweep_content(result: Any, out: Path, prov: dict[str, Any]) -> ReportContent:
    written = write_sweep_outputs(result, out, provenance=prov)
    verdict = [c.sentence + "." for c in result.crossings]
    assumptions = _common_assumptions(result.shots_total, result.target_mha, result.confidence)
    assumptions.append(result.crossing_method[0].upper() + result.crossing_method[1:] + ".")
    assumptions.append(
        "Each point scales the device's own values of the knob's channel; the compiled circuit "
        "and measurement plan stay fixed."
    )
    return ReportContent(
        title=f"sweep: {result.study_name}, {result.knob_spec.phrase}",
        verdict=tuple(verdict),
        tables=(("Energy error at each knob value", sweep_rows(result)),),
        figures=tuple(p for p in written if p.suffix == ".png"),
        assumptions=tuple(assumptions),
        cautions=(*(n + "." for n in result.notes()), CAUTION),
        provenance=prov,
    )


def _budget_content(result: Any, out: Path, prov: dict[str, Any]) -> ReportContent:
    written = write_budget_outputs(result, out, provenance=prov)
    assumptions = _common_assumptions(result.shots_total, result.target_mha, 0.95)[:2]
    assumptions.append(
        "Each channel alone: every other channel set to zero; each channel removed: that channel "
        "set to zero (T1/T2 infinite for relaxation)."
    )
    return ReportContent(
        title=f"budget: {result.study_name}",
        verdict=(result.sentence + ".",),
        tables=(("Energy error by noise channel", budget_rows(result)),),
        figures=tuple(p for p in written if p.suffix == ".png"),
        assumptions=tuple(assumptions),
        cautions=(CAUTION,),
        provenance=prov,
    )


def _cell(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    return "" if value is None else str(value)


def _md_table(rows: Sequence[dict[str, Any]]) -> list[str]:
    if not rows:
        return ["(no rows)"]
    heads = list(dict.fromkeys(k for r in rows for k in r))
    out = ["| " + " | ".join(heads) + " |", "|" + "---|" * len(heads)]
    for r in rows:
        out.append("| " + " | ".join(_cell(r.get(h)).replace("|", "\\|") for h in heads) + " |")
    return out


def report_markdown(c: ReportContent) -> str:
    """The report as Markdown (figures by relative path)."""
    lines = [f"# {c.title}", "", "## Verdict", "", *c.verdict, ""]
    for title, rows in c.tables:
        lines += [f"## {title}", "", *_md_table(rows), ""]
    lines += ["## Figures", ""]
    lines += [f"![{p.stem}]({p.name})" for p in c.figures] + [""]
    lines += ["## Assumptions", "", *(f"- {a}" for a in c.assumptions), ""]
    lines += ["## Cautions", "", *(f"- {a}" for a in c.cautions), ""]
    lines += ["## Provenance", "", "```json", json.dumps(c.provenance, indent=2), "```", ""]
    return "\n".join(lines)


_STYLE = (
    "body{font-family:sans-serif;max-width:60em;margin:2em auto;padding:0 1em;color:#222}"
    "table{border-collapse:collapse;font-size:0.85em;margin:1em 0}"
    "th,td{border:1px solid #bbb;padding:0.2em 0.5em;text-align:right}"
    "th:first-child,td:first-child{text-align:left}"
    "img{max-width:100%;border:1px solid #ddd;margin:0.5em 0}"
    ".verdict{font-size:1.1em;font-weight:bold}pre{background:#f4f4f4;padding:0.5em}"
)


def _html_table(rows: Sequence[dict[str, Any]]) -> list[str]:
    if not rows:
        return ["<p>(no rows)</p>"]
    heads = list(dict.fromkeys(k for r in rows for k in r))
    out = ["<table>", "<tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in heads) + "</tr>"]
    for r in rows:
        cells = "".join(f"<td>{html.escape(_cell(r.get(h)))}</td>" for h in heads)
        out.append(f"<tr>{cells}</tr>")
    out.append("</table>")
    return out


def report_html(c: ReportContent) -> str:
    """The report as one self-contained HTML page (PNG figures embedded as data URIs)."""
    e = html.escape
    body = [f"<h1>{e(c.title)}</h1>", "<h2>Verdict</h2>"]
    body += [f'<p class="verdict">{e(v)}</p>' for v in c.verdict]
    for title, rows in c.tables:
        body += [f"<h2>{e(title)}</h2>", *_html_table(rows)]
    body.append("<h2>Figures</h2>")
    for p in c.figures:
        data = base64.b64encode(p.read_bytes()).decode("ascii")
        body.append(
            f'<figure><img src="data:image/png;base64,{data}" alt="{e(p.stem)}">'
            f"<figcaption>{e(p.name)} (also as SVG and PDF beside this page)</figcaption></figure>"
        )
    body += ["<h2>Assumptions</h2>", "<ul>", *(f"<li>{e(a)}</li>" for a in c.assumptions), "</ul>"]
    body += ["<h2>Cautions</h2>", "<ul>", *(f"<li>{e(a)}</li>" for a in c.cautions), "</ul>"]
    body += [
        '<h2 id="provenance">Provenance</h2>',
        f"<pre>{e(json.dumps(c.provenance, indent=2))}</pre>",
    ]
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f"<title>{e(c.title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
        + "\n".join(body)
        + "\n</body>\n</html>\n"
    )


def report_files(kind: str) -> tuple[str, ...]:
    """Names a report of ``kind`` may write (checked before the job runs)."""
    stems = {
        "assess": ("assess-bias", "assess-extrapolation", "assess-drift"),
        "budget": ("budget",),
    }
    figs = tuple(f"{s}.{x}" for s in stems.get(kind, ()) for x in FIGURE_FORMATS)
    return ("report.html", "report.md", f"{kind}.json", *figs)


def write_report(kind: str, result: Any, out_dir: str | Path, prov: dict[str, Any]) -> list[Path]:
    """The report of a finished ``kind`` job (assess, sweep, budget) into ``out_dir``; returns
    the paths written (figures, data, report.md, report.html)."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    if kind == "assess":
        content = _assess_content(result, out, prov)
        data = write_text_atomic(
            out / "assess.json",
            json.dumps(jsonable(with_provenance(result.to_json(), prov)), indent=2) + "\n",
        )
        extra = [data]
    elif kind == "sweep":
        content, extra = _sweep_content(result, out, prov), []
    elif kind == "budget":
        content, extra = _budget_content(result, out, prov), []
    else:
        raise ValueError(f"unknown report kind {kind!r}; allowed: {', '.join(REPORT_KINDS)}")
    md = write_text_atomic(out / "report.md", report_markdown(content))
    page = write_text_atomic(out / "report.html", report_html(content))
    del extra, md, page  # every file of the folder is the report's (a fresh staging folder)
    return sorted(p for p in out.iterdir() if p.is_file())
