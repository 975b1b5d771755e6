"""Exact hypergeometric sampling bound for the phase-error count of a BB84 key.

Registers ``hypergeometric_sampling``.  Of ``N = n + k`` positions, ``T`` hold
an error; a uniformly random subset of ``k`` positions is revealed as test
bits and shows ``e`` errors, the other ``n`` are key bits.  The count ``X`` of
errors among the test bits is hypergeometric, and the Neyman upper confidence
bound on ``T`` at level ``eps`` is

.. math:: T_u = \\max\\{T \\in [e, e+n] : \\Pr[X \\le e \\mid N, T, k] > \\varepsilon\\},

so ``Pr[T_true > T_u] <= eps`` whatever ``T_true`` is (the tail is decreasing
in ``T``).  The key bits then hold at most ``T_u - e`` errors.  As a bound:
``deviation = (T_u - e)/n - e/k`` (a bound on the key-bit error *fraction*
minus the observed test fraction), and ``failure_probability(deviation)`` is
the tail at the smallest rejected ``T``.  The tail is computed, not bounded
(``exact = True``), with the log-concave walk of :mod:`._logconcave`.

Protocol code should call :func:`key_errors_upper` (float path, fast) or
:func:`key_errors_upper_certified` (integer guaranteed at least the exact
Neyman ``T_u - e``).

References
----------
.. [1] J. Neyman, "Outline of a theory of statistical estimation based on the
   classical theory of probability", Phil. Trans. R. Soc. A 236 (1937) 333-380.
.. [2] J. P. Buonaccorsi, "A note on confidence intervals for proportions in
   finite populations", The American Statistician 41 (1987) 215-218
   (exact hypergeometric limits by inverting the tail; citation from memory).
"""

from __future__ import annotations

import math
from statistics import NormalDist

import mpmath
import numpy as np
from flint import arb, ctx

from ..compile import Enclosure
from ..domains import Domain, Parameter
from ..errors import ComputationError, InputError
from ._base import EPS, Bound, Reference
from ._logconcave import (
    MAX_POPULATION,
    Hypergeometric,
    _lgamma1,
    _Walk,
    _walk,
    cdf_ball,
    cdf_ball_of_walk,
    lnbinom_arb,
    log_cdf,
    tail_arb_reference,
)
from ._registry import register

__all__ = ["HypergeometricSampling", "key_errors_upper", "key_errors_upper_certified", "hypergeometric_cdf",
           "hypergeometric_cdf_certified"]

