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
