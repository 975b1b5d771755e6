"""Decoy-state estimation formulas, written once for two number types (private helper of decoy_bb84).

Every closed form here is plain arithmetic (``+ - * /``) plus an ``exp`` that the caller passes, so the
same source runs

* on float64 numpy arrays (vectorised, for parameter design), and
* on python-flint ``arb`` balls (for the certified key length: the ball contains the exact value of the
  formula at the conservative inputs, and the reported length is rounded down from its lower end).

Notation (see proofs_notes/protocols/decoy_bb84.md): intensities ``mu[0] > mu[1] > ... `` (descending),
probabilities ``p[k]``; ``lo[k], hi[k]`` bound the *expected* count of detections (or errors) of intensity
``k`` given the photon-number content of the detected pulses, i.e. ``sum_n p_{k|n} s_n``; the rescaled
``e^{mu_k}/p_k`` times these bounds are the quantities the decoy inequalities act on.

References
----------
.. [1] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014).
.. [2] D. Rusca, A. Boaron, F. Grünenfelder, A. Martin, H. Zbinden, Appl. Phys. Lett. 112, 171104 (2018).
.. [3] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005).
"""

from __future__ import annotations

import math

import numpy as np
from flint import arb, ctx

from ..bounds.binomial_exact import (binomial_lower_limit_certified, binomial_upper_limit_certified)
from ..bounds.chernoff import (expectation_lower, expectation_lower_certified, expectation_upper,
                               expectation_upper_certified)
from ..bounds.kato import KATO, kato_choose_a
from ..compile import to_arb
from ..errors import ComputationError

LN2 = math.log(2.0)

#: Count-statistics methods: how an interval on an expected count is inferred from an observed count.
COUNT_METHODS = ("exact", "chernoff", "hoeffding")
#: Kato's inequality over all pulses (dependent rounds); certified key length only, no float design path.
KATO_METHOD = "kato"


# ---------------------------------------------------------------------------------------------------------
# number-type helpers
# ---------------------------------------------------------------------------------------------------------
def arb_exp(x):
    return to_arb(x).exp()


def floor_arb(x: arb) -> float:
    """A float certainly <= every point of the ball."""
    lo = x.lower()
    f = float(lo)
    return f if arb(f) <= lo else math.nextafter(f, -math.inf)


def ceil_arb(x: arb) -> float:
    """A float certainly >= every point of the ball."""
    hi = x.upper()
    f = float(hi)
    return f if arb(f) >= hi else math.nextafter(f, math.inf)


def clip0(x):
    """max(x, 0) for a lower bound (numpy or arb: for arb, the lower end clipped at 0 as a new exact ball)."""
    if isinstance(x, arb):
        lo = float(x.lower())
        return arb(0) if lo <= 0 else arb(math.nextafter(lo, -math.inf))
    return np.maximum(x, 0.0)


def lower_end(x):
    """For arb: an exact ball at a float below the ball (so later steps cannot widen its meaning)."""
    if isinstance(x, arb):
        return arb(floor_arb(x))
    return x


def upper_end(x):
    if isinstance(x, arb):
        return arb(ceil_arb(x))
    return x


# ---------------------------------------------------------------------------------------------------------
# intervals on expected counts
# ---------------------------------------------------------------------------------------------------------
def count_interval_float(method: str, observed, total, eps):
    """Float (vectorised, real-valued) interval ``(lo, hi)`` on the expected count.

    ``observed`` counts among ``total`` detections of the basis; ``eps`` the failure probability of each
    side.  Accepts non-integer counts (expected counts during design); NOT certified.
    """
    c = np.asarray(observed, dtype=float)
    C = np.asarray(total, dtype=float)
    eps = np.asarray(eps, dtype=float)
    if method == "hoeffding":
        d = np.sqrt(C / 2.0 * np.log(1.0 / eps))
        return c - d, c + d
    if method == "exact":
        from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up

        with np.errstate(all="ignore"):
            cc = np.clip(c, 0.0, C)
            up = C * special.betainccinv(cc + 1.0, np.maximum(C - cc, 1e-300), eps)
            lo = np.where(cc > 0, C * special.betaincinv(np.maximum(cc, 1e-300), C - cc + 1.0, eps), 0.0)
        up = np.where(cc >= C, C, np.maximum(up, cc + 1.0))
        lo = np.maximum(np.minimum(lo, cc - 1.0), 0.0)
        return lo, np.minimum(up, C)
    if method == "chernoff":
        cc = np.maximum(c, 0.0)
        return expectation_lower(cc, eps), expectation_upper(cc, eps)
    raise ValueError(method)


