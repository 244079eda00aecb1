"""The tune command's work besides the solves: option checks, drift, records, the preset.

Temperature readings, one record per bar and the tuned preset's file. The solves
themselves are :mod:`synth.physics.tuning` and :mod:`synth.physics.solid_tuning`;
this module never prints.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from synth.errors import ConfigError


def check_tune_options(inst, calibration: Path | None, *, solid: bool, correction_table: bool,
                       note: list[str] | None):
    """Refuse clashing tune options; return the stiffness calibration (None without one).

    --solid and --correction-table exclude each other; the table takes the whole range
    (no --note); neither goes with a stiffness calibration yet.
    """
    if solid and correction_table:
        raise ConfigError("= true: give --solid or --correction-table, not both",
                          source="--correction-table")
    if correction_table and note:
        raise ConfigError("= true: builds the table from the whole range; drop --note",
                          source="--correction-table")
    from synth.settings.damping import stiffness_of

    stiffness = stiffness_of(inst, calibration)
    if stiffness is not None and (solid or correction_table):
        raise ConfigError(
            f"= true: cannot be combined with a stiffness calibration ("
            f"{'--calibration' if calibration else 'the preset names ' + stiffness.source}) "
            "yet; tune with the calibration through the 3-D table instead",
            source="--solid" if solid else "--correction-table")
    return stiffness


def temperature_readings(inst, results, shop_c: float | None
                         ) -> tuple[dict[str, float], dict[str, Any]]:
    """Give each bar's partial 1 drift in cents per kelvin, and its shop readings.

    With shop_c, what each partial reads in the shop when the bar is in tune at the
    preset's temperature.
    """
    from synth.physics.tuning import temperature_shift_cents

    shop = {}
    mat = inst.material.at_temperature(inst.temperature_c)
    drift = {r.spec.note: float(temperature_shift_cents(r.geometry, mat, inst.temperature_c,
                                                        inst.temperature_c + 1.0, 1)[0])
             for r in results}
    if shop_c is not None:
        for r in results:
            shop[r.spec.note] = temperature_shift_cents(r.geometry, mat, inst.temperature_c,
                                                        shop_c, len(r.spec.ratios))
    return drift, shop


def write_tuned_preset(out: Path, inst, preset: Path, results, *, stiffness, table,
                       force: bool, calibration: Path | None = None) -> None:
    """Write the tuned preset: every bar solved, its header, the table it was tuned through.

    The preset names the calibration file the design was made with (``calibration``
    when given with a stiffness calibration, else the preset's own, re-pointed from
    ``out``'s folder: :func:`synth.settings.damping.repoint_calibration_file`).
    """
    import tomli_w

    from synth import io
    from synth.physics.tuning import tuned_preset

    header = (f"# {inst.name}: tuned by barwright from {preset.name}\n"
              f"# every [bars.*] table below is a solved bar; sizes in metres\n"
              + (f"# tuned with the {stiffness.describe()}\n" if stiffness else ""))
    from synth.settings.damping import repoint_calibration_file

    tuned = repoint_calibration_file(tuned_preset(inst, results), preset, out,
                                     calibration if stiffness is not None else None)
    if table is not None:
        tuned["solid_correction"] = table.to_table()
    text = header + tomli_w.dumps(tuned)
    io.write_bytes(out, text.encode("utf-8"), force=force)


def tune_records(results, drift: dict[str, float], shop: dict[str, Any],
                 solid: dict[str, dict]) -> list[dict[str, Any]]:
    """One record per tuned bar: sizes, residuals, drift, shop readings, its 3-D check."""
    records: list[dict[str, Any]] = []
    for r in results:
        g = r.geometry
        records.append({
            "note": r.spec.note, "target_hz": float(r.spec.fundamental_hz),
            "length_m": g.length_m, "width_m": g.width_m, "thickness_m": g.thickness_m,
            "undercut": g.undercut.to_table() if g.undercut else None,
            "thinnest_m": r.thinnest_m, "frequencies_hz": [float(f) for f in r.frequencies_hz],
            "residual_cents": [float(c) for c in r.residual_cents],
            "reachable": r.reachable, "message": r.message, "solves": r.n_solves,
            "seconds": r.seconds, "drift_cents_per_k": drift[r.spec.note],
            **({"shop_reading_cents": [float(c) for c in shop[r.spec.note]]}
               if r.spec.note in shop else {}),
            **({"solid": solid[r.spec.note]} if r.spec.note in solid else {}),
        })
    return records
