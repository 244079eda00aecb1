"""Mallet presets: they load, span the hardness grades, and bad values are named."""

from __future__ import annotations

import re
import shutil
from dataclasses import replace
from pathlib import Path

import pytest

from synth.config import presets_dir
from synth.errors import ConfigError
from synth.physics.mallet import Mallet, rigid_contact
from synth.settings.mallet import load_mallet, mallet_names

GOOD = """\
description = "test head"
mass_kg = 0.03
stiffness = 4.094e6
exponent = 1.5
loss_s_per_m = 0.2
"""


def test_every_preset_loads_with_a_source_for_every_value() -> None:
    names = mallet_names()
    assert 5 <= len(names) <= 6
    for name in names:
        mallet = load_mallet(name)
        assert mallet.name == name and mallet.description
        assert set(mallet.source) == {"mass_kg", "stiffness", "exponent", "loss_s_per_m"}
        assert load_mallet(presets_dir() / "mallets" / f"{name}.toml") == mallet


def test_presets_span_the_contact_times_asked_for() -> None:
    # physics.md section 10: 0.3-3 ms from yarn to hard heads is plausible [CP/M]; the
    # brief asks for roughly 0.3 to 4 ms at 1 m/s on a rigid target across the set.
    times = {n: rigid_contact(load_mallet(n), 1.0)[0] for n in mallet_names()}
    assert 0.2e-3 <= min(times.values()) <= 0.35e-3
    assert 3.0e-3 <= max(times.values()) <= 4.5e-3
    # The grade words order the heads from longest to shortest contact.
    order = ["very-soft", "soft", "medium", "medium-hard", "hard", "very-hard"]
    assert sorted(times, key=times.get, reverse=True) == order


def test_inline_table() -> None:
    mallet = load_mallet({"mass_kg": 0.03, "stiffness": 1e7, "exponent": 1.5, "loss_s_per_m": 0.0})
    assert mallet.name == "inline" and mallet.source == {}


def test_unknown_name_lists_the_presets() -> None:
    with pytest.raises(ConfigError, match="unknown mallet; available: hard"):
        load_mallet("feather")


@pytest.mark.parametrize(
    ("line", "key", "rule"),
    [
        ("mass_kg = -0.03", "mass_kg", "= -0.03: too small; allowed: 0.001 to 2 kg"),
        ("mass_kg = 30.0", "mass_kg", "= 30: too large; allowed: 0.001 to 2 kg"),
        ("stiffness = 0.0", "stiffness", "= 0: too small; allowed: 0.001 to 1e+24 N/m^p"),
        ("exponent = 6.0", "exponent", "= 6: too large; allowed: 1 to 5"),
        ("exponent = 0.5", "exponent", "= 0.5: too small; allowed: 1 to 5"),
        ("loss_s_per_m = -0.1", "loss_s_per_m", "= -0.1: too small; allowed: 0 to 10 s/m"),
        ('loss_s_per_m = "low"', "loss_s_per_m", "= 'low': must be a number"),
        ("masss_kg = 0.03", "masss_kg", "unknown key; allowed here:"),
    ],
)
def test_bad_value_names_file_key_value_and_rule(
    tmp_path: Path, line: str, key: str, rule: str
) -> None:
    name = line.split(" =")[0]
    text = (
        "\n".join(row for row in GOOD.splitlines() if not row.startswith(name + " "))
        + "\n"
        + line
        + "\n"
    )
    path = tmp_path / "bad.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError) as info:
        load_mallet(path)
    message = str(info.value)
    assert message.startswith(f"{path}: {key}")
    assert rule in message


def test_missing_key_is_named(tmp_path: Path) -> None:
    path = tmp_path / "short.toml"
    path.write_text(GOOD.replace("exponent = 1.5\n", ""), encoding="utf-8")
    with pytest.raises(ConfigError, match=re.escape(f"{path}: exponent: missing required key")):
        load_mallet(path)


def test_bundled_preset_without_sources_is_refused(tmp_path: Path, monkeypatch) -> None:
    # Project rule: every preset number says where it comes from.
    folder = tmp_path / "mallets"
    folder.mkdir()
    shutil.copy(presets_dir() / "mallets" / "hard.toml", folder / "hard.toml")
    (folder / "plain.toml").write_text(GOOD, encoding="utf-8")
    monkeypatch.setenv("BARWRIGHT_PRESETS", str(tmp_path))
    assert mallet_names() == ["hard", "plain"]
    assert load_mallet("hard").mass_kg > 0
    with pytest.raises(ConfigError, match="every value needs its source; missing for mass_kg"):
        load_mallet("plain")


def test_malformed_toml_is_a_config_error(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text("mass_kg = = 3\n", encoding="utf-8")
    with pytest.raises(ConfigError, match="malformed TOML"):
        load_mallet(path)


def test_direct_construction_is_checked_too() -> None:
    good = Mallet("ok", 0.03, 1e7, 1.5, 0.1)
    rule = "mallet 'ok': exponent = 7: too large; allowed: 1 to 5"
    with pytest.raises(ConfigError, match=re.escape(rule)):
        replace(good, exponent=7.0)
    with pytest.raises(ConfigError, match="mass_kg"):
        Mallet("x", 0.0, 1e7, 1.5, 0.1)


def test_force_law_never_pulls() -> None:
    # Hunt & Crossley 1975: F = K d^p (1 + lambda dd/dt), zero at zero compression, and
    # the head never pulls (clipped at 0 when the damping term would make it negative).
    m = Mallet("x", 0.03, 1e7, 1.5, 0.5)
    assert m.force_n(0.0, 1.0) == 0.0 and m.force_n(-1e-3, 1.0) == 0.0
    assert m.force_n(1e-4, 0.0) == pytest.approx(1e7 * 1e-6)
    assert m.force_n(1e-4, 1.0) == pytest.approx(1e7 * 1e-6 * 1.5)
    assert m.force_n(1e-4, -3.0) == 0.0