def count_interval_certified(method: str, observed: int, total: int, eps: float, prec: int = 128):
    """Certified interval ``(lo, hi)`` (arb balls, exact at conservative floats) on an expected count.

    Methods
    -------
    hoeffding : ``observed -/+ sqrt(total/2 ln(1/eps))`` (Hoeffding 1963, independent trials in [0, 1]).
    exact : ``total`` times the one-sided Clopper-Pearson limits; valid for independent, non-identical
        Bernoulli trials because the Poisson-binomial tail is dominated by the binomial one with the same
        mean when the limit lies at least one count beyond the observation (Hoeffding 1956), which the
        clamp ``hi >= observed + 1``, ``lo <= observed - 1`` enforces.
    chernoff : multiplicative Chernoff bound (independent, non-identical Bernoulli trials).
    """
    c, C = int(observed), int(total)
    with ctx.workprec(prec):
        if method == "hoeffding":
            d = (arb(C) / 2 * (1 / to_arb(eps)).log()).sqrt()
            return arb(c) - d, arb(c) + d
        if method == "exact":
            if C == 0:
                return arb(0), arb(0)
            pu = binomial_upper_limit_certified(c, C, eps, prec)
            pl = binomial_lower_limit_certified(c, C, eps, prec)
            hi = arb(pu) * C
            hi = arb(ceil_arb(hi))
            if hi < c + 1:
                hi = arb(min(c + 1, C))
            lo = arb(floor_arb(arb(pl) * C))
            if lo > c - 1:
                lo = arb(max(c - 1, 0))
            return lo, hi
        if method == "chernoff":
            return arb(expectation_lower_certified(c, eps, prec)), arb(expectation_upper_certified(c, eps, prec))
    raise ValueError(method)


# ---------------------------------------------------------------------------------------------------------
# Kato's inequality over the rounds (statistics="kato"; proof note, section 2a)
# ---------------------------------------------------------------------------------------------------------
def kato_tilt(n: int, expected, eps: float, direction: str) -> float:
    """Tilt ``a`` of Kato's inequality fixed from a pre-registered expected sum (``None``: ``a = 0``).

    ``direction="upper"`` tunes the event ``Lambda - Gamma >= (b + a (2 Gamma/n - 1)) sqrt(n)`` (upper bound
    on ``Lambda``, or lower bound on ``Gamma`` from ``Lambda``), ``"lower"`` the mirrored event.  ``a = 0`` is
    Azuma-Hoeffding.  The result must depend on design values only, never on the observed block.
    """
    if expected is None:
        return 0.0
    m = min(max(float(expected), 0.0), float(n))
    a = kato_choose_a(int(n), m, eps, direction)
    # the conversions divide by 1 + 2a/sqrt(n); keep it >= 1/2 (a rule on design values only)
    return a if 1 + 2 * a / math.sqrt(n) >= 0.5 else 0.0


def _kato_b(n: int, a: float, eps: float, prec: int) -> arb:
    """Exact ball at a float >= Kato's ``b`` at (n, a, eps)."""
    return arb(KATO.deviation_certified(eps, prec, n=int(n), a=float(a)).hi)


