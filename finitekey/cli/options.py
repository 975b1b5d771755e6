"""Option types for the sub-commands: a value is checked against its declared domain while the command line is
parsed, and a bad one gives the one-line message of :class:`~finitekey.errors.InputError` (see
:class:`finitekey.cli.Parser`), with the option named once."""

from __future__ import annotations

import argparse

from ..domains import Domain
from ..errors import InputError

__all__ = ["number", "domain_option"]


def number(field: str, text: str):
    """Parse the text of a number given on the command line: ``1000`` and ``1e6`` (integral) give ``int``.

    Raises
    ------
    InputError
        If ``text`` is not a number, naming ``field`` and the text as given.
    """
    t = str(text).strip()
    try:
        if t.lstrip("+-").isdigit():
            return int(t)
        x = float(t)
    except ValueError:
        raise InputError(field, text, "a number, e.g. 1000, 1e6 or 0.05") from None
    return int(x) if x.is_integer() and abs(x) < 2**53 and "." not in t and "e" in t.lower() else x


def domain_option(field: str, domain: Domain):
    """An argparse ``type=`` that parses a number and checks it against ``domain`` (errors name ``field``).

    Parameters
    ----------
    field : str
        The option as the user writes it, e.g. ``"--dps"``.
    domain : Domain
        The declared range.

    Returns
    -------
    callable
        ``text -> int or float``; raises :class:`argparse.ArgumentTypeError` with the InputError message.
    """
    def parse(text: str):
        try:
            value = number(field, text)
            if domain.integer and isinstance(value, float) and value.is_integer():
                value = int(value)
            return domain.check_scalar(field, value)
        except InputError:  # the message shows the text as typed and the declared range
            raise argparse.ArgumentTypeError(str(InputError(field, text, domain.describe()))) from None

    parse.__name__ = field.lstrip("-")
    return parse
