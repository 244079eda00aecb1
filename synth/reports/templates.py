"""Cutting templates: each bar's side profile at true size, tiled over printable pages.

One PDF (matplotlib's ``PdfPages``) with the paper in landscape.  Every page holds
one strip of one bar at 1:1 in both directions (a millimetre on the bar is a
millimetre on the paper, thickness included): the flat top, the undercut, the end
lines, the cord holes with their distance from the left end, and a tick at every
caliper station of the build sheet (every 10 % of the length) with the thickness
there.  A bar longer than the printable width is cut into strips that overlap by
:data:`OVERLAP_MM`; the same alignment marks are drawn in each overlap on both
pages, so the printed strips are laid over one another mark on mark.  Every page
carries the page label ("F3, 2 of 3"), the note, length and workshop, a 100 mm
check bar and the line :data:`PRINT_AT_SIZE`; the first page carries the
workshop safety line.

The drawing has one axes covering the printable area, with its limits in
millimetres equal to its size on the paper (``1 mm = 72 / 25.4 pt``), so any
point drawn at (x, y) mm lands x mm from the strip's left edge on the paper.
"""

from __future__ import annotations

import io as _bytes_io
import math
import textwrap
from dataclasses import dataclass

import numpy as np

from synth.errors import ConfigError
from synth.physics.geometry import BarGeometry
from synth.reports.cutlist import STATION_FRACTIONS, CutRow

MM_PER_INCH = 25.4
"""Millimetres per inch, exact by definition (international yard and pound, 1959)."""

PAPER_MM: dict[str, tuple[float, float]] = {
    "a4": (297.0, 210.0),       # ISO 216 A4, landscape (from memory)
    "letter": (279.4, 215.9),   # US Letter 8.5 x 11 in (ANSI/ASME Y14.1, from memory), landscape
}
"""Sheet sizes, width x height in mm, landscape."""

MARGIN_MM = 12.0
"""Blank border on every side: desktop printers leave a few millimetres unprinted
(common practice, no source); 12 mm keeps the drawing clear of any of them."""

OVERLAP_MM = 20.0
"""Length of bar drawn on both of two neighbouring strips (holds the alignment marks)."""

END_CLEARANCE_MM = 6.0
"""Paper left beyond each end of the bar, so the end lines are not at the strip's edge."""

CHECK_BAR_MM = 100.0
"""Length of the scale check drawn on every page."""

CHECK_BAR_HEIGHT_MM = 4.0

PRINT_AT_SIZE = "Print at 100 % / actual size; measure the check bar before cutting."

# Stroke colours of the marks, distinct so that each kind can be told apart on the
# page (and in the PDF's drawing operators).
OUTLINE_COLOUR = (0.0, 0.0, 0.0)
CORD_COLOUR = (0.0, 0.0, 0.75)
STATION_COLOUR = (0.35, 0.35, 0.35)
ALIGN_COLOUR = (0.75, 0.0, 0.0)

_BAR_BASE_MM = 70.0   # height of the bar's bottom face above the printable area's foot
_TEXT_PT = 8.0


@dataclass(frozen=True)
class TemplatePage:
    """One printed strip of one bar.

    ``start_mm`` is the bar coordinate (mm from its left end) at the left edge of
    the printable area; the strip shows ``start_mm`` to ``start_mm + width_mm``.
    """

    note: str
    index: int          # 1-based
    count: int
    start_mm: float
    width_mm: float

    @property
    def label(self) -> str:
        """The page label, e.g. ``F3, 2 of 3``."""
        return f"{self.note}, {self.index} of {self.count}"


def printable_mm(paper: str) -> tuple[float, float]:
    """Return the printable width and height of a sheet, mm (landscape, inside the margins)."""
    if paper not in PAPER_MM:
        raise ConfigError(f"= {paper!r}: must be one of " + ", ".join(PAPER_MM), source="--paper")
    w, h = PAPER_MM[paper]
    return w - 2 * MARGIN_MM, h - 2 * MARGIN_MM


