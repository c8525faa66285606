"""The look of simloop's report figures: one style, used with ``with report_style():``.

Designed for a printed A4/Letter page and a grey-scale printer: figures are drawn at the size
the report shows them (so 8 pt type stays 8 pt), taps differ by line style and marker as well as
by colour (the palette steps in lightness, so the taps stay apart in grey), untrusted values are
hollow markers and dashed lines with a legend entry that says so, and there is no chart junk
(no top/right spines, a faint grid only where values are read off).

Nothing here selects a backend: figures are :class:`matplotlib.figure.Figure` objects rendered
by their own canvas (no pyplot state), so importing this module never calls
``matplotlib.use()``.
"""

from __future__ import annotations

import io
from contextlib import contextmanager

import matplotlib
from matplotlib.figure import Figure

__all__ = ["INK", "MUTED", "ACCENT", "WARN", "TAP_COLOURS", "RC", "figure", "report_style",
           "tap_style", "to_svg", "untrusted_style"]

#: Text and axes. Near-black prints cleanly on any printer.
INK = "#1b1b1b"
#: Secondary lines, grid, annotations.
MUTED = "#8a8a8a"
#: The tuner's range and other "available" spans.
ACCENT = "#2f6f4f"
#: Gaps and warnings: a red that prints as mid grey, always paired with hatching.
WARN = "#b2322b"
#: Tap colours. The first three step in CIE lightness L* = 25, 53, 68 (computed from sRGB), so
#: three taps stay apart when printed in grey; line styles and markers repeat the distinction
#: for every tap (the fourth and fifth, L* = 29 and 64, rely on them).
TAP_COLOURS = ("#1f3a68", "#c0661a", "#5fb0cf", "#6b2d5c", "#8aa63a")
_DASHES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)))
_MARKERS = ("o", "s", "^", "D", "v")

#: rcParams of the report style (8 pt base type at figure size = shown size).
RC = {
    "font.family": "DejaVu Sans",
    "font.size": 8.0,
    "axes.titlesize": 8.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 8.0,
    "axes.labelcolor": INK,
    "axes.edgecolor": INK,
    "axes.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.prop_cycle": matplotlib.cycler(color=list(TAP_COLOURS)),
    "grid.color": "#d0d0d0",
    "grid.linewidth": 0.4,
    "grid.linestyle": "-",
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "xtick.color": INK,
    "ytick.color": INK,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.major.size": 3.0,
    "ytick.major.size": 3.0,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "legend.handlelength": 2.4,
    "lines.linewidth": 1.3,
    "lines.markersize": 4.0,
    "hatch.linewidth": 0.6,
    "hatch.color": WARN,
    "text.color": INK,
    "svg.fonttype": "path",  # text as outlines: the SVG needs no font on the reader's machine
    "svg.hashsalt": "simloop",  # stable element ids, so the same study gives the same file
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
}


@contextmanager
def report_style():
    """Apply :data:`RC` for the figures made inside the ``with`` block (and only there)."""
    with matplotlib.rc_context(RC):
        yield


def figure(width_mm: float, height_mm: float) -> Figure:
    """A figure of the size the report shows it, with constrained layout. [mm]"""
    return Figure(figsize=(width_mm / 25.4, height_mm / 25.4), layout="constrained")


def tap_style(i: int) -> dict:
    """Line colour, dash and marker of tap ``i`` (0-based): distinct in colour and in grey."""
    return {"color": TAP_COLOURS[i % len(TAP_COLOURS)], "linestyle": _DASHES[i % len(_DASHES)],
            "marker": _MARKERS[i % len(_MARKERS)]}


def untrusted_style(i: int) -> dict:
    """Markers of an untrusted value of tap ``i``: hollow, thin edge in the tap's colour."""
    return {"marker": _MARKERS[i % len(_MARKERS)], "markerfacecolor": "white",
            "markeredgecolor": TAP_COLOURS[i % len(TAP_COLOURS)], "markeredgewidth": 0.8,
            "linestyle": "none"}


def to_svg(fig: Figure) -> str:
    """The figure as an SVG document (text outlined, no date, no external references)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return buf.getvalue()
