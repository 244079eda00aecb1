"""`barwright cutlist --templates` and the profile drawings: true scale, labels, safety.

The templates are read back from the PDF's own bytes, as a printer would: the page
size from each page's MediaBox and the drawing from its content stream (the path
operators m, l, c and re, in PDF points).  A point is 1/72 inch (ISO 32000-1:2008
section 8.3.2.3, the default user space unit; section number from memory) and an
inch 25.4 mm exactly (the international yard and pound agreement of 1959), so a
drawing at 1:1 puts 72 / 25.4 pt on the page for every millimetre of bar.  ISO 216
gives A4 as 210 x 297 mm; US Letter is 8.5 x 11 in (ANSI/ASME Y14.1), i.e. 612 x 792
pt exactly (both sizes from memory).

Bounds: matplotlib's PDF writer prints path coordinates with 6 decimals (at most
5e-7 pt off each) and the page size with 10; the transform from mm to points is a
few float64 operations on numbers below 1e3 (error below 1e-12 pt).  A distance
between two drawn points is therefore good to 1e-6 pt (3.5e-7 mm); a length
put together over n pages, laid over one another mark on mark, adds two rounded
coordinates per join: 2 n x 5e-7 pt.
"""

from __future__ import annotations

import math
import re
import shutil
import tomllib
import zlib

import numpy as np
import pytest
from e2e_common import DEMO, run, run_json

from synth.reports.templates import (
    ALIGN_COLOUR,
    CORD_COLOUR,
    END_CLEARANCE_MM,
    MARGIN_MM,
    OUTLINE_COLOUR,
    OVERLAP_MM,
    STATION_COLOUR,
)

RAW = tomllib.loads(DEMO.read_text(encoding="utf-8"))
NOTES = list(RAW["bars"])
PT_PER_MM = 72.0 / 25.4          # PDF user space unit 1/72 in; 1 in = 25.4 mm exactly
ROUND_PT = 5e-7                  # half a unit of the 6 decimals of a path coordinate
A4_PT = (297.0 * PT_PER_MM, 210.0 * PT_PER_MM)   # ISO 216, landscape
LETTER_PT = (792.0, 612.0)       # 11 x 8.5 in (ANSI/ASME Y14.1), landscape
PRINT_LINE = "Print at 100 % / actual size; measure the check bar before cutting."


# --------------------------------------------------------------------------------------
# a small reader of the PDF's pages: page size, stroked and filled paths, text
# --------------------------------------------------------------------------------------

_TOKEN = re.compile(rb"\((?:\\.|[^\\)])*\)|/[^\s/\[\]()<>]+|[\[\]]|[-+]?(?:\d+\.?\d*|\.\d+)"
                    rb"|[A-Za-z*'\"]+")


def _unescape(s: bytes) -> str:
    s = re.sub(rb"\\([0-7]{1,3})", lambda m: bytes([int(m.group(1), 8)]), s[1:-1])
    return re.sub(rb"\\(.)", rb"\1", s).decode("latin-1")


def _page_contents(data: bytes) -> list[dict]:
    """Each page in order: MediaBox (pt), strokes and fills (colour, subpaths), texts, clip."""
    objects = {int(m.group(1)): m.group(2)
               for m in re.finditer(rb"(\d+) 0 obj(.*?)endobj", data, re.S)}
    kids = next(re.search(rb"/Kids\s*\[([^\]]*)\]", body).group(1)
                for body in objects.values() if re.search(rb"/Type\s*/Pages\b", body))
    pages = []
    for ref in re.findall(rb"(\d+) 0 R", kids):
        body = objects[int(ref)]
        box = [float(v) for v in re.search(rb"/MediaBox\s*\[([^\]]*)\]", body).group(1).split()]
        stream = objects[int(re.search(rb"/Contents (\d+) 0 R", body).group(1))]
        start = stream.index(b"stream") + len(b"stream")
        start += 2 if stream[start:start + 2] == b"\r\n" else 1   # one end of line
        # the end of the compressed data is its own (what follows is unused_data)
        raw = zlib.decompressobj().decompress(stream[start:stream.rindex(b"endstream")])
        pages.append({"box": box, **_interpret(raw)})
    return pages


