"""Exact binomial tails and the one-sided Clopper-Pearson confidence limits.

Registers ``binomial_exact``: for ``x`` successes observed in ``n`` independent
trials of success probability ``p``, the one-sided upper confidence limit at
level ``eps`` is the ``p_upper`` with

.. math:: \\Pr[X \\le x \\mid n, p_{upper}] = \\varepsilon ,

so that ``Pr[p > p_upper(X)] <= eps`` for every ``p``.  The bound's deviation is
``delta = p_upper - x / n`` and its failure probability is
``BinomCDF(x; n, x/n + delta)``.  Nothing is bounded: the tail is computed
from the exact distribution (``exact = True``).

The float deviation uses ``scipy.special.betainccinv(x + 1, n - x, eps)``
(the regularised incomplete beta identity ``Pr[X <= x | p] = 1 - I_p(x+1, n-x)``);
tails use the log-concave walk of :mod:`._logconcave`, whose certified form
is an arb ball that contains the exact tail.

Plain functions :func:`binomial_upper_limit`, :func:`binomial_lower_limit`
(float, vectorised) and :func:`binomial_upper_limit_certified`,
:func:`binomial_lower_limit_certified` (guaranteed conservative) are what
protocol code should call.

References
----------
.. [1] C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial
   limits illustrated in the case of the binomial", Biometrika 26 (1934) 404-413.
.. [2] M. Abramowitz and I. A. Stegun, *Handbook of Mathematical Functions*,
   26.5.24 (binomial tail as an incomplete beta function).
"""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np
from flint import arb, ctx

from ..compile import Enclosure
from ..domains import Domain, Parameter
from ..errors import ComputationError, InputError
from ._base import EPS, Bound, Reference
from ._logconcave import MAX_POPULATION, Binomial, cdf_ball, log_cdf, log_sf, sf_ball, tail_arb_reference
from ._registry import register

__all__ = ["BinomialExact", "binomial_upper_limit", "binomial_lower_limit", "binomial_upper_limit_certified",
           "binomial_lower_limit_certified", "binomial_cdf", "binomial_cdf_certified"]

TRIALS = Parameter("n", "n", Domain(1, MAX_POPULATION, integer=True), "number of independent trials", (10, 1e12))
OBSERVED = Parameter("x", "x", Domain(0, MAX_POPULATION, integer=True), "number of successes observed (0 <= x <= n)",
                     (0, 1e10))
DEVIATION = Parameter("delta", r"\delta", Domain(-1.0, 1.0),
                      "upper confidence limit minus the observed fraction x/n")

_REFS = (
    Reference("clopper1934", "C. J. Clopper and E. S. Pearson, Biometrika 26, 404-413 (1934)",
              "10.1093/biomet/26.4.404"),
    Reference("abramowitz1964",
              "M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions, eq. 26.5.24 (1964)"),
)


def _check_pair(x, n):
    n = TRIALS.check(n)
    x = OBSERVED.check(x)
    if np.any(np.asarray(x) > np.asarray(n)):
        bad = np.broadcast_arrays(np.asarray(x), np.asarray(n))
        first = bad[0][bad[0] > bad[1]].ravel()[0].item()
        raise InputError("x", first, "an integer in [0, n] (successes cannot exceed trials)")
    return x, n


# ---- float, vectorised -----------------------------------------------------------------------------------
def binomial_upper_limit(x, n, eps):
    """One-sided Clopper-Pearson upper limit ``p_upper`` with ``Pr[X <= x | p_upper] = eps``.

    Parameters
    ----------
    x : int or array of int
        Successes observed, ``0 <= x <= n``.
    n : int or array of int
        Trials, ``1 <= n <= 2**50``.
    eps : float or array
        Level in (0, 1): ``Pr[p > p_upper(X)] <= eps`` for every true ``p``.

    Returns
    -------
    float or ndarray
        ``p_upper`` in float64 (1.0 where ``x == n``).  Accurate to a few ulps, not guaranteed
        conservative: use :func:`binomial_upper_limit_certified` for that.

    References
    ----------
    .. [1] C. J. Clopper and E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    p0, step = _upper_limit_parts(x, n, eps)
    out = p0 + step
    return out if out.ndim else float(out)


def _upper_limit_parts(x, n, eps):
    """scipy's limit ``p0`` and the Newton correction ``step`` (kept apart: step may be below an ulp of p0)."""
    x, n = _check_pair(x, n)
    eps = EPS.check(eps)
    xa, na = np.asarray(x, dtype=float), np.asarray(n, dtype=float)
    full = xa >= na
    from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up

    with np.errstate(all="ignore"):
        p0 = special.betainccinv(xa + 1.0, np.where(full, 1.0, na - xa), eps)
    p0 = np.where(full, 1.0, p0)
    return p0, _refine(p0, xa, na, eps, upper=True)


