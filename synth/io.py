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

Samples are floats with full scale at 1.0.  A sample beyond full scale raises
:class:`~synth.errors.AudioError` rather than being clipped (libsndfile would
clip or wrap it when converting to PCM); the peak planning of
:mod:`synth.engine.render` makes sure this never happens in a normal render.

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
import dataclasses
import json
import math
import os
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any, Final

import numpy as np

from synth.errors import AudioError

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

DEFAULT_SAMPLE_FORMAT: Final[str] = "pcm24"
"""Default sample format: 24-bit PCM."""

PLAY_INSTALL_HINT: Final[str] = (
    'install the playback extra with: pip install "barwright[play]", and the PortAudio '
    "library from your system's packages (for example libportaudio2 or portaudio)"
)


# --------------------------------------------------------------------------- checks
def check_writable(path: str | os.PathLike[str], *, force: bool = False) -> Path:
    """Raise unless ``path`` may be written (new file, or ``force``); return it as a Path.

    Call it before a long render so that a refusal comes before the work.
    """
    p = Path(path)
    if p.is_dir():
        raise AudioError(f"{p}: is a folder; give a file name")
    if p.exists() and not force:
        raise AudioError(f"{p}: already exists; use --force to overwrite it")
    if not p.parent.is_dir():
        raise AudioError(f"{p}: folder {p.parent} does not exist")
    return p


def _atomic_write(target: Path, suffix: str, write, *, force: bool) -> Path:
    """Run ``write(temp_path)``, then move the temporary file onto ``target``."""
    check_writable(target, force=force)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=f".partial{suffix}",
                                    dir=target.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        write(tmp)
        if force:
            os.replace(tmp, target)
        else:
            _move_without_overwrite(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    return target


def _move_without_overwrite(tmp: Path, target: Path) -> None:
    # A hard link fails if the target appeared meanwhile, so no file is ever overwritten.
    try:
        os.link(tmp, target)
    except FileExistsError:
        raise AudioError(f"{target}: already exists; use --force to overwrite it") from None
    except OSError:  # file system without hard links: check, then rename
        if target.exists():
            raise AudioError(f"{target}: already exists; use --force to overwrite it") from None
        os.replace(tmp, target)
        return
    tmp.unlink()


def _as_block(block: Any, channels: int | None, where: str) -> np.ndarray:
    arr = np.asarray(block)
    if arr.dtype.kind != "f":
        raise AudioError(f"{where}: samples must be floats (full scale 1.0), got {arr.dtype}")
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
    if not arr.size:
        return
    peak = float(np.max(np.abs(arr)))
    if peak <= 1.0:
        return
    if not math.isfinite(peak):
        bad = first + int(np.flatnonzero(~np.isfinite(arr).all(axis=1))[0])
        raise AudioError(f"{where}: sample {bad} is not finite; nothing was written")
    bad = first + int(np.flatnonzero((np.abs(arr) > 1.0).any(axis=1))[0])
    raise AudioError(
        f"{where}: sample {bad} is beyond full scale (peak {peak:.4g} = "
        f"{20 * math.log10(peak):+.2f} dBFS) and would clip; lower the gain or normalise "
        "the peak; nothing was written"
    )


# --------------------------------------------------------------------------- writing
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
        blocks (all with the same number of channels), full scale 1.0.
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
    if sample_rate not in SAMPLE_RATES_HZ:
        raise AudioError(
            f"{target}: sample rate {sample_rate} Hz: must be one of "
            + ", ".join(str(r) for r in SAMPLE_RATES_HZ)
        )
    if sample_format not in SAMPLE_FORMATS:
        raise AudioError(
            f"{target}: sample format {sample_format!r}: must be one of "
            + ", ".join(SAMPLE_FORMATS)
        )
    if channels is not None and channels not in (1, 2):
        raise AudioError(f"{target}: channels = {channels}: must be 1 or 2")
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
        first = _as_block(first, channels, where)
        n_ch = first.shape[1]
        written = 0
        try:
            f = sf.SoundFile(tmp, mode="w", samplerate=int(sample_rate), channels=n_ch,
                             subtype=subtype, format="WAV")
        except (sf.LibsndfileError, RuntimeError, OSError) as exc:
            raise AudioError(f"{where}: cannot write WAV ({exc})") from exc
        with f:
            block = first
            while block is not None:
                _check_range(block, where, written)
                try:
                    f.write(block)
                except (sf.LibsndfileError, RuntimeError, OSError) as exc:
                    raise AudioError(f"{where}: cannot write WAV ({exc})") from exc
                written += block.shape[0]
                nxt = next(iterator, None)  # errors of the block source pass through as they are
                block = None if nxt is None else _as_block(nxt, n_ch, where)

    return _atomic_write(target, ".wav", write, force=force)


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
    info = sf.info(str(path))
    return int(info.frames), int(info.samplerate), int(info.channels)


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
