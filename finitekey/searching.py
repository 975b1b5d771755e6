"""Generic numerical helpers for parameter design and block-size searches (protocol independent).

This module depends on numpy and scipy only, so protocol modules can use it
without an import cycle.  Nothing here decides a reported key length: the
optimisers pick parameters from float objectives, and the caller recomputes
the certified key length at the chosen point.

* :func:`maximize_box` -- maximise a vectorised objective over a box: a dense
  grid evaluated in one numpy call, then Nelder-Mead from the best grid point,
  clipped to the box.
* :func:`golden_max` -- bounded golden-section search for a scalar objective
  that is expensive (e.g. uses exact statistics).
* :func:`smallest_passing` -- smallest integer at which a monotone predicate
  becomes true: exponential bracketing, then bisection to a relative
  resolution.

References
----------
.. [1] J. A. Nelder and R. Mead, "A simplex method for function minimization",
   Comput. J. 7, 308 (1965).
.. [2] J. Kiefer, "Sequential minimax search for a maximum", Proc. Amer. Math.
   Soc. 4, 502 (1953) -- golden-section search.
"""

from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

__all__ = ["maximize_box", "golden_max", "smallest_passing"]


def maximize_box(f: Callable, bounds: Sequence[tuple], grid: Sequence[int], *, polish: bool = True,
                 xatol: float = 1e-6, maxiter: int = 200):
    """Maximise ``f(*coords)`` over the box ``bounds``.

    Parameters
    ----------
    f : callable
        Vectorised: takes one numpy array per coordinate (broadcast) and returns values; NaN counts as -inf.
    bounds : sequence of (lo, hi)
    grid : sequence of int
        Grid points per coordinate for the initial scan.
    polish : bool
        Run Nelder-Mead from the best grid point.

    Returns
    -------
    (x, value) : (numpy.ndarray, float)
    """
    axes = [np.linspace(lo, hi, m) for (lo, hi), m in zip(bounds, grid)]
    mesh = np.meshgrid(*axes, indexing="ij")
    with np.errstate(all="ignore"):
        vals = np.asarray(f(*mesh), dtype=float)
    vals = np.where(np.isfinite(vals), vals, -np.inf)
    idx = np.unravel_index(int(np.argmax(vals)), vals.shape)
    x0 = np.array([ax[i] for ax, i in zip(axes, idx)])
    best = float(vals[idx])
    if not polish or not np.isfinite(best):
        return x0, best
    lo = np.array([b[0] for b in bounds], dtype=float)
    hi = np.array([b[1] for b in bounds], dtype=float)
    free = np.flatnonzero(hi > lo)
    if free.size == 0:
        return x0, best

    def full(y):
        x = x0.copy()
        x[free] = np.clip(y, lo[free], hi[free])
        return x

    def neg(y):
        with np.errstate(all="ignore"):
            v = float(f(*full(y)))
        return -v if math.isfinite(v) else math.inf

    step = np.array([(bounds[i][1] - bounds[i][0]) / max(grid[i] - 1, 1) for i in free])
    y0 = x0[free]
    simplex = [y0] + [np.clip(y0 + np.eye(free.size)[j] * step[j] * 0.5, lo[free], hi[free]) for j in range(free.size)]
    for j in range(free.size):  # a vertex stuck on the boundary: step inwards instead
        if np.array_equal(simplex[j + 1], y0):
            simplex[j + 1] = np.clip(y0 - np.eye(free.size)[j] * step[j] * 0.5, lo[free], hi[free])
    from scipy import optimize  # here, not at module top: it adds about 0.2 s to every start-up

    res = optimize.minimize(neg, y0, method="Nelder-Mead",
                            options={"initial_simplex": np.array(simplex), "xatol": xatol, "fatol": 1e-9,
                                     "maxiter": maxiter})
    v = -neg(res.x)
    if v >= best:
        return full(res.x), v
    return x0, best


def golden_max(f: Callable, lo: float, hi: float, *, iters: int = 20):
    """Bounded golden-section search for the maximum of a scalar, unimodal ``f`` on [lo, hi].

    Returns ``(x, f(x))`` for the best point evaluated.
    """
    r = (math.sqrt(5) - 1) / 2
    a, b = lo, hi
    c, d = b - r * (b - a), a + r * (b - a)
    fc, fd = f(c), f(d)
    best = max((fc, c), (fd, d))
    for _ in range(iters):
        if fc >= fd:
            b, d, fd = d, c, fc
            c = b - r * (b - a)
            fc = f(c)
        else:
            a, c, fc = c, d, fd
            d = a + r * (b - a)
            fd = f(d)
        best = max(best, (fc, c), (fd, d))
    return best[1], best[0]


def smallest_passing(passes: Callable[[int], bool], start: int, *, limit: int, rel_resolution: float = 0.0,
                     lower: int = 1):
    """Smallest integer ``m`` in [lower, limit] with ``passes(m)`` true, for a predicate monotone in ``m``.

    Brackets by doubling from ``start``, then bisects until the bracket is narrower than
    ``max(1, rel_resolution * m)``; returns the passing end (so never a failing size).

    Returns
    -------
    int or None
        None if ``passes(limit)`` is false.
    """
    lo = max(lower, 1) - 1  # lo: known (or assumed) failing; 0 means none known
    hi = max(int(start), lower)
    while not passes(hi):
        lo = hi
        if hi >= limit:
            return None
        hi = min(limit, hi * 2)
    while hi - lo > max(1, int(rel_resolution * hi)):
        mid = (lo + hi) // 2
        if passes(mid):
            hi = mid
        else:
            lo = mid
    return hi
