"""Parameter declarations and their domains.

A :class:`Domain` is data: lower and upper limits, whether each end is open, and
whether the value must be an integer.  One :meth:`Domain.check` serves every
parameter of every bound, protocol and file, so that all error messages have
the same shape: field, value received, allowed range.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from .errors import InputError

__all__ = ["Domain", "Parameter", "PROBABILITY", "COUNT", "POSITIVE_COUNT", "POSITIVE_REAL", "SECURITY_EPSILON",
           "DPS", "RATE_HZ", "DETECTION_PROBABILITY"]


@dataclass(frozen=True, slots=True)
class Domain:
    """An interval of the real line, optionally restricted to integers.

    Parameters
    ----------
    lower, upper : float
        Limits; use ``-math.inf`` / ``math.inf`` for none.
    lower_open, upper_open : bool
        Whether the corresponding limit is excluded.
    integer : bool
        Whether values must be whole numbers.
    """

    lower: float = -math.inf
    upper: float = math.inf
    lower_open: bool = False
    upper_open: bool = False
    integer: bool = False

    def describe(self) -> str:
        """Return the allowed range in words, e.g. ``'an integer in [1, inf)'``."""
        kind = "an integer" if self.integer else "a finite real number"
        return f"{kind} in {self.interval()}"

    def interval(self) -> str:
        """The interval alone, e.g. ``'[1, inf)'``."""
        left = "(" if (self.lower_open or math.isinf(self.lower)) else "["
        right = ")" if (self.upper_open or math.isinf(self.upper)) else "]"
        return f"{left}{_fmt(self.lower)}, {_fmt(self.upper)}{right}"

    def contains(self, x: float) -> bool:
        """Whether the scalar ``x`` lies in the domain."""
        if not math.isfinite(x):
            return False
        if self.integer and x != math.floor(x):
            return False
        if x < self.lower or (self.lower_open and x == self.lower):
            return False
        if x > self.upper or (self.upper_open and x == self.upper):
            return False
        return True

    def check(self, field: str, value):
        """Validate ``value`` (scalar or array) and return it.

        Scalars come back as Python ``int`` (integer domains) or ``float``;
        arrays come back as numpy arrays of dtype float64 (or int64/object for
        large integers).  Booleans, strings, NaN and infinities are rejected.

        Raises
        ------
        InputError
            If any element is outside the domain, naming ``field``, the value and the range.
        """
        if isinstance(value, (bool, np.bool_)) or value is None or isinstance(value, (str, bytes)):
            raise InputError(field, value, self.describe())
        if isinstance(value, numbers.Number):
            return self._check_scalar(field, value)
        try:
            arr = np.asarray(value)
        except Exception as exc:  # pragma: no cover - exotic containers
            raise InputError(field, value, self.describe()) from exc
        if arr.dtype.kind not in "iuf" or arr.size == 0:
            raise InputError(field, value, self.describe())
        if arr.ndim == 0:
            return self._check_scalar(field, arr.item())
        flat = arr.ravel()
        if not self._array_ok(flat):
            bad = np.array([not self.contains(float(x)) for x in flat.tolist()])
            first = flat[np.argmax(bad)].item()
            raise InputError(field, first, self.describe())
        if self.integer:
            if arr.dtype.kind in "iu":
                return arr.astype(np.int64, copy=False) if arr.dtype.kind == "i" or arr.max() < 2**62 \
                    else arr.astype(object)
            return arr.astype(np.int64) if np.all(np.abs(arr) < 2**62) else arr.astype(object)
        return arr.astype(float, copy=False)

    def check_scalar(self, field: str, value):
        """Validate one value (a file field, an option) and return it as ``int`` or ``float``.

        Like :meth:`check`, but a list, table or array is refused with the allowed range, instead of being
        validated element by element: a field of a block or scenario holds one number.

        Raises
        ------
        InputError
            If ``value`` is not a single number inside the domain.
        """
        if isinstance(value, (list, tuple, dict, set, frozenset)) or (isinstance(value, np.ndarray)
                                                                      and value.ndim > 0):
            raise InputError(field, value, self.describe() + " (one number, not a list or table)")
        return self.check(field, value)

    def _array_ok(self, flat) -> bool:
        """Fast whole-array test (min/max propagate NaN); the slow path finds the culprit."""
        lo, hi = flat.min(), flat.max()
        if flat.dtype.kind == "f" and not (np.isfinite(lo) and np.isfinite(hi)):
            return False
        lo, hi = float(lo), float(hi)
        if lo < self.lower or hi > self.upper:
            return False
        if (self.lower_open and lo == self.lower) or (self.upper_open and hi == self.upper):
            return False
        if self.integer and flat.dtype.kind == "f" and not np.array_equal(flat, np.floor(flat)):
            return False
        return True

    def _check_scalar(self, field, value):
        if isinstance(value, numbers.Integral):
            x = int(value)
            ok = self.contains(float(x)) if abs(x) < 2**1000 else False
            if not ok:
                raise InputError(field, value, self.describe())
            return x
        try:
            x = float(value)
        except (TypeError, OverflowError) as exc:
            raise InputError(field, value, self.describe()) from exc
        if not self.contains(x):
            raise InputError(field, value, self.describe())
        return int(x) if self.integer else x


@dataclass(frozen=True, slots=True)
class Parameter:
    """A named, documented parameter with its domain.

    Parameters
    ----------
    name : str
        Python keyword used in the API and in files.
    latex : str
        LaTeX symbol used in formulas, e.g. ``r"\\varepsilon"``.
    domain : Domain
        Allowed values.
    description : str
        One line saying what the parameter is, with its unit if any.
    typical : tuple of float
        A range of typical values, used by generic tests and documentation.
    """

    name: str
    latex: str
    domain: Domain
    description: str
    typical: tuple = (1.0, 1.0)

    def check(self, value, field: str | None = None):
        """Validate ``value`` against the domain; see :meth:`Domain.check`."""
        return self.domain.check(field or self.name, value)


def _fmt(x: float) -> str:
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if float(x).is_integer() and abs(x) < 1e15:
        return str(int(x))
    short = f"{float(x):g}"  # 1e15 reads "1e+15", not "1000000000000000.0"; used only when exact
    return short if float(short) == float(x) else repr(float(x))


PROBABILITY = Domain(0.0, 1.0, lower_open=True, upper_open=True)
COUNT = Domain(0, math.inf, integer=True)
POSITIVE_COUNT = Domain(1, math.inf, integer=True)
POSITIVE_REAL = Domain(0.0, math.inf, lower_open=True)
#: Security parameters (eps_sec, eps_cor, eps_total) given by a user.  Values below 1e-100 are far below any
#: target in use (common practice, no source) and would underflow float64 once split over a ledger and
#: squared (the smoothing term of BB84), so they are refused here, naming the field as given.
SECURITY_EPSILON = Domain(1e-100, 1.0, upper_open=True)
#: Signal or pulse rates in Hz: 1 mHz to 1 PHz, far beyond any source in use (common practice, no source); a
#: subnormal rate would make the block fill time infinite.
RATE_HZ = Domain(1e-3, 1e15)
#: Detection probability per signal of a budget: at least 1e-100, so that detections / probability (the
#: signals per block) stays finite.
DETECTION_PROBABILITY = Domain(1e-100, 1.0, upper_open=True)
#: Decimal digits of an mpmath evaluation (``--dps``): below 15 is less than float64 gives; 1000 is far beyond
#: any need and keeps a mistyped value (10^6 digits was reported to run for about 7 minutes) from hanging.
DPS = Domain(15, 1000, integer=True)