def kato_count_interval_certified(observed: int, n: int, a_lo: float, a_hi: float, eps: float, prec: int = 128):
    """Certified interval on ``Lambda_n`` (sum over ``n`` rounds of the conditional probabilities) from the
    observed sum ``Gamma_n = observed``: each side fails with probability at most ``eps`` (Kato 2020, from
    memory; the lower side is the inequality for the complemented rounds).

    ``hi = Gamma + (b(a_hi) + a_hi (2 Gamma/n - 1)) sqrt(n)``, ``lo = Gamma - (b(a_lo) - a_lo (2 Gamma/n - 1))
    sqrt(n)``, as exact balls at outward-rounded floats, clipped to ``[0, n]``.
    """
    c, n = int(observed), int(n)
    with ctx.workprec(prec):
        rn = arb(n).sqrt()
        t = 2 * arb(c) / n - 1
        hi = arb(c) + (_kato_b(n, a_hi, eps, prec) + arb(a_hi) * t) * rn
        lo = arb(c) - (_kato_b(n, a_lo, eps, prec) - arb(a_lo) * t) * rn
        hi = arb(min(ceil_arb(hi), float(n)))
        lo = arb(max(floor_arb(lo), 0.0))
    return lo, hi


def count_intervals_certified(method: str, counts, eps: float, prec: int = 128, kato=None):
    """Certified intervals on the expected counts of one table, one per intensity: ``(lower ends, upper ends)``.

    ``kato = (pulses, expected list or None)`` for ``method="kato"`` (Kato intervals on sums of conditional
    probabilities, tilts from the pre-registered expected counts); otherwise :func:`count_interval_certified`
    of each count within the table's total.
    """
    if method == "kato":
        n, expected = kato
        lo, hi = [], []
        for i, c in enumerate(counts):
            m = None if expected is None else expected[i]
            a_lo, a_hi = kato_tilt(n, m, eps, "lower"), kato_tilt(n, m, eps, "upper")
            a, b = kato_count_interval_certified(c, n, a_lo, a_hi, eps, prec)
            lo.append(a)
            hi.append(b)
        return lo, hi
    total = sum(counts)
    lo, hi = [], []
    for c in counts:
        a, b = count_interval_certified(method, c, total, eps, prec)
        lo.append(a)
        hi.append(b)
    return lo, hi


def kato_actual_lower(lam_lower, n: int, a: float, eps: float, prec: int = 128):
    """Lower bound on an actual count ``Gamma_n`` from a lower bound on its conditional sum ``Lambda_n``.

    On the complement of ``Lambda - Gamma >= (b + a (2 Gamma/n - 1)) sqrt(n)`` (probability <= eps),
    ``Gamma (1 + 2a/sqrt(n)) > Lambda - (b - a) sqrt(n)``; the right side increases in ``Lambda``, so its
    lower bound may be plugged in.  Requires ``1 + 2a/sqrt(n) > 0`` (:func:`kato_tilt` ensures >= 1/2).
    """
    with ctx.workprec(prec):
        rn = arb(int(n)).sqrt()
        aa = arb(a)
        val = (lam_lower - (_kato_b(n, a, eps, prec) - aa) * rn) / (1 + 2 * aa / rn)
    return lower_end(val)


def kato_actual_upper(lam_upper, n: int, a: float, eps: float, prec: int = 128):
    """Upper bound on an actual count ``Gamma_n`` from an upper bound on ``Lambda_n``.

    On the complement of the mirrored event ``Gamma - Lambda >= (b - a (2 Gamma/n - 1)) sqrt(n)``,
    ``Gamma (1 + 2a/sqrt(n)) < Lambda + (b + a) sqrt(n)`` (increasing in ``Lambda``).
    """
    with ctx.workprec(prec):
        rn = arb(int(n)).sqrt()
        aa = arb(a)
        val = (lam_upper + (_kato_b(n, a, eps, prec) + aa) * rn) / (1 + 2 * aa / rn)
    return upper_end(val)