def _interpret(content: bytes) -> dict:
    """Run the path, colour and text operators of one content stream."""
    stroke, fill, saved = (0.0, 0.0, 0.0), (0.0, 0.0, 0.0), []
    args: list = []
    path: list[list[tuple[float, float]]] = []
    strokes, fills, texts, clips, line = [], [], [], [], []
    for tok in _TOKEN.findall(content):
        if tok[:1] == b"(":
            line.append(_unescape(tok))
            continue
        if re.fullmatch(rb"[-+]?(?:\d+\.?\d*|\.\d+)", tok):
            args.append(float(tok))
            continue
        if tok[:1] in (b"/", b"[", b"]"):
            continue
        op = tok.decode()
        if op == "q":
            saved.append((stroke, fill))
        elif op == "Q":
            stroke, fill = saved.pop()
        elif op == "RG":
            stroke = tuple(args[-3:])
        elif op == "G":
            stroke = (args[-1],) * 3
        elif op == "rg":
            fill = tuple(args[-3:])
        elif op == "g":
            fill = (args[-1],) * 3
        elif op == "m":
            path.append([tuple(args[-2:])])
        elif op in ("l", "c"):
            path[-1].append(tuple(args[-2:]))
        elif op == "re":
            x, y, w, h = args[-4:]
            path.append([(x, y), (x + w, y), (x + w, y + h), (x, y + h)])
        elif op in ("S", "s"):
            strokes += [(stroke, p) for p in path]
            path = []
        elif op in ("f", "F", "f*"):
            fills += [(fill, p) for p in path]
            path = []
        elif op in ("B", "B*", "b", "b*"):
            strokes += [(stroke, p) for p in path]
            fills += [(fill, p) for p in path]
            path = []
        elif op in ("W", "W*"):
            clips.append(path[-1])
        elif op == "n":
            path = []
        elif op == "ET":
            texts.append("".join(line))
            line = []
        args = [] if op not in ("h",) else args
    return {"strokes": strokes, "fills": fills, "texts": texts, "clips": clips}


def _same(a, b) -> bool:
    return all(abs(x - y) < 1e-9 for x, y in zip(a, b, strict=True))


def _verticals(page: dict, colour, *, min_pt: float = 0.0) -> list[tuple[float, float, float]]:
    """Visible two-point vertical strokes of one colour: (x, y low, y high), pt."""
    x0 = min(p[0] for p in page["clips"][0])
    x1 = max(p[0] for p in page["clips"][0])
    out = []
    for c, p in page["strokes"]:
        if _same(c, colour) and len(p) == 2 and p[0][0] == p[1][0] and x0 <= p[0][0] <= x1:
            lo, hi = sorted((p[0][1], p[1][1]))
            if hi - lo >= min_pt:
                out.append((p[0][0], lo, hi))
    return out


def _labels(pages: list[dict]) -> list[tuple[str, int, int]]:
    """The page label of each page: (note, index, count)."""
    out = []
    for page in pages:
        found = [re.fullmatch(r"([A-G]#?\d), (\d+) of (\d+)", t) for t in page["texts"]]
        hits = [(m.group(1), int(m.group(2)), int(m.group(3))) for m in found if m]
        assert len(hits) == 1, page["texts"][:5]
        out.append(hits[0])
    return out


# --------------------------------------------------------------------------------------
# the templates of the demo preset on A4
# --------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def templates(tmp_path_factory):
    """Run the build sheet with templates once: (JSON, pages, folder)."""
    folder = tmp_path_factory.mktemp("templates")
    data = run_json("cutlist", DEMO, "--out", folder, "--templates")
    pdf = folder / "templates.pdf"
    assert data["pdf"] == str(pdf)
    return data, _page_contents(pdf.read_bytes()), folder


def _strips(pages_mm: float, length_mm: float) -> int:
    """Pages a bar of length_mm takes on a sheet pages_mm wide (the layout's rule)."""
    width = pages_mm - 2 * MARGIN_MM
    need = length_mm + 2 * END_CLEARANCE_MM
    return 1 if need <= width else 1 + math.ceil((need - width) / (width - OVERLAP_MM))


def test_page_size_is_a4_landscape(templates) -> None:
    """Every MediaBox is 297 x 210 mm in points (ISO 216), to the 10 printed decimals."""
    _, pages, _ = templates
    for page in pages:
        x0, y0, x1, y1 = page["box"]
        assert (x0, y0) == (0.0, 0.0)
        assert abs(x1 - A4_PT[0]) <= 1e-9 and abs(y1 - A4_PT[1]) <= 1e-9, page["box"]


def test_every_bar_tiled_and_labelled(templates) -> None:
    """Bars in keyboard order, "NOTE, k of n" on each page, n from the printable width.

    Demo bars run from 108 to 392 mm; 273 mm fit across A4 inside 12 mm margins,
    so the low bars take two pages and the rest one.
    """
    _, pages, _ = templates
    labels = _labels(pages)
    expected = []
    for note, bar in RAW["bars"].items():
        n = _strips(297.0, bar["length_m"] * 1e3)
        expected += [(note, k, n) for k in range(1, n + 1)]
    assert labels == expected
    assert any(n > 1 for _, _, n in labels) and any(n == 1 for _, _, n in labels)


