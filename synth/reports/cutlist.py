"""The build sheet: what to cut for every bar of a tuned instrument.

Per bar: length, blank, arch, thinnest point, thickness at fixed stations (every
10 % of the length, for checking with calipers), and the cord holes at the nodes
of vertical mode 1 of the actual undercut bar (not the 22.4 % rule of a uniform
bar).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, replace

import numpy as np

from synth.executor import Job, run_jobs, values_or_raise
from synth.physics.bar_fe import solve_bar
from synth.physics.instrument import Instrument
from synth.physics.solid_correction import corrected_modes, model_correction

STATION_FRACTIONS = tuple(i / 10 for i in range(11))

SAFETY = (
    "Workshop safety when cutting and grinding: eye, face and hearing protection; clamp the "
    "work; blades and wheels rated for non-ferrous metal; dust extraction for aluminium, "
    "whose fine dust can burn (keep it apart from steel grinding); follow local codes and "
    "the machine maker's instructions."
)


@dataclass(frozen=True)
class CutRow:
    """One bar of the build sheet (SI units).

    ``fundamental_hz`` and ``partials_hz`` (vertical 1-3) are the model's
    predictions: 1-D times the preset's composed correction (3-D table x stiffness
    calibration, :func:`synth.physics.solid_correction.model_correction`).
    """

    note: str
    target_hz: float
    length_m: float
    width_m: float
    thickness_m: float
    undercut: str
    thinnest_m: float
    station_thickness_m: tuple[float, ...]
    cord_holes_m: tuple[float, ...]
    mass_kg: float
    fundamental_hz: float
    tube_length_m: float | None = None
    partials_hz: tuple[float, ...] = ()

    @property
    def cord_fraction(self) -> float:
        """Left cord hole as a fraction of the length."""
        return self.cord_holes_m[0] / self.length_m if self.cord_holes_m else float("nan")


def cut_rows(instrument: Instrument, notes: list[str] | None = None, progress=None,
             tube_lengths: dict[str, float] | None = None, *, tubes: bool = False,
             workers: int | None = 1) -> list[CutRow]:
    """Solve every bar of the preset and collect what the shop needs to cut it.

    Parameters
    ----------
    instrument : Instrument
        A tuned preset (every note in ``[bars]``).
    notes : list of str, optional
        Default: the whole range.
    progress : callable(note), optional
        Called as each bar is done (in completion order).
    tube_lengths : dict, optional
        Tube cut length per note, m, given by the caller.
    tubes : bool
        Work out each bar's tube cut length with its solve
        (:func:`synth.voicing.tube_cut_lengths`, note by note); ``tube_lengths``
        wins where both give one.
    workers : int, optional
        Processes the bars are solved on, each bar an independent job of
        :func:`synth.executor.run_jobs` (1: here; None: every core).  The rows are
        the same whichever number solved them.
    """
    notes = list(notes or instrument.notes)
    jobs = [Job(n, _cut_row, (instrument, n, tubes)) for n in notes]
    done = run_jobs(jobs, workers=workers,
                    progress=None if progress is None else (lambda r: progress(r.key)))
    given = tube_lengths or {}
    return [replace(r, tube_length_m=given[r.note]) if r.note in given else r
            for r in values_or_raise(jobs, done, "cut list of")]


def _cut_row(instrument: Instrument, note: str, tubes: bool) -> CutRow:
    """One bar of the cut list (an independent job: module level, picklable)."""
    material = instrument.material.at_temperature(instrument.temperature_c)
    geo = instrument.bar(note)
    res = corrected_modes(solve_bar(geo, material, n_vertical=3, n_lateral=0,
                                    n_torsional=0), model_correction(instrument), note)
    stations = geo.thickness_at(np.array(STATION_FRACTIONS) * geo.length_m)
    tube = None
    if tubes:   # as synth.voicing.tube_cut_lengths gives it, for this note alone
        from synth.voicing import Voicer

        spec = Voicer(instrument, channels=1).tube_spec(note)
        tube = None if spec is None else spec.length_m
    return CutRow(
        note=note,
        target_hz=instrument.target_hz(note),
        length_m=geo.length_m,
        width_m=geo.width_m,
        thickness_m=geo.thickness_m,
        undercut=geo.undercut.describe() if geo.undercut else "none",
        thinnest_m=geo.thinnest_m(),
        station_thickness_m=tuple(float(v) for v in stations),
        cord_holes_m=res.vertical[0].nodes_m,
        mass_kg=res.mass_kg,
        fundamental_hz=res.fundamental_hz,
        tube_length_m=tube,
        partials_hz=tuple(float(m.frequency_hz) for m in res.vertical[:3]),
    )


def cutlist_csv(rows: list[CutRow]) -> str:
    """Return the build sheet as CSV text, lengths in millimetres."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    head = ["note", "target_hz", "length_mm", "width_mm", "thickness_mm", "undercut",
            "thinnest_mm", "cord_hole_left_mm", "cord_hole_right_mm", "cord_fraction",
            "mass_g", "tube_length_mm"]
    head += [f"t_at_{int(round(f * 100))}pct_mm" for f in STATION_FRACTIONS]
    w.writerow(head)
    for r in rows:
        holes = list(r.cord_holes_m) + [float("nan")] * 2
        w.writerow([
            r.note, f"{r.target_hz:.4f}", f"{r.length_m * 1e3:.2f}", f"{r.width_m * 1e3:.2f}",
            f"{r.thickness_m * 1e3:.3f}", r.undercut, f"{r.thinnest_m * 1e3:.3f}",
            f"{holes[0] * 1e3:.2f}", f"{holes[1] * 1e3:.2f}", f"{r.cord_fraction:.4f}",
            f"{r.mass_kg * 1e3:.1f}",
            "" if r.tube_length_m is None else f"{r.tube_length_m * 1e3:.2f}",
            *[f"{t * 1e3:.3f}" for t in r.station_thickness_m],
        ])
    return buf.getvalue()


def write_build_sheet(instrument: Instrument, rows: list[CutRow], csv_path, png_path,
                      pdf_path=None, *, paper: str = "a4", force: bool = False) -> None:
    """Write the build sheet's files.

    The CSV, the profile sheet and (with ``pdf_path``) the 1:1 cutting templates
    (:mod:`synth.reports.templates`).
    """
    from synth import io as sio
    from synth.reports.plots import profile_sheet_png
    from synth.reports.templates import templates_pdf

    sio.write_bytes(csv_path, cutlist_csv(rows).encode("utf-8"), force=force)
    sio.write_bytes(png_path, profile_sheet_png(
        [(r.note, instrument.bar(r.note), r.cord_holes_m) for r in rows],
        title=f"{instrument.name}: bar profiles (circles: cord holes)"), force=force)
    if pdf_path is not None:
        sio.write_bytes(pdf_path, templates_pdf(
            rows, {r.note: instrument.bar(r.note) for r in rows}, paper=paper,
            title=instrument.name, workshop=instrument.raw.get("workshop", ""),
            safety=SAFETY), force=force)