def binomial_lower_limit(x, n, eps):
    """One-sided Clopper-Pearson lower limit ``p_lower`` with ``Pr[X >= x | p_lower] = eps``.

    ``Pr[p < p_lower(X)] <= eps`` for every true ``p``; ``p_lower = 0`` where ``x == 0``.
    The value is the ``eps`` quantile of Beta(x, n - x + 1), from ``scipy.special.betaincinv``.
    See :func:`binomial_upper_limit` for the parameters.

    References
    ----------
    .. [1] C. J. Clopper and E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    x, n = _check_pair(x, n)
    eps = EPS.check(eps)
    xa, na = np.asarray(x, dtype=float), np.asarray(n, dtype=float)
    zero = xa <= 0
    from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up

    with np.errstate(all="ignore"):
        out = special.betaincinv(np.where(zero, 1.0, xa), na - xa + 1.0, eps)
    out = np.where(zero, 0.0, out)
    out = out + _refine(out, xa, na, eps, upper=False)
    return out if out.ndim else float(out)


#: below this many trials scipy's inverse incomplete beta is used as is (it is accurate to ~1e-16 there)
_REFINE_FROM = 10**6


def _refine(p, xa, na, eps, upper):
    """Newton corrections (an array like ``p``, zero below ``_REFINE_FROM`` trials) to scipy's limits."""
    p = np.asarray(p, dtype=float)
    bp, bx, bn, be = np.broadcast_arrays(p, xa, na, np.asarray(eps, dtype=float))
    out = np.zeros(bp.shape)
    if not np.any(bn >= _REFINE_FROM):
        return out
    for idx in np.ndindex(out.shape):
        if bn[idx] >= _REFINE_FROM:
            out[idx] = _newton_step(int(bx[idx]), int(bn[idx]), float(be[idx]), float(bp[idx]), upper)
    return out


def _newton_step(x: int, n: int, eps: float, p0: float, upper: bool) -> float:
    """Newton step dp on ``Pr[X <= x | p] = eps`` (upper) or ``Pr[X >= x | p] = eps`` (lower) from p0.

    Uses ``d/dp Pr[X <= x | n, p] = -n Pr[Y = x | n-1, p]`` (and the mirror identity for the upper
    tail); the tails come from the log-concave walk, accurate to ~1e-13 relative, so the step
    corrects the inverse incomplete beta's rounding (about 1e-14 relative at n = 1e12).
    Returns 0 where the step is not finite or not small.
    """
    if not (0.0 < p0 < 1.0) or (upper and x >= n) or (not upper and x <= 0):
        return 0.0
    fam = Binomial(n, p0)
    with ctx.workprec(128):
        lb = float(Binomial(n - 1, p0).log_pmf_arb(x if upper else x - 1).mid())
    if upper:
        step = eps * math.expm1(log_cdf(fam, x) - math.log(eps)) / math.exp(math.log(n) + lb)
    else:
        step = -eps * math.expm1(log_sf(fam, x) - math.log(eps)) / math.exp(math.log(n) + lb)
    if not math.isfinite(step) or abs(step) > 1e-8 * p0:
        return 0.0
    return step


def _minus_ratio(p: float, x: int, n: int) -> float:
    """``p - x/n`` with the rounding of ``x/n`` accounted for (the difference is often tiny)."""
    q = x / n
    residual = float(Fraction(x, n) - Fraction(q))
    return (p - q) - residual


# ---- exact tails -----------------------------------------------------------------------------------------
def binomial_cdf(x: int, n: int, p: float) -> float:
    """``Pr[X <= x]`` for X ~ Binomial(n, p), float64, accurate also far in the tail (down to ~1e-300)."""
    if p <= 0.0:
        return 1.0
    if p >= 1.0:
        return 1.0 if x >= n else 0.0
    return math.exp(log_cdf(Binomial(n, p), x))


def binomial_cdf_certified(x: int, n: int, p: float, prec: int = 128) -> Enclosure:
    """Enclosure guaranteed to contain ``Pr[X <= x]`` for X ~ Binomial(n, p), p a float taken exactly."""
    if p <= 0.0 or p >= 1.0:
        v = binomial_cdf(x, n, p)
        return Enclosure(v, v)
    return Enclosure.from_arb(cdf_ball(Binomial(n, p), x, prec))


