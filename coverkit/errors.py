"""Errors a user can cause and fix.

Every error carries one line that says what is wrong, where (file, field, row or key) and how to fix it.
The CLI prints that line and exits with status 2; a traceback on bad input is a bug.

An error about one of the caller's values names the library parameter (``param``), never a command-line flag or a
study key: each front end words it its own way (``--calls-per-h`` on the command line,
``availability.calls_per_h`` in a study file) with :meth:`CoverkitError.worded`. The message marks where the name
goes with :data:`PARAM`; from Python it reads as the parameter's own name.

Each class also derives from the matching built-in, so ``except ValueError`` / ``except OSError`` code catches them.

>>> err = ModelError(f"{PARAM} 20 is more than the 5 candidate sites.", param="add")
>>> str(err), err.param, isinstance(err, ValueError)
('add 20 is more than the 5 candidate sites.', 'add', True)
>>> err.worded("--add")
'--add 20 is more than the 5 candidate sites.'
"""

from __future__ import annotations

#: where a message names the parameter (replaced by its name, or by a front end's name for it)
PARAM = "{param}"


class CoverkitError(Exception):
    """A problem with the user's input that the user can fix.

    Parameters
    ----------
    message
        One line: what is wrong, where, and the fix. With ``param``, :data:`PARAM` marks where its name goes (else the
        name leads the line).
    param
        The library parameter whose value is wrong (``calls_per_h``), if the error is about one.
    """

    exit_code = 2

    def __init__(self, message: str, *, param: str | None = None) -> None:
        self.param = param
        self.template = " ".join(str(message).split())
        super().__init__(self.worded(param) if param else self.template)

    def worded(self, name: str | None) -> str:
        """The message with the parameter called ``name`` (a flag, a study key).

        >>> CoverkitError("must be positive.", param="calls_per_h").worded("availability.calls_per_h")
        'availability.calls_per_h: must be positive.'
        """
        if not name:
            return str(self)
        if PARAM in self.template:
            return self.template.replace(PARAM, name)
        return f"{name}: {self.template}"

    def __reduce__(self):  # pickling keeps the parameter
        return _rebuild, (type(self), self.template, self.param)


def _rebuild(cls: type[CoverkitError], template: str, param: str | None) -> CoverkitError:
    return cls(template, param=param)


class InputFileError(CoverkitError, OSError):
    """A file is missing, empty, unreadable or of the wrong kind."""


class FieldError(CoverkitError, ValueError):
    """A field or column named by the user (or required) is missing or has bad values."""


class ProfileError(CoverkitError, ValueError):
    """A speed profile is unknown or has a bad key or value."""


class NetworkError(CoverkitError, ValueError):
    """The road data give no usable network (no drivable road, boundary outside the data, ...)."""


class OffNetworkError(CoverkitError, ValueError):
    """Points lie farther from any road than the snap limit."""


class StudyError(CoverkitError, ValueError):
    """A study or scenario file has an unknown key, a wrong type or a missing file."""


class ModelError(CoverkitError, ValueError):
    """A model cannot be posed or solved with the given parameters (for example an unstable queue)."""
