"""Exceptions raised for bad input.

Every error raised on purpose by surrogate3d derives from :class:`Surrogate3DError`, so
that the command line can print it in one line and exit with a non-zero status.
"""


class Surrogate3DError(Exception):
    """Base class of all errors surrogate3d raises for bad input or bad files."""


class ValidationError(Surrogate3DError, ValueError):
    """A scene, a table or a parameter breaks a documented rule.

    The message names the variable, where it is wrong (index) and the offending value.
    """


class FormatError(Surrogate3DError):
    """A file is missing, unreadable, truncated, of another format version, or lacks a stored result."""


class ParameterError(ValidationError):
    """A function or estimator parameter is outside its allowed range."""


class OutputError(Surrogate3DError, OSError):
    """An output cannot be written: its location is wrong, in use, full, read-only or not permitted.

    The message names the path and says what to do about it.
    """
