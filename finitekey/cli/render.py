"""Shared rendering helpers for the sub-commands: JSON output and aligned text tables."""

from __future__ import annotations

import json
import math

import numpy as np

from ..cautions import CAUTION
from ..errors import ComputationError
from ..report.numbers import format_number


def _default(o):
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating,)):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if hasattr(o, "value") and hasattr(o, "name"):  # enums
        return o.value
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def json_document(obj: dict) -> dict:
    """Copy of the mapping ``obj`` with the caution of :mod:`finitekey.cautions` as its last field ``caution``.

    Every JSON document a command prints goes through here, so that no machine-readable output lacks the
    caution that the text outputs carry.
    """
    out = dict(obj)
    out["caution"] = CAUTION
    return out


def to_json_line(obj) -> str:
    """One line of JSON Lines (compact); non-finite floats are refused as in :func:`to_json`."""
    try:
        return json.dumps(obj, default=_default, allow_nan=False, separators=(",", ":"))
    except ValueError as exc:
        raise ComputationError(f"a result holds a number JSON cannot carry ({exc}); no output written") from None


def to_json(obj) -> str:
    """JSON text; non-finite floats are refused so that no NaN reaches a consumer.

    Raises
    ------
    ComputationError
        If a value is not finite (one line, exit status 3, instead of a traceback).
    """
    try:
        return json.dumps(obj, indent=2, default=_default, allow_nan=False)
    except ValueError as exc:
        raise ComputationError(f"a result holds a number JSON cannot carry ({exc}); no output written") from None


def table(rows, headers) -> str:
    """Aligned plain-text table from a list of row sequences."""
    cells = [[str(h) for h in headers]] + [[fmt(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(cells[0], widths)),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(c.rjust(w) if _numeric(c) else c.ljust(w) for c, w in zip(r, widths)) for r in cells[1:]]
    return "\n".join(lines)


def fmt(x) -> str:
    """One value for a text table: the house number formatter (:mod:`finitekey.report.numbers`).

    Integers exact, digits grouped from five on (``4 100 179``); floats to 6
    significant digits, plain decimal in [1e-4, 1e5) and scientific outside
    (``1e-20``, ``2.19898e-2``), trailing zeros dropped.
    """
    if isinstance(x, bool):
        return str(x)
    if isinstance(x, (int, np.integer, float, np.floating)):
        if isinstance(x, (float, np.floating)) and not math.isfinite(float(x)):
            return str(float(x))
        return format_number(x, "real", "text", sig=6, trim=True)
    return str(x)


def _numeric(s: str) -> bool:
    try:
        float(s.replace(" ", ""))
        return True
    except ValueError:
        return False


def caution_block() -> str:
    return CAUTION
