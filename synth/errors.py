"""The one exception hierarchy of barwright.

Every problem a user can fix (a bad preset value, an unknown note, a file that
cannot be read) raises a subclass of :class:`SynthError`.  The command line turns
it into one line on stderr and exit code 2.  The classes also derive from the
matching builtin so that library callers may catch either.
"""

from __future__ import annotations


class SynthError(Exception):
    """Base class of every error barwright raises on purpose."""


class ConfigError(SynthError, ValueError):
    """A preset, bar file, event file or option holds a value that is not allowed.

    Parameters
    ----------
    message : str
        What is wrong and what is allowed.
    source : str, optional
        The file (or ``"--option"``) the value came from.
    key : str, optional
        Dotted key inside the file, e.g. ``"undercut.thickness_m"``.
    """

    def __init__(self, message: str, *, source: str | None = None, key: str | None = None):
        self.source = source
        self.key = key
        self.detail = message
        head = ": ".join(p for p in (source, key) if p)
        if not head:
            text = message
        elif message.startswith("= "):
            text = f"{head} {message}"
        else:
            text = f"{head}: {message}"
        super().__init__(text)


class ModelError(SynthError, ValueError):
    """A physically impossible or numerically unsolvable request to a model."""


class AudioError(SynthError, OSError):
    """An audio file cannot be read, written or played as asked."""
