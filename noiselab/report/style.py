"""Figure styles: ``paper`` (the default look, for a document) and ``talk`` (larger type,
thicker lines and markers, somewhat larger figures, for slides).

The figure functions ask for their font sizes (points), line widths and marker sizes through
:func:`font`, :func:`line` and :func:`mark`, and for their size through :func:`size`; these
scale by the style in effect, which :func:`figure_style` sets for the duration of a ``with``
block (with matplotlib's own defaults scaled alike, for what the figures do not size
themselves). Outside any block the style is ``paper``, whose scales are 1: the figures look as
they always did.
"""

from __future__ import annotations

import contextlib
import dataclasses
from collections.abc import Iterator
from contextvars import ContextVar
from typing import Any

import matplotlib

from noiselab.common.errors import arg, input_error


@dataclasses.dataclass(frozen=True)
class FigureStyle:
    """Scale factors against the paper look: type, lines (and markers), figure size."""

    name: str
    font_scale: float
    line_scale: float
    size_scale: float

    def rc(self) -> dict[str, Any]:
        """matplotlib defaults scaled by this style (empty for paper: its defaults as they are)."""
        if self.name == "paper":
            return {}
        base = matplotlib.rcParamsDefault
        out: dict[str, Any] = {"font.size": base["font.size"] * self.font_scale}
        for key in (
            "lines.linewidth",
            "axes.linewidth",
            "patch.linewidth",
            "grid.linewidth",
            "xtick.major.width",
            "ytick.major.width",
            "lines.markeredgewidth",
        ):
            out[key] = base[key] * self.line_scale
        for key in ("lines.markersize", "xtick.major.size", "ytick.major.size"):
            out[key] = base[key] * self.line_scale
        return out  # fmt: skip


STYLES: dict[str, FigureStyle] = {
    "paper": FigureStyle("paper", 1.0, 1.0, 1.0),
    # common practice, no source: slide type about 1.5x a paper figure's, lines thicker still
    "talk": FigureStyle("talk", 1.5, 1.6, 1.3),
}
DEFAULT_STYLE = "paper"
_CURRENT: ContextVar[FigureStyle] = ContextVar("figure_style", default=STYLES[DEFAULT_STYLE])


def get_style(name: str, option: str = arg("style")) -> FigureStyle:
    """The style called ``name``; a one-line InputError naming ``option`` otherwise (the
    argument ``style``; the command line shows ``--style``)."""
    if name not in STYLES:
        raise input_error(None, option, f"unknown style {name!r}", ", ".join(STYLES))
    return STYLES[name]


def current_style() -> FigureStyle:
    """The style in effect (paper outside any :func:`figure_style` block)."""
    return _CURRENT.get()


@contextlib.contextmanager
def figure_style(name: str | None) -> Iterator[FigureStyle]:
    """Draw and save figures in style ``name`` (None: paper) inside the block."""
    style = get_style(name or DEFAULT_STYLE)
    token = _CURRENT.set(style)
    try:
        with matplotlib.rc_context(style.rc()):
            yield style
    finally:
        _CURRENT.reset(token)


def font(points: float) -> float:
    """A font size (points) in the current style."""
    return points * current_style().font_scale


def line(width: float) -> float:
    """A line width (points) in the current style."""
    return width * current_style().line_scale


def mark(size: float) -> float:
    """A marker or cap size (points) in the current style."""
    return size * current_style().line_scale


def size(width_in: float, height_in: float) -> tuple[float, float]:
    """A figure size (inches) in the current style."""
    s = current_style().size_scale
    return width_in * s, height_in * s
