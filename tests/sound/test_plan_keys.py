"""Plan keys: any change of a setting that enters a key changes it, equal settings never do.

The keys are checked against two things outside the cache's own code: an
independent structural comparison (same types, floats bit for bit as IEEE 754
binary64, IEEE 754-2008 section 3.4: -0.0 and 0.0 are different settings), and
a fresh interpreter with another hash seed (Python's str hashes are salted per
process, PEP 456, so a key that depended on them or on addresses would differ).
"""

from __future__ import annotations

import collections
import copy
import dataclasses
import enum
import math
import struct
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import synth.voicing as voicing
from synth import plan_cache
from synth.voicing import Voicer

ROOT = Path(__file__).resolve().parents[2]
CASES = settings(max_examples=300, derandomize=True, database=None, deadline=None,
                 suppress_health_check=[HealthCheck.too_slow])

# -- the canonical form against an independent structural comparison ------------------

_scalars = (st.none() | st.booleans() | st.integers(-2**70, 2**70)
            | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=6)
            | st.binary(max_size=6))
_values = st.recursive(
    _scalars,
    lambda inner: (st.tuples(inner, inner) | st.lists(inner, max_size=3)
                   | st.dictionaries(st.text(max_size=3), inner, max_size=3)
                   | st.frozensets(st.integers(-5, 5), max_size=3)),
    max_leaves=8)


