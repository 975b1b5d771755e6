"""Sweep grids: parsing ``--vary FIELD=VALUES`` and expanding several of them into a cartesian grid.

``VALUES`` is a comma-separated list (``1e6,1e8,1e10``), a range
``start:stop:step`` or a log-spaced range ``start:stop:logN``.

* Ranges are computed in exact decimal arithmetic, so ``0:150:10`` gives
  ``0, 10, ..., 150`` with no floating-point drift; ``stop`` is included
  exactly when it lands on the grid (``0:1:0.3`` gives ``0, 0.3, 0.6, 0.9``).
* ``start:stop:logN`` gives N points from ``start`` to ``stop`` (both
  included, both positive) evenly spaced in ``log10``, the points of
  ``numpy.logspace(log10(start), log10(stop), N)``.  They are computed with
  40 significant decimal digits and rounded once to the nearest float, so
  ``1e6:1e12:log7`` gives the exact integers ``10**6, ..., 10**12`` and an
  in-between point such as ``10**6.5`` is the float nearest to it; a value
  within 1e-30 (relative) of an integer is that integer.

Several axes form a grid in the order given: the first axis varies slowest,
as in :func:`itertools.product`.

References
----------
.. [1] Python documentation, ``decimal`` -- exact decimal arithmetic used for
   the range grid (common practice, no source beyond the library docs).
"""

from __future__ import annotations

import decimal
import itertools
from collections.abc import Sequence
from dataclasses import dataclass

from ..errors import InputError

__all__ = ["MAX_POINTS", "VARY_FORMS", "Axis", "GridPoint", "expand_grid", "parse_value", "parse_vary"]

#: Largest number of points of one axis and of a whole grid (a typo such as 0:1e9:1 must not hang the tool).
MAX_POINTS = 100_000

VARY_FORMS = ("FIELD=VALUES with VALUES a comma-separated list such as 1e6,1e8,1e10, "
              "a range start:stop:step such as 0:150:10 (stop included when it lands on the grid) "
              "or a log-spaced range start:stop:logN such as 1e6:1e12:log7 (N points, both ends included)")


@dataclass(frozen=True)
class Axis:
    """One varied scenario field and its values.

    Attributes
    ----------
    field : str
        Dotted scenario field name, e.g. ``"link.distance_km"``.
    values : tuple
        The values, in the order they were given (ints where the text was integral).
    text : str
        The ``--vary`` expression as typed, for provenance.
    """

    field: str
    values: tuple
    text: str = ""


@dataclass(frozen=True)
class GridPoint:
    """One point of a sweep grid: its position and the field values set there."""

    index: int
    assignments: tuple  # ((field, value), ...) in axis order

    def as_dict(self) -> dict:
        """The field values set at this point, ``{dotted field: value}``.

        Returns
        -------
        dict
        """
        return dict(self.assignments)


def _decimal(field: str, token: str) -> decimal.Decimal:
    try:
        d = decimal.Decimal(token.strip())
    except (decimal.InvalidOperation, ValueError):
        raise InputError(field, token, "a number, e.g. 10, 0.02 or 1e6") from None
    if not d.is_finite():
        raise InputError(field, token, "a finite number")
    return d


def _from_decimal(d: decimal.Decimal):
    """int when the value is whole (1e6 -> 1000000), else the nearest float."""
    if d == d.to_integral_value():
        return int(d)
    return float(d)


def parse_value(field: str, token: str):
    """One list element: a number (int when whole) or, failing that, the text itself.

    Strings are passed on to the protocol's ``with_field``, which validates
    them (e.g. a statistics method name).
    """
    t = token.strip()
    if not t:
        raise InputError(field, token, "a non-empty value")
    low = t.lower()
    if low in ("true", "false"):
        return low == "true"
    try:
        d = decimal.Decimal(t)
    except (decimal.InvalidOperation, ValueError):
        return t
    if not d.is_finite():
        raise InputError(field, token, "a finite number")
    return _from_decimal(d)