def plan_pages(note: str, length_mm: float, paper: str) -> list[TemplatePage]:
    """Cut one bar's drawing into strips that fit the printable width.

    With W the printable width and s = W - :data:`OVERLAP_MM` the step between
    strips, a bar that needs ``L + 2 c`` of paper (c = :data:`END_CLEARANCE_MM`)
    takes ``1 + ceil((L + 2 c - W) / s)`` strips, one if it fits.
    """
    width, _ = printable_mm(paper)
    need = length_mm + 2 * END_CLEARANCE_MM
    if need <= width:   # one page, the bar centred on it
        return [TemplatePage(note, 1, 1, -(width - length_mm) / 2, width)]
    step = width - OVERLAP_MM
    count = 1 + math.ceil((need - width) / step)
    return [TemplatePage(note, k + 1, count, -END_CLEARANCE_MM + k * step, width)
            for k in range(count)]


def alignment_marks_mm(pages: list[TemplatePage]) -> list[float]:
    """Bar coordinates of the alignment marks: two in each overlap of neighbouring strips."""
    marks = []
    for a, b in zip(pages, pages[1:], strict=False):
        lo, hi = b.start_mm, a.start_mm + a.width_mm
        marks += [lo + 0.25 * (hi - lo), lo + 0.75 * (hi - lo)]
    return marks


def templates_pdf(rows: list[CutRow], geometries: dict[str, BarGeometry], *, paper: str = "a4",
                  title: str = "", workshop: str = "", safety: str = "") -> bytes:
    """Return the cutting templates of the build sheet's bars as PDF bytes.

    Parameters
    ----------
    rows : list of CutRow
        The build sheet (cord holes, stations, length), in page order.
    geometries : dict of str to BarGeometry
        Each row's bar, by note (the profile drawn).
    paper : {"a4", "letter"}
        Sheet size, printed in landscape.
    title, workshop : str
        The instrument's and the workshop's names, printed on every page.
    safety : str
        Printed on the first page.

    Returns
    -------
    bytes
        A PDF of ``sum(len(plan_pages(...)))`` pages.
    """
    from matplotlib.backends.backend_pdf import PdfPages

    from synth.reports.plots import pyplot

    plt = pyplot()
    printable_mm(paper)   # a bad paper name stops here
    buf = _bytes_io.BytesIO()
    first = True
    with PdfPages(buf, metadata={"Title": f"{title} cutting templates".strip(),
                                 "Subject": PRINT_AT_SIZE, "CreationDate": None}) as pdf:
        for row in rows:
            geometry = geometries[row.note]
            pages = plan_pages(row.note, row.length_m * 1e3, paper)
            marks = alignment_marks_mm(pages)
            for page in pages:
                fig = page_figure(row, geometry, page, marks, paper=paper, title=title,
                                  workshop=workshop, safety=safety if first else "")
                pdf.savefig(fig)
                plt.close(fig)
                first = False
    return buf.getvalue()


def page_figure(row: CutRow, geometry: BarGeometry, page: TemplatePage, marks: list[float], *,
                paper: str, title: str = "", workshop: str = "", safety: str = ""):
    """Return the matplotlib figure of one strip: the sheet's size, one axes at 1:1 in mm."""
    from synth.reports.plots import pyplot

    paper_w, paper_h = PAPER_MM[paper]
    width, height = printable_mm(paper)
    fig = pyplot().figure(figsize=(paper_w / MM_PER_INCH, paper_h / MM_PER_INCH))
    ax = fig.add_axes((MARGIN_MM / paper_w, MARGIN_MM / paper_h,
                       width / paper_w, height / paper_h))
    ax.set_xlim(page.start_mm, page.start_mm + width)
    ax.set_ylim(0.0, height)
    ax.set_axis_off()
    _draw_page(ax, row, geometry, page, marks, title=title, workshop=workshop, safety=safety)
    return fig


