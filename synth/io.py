"""Audio files and playback: the only module that reads or writes audio.

Writing
-------
:func:`write_wav` writes WAV files through soundfile (libsndfile) at 44.1, 48
or 96 kHz, mono or stereo, as 16-bit PCM, 24-bit PCM or 32-bit float
(:data:`SAMPLE_FORMATS`).  It takes either one array or an iterable of blocks
(for example :func:`synth.engine.render.render_blocks`), so a long render is
written as it is produced and never held in memory.  Every file is written
atomically: the samples go to a temporary file in the target's folder, which
replaces the target only once the last block is written and the file is
closed.  An existing target is never touched unless ``force=True``; an
exception at any point, a ``KeyboardInterrupt`` included, removes the
temporary file and leaves no file (or the old file) at the target path.
Temporaries are named ``.<target>.<pid>@<host>-<random>.partial<suffix>``, so one
stranded by a process killed outright is recognised and removed later
(:func:`remove_stale_temporaries`).  File-system errors (disk full, no
permission, a name too long) raise :class:`~synth.errors.AudioError`.

An :class:`OutputPlan` makes a run's files one unit: all targets are checked
before the first is written, every write goes to a temporary, and the files
appear together when the plan commits (or none of them, when it is discarded).

Samples are floats with full scale at 1.0.  A sample beyond full scale raises
:class:`~synth.errors.AudioError` rather than being clipped (libsndfile would
clip or wrap it when converting to PCM); the peak planning of
:mod:`synth.engine.render` makes sure this never happens in a normal render.
A 16- or 24-bit file may also be written from int32 blocks at full scale 2^31,
which libsndfile only shifts into place: libsndfile (1.2, with the clipping
that soundfile switches on) turns a float sample ``v`` into the integer
``rint(v 2^31)`` (at most ``2^31 - 1``) before it keeps the top bits, so a
caller that computes that integer itself (:func:`synth.engine.render.scale_block`,
used by :mod:`synth.output`) gets the same file byte for byte and saves
libsndfile's conversion.  :func:`write_pcm_wav` goes one step further: it
takes the samples already packed as 16- or 24-bit PCM bytes and writes the
canonical WAV header itself, as libsndfile would (same atomic write).

:func:`write_sidecar` writes the JSON record of the settings behind a render
next to it (``take.wav`` -> ``take.json``), atomically as well.

Reading
-------
:func:`read_audio` reads any file libsndfile understands (WAV, FLAC, AIFF,
OGG...), or a stretch of it, as float64 samples scaled to full scale 1.0, for
the analysis of recordings; :func:`audio_info` gives its length, rate and
channels without reading the samples.

Playback
--------
:func:`play` sends samples to the default output device through the optional
``sounddevice`` module (the ``play`` extra) and the PortAudio library.

.. warning:: Struck metal bars are peaky.  Before playing, the caller tells
   the listener to start at a low volume, especially on headphones.
"""

from __future__ import annotations

import contextlib
import contextvars
import dataclasses
import errno
import json
import math
import os
import re
import signal
import struct
import tempfile
import threading
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any, Final

import numpy as np

from synth.errors import AudioError, ConfigError

SAMPLE_RATES_HZ: Final[tuple[int, ...]] = (44100, 48000, 96000)
"""Sample rates a render may be written at, Hz."""

DEFAULT_SAMPLE_RATE_HZ: Final[int] = 48000
"""Default output sample rate, Hz."""

SAMPLE_FORMATS: Final[dict[str, str]] = {
    "pcm16": "PCM_16",
    "pcm24": "PCM_24",
    "float32": "FLOAT",
}
"""Our sample-format names and the libsndfile subtypes they select."""


def check_sample_format(fmt: str) -> None:
    """Refuse a --format that is not one of :data:`SAMPLE_FORMATS`."""
    if fmt not in SAMPLE_FORMATS:
        raise ConfigError(f"= {fmt!r}: must be one of " + ", ".join(SAMPLE_FORMATS),
                          source="--format")


def check_sample_rate(sample_rate: int) -> None:
    """Refuse a --sample-rate that is not one of :data:`SAMPLE_RATES_HZ`."""
    if sample_rate not in SAMPLE_RATES_HZ:
        raise ConfigError(f"= {sample_rate}: must be one of "
                          + ", ".join(str(r) for r in SAMPLE_RATES_HZ), source="--sample-rate")


DEFAULT_SAMPLE_FORMAT: Final[str] = "pcm24"
"""Default sample format: 24-bit PCM."""

