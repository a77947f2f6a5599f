"""Exceptions that carry a clear, one-line message for the user.

Every error a user can cause (a bad file, a bad profile, a missing device)
is a :class:`PopmeterError`. The command line prints ``str(error)`` on one
line and exits with :attr:`PopmeterError.exit_code`; it shows a traceback only
with ``--debug``. Library callers catch the specific subclass they care about.
"""

from __future__ import annotations


class PopmeterError(Exception):
    """Base class of every error popmeter reports to its user.

    The message must name the thing at fault (a file path, a profile key)
    and what is wrong with it, in one line.
    """

    exit_code: int = 2


class InputError(PopmeterError):
    """A recording cannot be read or holds no usable audio."""


class DependencyError(PopmeterError):
    """An optional system component is missing (ffmpeg, PortAudio)."""


class ConfigError(PopmeterError):
    """A boat profile or QC spec file is invalid.

    ``problems`` lists one line per problem so that a user can fix all of
    them in one go; ``str(error)`` joins them.
    """

    def __init__(self, source: str, problems: list[str]):
        self.source = source
        self.problems = list(problems)
        joined = "; ".join(self.problems)
        super().__init__(f"{source}: {joined}")


class ProfileError(ConfigError):
    """A boat profile (TOML) is invalid."""


class SpecError(ConfigError):
    """A QC spec (TOML) is invalid."""


class DeviceError(PopmeterError):
    """An audio input device is missing, busy, or failed during capture."""


class UsageError(PopmeterError):
    """The command line or an API call was given contradictory arguments."""


class OutputError(PopmeterError):
    """An output file or folder cannot be written (missing or read-only
    folder, a file in the way, a full disk)."""


def output_error(path: object, error: OSError, *, folder: bool = False) -> OutputError:
    """One-line :class:`OutputError` for ``error`` raised while writing ``path``.

    Names the path the user gave (not a temporary file beside it) and, when a
    file stands where a folder is needed, that file. ``folder`` is true when
    ``path`` is meant to be a folder (a report directory); default False (a
    file, so an existing folder there is the problem).
    """
    from pathlib import Path

    target = Path(str(path))
    for parent in target.parents:
        if parent.exists() and not parent.is_dir():
            return OutputError(f"{path}: cannot write ({parent} is a file, not a folder)")
    if not folder and target.is_dir():
        return OutputError(f"{path}: cannot write (it is a folder; give a file name)")
    reason = error.strerror or str(error)
    return OutputError(f"{path}: cannot write ({reason})")