# ---------------------------------------------------------------------------------------------------------
# decoy closed forms
# ---------------------------------------------------------------------------------------------------------
def poisson_weights(mu, p, exp):
    """tau_n = sum_k p_k e^{-mu_k} mu_k^n / n! for n = 0, 1 (probability that a pulse has n photons)."""
    tau0 = sum(pk * exp(-mk) for mk, pk in zip(mu, p))
    tau1 = sum(pk * mk * exp(-mk) for mk, pk in zip(mu, p))
    return tau0, tau1


def three_intensity(mu, p, lo, hi, exp):
    """Lower bounds on vacuum and single-photon detections from three intensities (Lim et al. 2014).

    Requires ``mu[0] > mu[1] + mu[2]`` and ``mu[1] > mu[2] >= 0``.  ``lo``/``hi`` bound the expected
    detection counts per intensity (before rescaling).

    Returns
    -------
    (s0, s1) : lower bounds on the vacuum and single-photon detections (not clipped below at 0 for s1;
        s0 clipped at 0).
    """
    m1, m2, m3 = mu
    r = [exp(mk) / pk for mk, pk in zip(mu, p)]
    n1u, n2l, n2u, n3l, n3u = r[0] * hi[0], r[1] * lo[1], r[1] * hi[1], r[2] * lo[2], r[2] * hi[2]
    tau0, tau1 = poisson_weights(mu, p, exp)
    s0 = clip0(tau0 * (m2 * n3l - m3 * n2u) / (m2 - m3))
    s1 = (tau1 * m1 * (n2l - n3u - (m2 * m2 - m3 * m3) / (m1 * m1) * (n1u - s0 / tau0))
          / (m1 * (m2 - m3) - (m2 * m2 - m3 * m3)))
    return s0, s1


def three_intensity_errors(mu, p, lo, hi, exp):
    """Upper bound on single-photon errors from the two weakest intensities (Lim et al. 2014)."""
    m2, m3 = mu[1], mu[2]
    tau0, tau1 = poisson_weights(mu, p, exp)
    return tau1 * (exp(m2) / p[1] * hi[1] - exp(m3) / p[2] * lo[2]) / (m2 - m3)


def two_intensity(mu, p, lo, hi, s0_upper, exp):
    """Vacuum (lower) and single-photon (lower) detections from two intensities (Rusca et al. 2018).

    ``s0_upper`` is an upper bound on the vacuum detections of the same basis (from its errors).
    """
    k1, k2 = mu
    r1, r2 = exp(k1) / p[0], exp(k2) / p[1]
    tau0, tau1 = poisson_weights(mu, p, exp)
    s0 = clip0(tau0 / (k1 - k2) * (k1 * r2 * lo[1] - k2 * r1 * hi[0]))
    s1 = (tau1 * k1 / (k2 * (k1 - k2))
          * (r2 * lo[1] - k2 * k2 / (k1 * k1) * r1 * hi[0] - (k1 * k1 - k2 * k2) / (k1 * k1) * s0_upper / tau0))
    return s0, s1


def two_intensity_vacuum_upper(mu, p, err_hi_weak, vac_dev, exp):
    """Upper bound on vacuum detections from the weak intensity's error count (Rusca et al. 2018).

    A vacuum detection is an error with probability 1/2 whatever the adversary does, so
    ``s0/2 - vac_dev <= v0 <= tau0 e^{mu_w} / p_w * E[m_w]`` except with the deviation's failure probability.
    """
    tau0, _ = poisson_weights(mu, p, exp)
    return 2 * (tau0 * exp(mu[1]) / p[1] * err_hi_weak + vac_dev)


def two_intensity_errors(mu, p, lo, hi, exp):
    """Upper bound on single-photon errors from two intensities (Rusca et al. 2018)."""
    k1, k2 = mu
    _, tau1 = poisson_weights(mu, p, exp)
    return tau1 / (k1 - k2) * (exp(k1) / p[0] * hi[0] - exp(k2) / p[1] * lo[1])


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
