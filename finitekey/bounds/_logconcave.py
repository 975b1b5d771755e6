"""Tails of log-concave integer distributions whose consecutive terms have rational ratios.

Private machinery shared by :mod:`.binomial_exact` and :mod:`.hypergeometric_exact`.

Method
------
A tail ``Pr[X <= x]`` (or ``Pr[X >= x]``) is written as ``p(x) * S`` with
``S = sum_i P_i``, ``P_0 = 1`` and ``P_{i+1} = P_i * r_i``, where ``r_i`` is
the ratio of consecutive terms, walking *away from the mode*.  Both
distributions are log-concave, so these ratios are non-increasing along the
walk; once a term ``P_L`` is negligible, every later term is bounded by a
geometric series of ratio ``r_L < 1`` and the remainder is at most
``P_{L-1} r_L / (1 - r_L)``.  When the requested tail lies across the mode
its complement is summed instead.

* The start term ``p(x)`` is computed from ``lgamma`` in arb ball arithmetic
  (the float path takes the ball's midpoint): plain float ``lgamma``
  differences lose about ``1e-3`` absolute at populations of ``1e12``.
* The sum ``S`` is computed in float64 with numpy, in chunks (ratios are
  products and quotients of integers that float64 holds exactly below
  ``2**53``; the running products are ``np.multiply.accumulate``).
* **Certified enclosure.** The float sum only uses IEEE-754 multiplication,
  division and addition of positive normal numbers, each correctly rounded
  (relative error at most ``u = 2**-53``).  Whatever the order of the
  operations, a value obtained from exact data through ``m`` such
  operations carries a factor ``1 + theta`` with ``|theta| <= gamma_m = m u
  / (1 - m u)`` (a standard lemma of rounding-error analysis).  Counting
  ``m`` generously per term gives ``S`` in ``[S_hat/(1+gamma),
  S_hat/(1-gamma)]`` plus the remainder, computed with an arb-evaluated
  ratio.  No library ``log`` or ``exp`` of float64 is trusted anywhere.
  Included terms are never below ``2**-64`` of the running sum, hence far
  from the subnormal range where the rounding model fails.  This is tighter
  (about ``1e-9`` relative at ``1e6`` terms) and faster than bounding blocks
  of terms by geometric series.

References
----------
.. [1] N. J. Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed.,
   SIAM (2002), Lemma 3.1 (products of ``1 + delta`` factors) and section 4.2
   (summation error).
.. [2] F. Johansson, "Arb: efficient arbitrary-precision midpoint-radius
   interval arithmetic", IEEE Trans. Computers 66 (2017) 1281-1292.
.. [3] S. Karlin, *Total Positivity*, Stanford University Press (1968)
   (log-concavity of the binomial and hypergeometric distributions).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from flint import arb, ctx

from ..errors import ComputationError

__all__ = ["Binomial", "Hypergeometric", "log_cdf", "log_sf", "cdf_ball", "cdf_ball_of_walk", "sf_ball", "lnbinom_arb",
           "MAX_POPULATION"]

#: Largest population (number of trials) accepted: every integer met in a ratio stays exact in float64.
MAX_POPULATION = 2**50

_U = 2.0**-53          # unit roundoff of float64, round to nearest
_THRESHOLD = 2.0**-64  # terms below this fraction of the running sum end the walk
_FIRST_CHUNK = 512
_MAX_CHUNK = 1 << 16
_WORK_PREC = 128       # bits for arb start terms (|lgamma| <= 3e16, so >= 2**-70 absolute)
_ONE = np.ones(1)      # P_0 of a kept walk (read-only constant)
_ONE.setflags(write=False)


def _lgamma1(m: int) -> arb:
    """ln(m!) as an arb ball at the current precision."""
    return arb(m + 1).lgamma()


def lnbinom_arb(a: int, b: int) -> arb:
    """ln C(a, b) as an arb ball at the current working precision (0 <= b <= a)."""
    return _lgamma1(a) - _lgamma1(b) - _lgamma1(a - b)


# ---- distributions ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Binomial:
    """Binomial(n, p) with p a float64 in [0, 1], taken exactly."""

    n: int
    p: float
    #: rounding errors incurred by one float ratio (1-p, division, product, quotient)
    roundings: int = 4
    #: optional exact success probability as an arb ball (used by the arb-only walk); defaults to ``p``
    p_arb: object = None

    def _parb(self) -> arb:
        return arb(self.p) if self.p_arb is None else self.p_arb

    @property
    def lo(self) -> int:
        return 0 if self.p < 1.0 else self.n

    @property
    def hi(self) -> int:
        return self.n if self.p > 0.0 else 0

    @property
    def float_ok(self) -> bool:
        return 1e-280 < self.p and (1.0 - self.p) > 1e-280

    def mode_side(self, x: int) -> int:
        """-1 if x is at or below the mode (walk down), +1 if above."""
        return -1 if x <= math.floor((self.n + 1) * self.p) else 1

    def log_pmf_arb(self, j: int) -> arb:
        p = self._parb()
        if self.p == 0.0 or self.p == 1.0:
            return arb(0) if j == self.lo else arb("-inf")
        return lnbinom_arb(self.n, j) + j * p.log() + (self.n - j) * (-p).log1p()

    def down_ratio(self, js: np.ndarray) -> np.ndarray:
        """p(j-1)/p(j) = j (1-p) / ((n-j+1) p), float64."""
        c = (1.0 - self.p) / self.p
        return (js * c) / ((self.n + 1.0) - js)

    def up_ratio(self, js: np.ndarray) -> np.ndarray:
        """p(j+1)/p(j) = (n-j) p / ((j+1)(1-p)), float64."""
        c = self.p / (1.0 - self.p)
        return ((self.n - js) * c) / (js + 1.0)

    def down_ratio_arb(self, j: int) -> arb:
        p = self._parb()
        return arb(j) * (1 - p) / (arb(self.n - j + 1) * p)

    def ratio_bias(self, step: int) -> float:
        """Relative error of the shared float constant (1-p)/p (step < 0) or p/(1-p) (step > 0).

        Every float ratio carries it, so the i-th partial product carries it i times; the float
        path corrects the sum to first order (the certified path counts it as rounding instead).
        """
        p = Fraction(self.p)
        if step < 0:
            exact, flt = (1 - p) / p, Fraction((1.0 - self.p) / self.p)
        else:
            exact, flt = p / (1 - p), Fraction(self.p / (1.0 - self.p))
        return float((exact - flt) / flt)

    def up_ratio_arb(self, j: int) -> arb:
        p = self._parb()
        return arb(self.n - j) * p / (arb(j + 1) * (1 - p))


@dataclass(frozen=True)
class Hypergeometric:
    """Number of marked items in a uniform sample of ``k`` from ``N`` items of which ``K`` are marked."""

    N: int
    K: int
    k: int
    #: ln C(N, k), if the caller has it already (saves three lgamma calls)
    log_norm: arb | None = None
    roundings: int = 3  # two products and a quotient

    @property
    def lo(self) -> int:
        return max(0, self.k - (self.N - self.K))

    @property
    def hi(self) -> int:
        return min(self.k, self.K)

    float_ok = True

    def mode_side(self, x: int) -> int:
        return -1 if x <= ((self.k + 1) * (self.K + 1)) // (self.N + 2) else 1

    def log_pmf_arb(self, j: int) -> arb:
        norm = self.log_norm if self.log_norm is not None else lnbinom_arb(self.N, self.k)
        return lnbinom_arb(self.K, j) + lnbinom_arb(self.N - self.K, self.k - j) - norm

    def down_ratio(self, js: np.ndarray) -> np.ndarray:
        """h(j-1)/h(j) = j (N-K-k+j) / ((K-j+1)(k-j+1)), float64."""
        c = float(self.N - self.K - self.k)
        return (js * (js + c)) / (((self.K + 1.0) - js) * ((self.k + 1.0) - js))

    def up_ratio(self, js: np.ndarray) -> np.ndarray:
        """h(j+1)/h(j) = (K-j)(k-j) / ((j+1)(N-K-k+j+1)), float64."""
        c = float(self.N - self.K - self.k + 1)
        return ((self.K - js) * (self.k - js)) / ((js + 1.0) * (js + c))

    def ratio_bias(self, step: int) -> float:
        return 0.0  # no shared rounded constant: the ratios are formed from exact integers

    def down_ratio_arb(self, j: int) -> arb:
        return arb(j * (self.N - self.K - self.k + j)) / arb((self.K - j + 1) * (self.k - j + 1))

    def up_ratio_arb(self, j: int) -> arb:
        return arb((self.K - j) * (self.k - j)) / arb((j + 1) * (self.N - self.K - self.k + j + 1))


# ---- the walk --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Walk:
    total: float       # float sum of the included P_i (P_0 = 1)
    moment: float      # float sum of i * P_i over the included terms
    terms: int         # number of included terms
    chunks: int
    last: float        # last included P_i
    next_ratio_at: int | None  # point whose ratio produces the first excluded term; None if support exhausted
    #: the included P_i as one float64 array (only when the walk was asked to keep them)
    values: np.ndarray | None = None


def _walk(fam, start: int, step: int, with_moment: bool = False, keep: bool = False,
          first_chunk: int = _FIRST_CHUNK) -> _Walk:
    """Sum P_i = p(start + step i) / p(start) in float64 until negligible or out of support.

    ``with_moment`` also accumulates ``sum i P_i`` (for the float path's bias correction); ``keep``
    returns the included terms as well (the sums are the same, operation for operation);
    ``first_chunk`` sizes the first block of terms (later blocks grow fourfold).  The certificate
    holds for any chunking: the chunk count enters the rounding count.
    """
    ratio = fam.down_ratio if step < 0 else fam.up_ratio
    avail = (start - fam.lo) if step < 0 else (fam.hi - start)
    total, moment, last, j, chunks, terms, size = 1.0, 0.0, 1.0, start, 0, 1, max(1, min(first_chunk, _MAX_CHUNK))
    kept = [_ONE] if keep else None
    while avail > 0:
        m = min(size, avail)
        js = np.arange(m, dtype=np.float64)
        if step < 0:
            js = float(j) - js
        else:
            js += float(j)
        with np.errstate(all="ignore"):
            prods = np.multiply.accumulate(ratio(js))
            prods *= last
        chunks += 1
        small = prods < _THRESHOLD * total
        if small.any():
            idx = int(np.argmax(small))
            if idx:
                total += float(prods[:idx].sum())
                if with_moment:
                    moment += _moment(prods[:idx], terms)
                last = float(prods[idx - 1])
                if keep:
                    kept.append(prods[:idx])
            return _Walk(total, moment, terms + idx, chunks, last, j + step * idx, _join(kept))
        total += float(prods.sum())
        if keep:
            kept.append(prods)
        if with_moment:
            moment += _moment(prods, terms)
        terms += m
        last = float(prods[-1])
        j += step * m
        avail -= m
        size = min(size * 4, _MAX_CHUNK)
    return _Walk(total, moment, terms, chunks, last, None, _join(kept))


def _join(kept):
    return None if kept is None else np.concatenate(kept)


def _moment(prods: np.ndarray, first: int) -> float:
    """sum_t (first + t) prods[t], without BLAS (whose threads contend on a loaded machine)."""
    return float(first * prods.sum() + (prods * np.arange(prods.size, dtype=np.float64)).sum())


def _walk_log(fam, start: int, step: int) -> float:
    """Float natural log of the tail sum from ``start`` in direction ``step`` (start term included)."""
    with ctx.workprec(_WORK_PREC):
        log_start = float(fam.log_pmf_arb(start).mid())
    if not fam.float_ok:
        with ctx.workprec(_WORK_PREC):
            return float(_walk_arb(fam, start, step, _WORK_PREC).log().mid())
    bias = fam.ratio_bias(step)
    w = _walk(fam, start, step, with_moment=bias != 0.0)
    # first-order correction for a rounded constant shared by all ratios: P_i is off by (1 + bias)^i
    return log_start + math.log(w.total + bias * w.moment)


def _walk_ball(fam, start: int, step: int, prec: int) -> arb:
    """Arb ball guaranteed to contain the tail sum from ``start`` in direction ``step``."""
    prec = max(prec, _WORK_PREC)
    if not fam.float_ok:
        return _walk_arb(fam, start, step, prec)
    return _ball_of_walk(fam, start, step, prec, _walk(fam, start, step))


def _ball_of_walk(fam, start: int, step: int, prec: int, w: _Walk, log_start: arb | None = None) -> arb:
    """The certified ball of :func:`_walk_ball` from a float walk ``w`` already run (same ``start``, ``step``).

    ``log_start`` is ``fam.log_pmf_arb(start)`` at ``prec`` bits if the caller has it.
    """
    with ctx.workprec(prec):
        m = arb((fam.roundings + 2) * (w.terms + 1) + 2 * w.chunks + 8)
        gamma = m * _U / (1 - m * _U)
        s_hat = arb(w.total)
        lo = s_hat / (1 + gamma)
        hi = s_hat / (1 - gamma)
        if w.next_ratio_at is not None:
            r = (fam.down_ratio_arb if step < 0 else fam.up_ratio_arb)(w.next_ratio_at)
            if not (r < 1):
                return _walk_arb(fam, start, step, prec)
            hi = hi + arb(w.last) / (1 - gamma) * r / (1 - r)
        sums = arb(lo.lower()).union(arb(hi.upper()))
        if log_start is None:
            log_start = fam.log_pmf_arb(start)
        return log_start.exp() * sums


def _walk_arb(fam, start: int, step: int, prec: int, max_terms: int = 10**7) -> arb:
    """Reference walk entirely in arb (slow: about a microsecond per term)."""
    ratio = fam.down_ratio_arb if step < 0 else fam.up_ratio_arb
    end = fam.lo if step < 0 else fam.hi
    with ctx.workprec(prec):
        tol = arb(2) ** (-prec)
        total, term, j = arb(1), arb(1), start
        for _ in range(max_terms):
            if j == end:
                return fam.log_pmf_arb(start).exp() * total
            r = ratio(j)
            if r < 1 and term * r / (1 - r) < tol * total:
                rem = term * r / (1 - r)
                return fam.log_pmf_arb(start).exp() * (total + arb(0).union(rem.upper()))
            term = term * r
            total = total + term
            j += step
    raise ComputationError(f"tail sum did not converge within {max_terms} terms")


# ---- tails -----------------------------------------------------------------------------------------------
def log_cdf(fam, x: int) -> float:
    """Natural log of ``Pr[X <= x]`` in float64 (``-inf`` below the support)."""
    if x < fam.lo:
        return -math.inf
    if x >= fam.hi:
        return 0.0
    if fam.mode_side(x) < 0:
        return _walk_log(fam, x, -1)
    return math.log1p(-math.exp(_walk_log(fam, x + 1, +1)))


def log_sf(fam, x: int) -> float:
    """Natural log of ``Pr[X >= x]`` in float64 (``-inf`` above the support)."""
    if x > fam.hi:
        return -math.inf
    if x <= fam.lo:
        return 0.0
    if fam.mode_side(x) > 0:
        return _walk_log(fam, x, +1)
    return math.log1p(-math.exp(_walk_log(fam, x - 1, -1)))


def _tail_ball(fam, x: int, lower: bool, walk) -> arb:
    """``Pr[X <= x]`` (lower) or ``Pr[X >= x]`` as a ball, summing from the side away from the mode.

    ``walk(start, direction)`` returns a ball for the tail that starts at ``start`` and runs in
    ``direction`` (-1 down, +1 up); when ``x`` lies past the mode the complement of the other tail is used.
    Call inside the working-precision context.
    """
    if lower:
        if x < fam.lo:
            return arb(0)
        if x >= fam.hi:
            return arb(1)
        if fam.mode_side(x) < 0:
            return _clip01(walk(x, -1))
        return _clip01(1 - walk(x + 1, +1))
    if x > fam.hi:
        return arb(0)
    if x <= fam.lo:
        return arb(1)
    if fam.mode_side(x) > 0:
        return _clip01(walk(x, +1))
    return _clip01(1 - walk(x - 1, -1))


def cdf_ball(fam, x: int, prec: int = _WORK_PREC) -> arb:
    """Arb ball containing ``Pr[X <= x]`` exactly."""
    with ctx.workprec(max(prec, _WORK_PREC)):
        return _tail_ball(fam, x, True, lambda start, d: _walk_ball(fam, start, d, prec))


def cdf_ball_of_walk(fam, x: int, w: _Walk, log_start: arb, prec: int = _WORK_PREC) -> arb:
    """:func:`cdf_ball` for ``x`` at or below the mode, reusing the downward float walk ``w`` from ``x``.

    Same ball as ``cdf_ball(fam, x, prec)`` (same walk, same arithmetic); ``log_start`` must be
    ``fam.log_pmf_arb(x)`` at ``max(prec, 128)`` bits.
    """
    if not (fam.lo <= x < fam.hi and fam.mode_side(x) < 0 and fam.float_ok):
        raise ValueError("cdf_ball_of_walk: x must lie in the support, below its top, at or below the mode")
    prec = max(prec, _WORK_PREC)
    with ctx.workprec(prec):
        return _clip01(_ball_of_walk(fam, x, -1, prec, w, log_start))


def sf_ball(fam, x: int, prec: int = _WORK_PREC) -> arb:
    """Arb ball containing ``Pr[X >= x]`` exactly."""
    with ctx.workprec(max(prec, _WORK_PREC)):
        return _tail_ball(fam, x, False, lambda start, d: _walk_ball(fam, start, d, prec))


def tail_arb_reference(fam, x: int, lower: bool, prec: int) -> arb:
    """Ball for ``Pr[X <= x]`` (lower) or ``Pr[X >= x]`` summed entirely in arb at ``prec`` bits."""
    with ctx.workprec(prec):
        return _tail_ball(fam, x, lower, lambda start, d: _walk_arb(fam, start, d, prec))


def _clip01(b: arb) -> arb:
    """Intersect a probability ball with [0, 1] (the exact value is a probability)."""
    lo = b.lower()
    hi = b.upper()
    if lo < 0:
        lo = arb(0)
    if hi > 1:
        hi = arb(1)
    return arb(lo).union(arb(hi))