def test_check_bar_measures_100_mm_on_every_page(templates) -> None:
    """A filled black rectangle 100 mm x 4 mm on each page, to 1e-6 pt."""
    _, pages, _ = templates
    for page in pages:
        sizes = []
        for colour, p in page["fills"]:
            xs, ys = [q[0] for q in p], [q[1] for q in p]
            if _same(colour, (0.0, 0.0, 0.0)) and len(set(zip(xs, ys, strict=True))) == 4:
                sizes.append((max(xs) - min(xs), max(ys) - min(ys)))
        assert any(abs(w - 100.0 * PT_PER_MM) <= 2 * ROUND_PT
                   and abs(h - 4.0 * PT_PER_MM) <= 2 * ROUND_PT for w, h in sizes), sizes
        assert PRINT_LINE in page["texts"]


def test_bars_put_together_have_their_length_holes_and_stations(templates) -> None:
    """Lay each bar's pages over one another at the alignment marks and measure it.

    Page 1's left end line is the origin; every later page is shifted so that its
    alignment marks fall on the previous page's (both marks of a join must give
    the same shift).  Then the right end line lies the preset's length away, the
    cord holes at the mode-1 nodes the build sheet gives (JSON, unrounded) and the
    station ticks at every 10 % of the length; the end lines are the blank's
    thickness tall (the thickness is drawn 1:1 too).  Bound: 2 n x 5e-7 pt for a
    bar over n pages (module docstring).
    """
    data, pages, _ = templates
    records = {r["note"]: r for r in data["bars"]}
    by_note: dict[str, list[dict]] = {}
    for page, (note, _, _) in zip(pages, _labels(pages), strict=True):
        by_note.setdefault(note, []).append(page)
    for note, bar in RAW["bars"].items():
        strip = by_note[note]
        n = len(strip)
        tol_pt = 2 * n * ROUND_PT
        shift, ends, holes, ticks, previous = 0.0, [], [], [], []
        for k, page in enumerate(strip):
            marks = sorted(x for x, lo, hi in _verticals(page, ALIGN_COLOUR))
            if k > 0:   # this page's first two marks on the previous page's last two
                shifts = [a - b for a, b in zip(previous[-2:], marks[:2], strict=True)]
                assert len(shifts) == 2 and abs(shifts[0] - shifts[1]) <= 4 * ROUND_PT, shifts
                shift += shifts[0]
            previous = marks
            thickness_pt = bar["thickness_m"] * 1e3 * PT_PER_MM
            for x, lo, hi in _verticals(page, OUTLINE_COLOUR, min_pt=3.0 * PT_PER_MM):
                assert abs((hi - lo) - thickness_pt) <= 2 * ROUND_PT, (note, hi - lo)
                ends.append(x + shift)
            holes += [x + shift for x, _, _ in _verticals(page, CORD_COLOUR)]
            ticks += [x + shift for x, _, _ in _verticals(page, STATION_COLOUR)]
        ends = [x for i, x in enumerate(sorted(ends))   # an end seen on two pages counts once
                if i == 0 or x - sorted(ends)[i - 1] > 1.0]
        assert len(ends) == 2, (note, ends)
        length_mm = bar["length_m"] * 1e3
        assert abs((ends[1] - ends[0]) - length_mm * PT_PER_MM) <= tol_pt, note
        for want in records[note]["cord_holes_m"]:
            assert min(abs(x - ends[0] - want * 1e3 * PT_PER_MM) for x in holes) <= tol_pt
        for frac in np.arange(11) / 10:
            assert min(abs(x - ends[0] - frac * length_mm * PT_PER_MM) for x in ticks) <= tol_pt


def test_pages_name_the_bar_and_the_workshop(templates) -> None:
    """Every page names its note, length (to 0.1 mm) and the preset's workshop."""
    _, pages, _ = templates
    for page, (note, _, _) in zip(pages, _labels(pages), strict=True):
        text = " ".join(page["texts"])
        assert f"length {RAW['bars'][note]['length_m'] * 1e3:.1f} mm" in text
        assert RAW["workshop"] in text


