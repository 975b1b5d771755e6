"""Outward rounding of arb balls to exact floats, the number-type glue of the decoy estimates.

Every decoy formula runs on two number types: float64 numpy arrays (designs) and python-flint ``arb``
balls (certified key lengths).  These helpers turn a ball into an exact ball at a float on the safe side,
so that later arithmetic cannot widen what a bound means; on numpy input they are the identity (or
``max(x, 0)``).
"""

from __future__ import annotations

import math

import numpy as np
from flint import arb

from ..compile import to_arb

__all__ = ["arb_exp", "floor_arb", "ceil_arb", "clip0", "lower_end", "upper_end"]


def arb_exp(x):
    """``exp`` of a number as an arb ball (the ``exp`` argument of the closed forms for certified use).

    Parameters
    ----------
    x : float, int, Fraction or arb

    Returns
    -------
    arb
    """
    return to_arb(x).exp()


def floor_arb(x: arb) -> float:
    """A float certainly <= every point of the ball.

    Parameters
    ----------
    x : arb

    Returns
    -------
    float
    """
    lo = x.lower()
    f = float(lo)
    return f if arb(f) <= lo else math.nextafter(f, -math.inf)


def ceil_arb(x: arb) -> float:
    """A float certainly >= every point of the ball.

    Parameters
    ----------
    x : arb

    Returns
    -------
    float
    """
    hi = x.upper()
    f = float(hi)
    return f if arb(f) >= hi else math.nextafter(f, math.inf)


def clip0(x):
    """``max(x, 0)`` for a lower bound.

    Parameters
    ----------
    x : arb or numpy array

    Returns
    -------
    arb or numpy array
        For arb: the lower end clipped at 0, as a new exact ball one ulp below the float of the lower end
        (so it is certainly below the ball).
    """
    if isinstance(x, arb):
        lo = float(x.lower())
        return arb(0) if lo <= 0 else arb(math.nextafter(lo, -math.inf))
    return np.maximum(x, 0.0)


def lower_end(x):
    """For arb: an exact ball at a float below the ball (so later steps cannot widen its meaning).

    Parameters
    ----------
    x : arb or float/array (returned unchanged)

    Returns
    -------
    arb or float/array
    """
    if isinstance(x, arb):
        return arb(floor_arb(x))
    return x


def upper_end(x):
    """For arb: an exact ball at a float above the ball.

    Parameters
    ----------
    x : arb or float/array (returned unchanged)

    Returns
    -------
    arb or float/array
    """
    if isinstance(x, arb):
        return arb(ceil_arb(x))
    return x
