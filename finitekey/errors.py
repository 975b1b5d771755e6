"""One exception family for finitekey.

Every user-facing error names the field that is wrong, repeats the value that
was given, and states what is allowed.  The command line turns these into a
one-line message and exit code 2; nothing below the API prints a traceback for
a user error.
"""

from __future__ import annotations

__all__ = ["FiniteKeyError", "InputError", "PathError", "ComputationError"]


class FiniteKeyError(Exception):
    """Base class of every error raised on purpose by finitekey."""


class InputError(FiniteKeyError, ValueError):
    """A value given by the user is outside its allowed range or of the wrong type.

    Parameters
    ----------
    field : str
        Name of the parameter or file field, e.g. ``"eps"`` or ``"link.distance_km"``.
    value : object
        The value received; ``None`` means that no value was given (a missing field, option or a JSON
        ``null``), and the message then says the field is missing instead of showing ``None``.
    allowed : str
        Plain-language description of what is allowed, e.g. ``"a real number in (0, 1)"``.
    """

    def __init__(self, field: str, value: object, allowed: str):
        self.field = field
        self.value = value
        self.allowed = allowed
        if value is None:
            super().__init__(f"{field} is missing; expected {_strip_missing(allowed)}")
        else:
            super().__init__(f"{field} = {_show(value)} is not allowed; expected {allowed}")

    def __reduce__(self):
        # Rebuild from the three fields, so the error survives pickling (worker processes, Dask).
        return (type(self), (self.field, self.value, self.allowed))


class PathError(InputError):
    """The operating system refused to read or write a file or stream the user named.

    One line naming the option, the path and the reason, e.g.
    ``--output 'out/t.md': cannot write: No space left on device``.

    Parameters
    ----------
    field : str
        The option or field that named the path, e.g. ``"--output"``.
    path : str
        The path as given (or ``"<standard output>"``).
    reason : str
        What failed and why.
    """

    def __init__(self, field: str, path: str, reason: str):
        self.field = field
        self.value = path
        self.allowed = reason
        Exception.__init__(self, f"{field} {path!r}: {reason}")


class ComputationError(FiniteKeyError, ArithmeticError):
    """A numerical procedure could not produce a result it can vouch for."""


def _strip_missing(allowed: str) -> str:
    """Drop a trailing "(missing field)"-style note from ``allowed``: the message already says "missing"."""
    text = str(allowed)
    for note in (" (missing field)", " (required field)", " (required)"):
        if text.endswith(note):
            text = text[: -len(note)]
    return text.replace(" (missing field; ", " (")


def _show(value: object) -> str:
    text = repr(value)
    if len(text) > 80:
        text = text[:77] + "..."
    return text