PLAY_INSTALL_HINT: Final[str] = (
    'install the playback extra with: pip install "barwright[play]", and the PortAudio '
    "library from your system's packages (for example libportaudio2 or portaudio)"
)


# --------------------------------------------------------------------------- checks
TEMP_MARK: Final[str] = ".partial"
"""Part of every temporary file name: ``.<target>.<pid>@<host>-<random>.partial<suffix>``."""

_TEMP_NAME = re.compile(r"^\..*\.(\d+)@([0-9a-f]{6})-[A-Za-z0-9_]+\.partial(\.[A-Za-z0-9]+)?$")
_NAME_MAX_DEFAULT: Final[int] = 255


def _name_max(folder: Path) -> int:
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return _NAME_MAX_DEFAULT


def _existing_ancestor(folder: Path) -> Path:
    """Return the nearest existing folder or file on the way up from ``folder``."""
    p = folder
    while not os.path.lexists(p) and p != p.parent:
        p = p.parent
    return p


def _folder_problem(folder: Path) -> str | None:
    """Why files cannot be written into ``folder`` (made if missing), or None."""
    anchor = _existing_ancestor(folder)
    if not os.path.isdir(anchor):
        return f"{anchor} is a file, not a folder"
    limit = _name_max(anchor)
    for part in folder.parts:
        if len(os.fsencode(part)) > limit:
            return (f"a name in the path is too long ({len(os.fsencode(part))} bytes; the file "
                    f"system allows {limit})")
    if not os.access(anchor, os.W_OK | os.X_OK):
        return f"folder {anchor} is read-only"
    return None


def _target_problem(p: Path, *, force: bool, make_folders: bool) -> str | None:
    """Why ``p`` may not be written, or None."""
    limit = _name_max(_existing_ancestor(p.parent))
    if len(os.fsencode(p.name)) > limit:
        return (f"file name too long ({len(os.fsencode(p.name))} bytes; the file system "
                f"allows {limit})")
    problem = _folder_problem(p.parent)
    if problem is not None:
        return problem
    if os.path.isdir(p):
        return "is a folder; give a file name"
    if os.path.lexists(p) and not force:
        return "already exists; use --force to overwrite it"
    if not make_folders and not os.path.isdir(p.parent):
        return f"folder {p.parent} does not exist"
    return None