KEY_BITS = Parameter("n", "n", Domain(1, MAX_POPULATION // 2, integer=True), "number of key (unrevealed) bits",
                     (1e3, 1e12))
TEST_BITS = Parameter("k", "k", Domain(1, MAX_POPULATION // 2, integer=True), "number of test (revealed) bits",
                      (1e2, 1e11))
TEST_ERRORS = Parameter("e", "e", Domain(0, MAX_POPULATION // 2, integer=True),
                        "errors observed among the test bits (0 <= e <= k)", (0, 1e9))
DEVIATION = Parameter("delta", r"\delta", Domain(-1.0, 1.0),
                      "bound on the key-bit error fraction minus the observed test error fraction e/k")

_REFS = (
    Reference("neyman1937", "J. Neyman, Phil. Trans. R. Soc. A 236, 333-380 (1937)", "10.1098/rsta.1937.0005"),
    Reference("buonaccorsi1987", "J. P. Buonaccorsi, The American Statistician 41, 215-218 (1987)",
              "10.1080/00031305.1987.10475483"),
)

_PREC = 128
#: claims n (e/k + delta) are read with this relative slack before the floor (64 ulps of float64)
_CLAIM_SLACK = 2.0**-46


def _check(n, k, e, eps=None):
    n = KEY_BITS.check(n)
    k = TEST_BITS.check(k)
    e = TEST_ERRORS.check(e)
    if e > k:
        raise InputError("e", e, f"an integer in [0, k] = [0, {k}] (errors cannot exceed test bits)")
    if n + k > MAX_POPULATION:
        raise InputError("n", n, f"n + k <= {MAX_POPULATION} (k = {k})")
    if eps is not None:
        eps = EPS.check(eps)
    return n, k, e, eps


class _SamplingTail:
    """``T -> Pr[X <= e | N = n + k, T errors, sample k]`` with the normalisation computed once."""

    def __init__(self, n: int, k: int, e: int):
        self.n, self.k, self.e, self.N = n, k, e, n + k
        with ctx.workprec(_PREC):
            self.log_norm = lnbinom_arb(self.N, k)
            self._lg_e = _lgamma1(e)
            self._lg_ke = _lgamma1(k - e)

    def family(self, T: int) -> Hypergeometric:
        return Hypergeometric(self.N, T, self.k, self.log_norm)

    def log_cdf(self, T: int) -> float:
        return log_cdf(self.family(T), self.e)

    def ball(self, T: int, prec: int = _PREC) -> arb:
        return cdf_ball(self.family(T), self.e, prec)

    def log_start(self, T: int) -> arb:
        """``ln Pr[X = e | T]`` at 128 bits: the very ball of ``family(T).log_pmf_arb(e)`` (same
        operations in the same order), with the two lgamma values that do not depend on ``T`` reused."""
        e, k, N = self.e, self.k, self.N
        with ctx.workprec(_PREC):
            return ((_lgamma1(T) - self._lg_e - _lgamma1(T - e))
                    + (_lgamma1(N - T) - self._lg_ke - _lgamma1(N - T - k + e)) - self.log_norm)

    def probe(self, T: int, light: bool = False) -> _Probe | None:
        """Float ``ln F(e; T)`` with its walk kept, or None where :func:`log_cdf` would not walk down
        from ``e`` (then the caller falls back to the plain search).

        The float value is the one :meth:`log_cdf` returns (same start ball, same sum) up to the
        chunking of the walk, which is sized here from the first ratio.  ``light`` takes the start term
        from float ``lgamma`` instead (absolute error up to ~1e-16 N ln N): good enough to predict
        where the bound lies, never used to decide it (``log_start`` is then None).
        """
        fam = self.family(T)
        e, k, N = self.e, self.k, self.N
        if not (fam.lo <= e < fam.hi and fam.mode_side(e) < 0):
            return None
        # size the first block of terms: ln P_i ~ -a i - b i^2 / 2 from the first two ratios, solved
        # for ln P_L = -45 (about 2**-64), with 10% to spare; at most 45 / a (geometric decay)
        r = e * (N - T - k + e) / ((T - e + 1) * (k - e + 1)) if e > 0 else 0.0
        if 0.0 < r < 1.0 - 1e-9:
            a = -math.log(r)
            r2 = (e - 1) * (N - T - k + e - 1) / ((T - e + 2) * (k - e + 2)) if e > 1 else 0.0
            b = math.log(r / r2) if r2 > 0.0 else 0.0
            length = 45.0 / a if b <= 1e-300 else min(45.0 / a, (math.sqrt(a * a + 90.0 * b) - a) / b)
            first = int(1.1 * length) + 16
        else:
            first = 16
        w = _walk(fam, e, -1, keep=True, first_chunk=min(first, e - fam.lo + 1))
        if light:
            lg = math.lgamma
            ls_f = (lg(T + 1) - lg(e + 1) - lg(T - e + 1) + lg(N - T + 1) - lg(k - e + 1) - lg(N - T - k + e + 1)
                    - (lg(N + 1) - lg(k + 1) - lg(N - k + 1)))
            return _Probe(T, fam, None, w, ls_f + math.log(w.total + 0.0))
        ls = self.log_start(T)
        return _Probe(T, fam, ls, w, float(ls.mid()) + math.log(w.total + 0.0))


class _Probe:
    """One evaluation of the tail at ``T``: family, start-term ball, kept float walk, float log tail."""

    __slots__ = ("T", "fam", "log_F", "log_start", "walk")

    def __init__(self, T: int, fam: Hypergeometric, log_start: arb, walk: _Walk, log_F: float):
        self.T, self.fam, self.log_start, self.walk, self.log_F = T, fam, log_start, walk, log_F


def _guess(n, k, e, eps) -> float:
    """Normal approximation (with finite-population correction) to T_u; only a starting point."""
    N = n + k
    z = max(-NormalDist().inv_cdf(eps), 0.0)  # the standard library's normal quantile: no scipy import
    f = max((N - k) / max(N - 1, 1), 1e-12)
    c = z * z * k * f
    ep = e + 0.5
    a2 = k * k + c
    b = 2 * k * ep + c
    disc = max(b * b - 4 * a2 * ep * ep, 0.0)
    p = (b + math.sqrt(disc)) / (2 * a2)
    return min(max(p * N, e), e + n)


def _search(tail: _SamplingTail, eps: float) -> int:
    """Largest T in [e, e+n] with float tail > eps (bracketed secant on log tail, integer bisection)."""
    n, k, e = tail.n, tail.k, tail.e
    log_eps = math.log(eps)
    g = lambda T: tail.log_cdf(T) - log_eps  # noqa: E731
    lo, hi = e, e + n          # g(lo) > 0 always (the tail is 1 at T = e)
    g_hi = g(hi)
    if g_hi > 0:
        return hi
    t0 = int(min(max(round(_guess(n, k, e, eps)), lo + 1), hi - 1)) if hi - lo > 1 else lo
    pts = []
    if hi - lo > 1:
        g0 = g(t0)
        pts.append((t0, g0))
        if g0 > 0:
            lo = t0
        else:
            hi = t0
        # a second point one tenth of a standard deviation (in T units) away
        N = n + k
        p = min(max(t0 / N, 1.0 / N), 1 - 1.0 / N)
        sd_t = (N / k) * math.sqrt(k * p * (1 - p) * max((N - k) / max(N - 1, 1), 1e-12)) + 1.0
        t1 = t0 + max(1, int(0.1 * sd_t)) * (1 if g0 > 0 else -1)
        if lo < t1 < hi:
            g1 = g(t1)
            pts.append((t1, g1))
            if g1 > 0:
                lo = t1
            else:
                hi = t1
    slow = 0
    while hi - lo > 1:
        cand = None
        if len(pts) >= 2 and slow < 2:
            (a, ga), (b, gb) = pts[-2], pts[-1]
            if math.isfinite(ga) and math.isfinite(gb) and ga != gb:
                t = b - gb * (b - a) / (gb - ga)
                if math.isfinite(t):
                    cand = int(math.floor(t))
                    if cand <= lo:
                        cand = lo + 1
                    if cand >= hi:
                        cand = hi - 1
        if cand is None:
            cand = (lo + hi) // 2
            slow = 0
        width = hi - lo
        gc = g(cand)
        pts.append((cand, gc))
        if gc > 0:
            lo = cand
        else:
            hi = cand
        slow = slow + 1 if (hi - lo) > width // 2 and (hi - lo) > 2 else 0
    return lo

#: a float log tail derived from a neighbouring walk decides the comparison with ln eps only when it is
#: this far from it (both it and the direct value are within about 1e-10 of the exact log tail)
_DERIVED_MARGIN = 1e-8
#: up to this population the first (prediction-only) walk takes its start term from float lgamma
_LIGHT_MAX_POPULATION = 10**10
#: the predictor uses at most about twice this many terms of a walk
_PREDICT_TERMS = 256


def _predict(tail: _SamplingTail, pr: _Probe, log_eps: float) -> float | None:
    """Predicted real ``T`` where ``ln F(e; T) = ln eps``, from the terms of the walk at ``pr.T``.

    ``F(e; T + d) = sum_j p(j; T) R_j(d)`` exactly, with ``R_j(d) = prod_{t=T}^{T+d-1} r_j(t)`` and
    ``r_j(t) = p(j; t+1)/p(j; t) = (t+1)/(t+1-j) * (N-t-k+j)/(N-t)``.  With ``f_j(t) = ln r_j(t)``
    taken linear in ``t`` (value and derivative at ``T``), ``ln R_j(d) ~ d f_j + d(d-1)/2 f_j'``; a
    linear step from the mean slope, then at most two Newton steps on that model.  Only a guess:
    every decision is taken on exact (float or certified) tails.
    """
    T, e, k, N = pr.T, tail.e, tail.k, tail.N
    P = pr.walk.values
    P = P[:max(1, int(np.searchsorted(-P, -1e-12)))]  # terms decrease; smaller ones do not move the guess
    offs = np.arange(P.size, dtype=np.float64)
    if P.size > 2 * _PREDICT_TERMS:  # a long, smooth walk: every s-th term (the ratio of sums is kept)
        stride = P.size // _PREDICT_TERMS
        P, offs = P[::stride], offs[::stride]
    target = log_eps - pr.log_F
    lo_d, hi_d = float(e + 1 - T), float(e + tail.n - T)
    with np.errstate(all="ignore"):
        a = (T + 1.0 - e) + offs          # t + 1 - j at t = T
        b = float(N - T - k + e) - offs    # N - t - k + j
        f0 = np.log(b / a) + math.log((T + 1.0) / (N - T))
        f1 = (1.0 / (T + 1.0) + 1.0 / (N - T)) - (1.0 / a + 1.0 / b)
        sP = float(P.sum())
        slope = float(P @ f0) / sP
        if not (math.isfinite(slope) and slope < 0):
            return None
        d = min(max(target / slope, lo_d), hi_d)
        logP = np.log(P)
        for _ in range(2):
            x = logP + (d * f0 + (0.5 * d * (d - 1.0)) * f1)
            m = float(x.max())
            w = np.exp(x - m)
            sw = float(w.sum())
            h = m + math.log(sw / sP)
            hp = float(w @ (f0 + (d - 0.5) * f1)) / sw
            if not (math.isfinite(h) and math.isfinite(hp) and hp < 0):
                return None
            step = (h - target) / hp
            d = min(max(d - step, lo_d), hi_d)
            if abs(step) < 0.05:
                break
    return T + d if math.isfinite(d) else None


def _derived_log_below(tail: _SamplingTail, pr: _Probe) -> float:
    """Float ``ln F(e; T - 1)`` from the walk at ``T = pr.T``: ``F(T-1) = sum_j p(j; T) / r_j(T-1)``."""
    T, e, k, N = pr.T, tail.e, tail.k, tail.N
    P = pr.walk.values
    P = P[:max(1, int(np.searchsorted(-P, -2.0**-60)))]  # dropped terms: < 1e-12 of the sum in all
    j = float(e) - np.arange(P.size, dtype=np.float64)
    inv = ((T - j) / float(T)) * (float(N - T + 1) / ((N - T + 1.0 - k) + j))
    if not inv[-1] <= 2.0:  # the ratio grows down the walk: the cut-off terms could matter at T - 1
        return math.nan
    return pr.log_F + math.log(float((P * inv).sum())) - math.log(float(P.sum()))


def _fast_search(tail: _SamplingTail, eps: float, max_rounds: int = 6):
    """``(T, probe at T + 1 or None)`` with T the result of :func:`_search`; a handful of walks.

    Candidates ``c`` come from :func:`_predict`; ``c`` is accepted when the direct float tail at ``c + 1``
    is ``<= eps`` and the tail at ``c`` is ``> eps`` (derived from the same walk when that is far from
    ``eps``, else evaluated directly).  This is exactly the bracket :func:`_search` ends on, so the
    result is the same (the float tail is non-increasing in ``T``).  Anything unusual (a tail across
    the mode, the ends of ``[e, e + n]``, a poor prediction) falls back to :func:`_search`.
    """
    n, e = tail.n, tail.e
    lo, hi = e, e + n
    if hi - lo < 4:
        return _search(tail, eps), None
    log_eps = math.log(eps)
    known_lo, known_hi = lo, hi + 1  # float tail > eps at known_lo; <= eps at known_hi (virtual)
    c = int(min(max(round(_guess(tail.n, tail.k, e, eps)), lo + 1), hi - 1))
    first = tail.probe(c, light=tail.N <= _LIGHT_MAX_POPULATION)
    if first is None:
        return _search(tail, eps), None
    nxt = _predict(tail, first, log_eps)
    if nxt is None:
        return _search(tail, eps), None
    c = min(max(math.floor(nxt), lo), hi - 1)
    for _ in range(max_rounds):
        if not (known_lo <= c < known_hi - 1) or c + 1 >= hi:
            break
        pr = tail.probe(c + 1)
        if pr is None:
            break
        if pr.log_F - log_eps > 0:
            known_lo = c + 1
            nxt = _predict(tail, pr, log_eps)
            if nxt is None:
                break
            c = max(math.floor(nxt), c + 1)
            continue
        known_hi = c + 1
        if c == e:
            return c, pr
        g0 = _derived_log_below(tail, pr) - log_eps
        if not abs(g0) > _DERIVED_MARGIN:  # too close to call (or not derivable): evaluate directly
            p0 = tail.probe(c)
            if p0 is None:
                break
            g0 = p0.log_F - log_eps
            if not g0 > 0:
                known_hi = c
                nxt = _predict(tail, p0, log_eps)
                if nxt is None:
                    break
                c = min(math.floor(nxt), c - 1)
                continue
        if g0 > 0:
            return c, pr
        nxt = _predict(tail, pr, log_eps)
        if nxt is None:
            break
        c = min(math.floor(nxt), c - 1)
    return _search(tail, eps), None


def _upper_T(tail: _SamplingTail, eps: float, prec: int) -> int:
    """Certified: smallest ``T' >= T`` (``T`` from the float search) with ``F(e; T'+1) <= eps`` certified."""
    T, pr = _fast_search(tail, eps)
    if pr is None or T >= tail.e + tail.n:
        return _certified_upper_T(tail, eps, T, prec)
    if prec <= _PREC:
        ls = pr.log_start
    else:
        with ctx.workprec(prec):
            ls = pr.fam.log_pmf_arb(tail.e)
    if cdf_ball_of_walk(pr.fam, tail.e, pr.walk, ls, prec).upper() <= arb(eps):
        return T
    return _certified_upper_T(tail, eps, T + 1, prec)



def key_errors_upper(n: int, k: int, e: int, eps: float) -> int:
    """Upper confidence bound on the number of errors among the ``n`` key bits (float path).

    Parameters
    ----------
    n : int
        Key bits (unrevealed positions).
    k : int
        Test bits: a uniformly random subset of the ``n + k`` positions.
    e : int
        Errors observed among the test bits, ``0 <= e <= k``.
    eps : float
        Failure probability in (0, 1).

    Returns
    -------
    int
        ``T_u - e`` where ``T_u`` is the Neyman bound defined in the module docstring, with the tail
        evaluated in float64 (relative error about 1e-12).  A tail within that distance of ``eps`` may
        be misjudged by one count; :func:`key_errors_upper_certified` never is.

    References
    ----------
    .. [1] J. Neyman, Phil. Trans. R. Soc. A 236 (1937) 333-380.
    """
    n, k, e, eps = _check(n, k, e, eps)
    return _fast_search(_SamplingTail(n, k, e), eps)[0] - e


def _certified_upper_T(tail: _SamplingTail, eps: float, T: int, prec: int) -> int:
    """Smallest T' >= T with Pr[X <= e | T'+1] <= eps certified (so exact T_u <= T')."""
    e_arb = arb(eps)
    for _ in range(10_000):
        if T >= tail.e + tail.n:
            return tail.e + tail.n
        if tail.ball(T + 1, prec).upper() <= e_arb:
            return T
        T += 1
    raise ComputationError("could not certify the hypergeometric upper confidence bound")


def _certified_lower_T(tail: _SamplingTail, eps: float, T: int, prec: int) -> int:
    """Largest T' <= T with Pr[X <= e | T'] > eps certified (so exact T_u >= T')."""
    e_arb = arb(eps)
    for _ in range(10_000):
        if T <= tail.e:
            return tail.e
        if tail.ball(T, prec).lower() > e_arb:
            return T
        T -= 1
    raise ComputationError("could not certify the hypergeometric upper confidence bound from below")


def key_errors_upper_certified(n: int, k: int, e: int, eps: float, prec: int = _PREC) -> int:
    """Integer guaranteed to be at least the exact Neyman ``T_u - e`` (see :func:`key_errors_upper`).

    Starts from the float result ``T`` and checks with a certified enclosure that
    ``Pr[X <= e | T + 1] <= eps``; if the enclosure's upper end is above ``eps``, ``T`` is raised
    by one and the check repeated.  Since the tail decreases in ``T``, every larger ``T`` is then
    rejected too, so the exact ``T_u`` is at most the returned ``T``.

    References
    ----------
    .. [1] J. Neyman, Phil. Trans. R. Soc. A 236 (1937) 333-380.
    """
    n, k, e, eps = _check(n, k, e, eps)
    return _upper_T(_SamplingTail(n, k, e), eps, prec) - e


def hypergeometric_cdf(x: int, N: int, K: int, k: int) -> float:
    """``Pr[X <= x]``, X the marked count in a uniform sample of k from N items with K marked (float64)."""
    return math.exp(log_cdf(Hypergeometric(N, K, k), x))


def hypergeometric_cdf_certified(x: int, N: int, K: int, k: int, prec: int = _PREC) -> Enclosure:
    """Enclosure guaranteed to contain ``Pr[X <= x]`` (see :func:`hypergeometric_cdf`)."""
    return Enclosure.from_arb(cdf_ball(Hypergeometric(N, K, k), x, prec))


def _claimed_count(n, k, e, delta) -> int:
    """Key-error count claimed by a deviation: floor(n (e/k + delta)) read with a 64-ulp slack."""
    v = n * (e / k + delta)
    return math.floor(v + _CLAIM_SLACK * max(1.0, abs(v)))


@register
class HypergeometricSampling(Bound):
    """Exact hypergeometric (sampling without replacement) bound on the key-bit error count.

    ``deviation(eps, n=, k=, e=)`` is ``(T_u - e)/n - e/k``; ``failure_probability(delta, n=, k=, e=)``
    is ``Pr[X <= e | n + k, T_claim + 1, k]`` where ``T_claim = e + floor(n (e/k + delta))`` (1 if
    that count is negative, 0 if it is at least ``n``).  Count claims are read with a relative slack
    of ``2**-46`` before the floor, so that a deviation returned by ``deviation`` maps back to the
    same integer count despite float rounding.

    References
    ----------
    .. [1] J. Neyman, Phil. Trans. R. Soc. A 236 (1937) 333-380.
    """

    name = "hypergeometric_sampling"
    title = "Exact hypergeometric sampling bound (random test subset, Neyman upper limit)"
    summary = ("Upper confidence bound on the error fraction of n key bits when a uniformly random k of the "
               "n + k positions are tested and show e errors; computed from the exact hypergeometric tail.")
    bounds = "hypergeometric_sampling"
    parameters = (KEY_BITS, TEST_BITS, TEST_ERRORS)
    deviation_parameter = DEVIATION
    references = _REFS
    assumptions = ("the k test positions are a uniformly random subset of the n + k positions, chosen "
                   "independently of where the errors are",
                   "the error pattern is fixed (or arbitrary, adversarial) before the subset is chosen")
    exact = True

    def _check_joint(self, params):
        e, k, n = np.asarray(params["e"]), np.asarray(params["k"]), np.asarray(params["n"])
        if np.any(e > k):
            be, bk = np.broadcast_arrays(e, k)
            raise InputError("e", be[be > bk].ravel()[0].item(),
                             "an integer in [0, k] (errors cannot exceed test bits)")
        if np.any(n + k > MAX_POPULATION):
            raise InputError("n", n.ravel()[0].item() if n.ndim else n.item(), f"n + k <= {MAX_POPULATION}")

    def latex(self) -> dict:
        return {
            "failure_probability": (r"\varepsilon = \sum_{j \le e} \binom{T}{j}\binom{n+k-T}{k-j} \Big/ \binom{n+k}{k},"
                                    r"\quad T = e + \lfloor n(e/k+\delta) \rfloor + 1"),
            "deviation": (r"\delta = \frac{T_u - e}{n} - \frac{e}{k},\quad T_u = \max\{T : "
                          r"\Pr[X \le e \mid n+k, T, k] > \varepsilon\}"),
        }

    # float
    def _deviation(self, eps, params):
        n, k, e = params["n"], params["k"], params["e"]
        bn, bk, be, beps = np.broadcast_arrays(np.asarray(n), np.asarray(k), np.asarray(e), np.asarray(eps))
        out = np.empty(bn.shape)
        for idx in np.ndindex(bn.shape):
            ni, ki, ei = int(bn[idx]), int(bk[idx]), int(be[idx])
            t = _fast_search(_SamplingTail(ni, ki, ei), float(beps[idx]))[0]
            out[idx] = (t - ei) / ni - ei / ki
        return out if out.ndim else float(out)

    def _failure_probability(self, deviation, params):
        n, k, e = params["n"], params["k"], params["e"]
        bn, bk, be, bd = np.broadcast_arrays(np.asarray(n), np.asarray(k), np.asarray(e),
                                             np.asarray(deviation, dtype=float))
        out = np.empty(bn.shape)
        for idx in np.ndindex(bn.shape):
            ni, ki, ei = int(bn[idx]), int(bk[idx]), int(be[idx])
            m = _claimed_count(ni, ki, ei, float(bd[idx]))
            if m < 0:
                out[idx] = 1.0
            elif m >= ni:
                out[idx] = 0.0
            else:
                out[idx] = math.exp(_SamplingTail(ni, ki, ei).log_cdf(ei + m + 1))
        return out if out.ndim else float(out)

    # certified
    def _exact_T_range(self, eps, params, prec):
        n, k, e = params["n"], params["k"], params["e"]
        tail = _SamplingTail(n, k, e)
        t = _fast_search(tail, eps)[0]
        return tail, _certified_lower_T(tail, eps, t, prec), _certified_upper_T(tail, eps, t, prec)

    def _deviation_certified(self, eps, params, prec):
        n, k, e = params["n"], params["k"], params["e"]
        _, t_lo, t_hi = self._exact_T_range(eps, params, prec)
        with ctx.workprec(max(prec, _PREC)):
            lo = arb(t_lo - e) / arb(n) - arb(e) / arb(k)
            hi = arb(t_hi - e) / arb(n) - arb(e) / arb(k)
        return Enclosure(math.nextafter(float(lo.lower()), -math.inf), math.nextafter(float(hi.upper()), math.inf))

    def _claims_arb(self, deviation, params):
        """All integer claims m compatible with the exact value of n (e/k + delta) plus slack."""
        n, k, e = params["n"], params["k"], params["e"]
        with ctx.workprec(_PREC):
            v = arb(n) * (arb(e) / arb(k) + arb(deviation))
            lo_v = v.lower()
            hi_v = v.upper()
            m_lo = int((lo_v + _CLAIM_SLACK * max(arb(1), abs(lo_v))).floor().unique_fmpz())
            m_hi = int((hi_v + _CLAIM_SLACK * max(arb(1), abs(hi_v))).floor().unique_fmpz())
        return range(m_lo, m_hi + 1)

    def _failure_probability_certified(self, deviation, params, prec):
        n, k, e = params["n"], params["k"], params["e"]
        tail = _SamplingTail(n, k, e)
        los, his = [], []
        for m in self._claims_arb(deviation, params):
            if m < 0:
                los.append(1.0)
                his.append(1.0)
            elif m >= n:
                los.append(0.0)
                his.append(0.0)
            else:
                b = tail.ball(e + m + 1, prec)
                los.append(float(b.lower()))
                his.append(float(b.upper()))
        return Enclosure(math.nextafter(min(los), -math.inf), math.nextafter(max(his), math.inf))

    # mpmath
    def _deviation_mp(self, eps, params, dps):
        n, k, e = params["n"], params["k"], params["e"]
        tail, t_lo, t_hi = self._exact_T_range(eps, params, _PREC)
        t_u = t_lo
        prec = int(dps * 3.33) + 30
        for t in range(t_lo + 1, t_hi + 1):  # undecided at 128 bits: decide at high precision
            b = tail_arb_reference(Hypergeometric(n + k, t, k), e, True, prec)
            if b > arb(eps):
                t_u = t
            elif not (b <= arb(eps)):
                raise ComputationError(f"{self.name}: tail at T = {t} equals eps to {dps} digits")
        with mpmath.workdps(dps):
            return mpmath.mpf(t_u - e) / n - mpmath.mpf(e) / k

    def _failure_probability_mp(self, deviation, params, dps):
        n, k, e = params["n"], params["k"], params["e"]
        m = _claimed_count(n, k, e, float(deviation))
        with mpmath.workdps(dps):
            if m < 0:
                return mpmath.mpf(1)
            if m >= n:
                return mpmath.mpf(0)
            b = tail_arb_reference(Hypergeometric(n + k, e + m + 1, k), e, True, int(dps * 3.33) + 30)
            return mpmath.mpf(b.mid().str(dps + 5, radius=False))
