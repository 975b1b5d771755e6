"""One number formatter for every human-readable output (text, Markdown, LaTeX, HTML) and one for CSV.

Human formats
-------------
A table column is formatted as a whole (:func:`format_column`), so every cell
of a column uses the same notation:

* each column has a *kind* (:data:`KINDS`), chosen from its key by
  :func:`column_kind`; the kind fixes the significant digits
  (:data:`SIGNIFICANT`) and whether the notation may be plain decimal;
* a column is written in plain decimal when every non-zero value lies in
  ``[1e-4, 1e5)`` (and the kind allows it), otherwise every non-zero value is
  written in scientific notation -- never ``0.001`` beside ``1.000e-03``;
* counts (key lengths, block sizes) and every other integer are exact, with
  their digits grouped in threes from five digits on (``4 100 179``; the
  grouping of ISO 80000-1 and of siunitx's default, common practice);
* epsilons (failure probabilities) are always scientific, 3 significant digits;
* scenario inputs (the varied fields) are shown exactly as the shortest
  decimal that reads back as the same float, with trailing zeros to align the
  column.

A cell is first decomposed into digits and an exponent (:class:`Number`);
each output only spells that decomposition (``1.23e-5`` in text,
``1.23×10⁻⁵`` in Markdown and HTML, ``1.23e-5`` inside a siunitx ``S``
column in LaTeX, which typesets it as :math:`1.23\\times10^{-5}`), so the
digits are the same in every format.

CSV and JSON
------------
Machine formats keep full precision: floats are written as Python's ``repr``,
the shortest decimal that reads back as the identical double (so scenario
inputs given as decimal text come back as that text, e.g. ``0.02``).  The one
exception are epsilon columns in CSV (upper bounds on failure probabilities):
a ledger sum such as ``1.0000099999999999e-10`` (one unit in the last place
below ``1.00001e-10``, because every secrecy term is rounded down) is written
rounded *up* to 15 significant digits, ``1.00001e-10``.  Fifteen digits survive
any decimal -> double -> decimal round trip (DBL_DIG = 15 for IEEE-754
binary64), and rounding up never understates a failure probability.  JSON
keeps the exact double everywhere.

References
----------
.. [1] ISO 80000-1:2009, Quantities and units -- Part 1: General, clause 7.3.1
   (digits grouped in threes separated by a small space).
.. [2] IEEE 754-2008, binary64: 15 significant decimal digits survive a round trip (DBL_DIG in C's float.h).
.. [3] J. Wright, "siunitx -- A comprehensive (SI) units package", CTAN (2022) -- ``S`` columns, ``table-format``.
"""

from __future__ import annotations

import decimal
import math
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "KINDS",
    "SIGNIFICANT",
    "Number",
    "column_kind",
    "csv_number",
    "format_column",
    "format_number",
    "group_digits",
    "spell",
]

#: Quantity kinds and their significant digits in human formats (None: exact).
SIGNIFICANT = {"count": None, "input": None, "epsilon": 3, "rate": 4, "fraction": 4, "time": 3, "real": 4}
KINDS = tuple(SIGNIFICANT) + ("text",)

#: Plain decimal notation is used for a column whose non-zero magnitudes all lie in this range.
FIXED_RANGE = (1e-4, 1e5)

_TARGETS = ("text", "md", "html", "tex")


@dataclass(frozen=True)
class Number:
    """A formatted number before it is spelled for one output.

    Attributes
    ----------
    digits : str
        Sign, integer digits and decimals, e.g. ``"-1.234"`` or ``"4100179"`` (no grouping).
    exponent : int or None
        Power of ten in scientific notation, None in plain decimal.
    group : bool
        Whether the integer digits are grouped in threes (counts).
    """

    digits: str
    exponent: int | None = None
    group: bool = False