def check_writable(path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Raise unless ``path`` may be written (new file, or ``force``); return it as a Path.

    Call it before a long render so that a refusal comes before the work.  Within an
    open :class:`OutputPlan` that holds ``path`` the plan has checked it already.
    """
    p = Path(path)
    plan = _ACTIVE_PLAN.get()
    if plan is not None and plan.holds(p):
        return p
    problem = _target_problem(p, force=force, make_folders=False)
    if problem is not None:
        raise AudioError(f"{p}: {problem}")
    return p


def host_tag() -> str:
    """Return six hex digits naming this machine (or container) in temporary file names.

    A process id means something only on the machine that runs it; temporaries of
    another host sharing the folder are never taken for stale.
    """
    import hashlib
    import socket

    return hashlib.sha1(socket.gethostname().encode("utf-8")).hexdigest()[:6]


def _owner_tag() -> str:
    return f"{os.getpid()}@{host_tag()}"


def _temp_prefix(target: Path) -> str:
    """Return ``.<name>.<pid>@<host>-``, the name shortened so the temporary's name fits."""
    name = target.name
    room = _NAME_MAX_DEFAULT - 48  # dots, pid, random part, mark and suffix
    while len(os.fsencode(name)) > room:
        name = name[:-1]
    return f".{name}.{_owner_tag()}-"


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT and SIGTERM while a temporary changes hands; they act on leaving.

    Between creating a temporary and recording who removes it, a signal would leave
    the file behind; held here, it is delivered (and its exception raised) only once
    the file is owned by a ``try`` that removes it or by the open plan.
    """
    if not hasattr(signal, "pthread_sigmask") or \
            threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _new_temp(target: Path, suffix: str) -> Path:
    """Create an empty temporary beside ``target``, named for it and for this process."""
    try:
        fd, name = tempfile.mkstemp(prefix=_temp_prefix(target), suffix=TEMP_MARK + suffix,
                                    dir=target.parent)
    except OSError as exc:
        raise AudioError(f"{target}: cannot write ({_os_reason(exc)})") from None
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)  # mkstemp makes 0600; give the usual permissions
    finally:
        os.close(fd)
    return Path(name)


def _probe(folder: Path) -> None:
    """Create and remove a temporary in ``folder``: raise unless files can be made there."""
    with _signals_held():  # never left behind by a signal
        try:
            fd, name = tempfile.mkstemp(prefix=f".write-test.{_owner_tag()}-",
                                        suffix=TEMP_MARK, dir=folder)
        except OSError as exc:
            raise AudioError(f"{folder}: cannot write in this folder "
                             f"({_os_reason(exc)})") from None
        os.close(fd)
        os.unlink(name)


def _os_reason(exc: OSError) -> str:
    reason = exc.strerror or str(exc)
    if exc.errno == errno.ENOSPC:
        reason += "; free some space and run again"
    elif exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        reason += "; choose a folder you may write to"
    return reason


def _atomic_write(target: Path, suffix: str, write, *, force: bool) -> Path:
    """Run ``write(temp_path)``, then move the temporary file onto ``target``.

    Inside an open :class:`OutputPlan` the temporary is kept until the plan commits.
    """
    plan = _ACTIVE_PLAN.get()
    if plan is not None:
        return plan._stage(target, suffix, write)
    check_writable(target, force=force)
    tmp: Path | None = None
    try:
        with _signals_held():
            tmp = _new_temp(target, suffix)
        _run_write(write, tmp, target)
        if force:
            _replace(tmp, target)
        else:
            _move_without_overwrite(tmp, target)
    except BaseException:
        if tmp is not None:
            with contextlib.suppress(OSError):
                tmp.unlink()
        raise
    return target


def _run_write(write, tmp: Path, target: Path) -> None:
    try:
        write(tmp)
    except OSError as exc:
        raise AudioError(f"{target}: cannot write ({_os_reason(exc)})") from None


def _replace(tmp: Path, target: Path) -> None:
    try:
        os.replace(tmp, target)
    except OSError as exc:
        raise AudioError(f"{target}: cannot write ({_os_reason(exc)})") from None


def _move_without_overwrite(tmp: Path, target: Path) -> None:
    # A hard link fails if the target appeared meanwhile, so no file is ever overwritten.
    try:
        os.link(tmp, target)
    except FileExistsError:
        raise AudioError(f"{target}: already exists; use --force to overwrite it") from None
    except OSError:  # file system without hard links: check, then rename
        if os.path.lexists(target):
            raise AudioError(f"{target}: already exists; use --force to overwrite it") from None
        _replace(tmp, target)
        return
    tmp.unlink()


# --------------------------------------------------------------------------- output plans
_ACTIVE_PLAN: contextvars.ContextVar[OutputPlan | None] = contextvars.ContextVar(
    "barwright_output_plan", default=None)


def active_plan() -> OutputPlan | None:
    """Return the output plan open in this context, if any."""
    return _ACTIVE_PLAN.get()


def _process_gone(pid: int, modified: float) -> bool:
    """Tell whether process ``pid`` is gone, as writer of a file modified at ``modified``.

    Gone: no such process, a zombie, or one started after the file was last
    written (the number was reused).  ``modified`` is in epoch seconds.
    """
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except (PermissionError, OSError):
        return False
    try:  # Linux: a zombie, or a later process under the same number
        stat = Path(f"/proc/{pid}/stat").read_text(encoding="ascii")
        fields = stat[stat.rindex(")") + 2:].split()
        if fields[0] in ("Z", "X"):
            return True
        boot = next(float(line.split()[1]) for line in
                    Path("/proc/stat").read_text(encoding="ascii").splitlines()
                    if line.startswith("btime "))
        started = boot + int(fields[19]) / os.sysconf("SC_CLK_TCK")
        return started > modified + 2.0
    except (OSError, ValueError, IndexError, StopIteration):
        return False


def remove_stale_temporaries(folder: str | os.PathLike[str]) -> list[tuple[Path, int]]:
    """Remove the temporaries in ``folder`` whose writing process is gone.

    Returns
    -------
    list of (Path, int)
        The removed files and their sizes in bytes.
    """
    removed: list[tuple[Path, int]] = []
    host = host_tag()
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TEMP_NAME.match(entry.name)
        if m is None or m.group(2) != host or int(m.group(1)) == os.getpid():
            continue
        try:
            st = entry.stat(follow_symlinks=False)
            if not _process_gone(int(m.group(1)), st.st_mtime):
                continue
            os.unlink(entry.path)
        except OSError:
            continue
        removed.append((Path(entry.path), int(st.st_size)))
    return removed


class OutputPlan:
    """Every file one run writes, checked before anything is written, committed together.

    Building the plan checks all targets: no two the same file, none existing
    unless ``force``, every folder creatable and writable, every name short
    enough; a problem raises :class:`~synth.errors.AudioError` naming the path.
    :meth:`open` makes the folders, tries a temporary file in each, removes
    temporaries left there by runs that were killed, and routes every write of
    this module (:func:`write_wav`, :func:`write_sidecar`, :func:`write_bytes`) to
    a temporary beside its target.  :meth:`commit` moves them all onto their
    targets; :meth:`discard` (any error, an interrupt) removes them and the
    folders the plan made, so a failed run leaves nothing behind.  Used as a
    context manager it opens, then commits or discards.

    Temporaries are named ``.<target>.<pid>@<host>-<random>.partial<suffix>``; one left
    by a process that was killed outright (SIGKILL) is removed by the next plan
    that opens in its folder.

    Parameters
    ----------
    targets : iterable of path-like or (path-like, str)
        Files to write, each optionally with what it is (``"WAV"``,
        ``"settings sidecar"``) for the messages.
    force : bool, optional
        Replace existing files (default: refuse).
    """

    def __init__(self, targets: Iterable[Any], *, force: bool = False):
        self.force = bool(force)
        self.targets: dict[str, tuple[Path, str]] = {}
        for item in targets:
            path, what = (item, "") if isinstance(item, str | os.PathLike) else item
            p = Path(path)
            key = self._key(p)
            if key in self.targets:
                other, what0 = self.targets[key]
                if other == p and what0 == what:
                    continue
                both = (f"the {what0 or 'first file'} and the {what or 'second file'}"
                        if what0 != what or not what else f"two {what} files")
                raise AudioError(f"{p}: {both} of this run would both be written here; "
                                 "choose another name")
            self.targets[key] = (p, what)
        for p, _ in self.targets.values():
            problem = _target_problem(p, force=self.force, make_folders=True)
            if problem is not None:
                raise AudioError(f"{p}: {problem}")
        self.removed: list[tuple[Path, int]] = []
        self._staged: dict[str, Path] = {}
        self._made: list[Path] = []
        self._token: contextvars.Token | None = None

    @staticmethod
    def _key(p: Path) -> str:
        return os.path.normcase(os.path.abspath(p))

    def holds(self, path: str | os.PathLike[str]) -> bool:
        """Tell whether ``path`` is one of the planned targets."""
        return self._key(Path(path)) in self.targets

    def require(self, paths: Iterable[str | os.PathLike[str]]) -> None:
        """Raise unless every path is planned (for a command run inside another's plan)."""
        for p in paths:
            if not self.holds(p):
                raise AudioError(f"{p}: not among the files planned for this run")

    @property
    def folders(self) -> list[Path]:
        """The target folders, each once, in plan order."""
        return list(dict.fromkeys(p.parent for p, _ in self.targets.values()))

    def open(self) -> OutputPlan:
        """Make the folders, try writing in each, remove stale temporaries, start staging."""
        if self._token is not None:
            raise AudioError("an output plan is already open")
        try:
            for folder in self.folders:
                missing = []
                p = folder
                while not os.path.lexists(p) and p != p.parent:
                    missing.append(p)
                    p = p.parent
                for m in reversed(missing):
                    try:
                        m.mkdir()
                    except FileExistsError:
                        continue
                    except OSError as exc:
                        raise AudioError(f"{m}: cannot make this folder ({_os_reason(exc)})"
                                         ) from None
                    self._made.append(m)
                _probe(folder)
                self.removed += remove_stale_temporaries(folder)
        except BaseException:
            self._remove_made_folders()
            raise
        self._token = _ACTIVE_PLAN.set(self)
        return self

    def _stage(self, target: Path, suffix: str, write) -> Path:
        key = self._key(target)
        if key not in self.targets:
            raise AudioError(f"{target}: not among the files planned for this run")
        tmp: Path | None = None
        try:
            with _signals_held():
                tmp = _new_temp(target, suffix)
            _run_write(write, tmp, target)
            with _signals_held():  # the plan owns it from here: its abort removes it
                old = self._staged.pop(key, None)
                self._staged[key] = tmp
                tmp = None
                if old is not None:
                    with contextlib.suppress(OSError):
                        old.unlink()
        except BaseException:
            if tmp is not None:
                with contextlib.suppress(OSError):
                    tmp.unlink()
            raise
        return target

    def staged(self, path: str | os.PathLike[str]) -> Path | None:
        """Return the temporary holding ``path`` until the plan commits, if it was written."""
        return self._staged.get(self._key(Path(path)))

    def commit(self) -> list[Path]:
        """Move every written temporary onto its target; return the targets.

        Without ``force`` a target that appeared meanwhile stops the commit and the
        targets this commit already placed are removed again.
        """
        self._close()
        done: list[Path] = []
        try:
            for key, tmp in list(self._staged.items()):
                target = self.targets[key][0]
                if self.force:
                    _replace(tmp, target)
                else:
                    _move_without_overwrite(tmp, target)
                del self._staged[key]
                done.append(target)
        except BaseException:
            if not self.force:
                for t in done:
                    with contextlib.suppress(OSError):
                        t.unlink()
            self._discard_staged()
            raise
        return done

    def discard(self) -> None:
        """Remove every temporary and the folders the plan made; no target is touched."""
        self._close()
        self._discard_staged()
        self._remove_made_folders()

    def _close(self) -> None:
        if self._token is not None:
            _ACTIVE_PLAN.reset(self._token)
            self._token = None

    def _discard_staged(self) -> None:
        for tmp in self._staged.values():
            with contextlib.suppress(OSError):
                tmp.unlink()
        self._staged.clear()

    def _remove_made_folders(self) -> None:
        for folder in reversed(self._made):
            with contextlib.suppress(OSError):
                folder.rmdir()  # only if empty
        self._made.clear()

    def __enter__(self) -> OutputPlan:
        return self.open()

    def __exit__(self, exc_type, exc, tb) -> None:  # never swallows the exception
        if exc_type is None:
            self.commit()
        else:
            self.discard()


def _as_block(block: Any, channels: int | None, where: str, integers: bool = False
              ) -> np.ndarray:
    arr = np.asarray(block)
    if arr.dtype.kind != "f" and not (integers and arr.dtype == np.int32):
        allowed = "floats (full scale 1.0) or int32 (full scale 2^31)" if integers else (
            "floats (full scale 1.0)")
        raise AudioError(f"{where}: samples must be {allowed}, got {arr.dtype}")
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[1] not in (1, 2):
        raise AudioError(
            f"{where}: samples must have shape (n,) or (n, channels) with 1 or 2 channels, "
            f"got {arr.shape}"
        )
    if channels is not None and arr.shape[1] != channels:
        raise AudioError(f"{where}: a block has {arr.shape[1]} channels, expected {channels}")
    return arr


def _check_range(arr: np.ndarray, where: str, first: int) -> None:
    if not arr.size or arr.dtype.kind != "f":
        return
    peak = float(np.max(np.abs(arr)))
    if peak <= 1.0:
        return
    if not math.isfinite(peak):
        raise range_error(where, first + int(np.flatnonzero(~np.isfinite(arr).all(axis=1))[0]),
                          math.nan)
    raise range_error(where, first + int(np.flatnonzero((np.abs(arr) > 1.0).any(axis=1))[0]),
                      peak)


def range_error(where: str, sample: int, peak: float) -> AudioError:
    """Return the refusal of a sample beyond full scale or not finite.

    ``peak`` is the largest magnitude of the sample's block; a peak that is not
    finite refuses the sample as not finite.
    """
    if not math.isfinite(peak):
        return AudioError(f"{where}: sample {sample} is not finite; nothing was written")
    return AudioError(
        f"{where}: sample {sample} is beyond full scale (peak {peak:.4g} = "
        f"{20 * math.log10(peak):+.2f} dBFS) and would clip; lower the gain or normalise "
        "the peak; nothing was written"
    )


# --------------------------------------------------------------------------- writing
def _check_file_settings(target: Path, sample_rate: int, sample_format: str,
                         formats: Mapping[str, Any], channels: int | None) -> None:
    """Refuse a rate, a format (one of ``formats``) or a channel count a writer cannot take."""
    if sample_rate not in SAMPLE_RATES_HZ:
        raise AudioError(
            f"{target}: sample rate {sample_rate} Hz: must be one of "
            + ", ".join(str(r) for r in SAMPLE_RATES_HZ)
        )
    if sample_format not in formats:
        raise AudioError(
            f"{target}: sample format {sample_format!r}: must be one of " + ", ".join(formats)
        )
    if channels is not None and channels not in (1, 2):
        raise AudioError(f"{target}: channels = {channels}: must be 1 or 2")


def write_wav(
    path: str | os.PathLike[str],
    samples: np.ndarray | Iterable[np.ndarray],
    *,
    sample_rate: int = DEFAULT_SAMPLE_RATE_HZ,
    sample_format: str = DEFAULT_SAMPLE_FORMAT,
    channels: int | None = None,
    force: bool = False,
) -> Path:
    """Write samples or streamed blocks to a WAV file, atomically.

    Parameters
    ----------
    path : path-like
        Target file (its folder must exist).
    samples : ndarray or iterable of ndarray
        One float array of shape (n,) or (n, channels), or an iterable of such
        blocks (all with the same number of channels), full scale 1.0.  For
        ``pcm16`` and ``pcm24`` a block may instead hold int32 samples at full
        scale 2^31, which libsndfile only shifts (the top 16 or 24 bits go to the
        file): every value is a valid sample, so such a block is not checked.
        The source may hand out one buffer again and again: each block is
        written before the next is asked for.
    sample_rate : int, optional
        44100, 48000 (default) or 96000 Hz.
    sample_format : str, optional
        ``"pcm16"``, ``"pcm24"`` (default) or ``"float32"``.
    channels : int, optional
        1 or 2; default: taken from the first block.
    force : bool, optional
        Replace an existing file (default: refuse).

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    AudioError
        Bad settings, an existing target without ``force``, a sample beyond
        full scale or not finite, or a write failure.  The target is left as it
        was (absent, or the old file) whenever an error or an interrupt stops
        the write.

    .. note:: A sample beyond full scale is refused, never clipped.
    """
    target = Path(path)
    _check_file_settings(target, sample_rate, sample_format, SAMPLE_FORMATS, channels)
    if isinstance(samples, np.ndarray):
        blocks: Iterable[np.ndarray] = (samples,)
    else:
        blocks = samples
    subtype = SAMPLE_FORMATS[sample_format]
    where = str(target)

    def write(tmp: Path) -> None:
        import soundfile as sf

        iterator = iter(blocks)
        first = next(iterator, None)
        if first is None:
            raise AudioError(f"{where}: no samples to write")
        integers = subtype != "FLOAT"
        first = _as_block(first, channels, where, integers)
        n_ch = first.shape[1]
        written = 0
        try:
            f = sf.SoundFile(tmp, mode="w", samplerate=int(sample_rate), channels=n_ch,
                             subtype=subtype, format="WAV")
        except (sf.LibsndfileError, RuntimeError, OSError) as exc:
            raise AudioError(f"{where}: cannot write WAV ({_sf_reason(exc)})") from None
        try:
            block: np.ndarray | None = first
            while block is not None:
                _check_range(block, where, written)
                try:
                    f.write(block)
                # soundfile asserts that libsndfile took every frame: a short write
                except (RuntimeError, OSError, AssertionError) as exc:
                    raise AudioError(f"{where}: cannot write WAV ({_sf_reason(exc)})"
                                     ) from None
                written += block.shape[0]
                nxt = next(iterator, None)  # errors of the block source pass through as they are
                block = None if nxt is None else _as_block(nxt, n_ch, where, integers)
        except BaseException:
            with contextlib.suppress(Exception):
                f.close()
            raise
        try:
            f.close()  # libsndfile rewrites the header here
        except (RuntimeError, OSError) as exc:
            raise AudioError(f"{where}: cannot write WAV ({_sf_reason(exc)})") from None

    return _atomic_write(target, ".wav", write, force=force)


PCM_WIDTHS: Final[dict[str, int]] = {"pcm16": 2, "pcm24": 3}
"""Bytes per sample of the integer formats."""


def write_pcm_wav(
    path: str | os.PathLike[str],
    chunks: Iterable[Any],
    *,
    sample_rate: int = DEFAULT_SAMPLE_RATE_HZ,
    sample_format: str = DEFAULT_SAMPLE_FORMAT,
    channels: int = 2,
    force: bool = False,
) -> Path:
    """Write packed PCM bytes as a WAV file, atomically.

    Parameters
    ----------
    path : path-like
        Target file (its folder must exist).
    chunks : iterable of bytes-like
        Little-endian signed samples of 2 (``pcm16``) or 3 (``pcm24``) bytes,
        channels interleaved, in whole frames; each chunk is written before the
        next is asked for (a producer may refill one buffer).
    sample_rate : int, optional
        44100, 48000 (default) or 96000 Hz.
    sample_format : str, optional
        ``"pcm16"`` or ``"pcm24"`` (default).
    channels : int, optional
        1 or 2 (default).
    force : bool, optional
        Replace an existing file (default: refuse).

    The file is the canonical WAV layout of the RIFF standard, as libsndfile
    writes it for these formats: a 44-byte header (``RIFF`` size, ``WAVE``, a
    16-byte ``fmt `` chunk of format 1, integer PCM, and the ``data`` chunk's
    size), the samples, and a pad byte after an odd number of data bytes.  The
    samples reach the disk (fsync) before the file is moved into place; an
    error or an interrupt leaves the target as it was.
    """
    target = Path(path)
    _check_file_settings(target, sample_rate, sample_format, PCM_WIDTHS, channels)
    width = PCM_WIDTHS[sample_format]
    frame = width * channels
    where = str(target)

    def header(size: int) -> bytes:
        return struct.pack("<4sI4s4sIHHIIHH4sI", b"RIFF", 36 + size + size % 2, b"WAVE",
                           b"fmt ", 16, 1, channels, sample_rate, sample_rate * frame, frame,
                           8 * width, b"data", size)

    def write(tmp: Path) -> None:
        try:
            fill(tmp)
        except OSError as exc:
            raise AudioError(f"{where}: cannot write WAV ({_os_reason(exc)})") from None

    def fill(tmp: Path) -> None:
        with open(tmp, "wb") as fh:
            fh.write(header(0))
            size = 0
            for chunk in chunks:
                data = memoryview(chunk).cast("B")
                if len(data) % frame:
                    raise AudioError(f"{where}: {len(data)} bytes of samples are not whole "
                                     f"frames of {frame} bytes")
                fh.write(data)
                size += len(data)
            if size == 0:
                raise AudioError(f"{where}: no samples to write")
            if 36 + size + size % 2 > 0xFFFFFFFF:
                raise AudioError(f"{where}: {size} bytes of samples do not fit a WAV file "
                                 "(4 GiB); render shorter parts")
            if size % 2:
                fh.write(b"\0")
            fh.seek(0)
            fh.write(header(size))
            fh.flush()
            os.fsync(fh.fileno())

    return _atomic_write(target, ".wav", write, force=force)


def _sf_reason(exc: BaseException) -> str:
    if isinstance(exc, OSError):
        return _os_reason(exc)
    return str(exc) or "the file system took fewer samples than written; is the disk full?"


def _jsonable(obj: Any) -> Any:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return _jsonable(dataclasses.asdict(obj))
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return _jsonable(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return None  # JSON has no NaN or infinity
    if obj is None or isinstance(obj, bool | int | float | str):
        return obj
    raise AudioError(f"sidecar: cannot record a value of type {type(obj).__name__}: {obj!r}")


def sidecar_path(path: str | os.PathLike[str]) -> Path:
    """Return the sidecar file of an audio file (``take.wav`` -> ``take.json``)."""
    return Path(path).with_suffix(".json")


def write_sidecar(path: str | os.PathLike[str], settings: Mapping[str, Any], *,
                  force: bool = False) -> Path:
    """Write the resolved settings of a render as JSON beside its audio file.

    Parameters
    ----------
    path : path-like
        The audio file (``take.wav``); the record goes to ``take.json``.
    settings : mapping
        Plain values, sequences, mappings, dataclasses, paths and numpy values;
        non-finite floats are stored as ``null``.
    force : bool, optional
        Replace an existing sidecar (default: refuse).

    Returns
    -------
    Path
        The sidecar file.
    """
    target = sidecar_path(path)
    text = json.dumps(_jsonable(dict(settings)), indent=2, sort_keys=True) + "\n"

    def write(tmp: Path) -> None:
        try:
            tmp.write_text(text, encoding="utf-8")
        except OSError as exc:
            raise AudioError(f"{target}: cannot write ({exc.strerror or exc})") from exc

    return _atomic_write(target, ".json", write, force=force)


# --------------------------------------------------------------------------- reading
def read_audio(path: str | os.PathLike[str], *, mono: bool = False, start: int = 0,
               stop: int | None = None) -> tuple[np.ndarray, int]:
    """Read an audio file (or its frames ``start .. stop - 1``) as float64 samples.

    Parameters
    ----------
    path : path-like
        Any format libsndfile reads (WAV, FLAC, AIFF, OGG...).
    mono : bool, optional
        Average the channels into one (returns a 1-D array).
    start, stop : int, optional
        First frame to read and the frame after the last (default: the whole file).

    Returns
    -------
    samples : ndarray, shape (n, channels), or (n,) with ``mono``
        Samples scaled so that full scale is 1.0.
    sample_rate : int
        Sample rate in Hz.

    Raises
    ------
    AudioError
        The file is missing, a folder, empty or not audio libsndfile can read.
    """
    import soundfile as sf

    p = Path(path)
    plan = _ACTIVE_PLAN.get()
    staged = None if plan is None else plan.staged(p)
    if staged is not None:  # written by this run, not yet committed
        data, rate = read_audio(staged, mono=mono, start=start, stop=stop)
        return data, rate
    if not p.exists():
        raise AudioError(f"{p}: file not found")
    if p.is_dir():
        raise AudioError(f"{p}: is a folder, expected an audio file")
    try:
        data, rate = sf.read(p, dtype="float64", always_2d=True, start=start, stop=stop)
    except (sf.LibsndfileError, RuntimeError) as exc:
        raise AudioError(f"{p}: not a readable audio file ({exc})") from None
    except OSError as exc:
        raise AudioError(f"{p}: cannot be read ({exc.strerror or exc})") from None
    if data.shape[0] == 0:
        raise AudioError(f"{p}: holds no samples")
    if mono:
        data = data.mean(axis=1)
    return data, int(rate)


def audio_info(path: str | os.PathLike[str]) -> tuple[int, int, int]:
    """Return ``(frames, sample_rate, channels)`` of an audio file without reading its samples.

    Raises
    ------
    AudioError
        As :func:`read_audio` (which reads the first frame to check the file).
    """
    import soundfile as sf

    read_audio(path, stop=1)
    plan = _ACTIVE_PLAN.get()
    staged = None if plan is None else plan.staged(Path(path))
    info = sf.info(str(path if staged is None else staged))
    return int(info.frames), int(info.samplerate), int(info.channels)


def file_sha256_16(path: str | os.PathLike[str]) -> str:
    """Return the first 16 hex digits of a file's SHA-256 ("" when it is not a file)."""
    import hashlib

    p = Path(path)
    if not p.is_file():
        return ""
    h = hashlib.sha256()
    with p.open("rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()[:16]


# --------------------------------------------------------------------------- playback
def play(samples: np.ndarray, sample_rate: int, *, blocking: bool = True) -> None:
    """Play samples on the default output device.

    Parameters
    ----------
    samples : ndarray, shape (n,) or (n, channels)
        Float samples, full scale 1.0; refused if any is beyond full scale.
    sample_rate : int
        Sample rate in Hz.
    blocking : bool, optional
        Wait until playback ends (default).

    Raises
    ------
    AudioError
        The ``sounddevice`` module, the PortAudio library or an output device
        is missing (the message says what to install), or the samples would clip.

    .. warning:: Tell the listener to start at a low volume before calling this.
    """
    arr = _as_block(samples, None, "playback")
    _check_range(arr, "playback", 0)
    try:
        import sounddevice as sd
    except ImportError:
        raise AudioError(f"playback needs the sounddevice module; {PLAY_INSTALL_HINT}") from None
    except OSError:  # the module is there but cannot load PortAudio
        raise AudioError(f"playback needs the PortAudio library; {PLAY_INSTALL_HINT}") from None
    try:
        sd.query_devices(kind="output")
    except Exception:  # PortAudioError or ValueError: no output device  # noqa: BLE001
        raise AudioError(
            "playback found no audio output device; connect one, or write a WAV and play it "
            "with another program"
        ) from None
    try:
        sd.play(arr, samplerate=int(sample_rate), blocking=blocking)
    except Exception as exc:  # noqa: BLE001  (PortAudio reports errors of its own type)
        raise AudioError(f"playback failed: {exc}") from None


def write_bytes(path: str | os.PathLike[str], data: bytes, *, force: bool = False) -> Path:
    """Write a non-audio output (TOML, CSV, PNG, JSON) atomically, refusing to overwrite.

    Same guarantees as :func:`write_wav`: the target appears whole or not at all,
    and an existing file is kept unless ``force``.
    """
    target = Path(path)

    def write(tmp: Path) -> None:
        tmp.write_bytes(data)

    suffix = target.suffix or ".out"
    return _atomic_write(target, suffix, write, force=force)