def _draw_page(ax, row: CutRow, geometry: BarGeometry, page: TemplatePage,
               marks: list[float], *, title: str, workshop: str, safety: str) -> None:
    """Draw one strip: everything at (bar mm, page mm) in the axes' data coordinates."""
    x0, x1 = page.start_mm, page.start_mm + page.width_mm
    base = _BAR_BASE_MM
    length = row.length_m * 1e3
    top = row.thickness_m * 1e3
    text = {"fontsize": _TEXT_PT, "color": "0.1"}

    # header, left-aligned on the strip
    ax.text(x0, 182.0, page.label, fontsize=16, weight="bold", va="top")
    ax.text(x0 + 45.0, 182.0,
            f"length {length:.1f} mm   width {row.width_m * 1e3:.1f} mm   blank "
            f"{top:.2f} mm   thinnest {row.thinnest_m * 1e3:.2f} mm   target "
            f"{row.target_hz:.2f} Hz", va="top", **text)
    ax.text(x0 + 45.0, 176.0, "  ".join(s for s in (title, workshop) if s), va="top", **text)
    ax.text(x0, 166.0, PRINT_AT_SIZE, fontsize=11, weight="bold", va="top")
    ax.text(x0, 159.0, "Side view at 1:1; drawn as seen with the bar's left end on the left. "
            + ("Lay the strips over one another with the red marks on top of each other."
               if page.count > 1 else ""), va="top", **text)

    # the bar: flat top, undercut below, end lines
    xs = np.unique(np.concatenate([np.linspace(0.0, geometry.length_m, 1200),
                                   geometry.breakpoints()]))
    h = geometry.thickness_at(xs) * 1e3
    xs = xs * 1e3
    bottom = base + top - h
    ax.fill_between(xs, bottom, base + top, color="0.88", lw=0)
    ax.plot(xs, bottom, color=OUTLINE_COLOUR, lw=0.6)
    ax.plot([0.0, length], [base + top, base + top], color=OUTLINE_COLOUR, lw=0.6)
    for x in (0.0, length):
        ax.plot([x, x], [base, base + top], color=OUTLINE_COLOUR, lw=0.6)

    # cord holes: a line through the bar and a circle at half the blank's thickness
    for i, xc in enumerate(row.cord_holes_m):
        x = xc * 1e3
        ax.plot([x, x], [base - 3.0, base + top + 14.0], color=CORD_COLOUR, lw=0.4)
        ax.plot([x], [base + 0.5 * top], ls="none", marker="o", ms=5, mfc="none",
                mec=CORD_COLOUR, mew=0.6)
        if not x0 <= x <= x1:
            continue
        right = x > x1 - 30.0 or (i > 0 and x >= x0 + 30.0)   # the label towards the middle
        ax.text(x - 1.0 if right else x + 1.0, base + top + 13.0,
                f"cord hole {x:.1f} mm\nfrom left end", va="top",
                ha="right" if right else "left", fontsize=7, color=CORD_COLOUR)

    # caliper stations: ticks below the bar with the thickness there
    for frac, t in zip(STATION_FRACTIONS, row.station_thickness_m, strict=True):
        x = frac * length
        ax.plot([x, x], [base - 2.0, base - 9.0], color=STATION_COLOUR, lw=0.5)
        if not x0 + 5.0 <= x <= x1 - 5.0:
            continue
        ax.text(x, base - 10.0, f"{frac * 100:.0f} %\n{t * 1e3:.2f}", ha="center", va="top",
                fontsize=6.5, color="0.2")
    ax.text(x0, base - 22.0, "below each station tick: % of the length from the left end, "
            "thickness there in mm", va="top", fontsize=6.5, color="0.2")

    # alignment marks in the overlaps (the same bar coordinate on both strips)
    for k, x in enumerate(marks):
        if x0 <= x <= x1:
            ax.plot([x, x], [base - 28.0, base + top + 24.0], color=ALIGN_COLOUR, lw=0.4)
            ax.plot([x - 4.0, x + 4.0], [base + top + 20.0] * 2, color=ALIGN_COLOUR, lw=0.4)
            ax.plot([x - 4.0, x + 4.0], [base - 24.0] * 2, color=ALIGN_COLOUR, lw=0.4)
            ax.text(x, base + top + 25.0, chr(ord("A") + k), fontsize=9, ha="center",
                    color=ALIGN_COLOUR)

    # 100 mm check bar, at the foot of every strip
    y = 18.0
    ax.add_patch(_rectangle(x0, y, CHECK_BAR_MM, CHECK_BAR_HEIGHT_MM))
    for k in range(11):
        ax.plot([x0 + 10.0 * k] * 2, [y - 1.5, y], color=OUTLINE_COLOUR, lw=0.4)
    ax.text(x0 + CHECK_BAR_MM + 3.0, y + 0.5 * CHECK_BAR_HEIGHT_MM,
            "100 mm check bar: measure it; it must read 100 mm", va="center", **text)
    if safety:
        ax.text(x0, 9.0, textwrap.fill(safety, 150), va="top", fontsize=7, color="0.1")


def _rectangle(x: float, y: float, w: float, h: float):
    """Return a filled black rectangle, mm."""
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), w, h, facecolor="black", edgecolor="none")