def _parse_log_range(field: str, text: str, start_text: str, stop_text: str, count_text: str) -> tuple:
    start, stop = _decimal(field, start_text), _decimal(field, stop_text)
    try:
        n = int(count_text[3:])
    except ValueError:
        n = 0
    if n < 2 or not count_text[3:].isdigit():
        raise InputError(field, text, "a log range start:stop:logN with N an integer of at least 2, e.g. 1e6:1e12:log7")
    if n > MAX_POINTS:
        raise InputError(field, text, f"a log range of at most {MAX_POINTS} points")
    if start <= 0 or stop <= 0:
        raise InputError(field, text, "a log range whose start and stop are both positive")
    with decimal.localcontext() as ctx:
        ctx.prec = 40
        a, b = start.log10(), stop.log10()
        out = []
        for i in range(n):
            if i == 0:
                v = start
            elif i == n - 1:
                v = stop
            else:
                v = decimal.Decimal(10) ** (a + (b - a) * i / (n - 1))
                whole = v.to_integral_value()
                if whole != 0 and abs(v - whole) <= abs(whole) * decimal.Decimal("1e-30"):
                    v = whole
            out.append(_from_decimal(+v))
    return tuple(out)


def _parse_range(field: str, text: str) -> tuple:
    parts = text.split(":")
    if len(parts) != 3:
        raise InputError(field, text, "a range start:stop:step with three numbers, e.g. 0:150:10, "
                                      "or start:stop:logN, e.g. 1e6:1e12:log7")
    if parts[2].strip().lower().startswith("log"):
        return _parse_log_range(field, text, parts[0], parts[1], parts[2].strip().lower())
    start, stop, step = (_decimal(field, p) for p in parts)
    if step == 0:
        raise InputError(field, text, "a range whose step is not zero")
    span = (stop - start) / step
    if span < 0:
        raise InputError(field, text, "a range whose step points from start towards stop")
    count = int(span.to_integral_value(rounding=decimal.ROUND_FLOOR)) + 1
    if count > MAX_POINTS:
        raise InputError(field, text, f"a range of at most {MAX_POINTS} points")
    return tuple(_from_decimal(start + i * step) for i in range(count))


def parse_vary(text: str, fields: Sequence[str] | None = None) -> Axis:
    """Parse one ``FIELD=VALUES`` expression.

    Parameters
    ----------
    text : str
        E.g. ``"link.distance_km=0:150:10"`` or ``"block.pulses=1e8,1e10"``.
    fields : sequence of str, optional
        The valid field names (``protocol.scenario_fields()``); when given, an
        unknown field raises an error listing them.

    Returns
    -------
    Axis

    Raises
    ------
    InputError
        For a malformed expression, an unknown field, an empty list or a bad range.
    """
    if not isinstance(text, str) or "=" not in text:
        raise InputError("--vary", text, VARY_FORMS)
    field, _, values = text.partition("=")
    field = field.strip()
    values = values.strip()
    if not field:
        raise InputError("--vary", text, VARY_FORMS)
    if fields is not None and field not in fields:
        raise InputError("--vary", field, "one of the scenario fields: " + ", ".join(fields))
    if not values:
        raise InputError(field, text, VARY_FORMS)
    if ":" in values:
        vals = _parse_range(field, values)
    else:
        tokens = values.split(",")
        if any(not t.strip() for t in tokens):
            raise InputError(field, values, "a comma-separated list with no empty entries, e.g. 1e6,1e8,1e10")
        vals = tuple(parse_value(field, t) for t in tokens)
        if len(vals) > MAX_POINTS:
            raise InputError(field, values, f"a list of at most {MAX_POINTS} values")
    return Axis(field=field, values=vals, text=text)


def expand_grid(axes: Sequence[Axis]) -> list:
    """Cartesian grid of the axes, first axis slowest; one :class:`GridPoint` per combination.

    With no axes the grid is the single unmodified scenario (one point with no assignments).

    Raises
    ------
    InputError
        If a field is varied twice or the grid has more than :data:`MAX_POINTS` points.
    """
    seen = {}
    for ax in axes:
        if ax.field in seen:
            raise InputError("--vary", ax.text, f"each field varied at most once ({ax.field} is already varied by "
                                                f"--vary {seen[ax.field]})")
        seen[ax.field] = ax.text
    total = 1
    for ax in axes:
        total *= len(ax.values)
    if total > MAX_POINTS:
        raise InputError("--vary", " ".join(a.text for a in axes), f"a grid of at most {MAX_POINTS} points")
    names = [a.field for a in axes]
    return [GridPoint(i, tuple(zip(names, combo)))
            for i, combo in enumerate(itertools.product(*[a.values for a in axes]))]
