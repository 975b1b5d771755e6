"""Phase-error sampling bounds and binary entropy for the key-length formulas (shared protocol helper).

The single-photon (or single-photon-pair) key bits' phase-error rate is bounded from the errors of a random
test subset: the 2014 sampling term, the random-sampling deviation, and the Chernoff-Hoeffding bound for
sampling without replacement that is monotone in the counts (``proofs_notes/protocols/decoy_bb84.md``,
section 6); float surrogates for designs and certified versions.  Binary entropy in float and as a certified
upper end.

Moved from the former ``protocols/_decoy_analysis.py`` (unchanged); the decoy estimates themselves are in
:mod:`finitekey.decoy`.
"""

from __future__ import annotations

import math

import numpy as np
from flint import arb, ctx

from ..compile import to_arb
from ..decoy.rounding import ceil_arb
from ..errors import ComputationError

LN2 = math.log(2.0)


def sampling_gamma(delta, lam, n_test, n_key, log):
    """The 2014 sampling term (squared): phase-error excess of n_key bits over the rate lam on n_test bits.

    ``gamma^2 = (c+d)(1-b)b/(c d ln 2) * log2((c+d)/(c d (1-b) b a^2))`` with ``c = n_test``, ``d = n_key``,
    ``b = lam`` (Lim et al. 2014, their gamma(a, b, c, d); from memory).  ``delta = a^2`` is passed: the
    probability at which the phase-error bound is evaluated (the square of the single-photon smoothing
    parameter ``a``).
    """
    c, d, b = n_test, n_key, lam
    inner = (c + d) / (c * d * (1 - b) * b * delta)
    val = (c + d) * (1 - b) * b / (c * d * LN2) * (log(inner) / LN2)
    return val


def random_sampling_deviation_float(n_key, n_test, eps):
    """Float continuation to real counts of the random-sampling deviation (design surrogate only).

    The inverse of ``eps = exp(-2 mu^2 n k^2 / ((n+k)(k+1)))`` of ``finitekey.bounds.random_sampling``
    (Tomamichel et al. 2012), which accepts integer counts only; the certified key length uses that bound.
    """
    n = np.asarray(n_key, dtype=float)
    k = np.asarray(n_test, dtype=float)
    return np.sqrt((n + k) * (k + 1) * np.log(1.0 / np.asarray(eps, dtype=float)) / (2 * n * k * k))


def sampling_kl_rate_float(lam, n_key, n_test, eps, iterations: int = 12):
    """Float upper bound on the error rate of ``n_key`` bits given rate ``lam`` on ``n_test`` bits sampled
    without replacement from the ``n_key + n_test`` (vectorised; used as the design surrogate).

    Chernoff-Hoeffding: the sample rate obeys ``Pr[rate <= lam] <= exp(-n_test D(lam || pi))`` for a
    population rate ``pi > lam`` also without replacement (Hoeffding 1963, section 6); ``pi_u`` solves
    ``D(lam || pi) = ln(1/eps)/n_test`` (Newton from the right, where ``D`` is convex and increasing) and the
    key rate is at most ``((n_key + n_test) pi_u - n_test lam) / n_key``.
    """
    lam = np.clip(np.asarray(lam, dtype=float), 0.0, 0.5)
    k = np.maximum(np.asarray(n_test, dtype=float), 1e-300)
    n = np.maximum(np.asarray(n_key, dtype=float), 1e-300)
    c = np.log(1.0 / eps) / k
    top = 1.0 - 1e-15
    pi = np.minimum(lam + np.sqrt(c / 2.0), top)   # Pinsker: D >= 2 (pi - lam)^2 >= c here
    safe = np.maximum(lam, 1e-300)
    for _ in range(iterations):
        d = np.where(lam > 0, lam * np.log(safe / pi), 0.0) + (1 - lam) * np.log((1 - lam) / (1 - pi))
        slope = (pi - lam) / (pi * (1 - pi))
        pi = np.clip(pi - (d - c) / np.maximum(slope, 1e-300), lam, top)
    return np.minimum(((n + k) * pi - k * lam) / n, 1.0)


def _kl_float(a: float, p: float) -> float:
    """D(a || p) in float (binary relative entropy, nats), for 0 <= a < p < 1."""
    t = a * math.log(a / p) if a > 0 else 0.0
    return t + (1 - a) * (math.log1p(-a) - math.log1p(-p))


def kl_arb(a: arb, p: arb) -> arb:
    """D(a || p) as an arb ball (binary relative entropy, nats), for 0 <= a < p < 1."""
    t = a * (a / p).log() if a > 0 else arb(0)
    return t + (1 - a) * ((-a).log1p() - (-p).log1p())


