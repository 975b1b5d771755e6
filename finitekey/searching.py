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
* :func:`smallest_block` -- smallest block size at which a warm-startable
  design meets a target: half-decade bracketing on log10 of the size, then
  bisection, then the first whole size at or just above the bracket's end.

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

__all__ = ["maximize_box", "golden_max", "smallest_passing", "smallest_block"]


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


def smallest_block(meets: Callable, x: float, top: float, *, floor: float = 3.0, resolution: float = 1e-3,
                   warm_upwards: bool = False, whole_tries: int = 5):
    """Smallest block size ``N`` with ``meets(N)`` true, searched on ``log10 N`` with warm starts.

    ``meets(N, warm=None)`` returns ``(ok, result, warm_next)``; ``warm_next`` warm-starts later calls.  From
    ``x = log10`` of a first size the bracket moves in half-decade steps: downwards (warm-started from the last
    size that met the target) while sizes meet it and ``log10 N`` stays above ``floor``, or upwards until a size
    does, at most to ``top``; then bisection to ``resolution`` in ``log10 N``, warm-started from the passing end.
    The size returned is the first whole number from ``ceil(10**hi)`` (grown by 0.1 % per try) that meets it.

    Parameters
    ----------
    meets : callable
        ``meets(N, warm=None) -> (ok, result, warm_next)``, monotone in ``N`` (common practice, assumed).
    x : float
        ``log10`` of the first size tried (at most ``top``).
    top : float
        ``log10`` of the largest size tried.
    floor : float
        The downward bracketing stops once ``log10 N`` is at or below it.
    resolution : float
        Width in ``log10 N`` at which bisection stops.
    warm_upwards : bool
        Whether the upward bracketing warm-starts each size from the previous one.
    whole_tries : int
        Whole sizes tried from ``ceil(10**hi)``.

    Returns
    -------
    tuple or None
        None when no size up to ``10**top`` meets the target; else ``(lo, hi, N, result)``: the final bracket in
        ``log10 N`` (``lo == hi`` when the search stopped at its lower end with a pass), the whole size and its
        result, with ``N`` None (and ``result`` the last one computed) when none of the whole sizes tried met
        the target.
    """
    ok, _, th_hi = meets(10 ** x)
    if ok:
        hi = lo = x
        while lo > floor:
            lo -= 0.5
            ok, _, th = meets(10 ** lo, th_hi)
            if not ok:
                break
            hi, th_hi = lo, th
    else:
        lo = x
        while True:
            if lo >= top:
                return None
            hi = min(lo + 0.5, top)
            ok, _, th_hi = meets(10 ** hi, th_hi) if warm_upwards else meets(10 ** hi)
            if ok:
                break
            lo = hi
    while hi - lo > resolution:
        mid = 0.5 * (lo + hi)
        ok, _, th = meets(10 ** mid, th_hi)
        if ok:
            hi, th_hi = mid, th
        else:
            lo = mid
    N = int(math.ceil(10 ** hi))
    for _ in range(whole_tries):
        ok, res, th = meets(N, th_hi)
        if ok:
            return lo, hi, N, res
        N = int(math.ceil(N * 1.001))
    return lo, hi, None, res


def farthest_passing(passes: Callable, warm, best, limit: float, tolerance: float, *, first_step: float = 50.0):
    """Largest ``x`` in ``[0, limit]`` with ``passes(x)`` true, given that ``x = 0`` passes (a reach search).

    The bracket grows from 0 in doubling steps (``first_step``, then twice as far each time), each step
    warm-started from the last passing point, until a point fails or ``limit`` passes; then bisection to
    ``tolerance``, warm-started from the passing end.

    Parameters
    ----------
    passes : callable
        ``passes(x, warm) -> (ok, warm_next, result)``, true up to the reach and false beyond (monotone in ``x``;
        common practice, assumed).
    warm, best
        The warm start and the result of the passing point ``x = 0``.
    limit : float
        Largest ``x`` tried.
    tolerance : float
        Width of the final bracket.

    Returns
    -------
    tuple
        ``(reach, result, limit_reached)``: the largest passing ``x`` found and its result, or ``(None, result,
        True)`` with the result at ``limit`` when ``limit`` itself passes.
    """
    lo, hi, step = 0.0, None, first_step
    while hi is None:
        x = min(lo + step, limit)
        ok, th, res = passes(x, warm)
        if ok and x >= limit:
            return None, res, True
        if ok:
            lo, warm, best = x, th, res
            step *= 2
        else:
            hi = x
    while hi - lo > tolerance:
        mid = 0.5 * (lo + hi)
        ok, th, res = passes(mid, warm)
        if ok:
            lo, warm, best = mid, th, res
        else:
            hi = mid
    return lo, best, False
