"""Plain-text tables for reports (the command line prints them)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any


def format_table(headers: Sequence[str], rows: Iterable[Sequence[Any]],
                 align: str | None = None, title: str | None = None) -> str:
    """Lay out rows as a plain-text table.

    Parameters
    ----------
    headers : sequence of str
        Column titles (units in the title, e.g. ``"freq Hz"``).
    rows : iterable of sequences
        Cells, already formatted as strings or numbers.
    align : str, optional
        One letter per column, ``l`` or ``r``; numbers default to right.
    title : str, optional
        A line printed above the table.
    """
    text_rows = [["" if c is None else str(c) for c in r] for r in rows]
    n = len(headers)
    widths = [len(h) for h in headers]
    for r in text_rows:
        for i, c in enumerate(r[:n]):
            widths[i] = max(widths[i], len(c))
    if align is None:
        align = "l" + "r" * (n - 1)

    def line(cells):
        out = []
        for i, c in enumerate(cells):
            out.append(c.ljust(widths[i]) if align[i] == "l" else c.rjust(widths[i]))
        return "  ".join(out).rstrip()

    parts = []
    if title:
        parts.append(title)
    parts.append(line(list(headers)))
    parts.append("  ".join("-" * w for w in widths))
    parts.extend(line(r + [""] * (n - len(r))) for r in text_rows)
    return "\n".join(parts)