def _sf_ge_ball(x: int, n: int, p: float, prec: int = 128) -> arb:
    """Ball containing ``Pr[X >= x]``."""
    if p <= 0.0:
        return arb(1 if x <= 0 else 0)
    if p >= 1.0:
        return arb(1)
    return sf_ball(Binomial(n, p), x, prec)


def binomial_upper_limit_certified(x: int, n: int, eps: float, prec: int = 128) -> float:
    """A float ``p >= p_upper`` (never too small), with ``Pr[X <= x | p] <= eps`` certified.

    Starts from :func:`binomial_upper_limit` and raises ``p`` by growing relative steps until the
    upper end of the certified enclosure of ``Pr[X <= x | p]`` is at most ``eps``; the tail is
    decreasing in ``p``, so every ``p`` at or beyond it is rejected at level ``eps``.

    References
    ----------
    .. [1] C. J. Clopper and E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    x, n = _check_pair(x, n)
    eps = EPS.check(eps)
    if x == n:
        return 1.0
    p = float(binomial_upper_limit(x, n, eps))
    step = 4e-16
    for _ in range(200):
        if 0.0 < p < 1.0 and cdf_ball(Binomial(n, p), x, prec).upper() <= arb(eps):
            return p
        p = min(1.0, p * (1.0 + step) + 1e-300)
        step *= 2.0
        if p >= 1.0:
            return 1.0
    raise ComputationError(f"could not certify a Clopper-Pearson upper limit for x = {x}, n = {n}, eps = {eps}")


def binomial_lower_limit_certified(x: int, n: int, eps: float, prec: int = 128) -> float:
    """A float ``p <= p_lower`` (never too large), with ``Pr[X >= x | p] <= eps`` certified.

    References
    ----------
    .. [1] C. J. Clopper and E. S. Pearson, Biometrika 26 (1934) 404-413.
    """
    x, n = _check_pair(x, n)
    eps = EPS.check(eps)
    if x == 0:
        return 0.0
    p = float(binomial_lower_limit(x, n, eps))
    step = 4e-16
    for _ in range(200):
        if 0.0 < p < 1.0 and _sf_ge_ball(x, n, p, prec).upper() <= arb(eps):
            return p
        p = max(0.0, p * (1.0 - step))
        step = min(2.0 * step, 0.5)
        if p <= 0.0:
            return 0.0
    raise ComputationError(f"could not certify a Clopper-Pearson lower limit for x = {x}, n = {n}, eps = {eps}")


def _cdf_at_shifted(x: int, n: int, delta: float) -> float:
    """``Pr[X <= x | n, p]`` at the exact ``p = x/n + delta``, to first order in the rounding of p."""
    p = x / n + delta
    if p <= 0.0 or p >= 1.0:
        return binomial_cdf(x, n, p)
    residual = float(Fraction(x, n) + Fraction(delta) - Fraction(p))
    log_c = log_cdf(Binomial(n, p), x)
    if residual and x < n:
        with ctx.workprec(128):
            lb = float(Binomial(n - 1, p).log_pmf_arb(x).mid())
        log_c += math.log1p(-residual * math.exp(math.log(n) + lb - log_c))
    return math.exp(log_c)


# ---- the registered bound --------------------------------------------------------------------------------
@register
class BinomialExact(Bound):
    """Exact binomial tail: one-sided Clopper-Pearson upper limit as a deviation.

    ``deviation(eps, n=, x=)`` is ``p_upper - x/n``; ``failure_probability(delta, n=, x=)`` is
    ``Pr[X <= x | n, x/n + delta]`` (0 when ``x/n + delta >= 1`` and ``x < n``; 1 when it is ``<= 0``).

    References
    ----------
    .. [1] C. J. Clopper and E. S. Pearson, Biometrika 26 (1934) 404-413.
    """

    name = "binomial_exact"
    title = "Exact binomial tail (one-sided Clopper-Pearson upper limit)"
    summary = ("Upper confidence limit on a success probability from x successes in n independent trials, "
               "computed from the exact binomial distribution; deviation = p_upper - x/n.")
    bounds = "binomial_proportion_upper_limit"
    parameters = (TRIALS, OBSERVED)
    deviation_parameter = DEVIATION
    references = _REFS
    assumptions = ("the n trials are independent with one common success probability p",
                   "x is the number of successes observed")
    exact = True

    def _check_joint(self, params):
        _check_pair(params["x"], params["n"])

    def latex(self) -> dict:
        return {
            "failure_probability": r"\varepsilon = \sum_{j=0}^{x} \binom{n}{j} p^j (1-p)^{n-j},\quad p = x/n + \delta",
            "deviation": r"\delta = I^{-1}_{1-\varepsilon}(x+1,\, n-x) - x/n",
        }

    # float
    def _deviation(self, eps, params):
        x, n = params["x"], params["n"]
        p0, step = _upper_limit_parts(x, n, eps)
        bp, bs, bx, bn = np.broadcast_arrays(p0, step, np.asarray(x), np.asarray(n))
        out = np.empty(bp.shape)
        for idx in np.ndindex(bp.shape):
            out[idx] = _minus_ratio(float(bp[idx]), int(bx[idx]), int(bn[idx])) + float(bs[idx])
        return out if out.ndim else float(out)

    def _failure_probability(self, deviation, params):
        x, n = params["x"], params["n"]
        bx, bn, bd = np.broadcast_arrays(np.asarray(x), np.asarray(n), np.asarray(deviation, dtype=float))
        out = np.empty(bd.shape)
        for idx in np.ndindex(bd.shape):
            out[idx] = _cdf_at_shifted(int(bx[idx]), int(bn[idx]), float(bd[idx]))
        return out if out.ndim else float(out)

    # mpmath
    def _failure_probability_mp(self, deviation, params, dps):
        x, n = params["x"], params["n"]
        prec = int(dps * 3.33) + 30
        with ctx.workprec(prec):
            p = arb(x) / arb(n) + arb(deviation)
            if p >= 1:
                return mpmath.mpf(1 if x == n else 0)
            if p <= 0:
                return mpmath.mpf(1)
            ball = tail_arb_reference(Binomial(n, float(p.mid()), p_arb=p), x, True, prec)
        with mpmath.workdps(dps):
            return mpmath.mpf(ball.mid().str(dps + 5, radius=False))

    def _deviation_mp(self, eps, params, dps):
        x, n = params["x"], params["n"]
        if x == n:
            return mpmath.mpf(0)
        prec = int(dps * 3.33) + 30
        # Newton on Pr[X <= x | p] - eps, using d/dp Pr[X <= x | n, p] = -n Pr[X' = x | n-1, p].
        with ctx.workprec(prec):
            p = arb(binomial_upper_limit(x, n, eps))
            target = arb(eps)
            for _ in range(8):
                pm = p.mid()
                fam = Binomial(n, float(pm), p_arb=pm)
                f = tail_arb_reference(fam, x, True, prec).mid() - target
                slope = n * Binomial(n - 1, float(pm), p_arb=pm).log_pmf_arb(x).exp()
                step = (f / slope).mid()
                p = pm + step
                if abs(step) < arb(2) ** (-prec + 20) * pm:
                    break
            out = p - arb(x) / arb(n)
        with mpmath.workdps(dps):
            return mpmath.mpf(out.mid().str(dps + 5, radius=False))

    # certified
    def _failure_probability_certified(self, deviation, params, prec):
        x, n = params["x"], params["n"]
        with ctx.workprec(max(prec, 128)):
            p = arb(x) / arb(n) + arb(deviation)
            p_lo, p_hi = float(p.lower()), float(p.upper())
        p_lo = math.nextafter(p_lo, -math.inf)
        p_hi = math.nextafter(p_hi, math.inf)
        # the tail decreases in p: [tail(p_hi).lower, tail(p_lo).upper]
        hi = self._cdf_ball(x, n, p_lo, prec).upper()
        lo = self._cdf_ball(x, n, p_hi, prec).lower()
        return Enclosure(math.nextafter(float(lo), -math.inf), math.nextafter(float(hi), math.inf))

    @staticmethod
    def _cdf_ball(x, n, p, prec) -> arb:
        if p <= 0.0:
            return arb(1)
        if p >= 1.0:
            return arb(1 if x >= n else 0)
        return cdf_ball(Binomial(n, p), x, prec)

    def _deviation_certified(self, eps, params, prec):
        x, n = params["x"], params["n"]
        if x == n:
            return Enclosure(0.0, 0.0)
        p = float(binomial_upper_limit(x, n, eps))
        e = arb(eps)
        width = 1e-13
        for _ in range(60):
            a = max(p * (1 - width), 5e-324)
            b = min(p * (1 + width), 1.0)
            ok_a = self._cdf_ball(x, n, a, prec).lower() > e
            ok_b = self._cdf_ball(x, n, b, prec).upper() <= e
            if ok_a and ok_b:
                with ctx.workprec(max(prec, 128)):
                    lo = arb(a) - arb(x) / arb(n)
                    hi = arb(b) - arb(x) / arb(n)
                return Enclosure(math.nextafter(float(lo.lower()), -math.inf),
                                 math.nextafter(float(hi.upper()), math.inf))
            width *= 4
        raise ComputationError(f"{self.name}: could not certify the upper limit for x = {x}, n = {n}, eps = {eps}")