def test_safety_on_the_first_page_and_in_the_summary(templates) -> None:
    """The first page and the printed summary carry the workshop safety line.

    What it must name (common practice, no source): eye and hearing protection,
    clamping, dust extraction for aluminium and its fire risk, local codes and the
    machine maker's instructions.
    """
    _, pages, folder = templates
    first = " ".join(pages[0]["texts"])
    for needle in ("eye, face and hearing protection", "clamp the work",
                   "dust extraction for aluminium", "can burn", "local codes",
                   "machine maker's instructions"):
        assert needle in first
    assert "dust extraction" not in " ".join(" ".join(p["texts"]) for p in pages[1:])
    # the summary printed by the same command (a fresh folder; JSON mode prints no table)
    out = folder / "again"
    r = run("cutlist", DEMO, "--out", out, "--templates", "--paper", "letter")
    assert r.exit_code == 0, r.stderr
    assert "dust extraction for aluminium" in r.stdout and "machine maker's" in r.stdout
    assert "templates.pdf" in r.stdout and PRINT_LINE in r.stdout
    letter = _page_contents((out / "templates.pdf").read_bytes())
    for page in letter:   # 11 x 8.5 in exactly
        assert abs(page["box"][2] - LETTER_PT[0]) <= 1e-9
        assert abs(page["box"][3] - LETTER_PT[1]) <= 1e-9
    expected = sum(_strips(279.4, b["length_m"] * 1e3) for b in RAW["bars"].values())
    assert len(letter) == expected


def test_templates_never_overwritten_without_force(templates, tmp_path) -> None:
    """An existing templates.pdf stops the run before anything is written (exit 2, one line)."""
    _, _, folder = templates
    shutil.copy(folder / "templates.pdf", tmp_path / "templates.pdf")
    before = (tmp_path / "templates.pdf").read_bytes()
    r = run("cutlist", DEMO, "--out", tmp_path, "--templates")
    assert r.exit_code == 2
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "templates.pdf" in lines[0] and "--force" in lines[0], lines
    assert (tmp_path / "templates.pdf").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["templates.pdf"]


def test_unknown_paper_is_refused(tmp_path) -> None:
    """`--paper a3`: one line naming the allowed sizes, exit 2, nothing written."""
    r = run("cutlist", DEMO, "--out", tmp_path / "o", "--templates", "--paper", "a3")
    assert r.exit_code == 2
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "--paper" in lines[0] and "a4, letter" in lines[0], lines
    assert not (tmp_path / "o").exists()


# --------------------------------------------------------------------------------------
# profiles.png: millimetres, labels, the stated exaggeration
# --------------------------------------------------------------------------------------


def test_profile_sheet_in_millimetres_with_labels() -> None:
    """Each panel states length, thinnest point and cord holes; the axes are in mm.

    Length from the preset, thinnest point from the power-law arch h0 - depth
    (geometry.py's docstring; the arch is centred, so its deepest point is at the
    middle), cord holes symmetric about the middle (printed to 0.1 mm: the two
    add up to the length within 0.1 mm + the length's own 0.05).  The figure's
    title states the thickness exaggeration, measured here from the axes' size in
    inches and their limits in mm (the title rounds it to a whole number).
    """
    from synth.reports.cutlist import cut_rows
    from synth.reports.plots import profile_sheet_figure, pyplot
    from synth.settings.instrument import load_instrument

    inst = load_instrument(DEMO)
    rows = cut_rows(inst, workers=1)
    fig = profile_sheet_figure([(r.note, inst.bar(r.note), r.cord_holes_m) for r in rows],
                               title="demo")
    try:
        fig.canvas.draw()
        drawn = [ax for ax in fig.axes if ax.axison]
        assert len(drawn) == len(NOTES)
        for ax, (note, bar) in zip(drawn, RAW["bars"].items(), strict=True):
            title = ax.get_title(loc="left")
            m = re.fullmatch(r"(\S+): length ([\d.]+) mm, thinnest ([\d.]+) mm\n"
                             r"cord holes ([\d.]+) and ([\d.]+) mm from left end", title)
            assert m and m.group(1) == note, title
            assert float(m.group(2)) == pytest.approx(bar["length_m"] * 1e3, abs=0.05)
            thinnest = (bar["thickness_m"] - bar["undercut"]["depth_m"]) * 1e3
            assert float(m.group(3)) == pytest.approx(thinnest, abs=0.005)
            assert float(m.group(4)) + float(m.group(5)) == pytest.approx(
                bar["length_m"] * 1e3, abs=0.15)
            assert min(t.get_fontsize() for t in ax.get_xticklabels()) >= 7
        assert {ax.get_ylabel() for ax in drawn if ax.get_ylabel()} == {"thickness, mm"}
        assert sum(ax.get_xlabel() == "mm from left end" for ax in drawn) == 4  # per column
        box = drawn[0].get_window_extent().transformed(fig.dpi_scale_trans.inverted())
        (x0, x1), (y0, y1) = drawn[0].get_xlim(), drawn[0].get_ylim()
        k = (box.height / (y1 - y0)) / (box.width / (x1 - x0))
        assert k > 1.5
        assert f"thickness drawn {k:.0f} x the length scale" in fig._suptitle.get_text()
    finally:
        pyplot().close(fig)
