"""PNG figures (matplotlib, Agg backend): grind maps, profile drawings, mode shapes.

Functions return PNG bytes; the caller decides where they go.
"""

from __future__ import annotations

import io as _bytes_io

import numpy as np

from synth.physics.bar_fe import BarModes
from synth.physics.geometry import BarGeometry
from synth.physics.tuning import GrindMap
from synth.pitch import nearest_note


def pyplot():
    """Return matplotlib.pyplot on the Agg backend (no screen needed)."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def figure_png(fig) -> bytes:
    """Return the figure as PNG bytes and close it."""
    buf = _bytes_io.BytesIO()
    fig.savefig(buf, format="png", dpi=130, bbox_inches="tight")
    pyplot().close(fig)
    return buf.getvalue()


def exaggeration(ax) -> float:
    """Return how many times the vertical scale of ``ax`` is stretched against the horizontal.

    1 means true proportions; a bar drawn 10 times taller than it is reads 10.
    Call after the layout is final (``tight_layout``), with both axes in one unit.
    """
    box = ax.get_window_extent()
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    if box.width <= 0 or x1 == x0 or y1 == y0:
        return 1.0
    return float((box.height / abs(y1 - y0)) / (box.width / abs(x1 - x0)))


def note_exaggeration(ax, *, where: str = "upper right") -> None:
    """Write "thickness drawn N x" in a corner of a profile drawn out of proportion."""
    k = exaggeration(ax)
    if k > 1.5:
        x, ha = (0.995, "right") if where.endswith("right") else (0.005, "left")
        ax.text(x, 0.97, f"thickness drawn {k:.0f} x the length scale", fontsize=7,
                transform=ax.transAxes, ha=ha, va="top", color="0.2",
                bbox={"fc": "white", "ec": "none", "alpha": 0.85, "pad": 1.5})


def draw_profile(ax, geometry: BarGeometry, *, cord_holes_m=(), label: str | None = None,
                 scale_mm: bool = True) -> None:
    """Side view of a bar: flat top, undercut below, cord holes marked."""
    L = geometry.length_m
    x = np.unique(np.concatenate([np.linspace(0, L, 600), geometry.breakpoints()]))
    h = geometry.thickness_at(x)
    k = 1e3 if scale_mm else 1.0
    top = np.full_like(x, geometry.thickness_m)
    ax.fill_between(x * k, (top - h) * k, top * k, color="0.72", lw=0)
    ax.plot(x * k, (top - h) * k, color="0.2", lw=1.0)
    ax.plot(x * k, top * k, color="0.2", lw=1.0)
    ax.plot([0, 0], [0, geometry.thickness_m * k], color="0.2", lw=1.0)
    ax.plot([L * k, L * k], [0, geometry.thickness_m * k], color="0.2", lw=1.0)
    for xc in cord_holes_m:
        ax.plot([xc * k], [0.5 * geometry.thickness_m * k], marker="o", ms=4, mfc="white",
                mec="0.1")
    ax.set_aspect("auto")
    if label:
        ax.set_title(label, fontsize=8, loc="left")


def grind_map_png(gm: GrindMap, geometry: BarGeometry, *, title: str = "",
                  cord_holes_m=()) -> bytes:
    """Profile drawing above, one sensitivity curve per partial below."""
    plt = pyplot()
    fig, (ax0, ax1) = plt.subplots(2, 1, figsize=(8, 6), sharex=True,
                                   gridspec_kw={"height_ratios": [1, 2.2]})
    draw_profile(ax0, geometry, cord_holes_m=cord_holes_m)
    ax0.set_ylabel("thickness, mm")
    ax0.set_title(title or "grind map", fontsize=10)
    for j, (kind, order) in enumerate(gm.modes):
        ax1.plot(gm.x_m * 1e3, gm.cents[:, j], marker=".", lw=1.4,
                 label=f"{kind} {order} ({gm.frequencies_hz[j]:.0f} Hz)")
    ax1.axhline(0.0, color="0.5", lw=0.8)
    ax1.set_xlabel("band centre, mm from left end")
    ax1.set_ylabel(f"cents per {gm.removal_m * 1e3:.2g} mm removed")
    ax1.set_title(f"band {gm.band_m * 1e3:.0f} mm wide; below zero: that partial goes flat",
                  fontsize=8, loc="left")
    ax1.legend(fontsize=8)
    ax1.grid(alpha=0.3)
    fig.tight_layout()
    note_exaggeration(ax0)
    return figure_png(fig)


def profile_sheet_png(bars: list[tuple[str, BarGeometry, tuple[float, ...]]], *,
                      title: str = "", columns: int = 4) -> bytes:
    """Return :func:`profile_sheet_figure` as PNG bytes."""
    return figure_png(profile_sheet_figure(bars, title=title, columns=columns))


def profile_sheet_figure(bars: list[tuple[str, BarGeometry, tuple[float, ...]]], *,
                         title: str = "", columns: int = 4):
    """Draw a sheet of bar side views (note, geometry, cord holes) to one length scale.

    Each panel is titled with the bar's length, thinnest point and cord-hole
    positions in mm from the left end; both axes are in mm, and the figure's title
    says how many times the thickness is stretched against the length.
    """
    plt = pyplot()
    n = len(bars)
    rows = max(1, int(np.ceil(n / columns)))
    fig, axes = plt.subplots(rows, columns, figsize=(3.4 * columns, 1.25 * rows + 0.6),
                             squeeze=False)
    longest = max(g.length_m for _, g, _ in bars) * 1e3
    thickest = max(g.thickness_m for _, g, _ in bars) * 1e3
    for ax, (note, geo, holes) in zip(axes.ravel(), bars, strict=False):
        where = " and ".join(f"{x * 1e3:.1f}" for x in holes)
        draw_profile(ax, geo, cord_holes_m=holes,
                     label=f"{note}: length {geo.length_m * 1e3:.1f} mm, thinnest "
                           f"{geo.thinnest_m() * 1e3:.2f} mm\ncord holes {where} mm from "
                           "left end")
        ax.set_xlim(-2, longest + 2)
        ax.set_ylim(-1, thickest + 1)
        ax.tick_params(labelsize=7.5)
    for ax in axes.ravel()[n:]:
        ax.axis("off")
    for column in range(min(n, columns)):   # the lowest drawing of each column
        axes[(n - 1 - column) // columns, column].set_xlabel("mm from left end", fontsize=8)
    for ax in axes[:, 0]:
        ax.set_ylabel("thickness, mm", fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.97) if title else None)
    k = exaggeration(axes[0, 0])
    note = (f" (thickness drawn {k:.0f} x the length scale; open circles: cord holes)"
            if k > 1.5 else " (open circles: cord holes)")
    fig.suptitle((title or "bar profiles") + note, fontsize=10)
    return fig


def mode_shapes_png(result: BarModes, *, title: str = "", reference_hz: float = 440.0) -> bytes:
    """Side view of the bar above its mode shapes, nodes marked, to one length scale.

    Vertical bending modes are drawn as the deflection of the top face, each scaled
    to a peak of 1 and stacked with the lowest at the top; torsional and lateral
    modes (twist, sideways deflection) follow in a second panel when they were
    computed.  Dots mark the nodes, where a mallet leaves that partial out and where
    a support leaves it ringing; the open circles on the bar are mode 1's nodes, the
    cord holes.
    """
    plt = pyplot()
    geometry = result.geometry
    others = [m for m in result.modes if m.kind != "vertical"]
    heights = [1.0, 0.45 * max(1, len(result.vertical))]
    if others:
        heights.append(0.45 * len(others))
    fig, axes = plt.subplots(len(heights), 1, figsize=(8, 1.2 + 1.3 * sum(heights)),
                             sharex=True, gridspec_kw={"height_ratios": heights})
    holes = result.vertical[0].nodes_m if result.vertical else ()
    draw_profile(axes[0], geometry, cord_holes_m=holes)
    axes[0].set_ylabel("thickness, mm")
    axes[0].set_title(title or "mode shapes", fontsize=10)
    x = np.unique(np.concatenate([np.linspace(0.0, geometry.length_m, 400),
                                  geometry.breakpoints()]))
    f1 = result.fundamental_hz if result.vertical else None
    for ax, modes in zip(axes[1:], [result.vertical, others], strict=False):
        for row, mode in enumerate(modes):
            shape = np.asarray(mode.shape_at(x), dtype=float)
            shape = shape / max(float(np.max(np.abs(shape))), 1e-300)
            base = -2.4 * row
            ax.axhline(base, color="0.85", lw=0.7)
            ax.plot(x * 1e3, base + shape, lw=1.3,
                    color="0.15" if mode.kind == "vertical" else "0.45",
                    ls="-" if mode.kind != "lateral" else "--")
            nodes = np.asarray(mode.nodes_m)
            ax.plot(nodes * 1e3, np.full(len(nodes), base), ls="none", marker="o", ms=3.5,
                    color="0.1")
            name, cents = nearest_note(mode.frequency_hz, reference_hz)
            cents = round(cents) + 0.0  # no "-0"
            ratio = f", x{mode.frequency_hz / f1:.3f}" if f1 else ""
            ax.text(1.005, base, f"{mode.kind} {mode.order}\n{mode.frequency_hz:.1f} Hz{ratio}\n"
                    f"{name} {cents:+.0f} c", transform=ax.get_yaxis_transform(),
                    fontsize=7, va="center")
        ax.set_yticks([])
        ax.set_ylim(-2.4 * (len(modes) - 1) - 1.3, 1.3)
    axes[1].set_title("vertical bending: deflection of the top face", fontsize=8, loc="left")
    if others:
        axes[2].set_title("torsion (twist, solid) and lateral bending (sideways, dashed)",
                          fontsize=8, loc="left")
    for ax in axes[1:]:
        ax.set_ylabel("deflection\n(peak 1)", fontsize=8)
    axes[-1].set_xlabel("distance from the left end, mm")
    fig.tight_layout()
    note_exaggeration(axes[0])
    return figure_png(fig)
