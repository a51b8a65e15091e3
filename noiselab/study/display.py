"""How job results show in a notebook: a one-line ``repr``, an HTML table (``_repr_html_``),
``to_records()`` (plain dicts, one per table row) and ``to_frame()`` when pandas is installed.

A result class derives from :class:`NotebookDisplay`, is declared with
``@dataclass(repr=False)`` (so that the dataclass does not write its own, very long repr) and
defines ``summary()`` and ``to_records()``.
"""

from __future__ import annotations

import html
from typing import Any

#: Rows shown by ``_repr_html_`` (``to_records()`` has them all).
HTML_ROWS = 25


def _cell(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.6g}"
    return "" if value is None else str(value)


class NotebookDisplay:
    """Short repr, rich notebook display and records of a job result."""

    def summary(self) -> str:  # pragma: no cover - every result defines it
        raise NotImplementedError

    def to_records(self) -> list[dict[str, Any]]:  # pragma: no cover - every result defines it
        raise NotImplementedError

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.summary()}>"

    def to_frame(self) -> Any:
        """``to_records()`` as a pandas DataFrame (ImportError naming pandas when absent)."""
        try:
            import pandas as pd  # optional: only for this method
        except ImportError:
            raise ImportError(
                f"{type(self).__name__}.to_frame() needs pandas (pip install pandas); "
                "to_records() gives the same rows as plain dicts"
            ) from None
        return pd.DataFrame.from_records(self.to_records())

    def _repr_html_(self) -> str:
        rows = self.to_records()
        heads = list(dict.fromkeys(k for r in rows for k in r))
        out = [f"<p><b>{html.escape(type(self).__name__)}</b> {html.escape(self.summary())}</p>"]
        if rows:
            out.append("<table>")
            out.append("<tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in heads) + "</tr>")
            for r in rows[:HTML_ROWS]:
                cells = "".join(f"<td>{html.escape(_cell(r.get(h)))}</td>" for h in heads)
                out.append(f"<tr>{cells}</tr>")
            out.append("</table>")
            if len(rows) > HTML_ROWS:
                out.append(f"<p>({len(rows) - HTML_ROWS} more rows: to_records())</p>")
        return "".join(out)