def _same(a, b) -> bool:
    """Structural identity: the same types and values, floats compared by their bits."""
    if type(a) is not type(b):
        return False
    if isinstance(a, float):
        return struct.pack("<d", a) == struct.pack("<d", b)
    if isinstance(a, tuple | list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    return a == b


@CASES
@given(st.lists(_values, max_size=3), st.lists(_values, max_size=3))
def test_equal_keys_exactly_for_the_same_settings(xs, ys) -> None:
    """Two argument lists share a key if and only if they are structurally the same.

    Concatenated arguments included: the form is prefix-free, so (a, b) and
    (a', b') with the same bytes overall cannot occur.
    """
    assert (plan_cache.plan_key("k", *xs) == plan_cache.plan_key("k", *ys)) == _same(xs, ys)


@CASES
@given(_values)
def test_a_value_keys_the_same_twice(x) -> None:
    """A value gives the same key again (after its frozen parts are memoised) and a copy too."""
    assert plan_cache.plan_key("k", x) == plan_cache.plan_key("k", copy.deepcopy(x))
    assert plan_cache.plan_key("k", x) == plan_cache.plan_key("k", x)


@CASES
@given(st.lists(_values, min_size=1, max_size=3))
def test_any_one_change_changes_the_key(xs) -> None:
    """Each leaf of the settings changed alone changes the key.

    The next float up, a flipped flag, a longer string, one more.
    """
    base = plan_cache.plan_key("k", *xs)
    for path, changed in _leaf_changes(tuple(xs)):
        assert plan_cache.plan_key("k", *changed) != base, path


class _Level(enum.IntEnum):
    LOW = 1


def test_kind_and_argument_boundaries_are_part_of_the_key() -> None:
    """The kind, and where one argument ends, enter the key."""
    assert plan_cache.plan_key("a", "bc") != plan_cache.plan_key("ab", "c")
    assert plan_cache.plan_key("k", "ab", "c") != plan_cache.plan_key("k", "a", "bc")
    assert plan_cache.plan_key("k", (1, 2)) != plan_cache.plan_key("k", 1, 2)
    assert plan_cache.plan_key("k", 1) != plan_cache.plan_key("k", 1.0)
    assert plan_cache.plan_key("k", True) != plan_cache.plan_key("k", 1)
    assert plan_cache.plan_key("k", -0.0) != plan_cache.plan_key("k", 0.0)
    assert plan_cache.plan_key("k", np.float64(0.5)) == plan_cache.plan_key("k", 0.5)
    pair = collections.namedtuple("pair", "a b")
    assert plan_cache.plan_key("k", pair(1, 2)) != plan_cache.plan_key("k", (1, 2))
    assert plan_cache.plan_key("k", _Level.LOW) != plan_cache.plan_key("k", 1)


def test_arrays_key_by_dtype_shape_and_bits() -> None:
    """dtype, shape and every bit of the data enter the key; object arrays are refused."""
    a = np.arange(6.0)
    keys = {plan_cache.plan_key("k", x) for x in
            (a, a.reshape(2, 3), a.astype(np.float32), a[::-1].copy(), -0.0 * a[:1])}
    assert len(keys) == 5
    assert plan_cache.plan_key("k", np.zeros(1)) != plan_cache.plan_key("k", -np.zeros(1))
    with pytest.raises(TypeError):
        plan_cache.plan_key("k", np.array([object()]))
    with pytest.raises(TypeError):
        plan_cache.plan_key("k", lambda: 0)


@dataclasses.dataclass(frozen=True)
class _Frozen:
    x: float
    values: object
    note: str = dataclasses.field(default="", compare=False)


@dataclasses.dataclass
class _Open:
    x: float


def test_a_value_that_can_change_is_hashed_again() -> None:
    """Only frozen dataclasses of values that cannot change are memoised.

    A list or an array inside a frozen dataclass, or a plain dataclass, changed in
    place, changes the key; a field with ``compare=False`` never enters it.
    """
    listed = _Frozen(1.0, [1.0])
    before = plan_cache.plan_key("k", listed)
    listed.values.append(2.0)
    assert plan_cache.plan_key("k", listed) != before
    arr = np.zeros(3)
    held = _Frozen(1.0, arr)
    before = plan_cache.plan_key("k", held)
    arr[1] = 1.0
    assert plan_cache.plan_key("k", held) != before
    plain = _Open(1.0)
    before = plan_cache.plan_key("k", plain)
    plain.x = 2.0
    assert plan_cache.plan_key("k", plain) != before
    assert (plan_cache.plan_key("k", _Frozen(1.0, (2,), note="a"))
            == plan_cache.plan_key("k", _Frozen(1.0, (2,), note="b")))


# -- every field of the settings the plans are keyed on -------------------------------


def _changed(value):
    """A different value of the same kind (None: nothing to change here)."""
    if isinstance(value, bool):
        return not value
    if isinstance(value, int):
        return value + 1
    if isinstance(value, float):
        return math.nextafter(value, math.inf) if math.isfinite(value) else 0.0
    if isinstance(value, str | bytes):
        return value + type(value)("x" if isinstance(value, str) else b"x")
    return None


def _leaf_changes(obj, path=()):
    """Yield (path, a copy of ``obj`` with the one leaf at ``path`` changed)."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        for f in dataclasses.fields(obj):
            if not f.compare:
                continue
            for sub, new in _leaf_changes(getattr(obj, f.name), (*path, f.name)):
                clone = copy.copy(obj)
                object.__setattr__(clone, f.name, new)   # no __post_init__: content only
                yield sub, clone
    elif isinstance(obj, tuple | list):
        for i, item in enumerate(obj):
            for sub, new in _leaf_changes(item, (*path, i)):
                yield sub, type(obj)([*obj[:i], new, *obj[i + 1:]])
    elif isinstance(obj, dict):
        for k in sorted(obj, key=repr):
            for sub, new in _leaf_changes(obj[k], (*path, k)):
                yield sub, {**obj, k: new}
    elif isinstance(obj, np.ndarray):
        if obj.size and obj.dtype.kind == "f":
            new = obj.copy()
            new.flat[-1] = math.nextafter(float(new.flat[-1]), math.inf)
            yield (*path, "[-1]"), new
    else:
        new = _changed(obj)
        if new is not None:
            yield path, new


def _settings_objects(v: Voicer) -> dict[str, object]:
    """Return the settings objects the plan's keys are made of.

    What ``Voicer._settings_key``, ``_note_key`` and ``_strike_key`` hash.
    """
    return {"material": v.material, "supports": v.supports,
            "calibration": v.loss_calibration, "sound": v.sound,
            "tubes": v.tube_settings, "correction": v.correction, "motor": v.motor,
            "bar": v.instrument.bars["A4"], "mallet": voicing._mallet("medium")}


def test_every_field_of_every_setting_changes_the_key(demo) -> None:
    """Each number, flag and name in each settings object, changed alone, changes the key."""
    v = Voicer(demo)
    checked = 0
    for name, obj in _settings_objects(v).items():
        if obj is None:
            continue
        base = plan_cache.plan_key("k", obj)
        for path, changed in _leaf_changes(obj):
            assert plan_cache.plan_key("k", changed) != base, (name, path)
            assert plan_cache.plan_key("k", obj) == base, (name, path)   # original untouched
            checked += 1
    assert checked > 50   # the walk reached the fields (about 100 on the demo)


def _strike_key(inst, note="A4", mallet="medium", speed=1.0, pos=0.45, acr=0.0,
                default_mallet=None, **voicer):
    v = Voicer(inst, mallet=default_mallet, **voicer)
    return v._strike_key(note, voicing._mallet(mallet), speed, pos, acr)


def test_strike_key_changes_with_the_strike_and_every_voicer_setting(demo) -> None:
    """The strike's key covers the note, the strike and each setting of the plan."""
    bar = demo.bars["A4"]
    thinner = dataclasses.replace(demo, bars={**demo.bars, "A4": dataclasses.replace(
        bar, width_m=bar.width_m * (1 - 1e-12))})
    warmer = dataclasses.replace(demo, temperature_c=demo.temperature_c + 0.5)
    keys = [_strike_key(demo), _strike_key(demo, note="A#4"), _strike_key(demo, mallet="soft"),
            _strike_key(demo, speed=math.nextafter(1.0, 2.0)), _strike_key(demo, pos=0.46),
            _strike_key(demo, acr=-0.0), _strike_key(demo, acr=0.1),
            _strike_key(demo, sample_rate=44100.0), _strike_key(demo, tubes=False),
            _strike_key(demo, motor_rate_rev_per_s=1.0), _strike_key(demo, channels=1),
            _strike_key(demo, default_mallet="soft"),
            _strike_key(demo, attack=False), _strike_key(thinner), _strike_key(warmer)]
    assert len(set(keys)) == len(keys)
    assert _strike_key(demo) == keys[0]


# -- other processes --------------------------------------------------------------------


_IN_ANOTHER_PROCESS = """
import math
from synth import plan_cache
from synth.config import presets_dir
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer, _mallet
inst = load_instrument(presets_dir() / 'instruments' / 'lantern-street-bars.toml')
v = Voicer(inst)
print(v._strike_key('A4', _mallet('medium'), 1.0, 0.45, 0.0))
print(v._plan_key('contact', 'C5', _mallet('soft'), 1.25, 0.5, 0.1))
print(plan_cache.plan_key('k', frozenset({'felt', 'yarn', 'rubber'}), {'b': 1.5, 'a': -0.0},
                          (None, True, 2**80, math.pi), {frozenset({'a', 'b'}), frozenset('c')}))
"""


def test_keys_are_the_same_in_another_process(demo) -> None:
    """Keys made in a fresh interpreter with another hash seed equal this process's."""
    here = [_strike_key(demo),
            Voicer(demo)._plan_key("contact", "C5", voicing._mallet("soft"), 1.25, 0.5, 0.1),
            plan_cache.plan_key("k", frozenset({"felt", "yarn", "rubber"}),
                                {"b": 1.5, "a": -0.0}, (None, True, 2**80, math.pi),
                                {frozenset({"a", "b"}), frozenset("c")})]
    for seed in ("1", "4242"):
        out = subprocess.run([sys.executable, "-c", _IN_ANOTHER_PROCESS], cwd=ROOT,
                             capture_output=True, text=True, timeout=300,
                             env={"PYTHONPATH": str(ROOT), "PATH": "", "PYTHONHASHSEED": seed})
        assert out.returncode == 0, out.stderr
        assert out.stdout.split() == here