def sampling_population_rate_upper(k: int, e: int, eps: float, prec: int = 128) -> float:
    """Certified upper confidence limit ``p_u`` on the error rate of a population from a uniform sample.

    ``e`` errors in a sample of ``k`` drawn without replacement: ``p_u`` is a float with
    ``p_u > e/k`` and ``k D(e/k || p_u) >= ln(1/eps)`` proven in arb (1.0 if no such float below 1).
    Valid at level ``eps`` because sampling without replacement obeys the with-replacement Chernoff bound
    ``Pr[X <= e] <= exp(-k D(e/k || p))`` for ``e/k < p`` (Hoeffding 1963, Theorem 4) and ``p_u``
    increases with ``e`` (Neyman construction).

    References
    ----------
    .. [1] W. Hoeffding, "Probability inequalities for sums of bounded random variables", J. Amer. Statist.
       Assoc. 58, 13-30 (1963), Theorem 4 and section 6.
    """
    k, e = int(k), int(e)
    if k < 1 or e >= k:
        return 1.0
    a = e / k
    c = math.log(1.0 / eps) / k
    top = math.nextafter(1.0, 0.0)
    if _kl_float(a, top) < c:
        p = top
    else:
        lo = a if a > 0 else 0.0
        p = optimize_root(lambda x: _kl_float(a, x) - c, lo, top)
    with ctx.workprec(prec):
        target = (1 / to_arb(eps)).log()
        aa = arb(e) / k
        step = max(4 * (math.nextafter(p, 2.0) - p), p * 2.0 ** -45)
        while True:
            if p > a and bool(k * kl_arb(aa, arb(p)) >= target):
                return p
            if p >= top:
                return 1.0
            p = min(p + step, top)
            step *= 2


def optimize_root(f, lo: float, hi: float) -> float:
    """Float root of an increasing ``f`` on ``(lo, hi)`` by bisection (f(lo) < 0 <= f(hi))."""
    from scipy.optimize import brentq
    left = math.nextafter(lo, 1.0)
    if f(left) >= 0:
        return left
    return float(brentq(f, left, hi, xtol=1e-300, rtol=4 * 2.0 ** -52, maxiter=500))


def kl_key_rate_upper(n_key: int, k_lower: int, k_upper: int, e_upper: int, eps: float, prec: int = 128):
    """Upper bound on the key-bit phase-error rate, monotone so lower/upper count bounds can be plugged in.

    For true single-photon counts ``N >= n_key`` (key), ``k_lower <= K <= k_upper`` (test) and test errors
    ``E <= e_upper``:  ``phi = p_u(k_lower, e) + (k_upper p_u(k_upper, e) - e)/n_key`` with ``p_u`` of
    :func:`sampling_population_rate_upper`; holds except with probability ``eps`` (proof note, section 6:
    the key errors are at most ``(N+K) p_u(K, E) - E``, which is non-decreasing in ``E`` while
    ``p_u <= 1/2``; ``p_u(K, e)`` decreases and ``K p_u(K, e)`` increases in ``K``; the rate then
    decreases in ``N``).  Returns ``(phi, p_low, p_high)`` as floats, ``phi`` rounded up (>= 1/2 means no
    usable bound).
    """
    n, kl, ku, e = int(n_key), int(k_lower), max(int(k_upper), int(k_lower)), int(e_upper)
    if n < 1 or kl < 1 or e >= kl:
        return 1.0, 1.0, 1.0
    p1 = sampling_population_rate_upper(kl, e, eps, prec)
    if p1 > 0.5:
        return 1.0, p1, 1.0
    p2 = sampling_population_rate_upper(ku, e, eps, prec)
    with ctx.workprec(prec):
        phi = arb(p1) + (arb(ku) * arb(p2) - e) / n
    return ceil_arb(phi), p1, p2


def binary_entropy_float(x):
    x = np.clip(np.asarray(x, dtype=float), 1e-300, 0.5)
    return -(x * np.log2(x) + (1 - x) * np.log1p(-x) / LN2)


def binary_entropy_arb_upper(x: arb) -> arb:
    """An exact ball >= h(x) for a ball x (h increasing on [0, 1/2]; capped at 1)."""
    u = float(x.upper())
    if u >= 0.5:
        return arb(1)
    if u <= 0:
        return arb(0)
    xu = arb(math.nextafter(u, math.inf))
    h = -(xu * xu.log() + (1 - xu) * (-xu).log1p()) / arb(2).log()
    return arb(ceil_arb(h))


def require(cond: bool, msg: str):
    if not cond:
        raise ComputationError(msg)
