"""Errors a user can cause and fix.

Every error carries one line that says what is wrong, where (file, field, row or key) and how to fix it.
The CLI prints that line and exits with status 2; a traceback on bad input is a bug.
"""

from __future__ import annotations


class CoverkitError(Exception):
    """A problem with the user's input that the user can fix.

    Parameters
    ----------
    message
        One line: what is wrong, where, and the fix.
    """

    exit_code = 2

    def __init__(self, message: str) -> None:
        super().__init__(" ".join(str(message).split()))


class InputFileError(CoverkitError):
    """A file is missing, empty, unreadable or of the wrong kind."""


class FieldError(CoverkitError):
    """A field or column named by the user (or required) is missing or has bad values."""


class ProfileError(CoverkitError):
    """A speed profile is unknown or has a bad key or value."""


class NetworkError(CoverkitError):
    """The road data give no usable network (no drivable road, boundary outside the data, ...)."""


class OffNetworkError(CoverkitError):
    """Points lie farther from any road than the snap limit."""


class StudyError(CoverkitError):
    """A study or scenario file has an unknown key, a wrong type or a missing file."""


class ModelError(CoverkitError):
    """A model cannot be posed or solved with the given parameters (for example an unstable queue)."""