def column_kind(key: str, values: Sequence = ()) -> str:
    """The quantity kind of a table column from its key (and, for varied fields, its values).

    Parameters
    ----------
    key : str
        Column key, e.g. ``"secret_key_length"``, ``"eps_total"``, ``"link.distance_km"``.
    values : sequence, optional
        The column's values; a column whose values are all strings is ``"text"``,
        a varied field whose values are all integers is ``"count"``.
    """
    vals = [v for v in values if v is not None]
    if vals and all(isinstance(v, str) for v in vals):
        return "text"
    last = key.rsplit(".", 1)[-1]
    if key in ("secret_key_length", "block_size"):
        return "count"
    if "." in key and not key.startswith("parameters."):  # a varied scenario field: an input, shown exactly
        return "input"
    if key.startswith("eps") or "epsilon" in last:
        return "epsilon"
    if "rate" in key and key.startswith("secret_key"):
        return "rate"
    if key.endswith("_s"):
        return "time"
    if key.startswith("parameters."):
        return "fraction"
    return "real"


def group_digits(digits: str, sep: str = " ") -> str:
    """Group the integer part of ``digits`` in threes from five digits on (``4100179`` -> ``4 100 179``)."""
    sign = "-" if digits.startswith("-") else ""
    body = digits.lstrip("-")
    whole, dot, frac = body.partition(".")
    if len(whole) < 5:
        return digits
    parts = []
    while whole:
        parts.insert(0, whole[-3:])
        whole = whole[:-3]
    return sign + sep.join(parts) + dot + frac


def _round_sig(x: float, sig: int) -> decimal.Decimal:
    d = decimal.Decimal(repr(x))
    if d == 0:
        return d
    exp = d.adjusted()
    q = decimal.Decimal(1).scaleb(exp - sig + 1)
    r = d.quantize(q, rounding=decimal.ROUND_HALF_EVEN)
    if r.adjusted() != exp:  # 9.9996 -> 10.00: one digit more, requantize
        r = d.quantize(q.scaleb(1), rounding=decimal.ROUND_HALF_EVEN)
    return r


def _fixed(d: decimal.Decimal, decimals: int) -> str:
    return f"{d:.{max(decimals, 0)}f}"


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _to_float_or_int(x):
    try:
        import numpy as np
        if isinstance(x, np.integer):
            return int(x)
        if isinstance(x, np.floating):
            return float(x)
    except ImportError:  # pragma: no cover
        pass
    return x


def format_column(values: Sequence, kind: str, sig: int | None = None) -> list:
    """Format one column's values with one notation; returns a :class:`Number`, str or None per cell.

    Strings are passed through, booleans become ``"true"``/``"false"``, None
    stays None (a missing value), lists become a list of the formatted
    elements (formatted together with the column).

    Parameters
    ----------
    values : sequence
        The column's cells.
    kind : str
        One of :data:`KINDS` (see :func:`column_kind`).
    sig : int, optional
        Significant digits instead of the kind's (:data:`SIGNIFICANT`).
    """
    from ..errors import InputError
    if kind not in KINDS:
        raise InputError("kind", kind, "one of: " + ", ".join(KINDS))
    values = [_to_float_or_int(v) if not isinstance(v, (list, tuple)) else [_to_float_or_int(e) for e in v]
              for v in values]
    flat = []
    for v in values:
        flat.extend(v if isinstance(v, (list, tuple)) else [v])
    nums = [v for v in flat if _is_number(v) and math.isfinite(v)]
    sig = sig or SIGNIFICANT.get(kind)
    if kind == "count" and all(isinstance(v, int) or float(v).is_integer() for v in nums):
        def one(v):
            return Number(str(int(v)), None, True)
        return _map(values, one)
    if kind in ("count", "text"):
        kind, sig = "real", sig or SIGNIFICANT["real"]
    nonzero = [abs(float(v)) for v in nums if v != 0]
    lo, hi = FIXED_RANGE
    fixed = kind != "epsilon" and all(lo <= a < hi for a in nonzero)
    if kind == "input":
        exact = [decimal.Decimal(repr(float(v))) if isinstance(v, float) else decimal.Decimal(v) for v in nums]
        if fixed:
            decimals = max([0] + [-d.normalize().as_tuple().exponent for d in exact if d != 0])

            def one(v):
                return Number(_fixed(decimal.Decimal(repr(v)) if isinstance(v, float) else decimal.Decimal(v),
                                     decimals), None, False)
        else:
            mant = []
            for d in exact:
                if d != 0:
                    m = d.normalize().scaleb(-d.adjusted())
                    mant.append(max(0, -m.as_tuple().exponent))
            decimals = max([0] + mant)

            def one(v):
                d = decimal.Decimal(repr(v)) if isinstance(v, float) else decimal.Decimal(v)
                if d == 0:
                    return Number("0")
                e = d.adjusted()
                return Number(_fixed(d.scaleb(-e), decimals), e, False)
        return _map(values, one)
    if fixed:
        def one(v):
            if isinstance(v, int):  # integers are exact counts: never rounded
                return Number(str(v), None, True)
            if v == 0:
                return Number("0")
            r = _round_sig(float(v), sig)
            return Number(_fixed(r, sig - 1 - r.adjusted()), None, False)
    else:
        def one(v):
            if isinstance(v, int) and kind != "epsilon":  # integers are exact counts: never rounded
                return Number(str(v), None, True)
            if v == 0:
                return Number("0")
            r = _round_sig(float(v), sig)
            e = r.adjusted()
            return Number(_fixed(r.scaleb(-e), sig - 1), e, False)
    return _map(values, one)


