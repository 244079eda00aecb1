"""One test per kind of bad input the readers once let through or crashed on.

Each bad file must give one ConfigError line naming the file, the key, the value
and the allowed range (the project's rule for bad input); each good spelling must
be used.  The ranges are the project's own (``synth.config.LIMITS``); where a
check compares with the outside world its source is named beside it.
"""

from __future__ import annotations

import ast
import math
from pathlib import Path

import mido
import pytest

from synth.config import LIMITS, MAX_EVENTS, Limit, load_toml
from synth.engine.score import Score, Strike
from synth.errors import ConfigError
from synth.settings.instrument import load_design
from synth.settings.mallet import load_mallet
from synth.settings.material import load_material
from synth.settings.score import read_events, read_midi
from synth.voicing import Voicer

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "presets" / "instruments" / "lantern-street-bars.toml"
BAR = """
material = "aluminium-6061-t6"
length_m = 0.320
width_m = 0.055
thickness_m = 0.012
"""


def refused(call, *needles: str) -> str:
    """Run ``call``; it must raise one ConfigError line holding every needle."""
    with pytest.raises(ConfigError) as info:
        call()
    text = str(info.value)
    assert "\n" not in text, text
    for n in needles:
        assert n in text, (n, text)
    return text


def write(tmp_path: Path, text: str, name: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def preset_with(tmp_path: Path, extra_in_a4: str = "", tail: str = "") -> Path:
    """Write the demo preset with lines added to [bars.A4] and at the end."""
    text = DEMO.read_text(encoding="utf-8")
    text = text.replace("[bars.A4]\n", "[bars.A4]\n" + extra_in_a4 + "\n", 1)
    return write(tmp_path, text + "\n" + tail, "preset.toml")


# --------------------------------------------------------------------------- bar files
@pytest.mark.parametrize(("line", "key", "allowed"), [
    ("width_m = 1e308", "width_m = 1e+308", "too large; allowed: 0.005 to 0.5 m"),
    ("length_m = 1e308", "length_m = 1e+308", "too large; allowed: 0.02 to 3 m"),
    ("thickness_m = 1e308", "thickness_m = 1e+308", "too large; allowed: 0.001 to 0.2 m"),
    ("width_m = nan", "width_m = nan", "must be a finite number; allowed: 0.005 to 0.5 m"),
    ("length_m = -inf", "length_m = -inf", "must be a finite number"),
    ("length_m = 100000000000000000000000", "length_m = 1e+23", "too large"),
])
def test_huge_bar_sizes_are_one_line(tmp_path: Path, line: str, key: str, allowed: str) -> None:
    name = line.split(" =")[0]
    text = "\n".join(r for r in BAR.splitlines() if not r.startswith(name + " ")) + "\n" + line
    p = write(tmp_path, text, "bar.toml")
    refused(lambda: load_design(p), f"{p}: {key}: {allowed}")


def test_inline_material_with_a_tiny_modulus(tmp_path: Path) -> None:
    text = BAR.replace('material = "aluminium-6061-t6"', "material = { youngs_modulus_pa = "
                       "1e-300, density_kg_m3 = 2700.0, poisson_ratio = 0.33 }")
    p = write(tmp_path, text, "bar.toml")
    refused(lambda: load_design(p), f"{p}: material.youngs_modulus_pa = 1e-300: too small; "
            "allowed: 1e+09 to 1.2e+12 Pa")


def test_thermal_expansion_of_one_per_kelvin(tmp_path: Path) -> None:
    # metals expand by 1e-5 to 3e-5 per K (ASM Handbook Vol. 2, from memory)
    text = (ROOT / "presets/materials/aluminium-6061-t6.toml").read_text(encoding="utf-8")
    p = write(tmp_path, text.replace("thermal_expansion_per_k = 23.6e-6",
                                     "thermal_expansion_per_k = 1.0"), "alloy.toml")
    refused(lambda: load_material(p), "thermal_expansion_per_k = 1: too large; allowed: 0 to "
            "0.0002 1/K")


@pytest.mark.parametrize("value, rule", [("0.5", "too large"), ("-0.1", "too small")])
def test_poisson_ratio_between_0_and_one_half(tmp_path: Path, value: str, rule: str) -> None:
    # 0 <= nu < 1/2 for ordinary isotropic solids (thermodynamic bound 1/2: any
    # elasticity text, e.g. Timoshenko & Goodier, Theory of Elasticity; from memory)
    text = BAR.replace('material = "aluminium-6061-t6"', "material = { youngs_modulus_pa = "
                       f"7e10, density_kg_m3 = 2700.0, poisson_ratio = {value} }}")
    p = write(tmp_path, text, "bar.toml")
    refused(lambda: load_design(p), f"poisson_ratio = {value}: {rule}; allowed: 0 to 0.5 "
            "(excluded)")


def test_deep_nesting_is_refused_not_a_recursion_error(tmp_path: Path) -> None:
    p = write(tmp_path, "a = " + "[" * 5000 + "]" * 5000 + "\n", "deep.toml")
    refused(lambda: load_toml(p), str(p), "nested", "allowed: up to 16 levels")
    p = write(tmp_path, "[" + ".".join(["t"] * 40) + "]\n", "deep2.toml")
    refused(lambda: load_toml(p), str(p), "nested more than 16 levels deep")


def test_long_material_and_mallet_names_never_reach_the_file_system(tmp_path: Path) -> None:
    long = "a" * 300
    p = write(tmp_path, BAR.replace("aluminium-6061-t6", long), "bar.toml")
    refused(lambda: load_design(p), f"{p}: material = 'aaaa", "unknown material")
    refused(lambda: load_mallet(long), "unknown mallet")
    refused(lambda: load_material("../" * 2000 + "x.toml"), "unknown material")
    events = write(tmp_path, f'[[strike]]\ntime_s = 0\nnote = "A4"\nvelocity = 0.5\n'
                             f'mallet = "{long}"\n', "events.toml")
    refused(lambda: read_events(events), f"{events}: strike[0].mallet = 'aaa", "unknown mallet")
    preset = preset_with(tmp_path)
    text = preset.read_text(encoding="utf-8").replace('mallet = "medium"', f'mallet = "{long}"')
    preset.write_text(text, encoding="utf-8")
    refused(lambda: load_design(preset), "sound.mallet = 'aaa", "unknown mallet")


# --------------------------------------------------------------------------- presets
@pytest.mark.parametrize(("line", "needle"), [
    ("tube = 5", "bars.A4.tube = 5: must be a table"),
    ('tube = "length_m"', "bars.A4.tube = 'length_m': must be a table"),
    ("tube = [0.1]", "bars.A4.tube = [0.1]: must be a table"),
    ("tube = { lenght_m = 0.1 }", "bars.A4.tube.lenght_m = 0.1: unknown key; allowed here: "
                                  "length_m"),
    ("tube = { length_m = 0.1, bore = 3 }", "bars.A4.tube.bore = 3: unknown key"),
    ("tube = { length_m = 1e300 }", "bars.A4.tube.length_m = 1e+300: too large; allowed: "
                                    "0.01 to 5 m"),
])
def test_bad_tube_overrides(tmp_path: Path, line: str, needle: str) -> None:
    p = preset_with(tmp_path, line)
    refused(lambda: load_design(p), f"{p}: {needle}")


def test_a_flat_spelt_tube_override_is_used(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8").replace('[bars."A#3"', "[bars.Bb3")
    assert "[bars.Bb3]" in text
    p = write(tmp_path, text.replace("[bars.Bb3]\n", "[bars.Bb3]\ntube = { length_m = 0.1 }\n"),
              "preset.toml")
    inst = load_design(p)
    assert inst.tube_lengths == {"A#3": 0.1}
    voicer = Voicer(inst, channels=1)
    assert voicer.tube_spec("Bb3").length_m == 0.1
    assert voicer.tube_spec("A#3").length_m == 0.1
    assert voicer.tube_spec("B3").length_m != 0.1   # the neighbour keeps its solved length


def test_a_flat_spelt_bar_keeps_its_tube_in_the_tuned_preset(tmp_path: Path) -> None:
    from synth.physics.tuning import tuned_preset

    text = DEMO.read_text(encoding="utf-8").replace('[bars."A#3"', "[bars.Bb3")
    p = write(tmp_path, text.replace("[bars.Bb3]\n", "[bars.Bb3]\ntube = { length_m = 0.1 }\n"),
              "preset.toml")
    bars = tuned_preset(load_design(p), [])["bars"]
    assert "Bb3" not in bars and bars["A#3"]["tube"] == {"length_m": 0.1}


def test_the_same_bar_spelt_twice_is_refused(tmp_path: Path) -> None:
    text = DEMO.read_text(encoding="utf-8") + "\n[bars.Bb3]\nlength_m = 0.3\n"
    p = write(tmp_path, text, "preset.toml")
    refused(lambda: load_design(p), "bars.Bb3: the same note as bars.A#3")


def test_a_flat_spelt_damping_override_is_used(tmp_path: Path) -> None:
    tail = '[damping]\n[[damping.override]]\nnote = "Bb4"\nkind = "vertical"\norder = 1\n' \
           "q = 1234.0\n"
    inst = load_design(preset_with(tmp_path, tail=tail))
    model = Voicer(inst, channels=1).model("A#4")
    assert model.budget[0].q == 1234.0
    plain = Voicer(load_design(DEMO), channels=1).model("A#4")
    assert plain.budget[0].q != 1234.0


@pytest.mark.parametrize(("note", "needle"), [
    ("C8", "damping.override[0].note = 'C8': not in this instrument's range; allowed: F3 to F6"),
    ("H4", "damping.override[0].note = 'H4': unknown note"),
])
def test_damping_override_for_a_note_the_instrument_lacks(tmp_path: Path, note: str,
                                                          needle: str) -> None:
    tail = f'[damping]\n[[damping.override]]\nnote = "{note}"\norder = 1\nq = 1234.0\n'
    p = preset_with(tmp_path, tail=tail)
    refused(lambda: load_design(p), f"{p}: {needle}")


@pytest.mark.parametrize(("low", "high", "needle"), [
    ("C-1", "F6", "lowest_note = 'C-1': unknown note"),
    ("F3", "C99999999", "highest_note = 'C99999999': unknown note"),
    ("F3", "H4", "highest_note = 'H4': unknown note"),
    ("F3", "C#9", "highest_note = 'C#9': note 'C#9' is off the keyboard; allowed: C0 to C9"),
])
def test_ranges_only_on_a_keyboard(tmp_path: Path, low: str, high: str, needle: str) -> None:
    text = DEMO.read_text(encoding="utf-8").replace('lowest_note = "F3"', f'lowest_note = "{low}"')
    text = text.replace('highest_note = "F6"', f'highest_note = "{high}"')
    p = write(tmp_path, text, "preset.toml")
    refused(lambda: load_design(p), f"{p}: {needle}")


@pytest.mark.parametrize(("old", "new", "needle"), [
    ("reference_pitch_hz = 442.0", "reference_pitch_hz = 500.0",
     "reference_pitch_hz = 500: too large; allowed: 380 to 480 Hz"),
    ("temperature_c = 21.0", "temperature_c = -40.0",
     "temperature_c = -40: too small; allowed: -20 to 50 C"),
    ("gap_m = 0.015", "gap_m = 1e300", "tubes.gap_m = 1e+300: too large; allowed: 0 (excluded)"),
    ("spin_up_s = 0.4", "spin_up_s = 1e9", "motor.spin_up_s = 1e+09: too large; allowed: 0 to 60"),
    ("listening_distance_m = 1.0", "listening_distance_m = 1e-300",
     "sound.listening_distance_m = 1e-300: too small; allowed: 0.1 to 100 m"),
    ("cord_loss_n_s_m = 0.3", "cord_loss_n_s_m = inf", "supports.cord_loss_n_s_m = inf: must be"),
    ("target_ratios = [1.0, 4.0, 10.0793684]", "target_ratios = [1.0, 4.0, 1e300]",
     "target_ratios[2] = 1e+300: too large; allowed: 1 to 100"),
    ("offset_cents = 30.0", "offset_cents = 30.0\nbogus = 1", "tubes.bogus = 1: unknown key"),
    ('workshop = "Fennick & Daughters, Tarrow Quay (demo scenario)"', "workshop = 3",
     "workshop = 3: must be a string"),
])
def test_every_preset_table_is_checked_at_load(tmp_path: Path, old: str, new: str,
                                               needle: str) -> None:
    text = DEMO.read_text(encoding="utf-8")
    assert old in text
    p = write(tmp_path, text.replace(old, new, 1), "preset.toml")
    refused(lambda: load_design(p), f"{p}: {needle}")


# --------------------------------------------------------------------------- events
@pytest.mark.parametrize(("body", "needle"), [
    ('[[strike]]\ntime_s = 0\nnote = "A4"\nmallet_speed_m_s = 1e-300\n',
     "strike[0].mallet_speed_m_s = 1e-300: too small; allowed: 0.01 to 20 m/s"),
    ('[[strike]]\ntime_s = 1e9\nnote = "A4"\nvelocity = 0.5\n',
     "strike[0].time_s = 1e+09: too large; allowed: 0 to 14400 s"),
    ('[score]\nlength_s = 1e300\n', "score.length_s = 1e+300: too large; allowed: 0.01 to 14400 s"),
    ('[score]\ntempo_bpm = 60\n[[strike]]\nbeat = 20000\nnote = "A4"\nvelocity = 0.5\n',
     "strike[0].beat = 20000: falls at 20000 s, too late; allowed: 0 to 14400 s"),
    ('[[strike]]\ntime_s = 14000\nnote = "A4"\nvelocity = 0.5\nduration_s = 1000\n',
     "strike[0].duration_s = 1000: falls at 15000 s, too late"),
    ('[[strike]]\ntime_s = 0\nnote = "H4"\nvelocity = 0.5\n', "strike[0].note = 'H4': unknown"),
    ('[[strike]]\ntime_s = 0\nnote = "C10"\nvelocity = 0.5\n', "strike[0].note = 'C10'"),
    ("strike = [1]\n", "strike[0]: must be a table"),
])
def test_bad_event_lists(tmp_path: Path, body: str, needle: str) -> None:
    p = write(tmp_path, body, "events.toml")
    refused(lambda: read_events(p), f"{p}: {needle}")


def test_too_many_events(tmp_path: Path) -> None:
    body = "".join(f'[[strike]]\ntime_s = {i * 2e-4:.4f}\nnote = "A4"\nvelocity = 0.5\n'
                   for i in range(MAX_EVENTS + 1))
    p = write(tmp_path, body, "events.toml")
    refused(lambda: read_events(p), f"{p}: strike: holds {MAX_EVENTS + 1} strikes and pedal "
            f"changes; allowed: up to {MAX_EVENTS}")


def test_flat_and_sharp_events_are_one_note(tmp_path: Path) -> None:
    p = write(tmp_path, '[[strike]]\ntime_s = 0\nnote = "Bb4"\nvelocity = 0.5\n', "events.toml")
    assert read_events(p).strikes[0].note == "A#4"


def test_a_note_outside_the_instrument_names_the_event_file() -> None:
    voicer = Voicer(load_design(DEMO), channels=1)
    score = Score((Strike(0.0, "C9", velocity=0.5, key="strike[0]"),), source="tune.toml")
    refused(lambda: voicer.score_voices(score),
            "tune.toml: strike[0].note = 'C9': not in the range of lantern-street-bars.toml; "
            "allowed: F3 to F6")


# --------------------------------------------------------------------------- MIDI
def _midi(tmp_path: Path, messages, kind: int = 0, name: str = "m.mid") -> Path:
    midi = mido.MidiFile(type=kind)
    midi.tracks.append(mido.MidiTrack(messages))
    p = tmp_path / name
    midi.save(p)
    return p


@pytest.mark.parametrize("kind", [2, 7, 0xFFFF])
def test_midi_types_other_than_0_and_1_are_refused(tmp_path: Path, kind: int) -> None:
    # SMF header: format word at bytes 8-9 (Standard MIDI Files 1.0, MMA 1996)
    p = _midi(tmp_path, [mido.Message("note_on", note=69, velocity=64, time=0)])
    data = bytearray(p.read_bytes())
    data[8:10] = kind.to_bytes(2, "big")
    p.write_bytes(bytes(data))
    refused(lambda: read_midi(p), f"{p}: MIDI type = ", ": not supported; allowed: 0 or 1")


def test_midi_with_a_huge_delta_time(tmp_path: Path) -> None:
    # largest variable-length quantity 0x0FFFFFFF ticks (Standard MIDI Files 1.0, MMA 1996)
    p = _midi(tmp_path, [mido.Message("note_on", note=69, velocity=64, time=0),
                         mido.Message("note_off", note=69, time=0x0FFFFFFF)])
    refused(lambda: read_midi(p), str(p), "too late; allowed: up to 14400 s")


def test_midi_with_too_many_events(tmp_path: Path) -> None:
    msgs = [mido.Message("note_on", note=60 + i % 12, velocity=64, time=1)
            for i in range(MAX_EVENTS + 2)]
    p = _midi(tmp_path, msgs)
    refused(lambda: read_midi(p), str(p), f"allowed: up to {MAX_EVENTS}")


def test_midi_note_off_the_keyboard(tmp_path: Path) -> None:
    p = _midi(tmp_path, [mido.Message("note_on", note=127, velocity=64, time=0)])
    refused(lambda: read_midi(p), str(p), "note number 127", "allowed: 12 to 120 (C0 to C9)")


def test_good_midi_is_read(tmp_path: Path) -> None:
    # 480 ticks at the default 500000 us per quarter note = 0.5 s (SMF 1.0, MMA 1996)
    p = _midi(tmp_path, [mido.Message("note_on", note=70, velocity=127, time=0),
                         mido.Message("note_off", note=70, time=480)], kind=1)
    score = read_midi(p)
    assert score.strikes[0].note == "A#4" and score.strikes[0].release_s == 0.5


# --------------------------------------------------------------------------- the table
def test_every_range_is_finite_and_ordered() -> None:
    for name, lim in LIMITS.items():
        assert isinstance(lim, Limit)
        assert math.isfinite(lim.lo) and math.isfinite(lim.hi) and lim.lo < lim.hi, name


# Every reader of the settings layer, and the mallet's own value check.  The blind
# comparison's key is left out: compare --blind writes it, and the reader checks its
# trials against the answers it holds rather than against a physical range.
READERS = sorted({p.relative_to(ROOT).as_posix()
                  for p in (ROOT / "synth" / "settings").glob("*.py")}
                 - {"synth/settings/__init__.py", "synth/settings/comparison.py",
                    "synth/settings/variants.py"}) + ["synth/physics/mallet.py"]
# Station lists of measured undercuts are bounded by the bar they lie in (checked
# against its length and thickness after reading), not by a range of their own.
UNNAMED = {("synth/settings/geometry.py", "x_m"), ("synth/settings/geometry.py", "thickness_m")}


@pytest.mark.parametrize("module", READERS)
def test_every_number_read_from_a_file_names_its_range(module: str) -> None:
    tree = ast.parse((ROOT / module).read_text(encoding="utf-8"))
    seen = 0
    for node in ast.walk(tree):
        if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                and node.func.attr in ("number", "numbers", "integer")):
            continue
        seen += 1
        kws = {k.arg: k.value for k in node.keywords}
        key = node.args[0].value if node.args and isinstance(node.args[0], ast.Constant) else "?"
        if (module, key) in UNNAMED:
            continue
        bounded = "limit" in kws or ({"ge", "gt"} & kws.keys() and {"le", "lt"} & kws.keys())
        assert bounded, f"{module}:{node.lineno} reads {key!r} without a range"
        if "limit" in kws and isinstance(kws["limit"], ast.Constant):
            assert kws["limit"].value in LIMITS, (module, node.lineno)
        elif "limit" in kws and isinstance(kws["limit"], ast.JoinedStr):
            prefix = "".join(v.value for v in kws["limit"].values if isinstance(v, ast.Constant))
            assert any(n.startswith(prefix) for n in LIMITS), (module, node.lineno)
    assert seen, f"{module} reads no numbers"


@pytest.mark.parametrize("name", ["a\x00b", "y" * 5000])
def test_unusable_file_names(name: str) -> None:
    for reader, suffix in ((load_toml, ".toml"), (read_midi, ".mid"), (read_events, ".mid")):
        refused(lambda r=reader, s=suffix: r(name + s))
