"""Output files: every target is checked before anything is written.

A failing run leaves nothing; file-system errors are one line with exit code 2.

Each command's refusal is checked on the real file system where root cannot
bypass it (a path under a regular file, a name longer than NAME_MAX = 255 bytes,
POSIX / Linux limits.h); a read-only folder and a full disk, which root does not
meet in a scratch folder, are simulated by making ``os.access``, ``mkstemp`` or
the write raise what the kernel would (EACCES, ENOSPC: errno values of POSIX).
"""

from __future__ import annotations

import errno
import os
import subprocess
import sys
from pathlib import Path

import pytest
from outputs_commands import COMMANDS, PRESET, one_error_line, run, temporaries, write_inputs

from synth import io
from synth.errors import AudioError

SCRATCH_NAMES = {"two-notes.toml", "take-A4.wav"}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """Write an event list and a recorded strike once for the module."""
    return write_inputs(tmp_path_factory.mktemp("inputs"))


def _files(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


# --------------------------------------------------------------------------- every command
@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_renders_being_a_file_is_refused_before_any_work(name, tmp_path, inputs, monkeypatch):
    """`renders` is a regular file: one line naming it, exit 2, nothing written."""
    monkeypatch.chdir(tmp_path)
    Path("renders").write_text("not a folder\n", encoding="utf-8")
    args, _ = COMMANDS[name]
    argv = [str(a) for a in args(Path("renders") / "out", inputs)]
    line = one_error_line(run(*argv))
    assert "renders is a file, not a folder" in line
    assert _files(tmp_path) == ["renders"]
    assert Path("renders").read_text(encoding="utf-8") == "not a folder\n"


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_a_name_longer_than_the_file_system_allows_is_refused(name, tmp_path, inputs):
    """A 300-byte name (NAME_MAX is 255 bytes on Linux file systems): one line, nothing made."""
    args, _ = COMMANDS[name]
    argv = args(tmp_path / ("n" * 300) / "out", inputs)
    line = one_error_line(run(*argv))
    assert "too long (300 bytes; the file system allows 255)" in line
    assert _files(tmp_path) == []


@pytest.mark.parametrize("name", sorted(set(COMMANDS) - {"demo"}))
def test_an_existing_target_is_kept_and_nothing_else_written(name, tmp_path, inputs):
    """The last target of a command exists: refused without --force before any file is written.

    (The demo replaces its own files by design and has no --force.)
    """
    args, targets = COMMANDS[name]
    out = tmp_path / "out"
    out.mkdir()
    existing = out / targets[-1]
    existing.write_bytes(b"keep me")
    line = one_error_line(run(*args(out, inputs)))
    assert f"{existing}: already exists; use --force" in line
    assert existing.read_bytes() == b"keep me"
    assert _files(out) == [targets[-1]]


def test_default_outputs_under_a_renders_file_are_refused(tmp_path, monkeypatch):
    """No --out: the default renders/<preset>/ folder cannot be made where `renders` is a file."""
    monkeypatch.chdir(tmp_path)
    Path("renders").write_bytes(b"")
    for args in (["strike", PRESET, "A4", "--duration", "0.2"], ["cutlist", PRESET],
                 ["sustain", PRESET, "--note", "A4"]):
        assert "renders is a file, not a folder" in one_error_line(run(*args))
    assert _files(tmp_path) == ["renders"]


def test_a_file_name_longer_than_the_file_system_allows_is_refused(tmp_path):
    """--out with a 300-byte file name: one line naming the limit, nothing written."""
    out = tmp_path / ("x" * 296 + ".wav")
    line = one_error_line(run("strike", PRESET, "A4", "--duration", "0.2", "--out", out))
    assert "file name too long (300 bytes; the file system allows 255)" in line
    assert _files(tmp_path) == []


def test_folder_under_a_file_is_refused(tmp_path):
    """--out inside a regular file: the folder cannot be made (ENOTDIR even for root)."""
    blocker = tmp_path / "take.txt"
    blocker.write_text("x", encoding="utf-8")
    line = one_error_line(run("tune", PRESET, "--note", "A4",
                              "--out", blocker / "sub" / "t.toml"))
    assert f"{blocker} is a file, not a folder" in line
    assert _files(tmp_path) == ["take.txt"]


# --------------------------------------------------------------------------- collisions
@pytest.mark.parametrize("force", [False, True])
def test_wav_named_like_its_own_sidecar_is_refused(tmp_path, force):
    """--out o.json: the WAV and its sidecar would be one file; refused, even with --force."""
    out = tmp_path / "o.json"
    args = ["strike", PRESET, "A4", "--duration", "0.2",
            "--out", out] + (["--force"] if force else [])
    line = one_error_line(run(*args))
    assert f"{out}: the WAV and the settings sidecar of this run would both be written here" \
        in line
    assert _files(tmp_path) == []
    out.write_bytes(b"older file")
    one_error_line(run(*args))
    assert out.read_bytes() == b"older file"


def test_plan_refuses_two_spellings_of_one_file(tmp_path, monkeypatch):
    """`a.csv` and `./x/../a.csv` are the same target: refused by the plan itself."""
    monkeypatch.chdir(tmp_path)
    Path("x").mkdir()
    with pytest.raises(AudioError, match="two table files of this run would both be written"):
        io.OutputPlan([(Path("a.csv"), "table"), (Path("x/../a.csv"), "table")])


# --------------------------------------------------------------------------- failing runs
def test_chord_decay_check_failing_leaves_nothing(tmp_path):
    """Chord --check-decay on a chord too short to track: exit 2, no WAV, sidecar, PNG or folder."""
    out = tmp_path / "new" / "c.wav"
    r = run("chord", PRESET, "F3 A4", "--duration", "0.3",
            "--check-decay", "--out", out)
    line = one_error_line(r)
    assert "too short" in line
    assert "wrote" not in r.stdout
    assert _files(tmp_path) == []


def test_commit_refuses_a_target_that_appeared_meanwhile(tmp_path):
    """A target appears while the run works: the run keeps it and removes its own files."""
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    plan = io.OutputPlan([a, b])
    with pytest.raises(AudioError, match=r"b\.csv: already exists"), plan:
        io.write_bytes(a, b"ours a")
        io.write_bytes(b, b"ours b")
        b.write_bytes(b"theirs")
    assert b.read_bytes() == b"theirs"
    assert not a.exists()
    assert temporaries(tmp_path) == []


def test_writing_an_unplanned_file_is_refused(tmp_path):
    """Inside a plan every write must be one of its targets."""
    with pytest.raises(AudioError, match="not among the files planned"), \
            io.OutputPlan([tmp_path / "a.csv"]):
        io.write_bytes(tmp_path / "b.csv", b"x")
    assert _files(tmp_path) == []


def test_a_run_reads_its_own_uncommitted_recording(tmp_path):
    """A WAV written earlier in the same plan reads back before it is committed (demo step 7)."""
    import numpy as np

    x = np.linspace(-0.5, 0.5, 480)
    with io.OutputPlan([tmp_path / "r.wav"]):
        io.write_wav(tmp_path / "r.wav", x, sample_format="float32")
        back, fs = io.read_audio(tmp_path / "r.wav", mono=True)
        assert not (tmp_path / "r.wav").exists()
    assert fs == io.DEFAULT_SAMPLE_RATE_HZ
    np.testing.assert_array_equal(back, x.astype(np.float32))  # float32 round trip is exact


# --------------------------------------------------------------------------- file-system errors
def test_read_only_folder_is_refused_at_planning(tmp_path, monkeypatch):
    """os.access says the folder is not writable (read-only for a normal user): one line."""
    real_access = os.access
    monkeypatch.setattr(io.os, "access",
                        lambda p, mode, **kw: False if Path(p) == tmp_path
                        else real_access(p, mode, **kw))
    out = tmp_path / "t.toml"
    line = one_error_line(run(*COMMANDS["tune"][0](tmp_path, None)))
    assert f"{out}: folder {tmp_path} is read-only" in line
    assert _files(tmp_path) == []


@pytest.mark.parametrize("name", ["strike", "tune"])
def test_permission_denied_on_the_first_write_is_one_line(name, tmp_path, inputs, monkeypatch):
    """Creating a file fails with EACCES (as on a read-only folder for a normal user)."""

    def refuse(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(io.tempfile, "mkstemp", refuse)
    args, _ = COMMANDS[name]
    line = one_error_line(run(*args(tmp_path / "out", inputs)))
    assert "out: cannot write in this folder (Permission denied; choose a folder you may " \
        "write to)" in line
    assert _files(tmp_path) == []


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a mode 0555 folder")
def test_real_read_only_folder(tmp_path):
    """A mode 0555 folder for a normal user: one line, nothing written."""
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        line = one_error_line(run(*COMMANDS["tune"][0](folder, None)))
        assert "read-only" in line
    finally:
        folder.chmod(0o755)


def _no_space(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


class _FullDisk:
    """A binary file whose writes fail with ENOSPC once its header is written."""

    def __init__(self, path, mode):
        self._fh = open(path, mode)  # noqa: SIM115 (closed by __exit__)
        self._writes = 0

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._fh.close()

    def write(self, data):
        self._writes += 1
        if self._writes > 1:
            _no_space()
        return self._fh.write(data)

    def __getattr__(self, name):
        return getattr(self._fh, name)


@pytest.mark.parametrize("fmt", ["pcm24", "float32"])
def test_disk_full_while_writing_a_wav(tmp_path, monkeypatch, fmt):
    """The write fails with ENOSPC halfway: one line, no WAV, sidecar or temporary.

    16- and 24-bit files are written by barwright's own writer, float32 through
    libsndfile: the disk fills under each.
    """
    import soundfile

    import synth.io

    if fmt == "float32":
        monkeypatch.setattr(soundfile.SoundFile, "write", _no_space)
    else:
        monkeypatch.setattr(synth.io, "open", _FullDisk, raising=False)
    out = tmp_path / "s.wav"
    line = one_error_line(run("strike", PRESET, "A4", "--duration", "0.2",
                              "--format", fmt, "--out", out))
    assert f"{out}: cannot write WAV (No space left on device; free some space" in line
    assert _files(tmp_path) == []


def test_disk_full_while_writing_bytes(tmp_path, monkeypatch):
    """Writing the tuned preset fails with ENOSPC: one line, nothing left."""
    monkeypatch.setattr(Path, "write_bytes", _no_space)
    line = one_error_line(run(*COMMANDS["tune"][0](tmp_path, None)))
    assert "t.toml: cannot write (No space left on device; free some space" in line
    assert _files(tmp_path) == []


def test_disk_full_on_the_last_file_removes_the_earlier_ones(tmp_path, monkeypatch):
    """cutlist: the CSV is written, the PNG hits ENOSPC: neither file is left."""
    real = Path.write_bytes
    monkeypatch.setattr(Path, "write_bytes",
                        lambda self, data: _no_space() if data[:4] == b"\x89PNG"
                        else real(self, data))
    out = tmp_path / "sheet"
    line = one_error_line(run(*COMMANDS["cutlist"][0](out, None)))
    assert "profiles.png: cannot write (No space left on device" in line
    assert _files(tmp_path) == []


# --------------------------------------------------------------------------- temporaries
def test_stale_temporaries_of_dead_processes_are_removed(tmp_path):
    """A temporary whose process is gone is removed; ours, a live one's, another host's kept."""
    done = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    dead = int(done.stdout)  # exited and reaped by subprocess.run
    host = io.host_tag()
    stale = tmp_path / f".s.wav.{dead}@{host}-abcd1234.partial.wav"
    ours = tmp_path / f".s.wav.{os.getpid()}@{host}-abcd1234.partial.wav"
    parent = tmp_path / f".s.wav.{os.getppid()}@{host}-abcd1234.partial.wav"  # started earlier
    other_host = "000000" if host != "000000" else "111111"
    elsewhere = tmp_path / f".s.wav.{dead}@{other_host}-abcd1234.partial.wav"  # its pid: not ours
    other = tmp_path / "notes.partial.txt"
    for p in (stale, ours, parent, elsewhere, other):
        p.write_bytes(b"x" * 10)
    removed = io.remove_stale_temporaries(tmp_path)
    assert removed == [(stale, 10)]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        p.name for p in (ours, parent, elsewhere, other))


def test_temporary_names_fit_and_carry_the_process_id(tmp_path):
    """A 250-byte target name still gets a temporary within NAME_MAX, with our process id."""
    target = tmp_path / ("t" * 246 + ".csv")
    tmp = io._new_temp(target, ".csv")
    try:
        assert len(os.fsencode(tmp.name)) <= 255
        assert f".{os.getpid()}@{io.host_tag()}-" in tmp.name
        assert tmp.name.endswith(".partial.csv")
        umask = os.umask(0)
        os.umask(umask)
        assert tmp.stat().st_mode & 0o777 == 0o666 & ~umask  # not mkstemp's 0600
    finally:
        tmp.unlink()