def _map(values, one) -> list:
    def cell(v):
        if v is None:
            return None
        if isinstance(v, bool):
            return str(v).lower()
        if isinstance(v, str):
            return v
        if _is_number(v):
            if isinstance(v, float) and not math.isfinite(v):  # pragma: no cover - sweeps never store these
                return str(v)
            return one(v)
        return str(v)
    return [[cell(e) for e in v] if isinstance(v, (list, tuple)) else cell(v) for v in values]


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def spell(cell, target: str = "text", missing: str = "–") -> str:
    """Spell one formatted cell (from :func:`format_column`) for an output.

    Parameters
    ----------
    cell : Number, str, list or None
    target : {"text", "md", "html", "tex"}
        ``text``: ``1.23e-5``, digits grouped with a space; ``md``: ``1.23×10⁻⁵``,
        grouped with a space; ``html``: as md, grouped with a narrow no-break
        space (U+202F); ``tex``: the input syntax of a siunitx ``S`` column
        (``1.23e-5``, no grouping: siunitx groups).  Text is returned as is
        (escaping is the caller's).
    missing : str
        What None becomes.
    """
    if cell is None:
        return missing
    if isinstance(cell, list):
        return ", ".join(spell(c, target, missing) for c in cell)
    if not isinstance(cell, Number):
        return str(cell)
    if target == "tex":
        digits = cell.digits
    else:
        digits = group_digits(cell.digits, "\u202f" if target == "html" else " ") if cell.group else cell.digits
    if cell.exponent is None:
        return digits
    if target in ("text", "tex"):
        return f"{digits}e{cell.exponent}"
    return f"{digits}×10{str(cell.exponent).translate(_SUPERSCRIPT)}"


def format_number(x, kind: str = "real", target: str = "text", sig: int | None = None, trim: bool = False) -> str:
    """One value formatted alone (a column of one): ``format_number(1.5e-7, "epsilon") == "1.50e-7"``.

    ``trim`` drops trailing zeros of the digits (for a value shown alone, where
    no column needs aligning: ``0.5`` rather than ``0.500000``).
    """
    cell = format_column([x], kind, sig)[0]
    if trim and isinstance(cell, Number) and "." in cell.digits:
        cell = Number(cell.digits.rstrip("0").rstrip("."), cell.exponent, cell.group)
    return spell(cell, target)


def _csv_up15(x: float) -> str:
    s = repr(x)
    d = decimal.Decimal(s)
    if len(d.as_tuple().digits) <= 15 or d == 0:
        return s
    r = d.quantize(decimal.Decimal(1).scaleb(d.adjusted() - 14), rounding=decimal.ROUND_CEILING)
    return repr(float(r)) if decimal.Decimal(repr(float(r))) >= d else str(r)


def csv_number(x, kind: str = "real") -> str:
    """A CSV cell: exact shortest round-trip ``repr`` for floats; epsilons rounded up to 15 digits.

    None is the empty string, booleans ``true``/``false``, lists ``a;b;c``.
    """
    x = _to_float_or_int(x)
    if x is None:
        return ""
    if isinstance(x, bool):
        return str(x).lower()
    if isinstance(x, (list, tuple)):
        return ";".join(csv_number(v, kind) for v in x)
    if isinstance(x, float):
        return _csv_up15(x) if kind == "epsilon" else repr(x)
    return str(x)
