"""Symbolic bounds against the distributions they bound.

External references:
* exact tails: binomial and hypergeometric probabilities summed in log space,
  starting from a pmf evaluated with mpmath's loggamma at 40 digits (scipy's
  hypergeom loses precision at large populations and binom.logsf underflows
  ~60 sigma out, so scipy is used only to cross-check these sums at moderate
  sizes, where it is accurate); Poisson tails from scipy.stats.poisson;
* Monte Carlo with ``numpy.random.default_rng(seed)``.

"Deviation >= exact quantile" is checked in the equivalent form "exact tail
probability at the bound's deviation <= eps" (the exact tail is non-increasing
in the deviation, so the two statements are the same).  Event boundaries are
rounded so as to include a boundary point within 1e-12 (relative) of the
threshold, which can only make the check stricter.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import sympy as sp
from scipy import stats

import finitekey.bounds as fb
from finitekey.bounds import chernoff, kato

# ---- exact tails in log space ------------------------------------------------------------------------

_CHUNK = 1 << 15


def _walk(log_first, log_ratio, start, stop, step):
    """sum_{j from start towards stop} exp(log pmf(j)); log_ratio(js) = log pmf(j+step) - log pmf(j)."""
    total = 0.0
    offset = 0.0  # log pmf(j) - log_first at the start of the chunk
    j = start
    while (step > 0 and j <= stop) or (step < 0 and j >= stop):
        end = min(stop, j + _CHUNK - 1) if step > 0 else max(stop, j - _CHUNK + 1)
        js = np.arange(j, end + step, step, dtype=float)
        with np.errstate(divide="ignore"):  # the ratio past the last support point is 0
            lr = log_ratio(js)
        logs = offset + np.concatenate(([0.0], np.cumsum(lr[:-1])))
        terms = np.exp(logs)
        total += terms.sum()
        offset = logs[-1] + lr[-1]
        if terms[-1] < 1e-22 * total and lr[-1] < 0:
            break
        j = end + step
    return math.exp(log_first) * total


def _binom_logpmf(k, n, p):
    with mpmath.workdps(40):
        k, n, p = mpmath.mpf(k), mpmath.mpf(n), mpmath.mpf(p)
        return float(mpmath.loggamma(n + 1) - mpmath.loggamma(k + 1) - mpmath.loggamma(n - k + 1)
                     + k * mpmath.log(p) + (n - k) * mpmath.log1p(-p))


def binom_sf(k, n, p):
    """Pr[X >= k], X ~ Binomial(n, p)."""
    k = max(int(k), 0)
    if k > n:
        return 0.0
    if k <= n * p:
        return 1.0 - binom_cdf(k - 1, n, p)
    lq = math.log(p) - math.log1p(-p)
    return _walk(_binom_logpmf(k, n, p), lambda js: np.log((n - js) / (js + 1)) + lq, k, n, +1)


def binom_cdf(k, n, p):
    """Pr[X <= k], X ~ Binomial(n, p)."""
    k = min(int(k), n)
    if k < 0:
        return 0.0
    if k >= n * p:
        return 1.0 - binom_sf(k + 1, n, p)
    lq = math.log1p(-p) - math.log(p)
    return _walk(_binom_logpmf(k, n, p), lambda js: np.log(js / (n - js + 1)) + lq, k, 0, -1)


def _hyper_logpmf(t, N, K, n):
    def lc(a, b):
        return mpmath.loggamma(a + 1) - mpmath.loggamma(b + 1) - mpmath.loggamma(a - b + 1)

    with mpmath.workdps(40):
        t, N, K, n = (mpmath.mpf(v) for v in (t, N, K, n))
        return float(lc(K, t) + lc(N - K, n - t) - lc(N, n))


def hyper_sf(t, N, K, n):
    """Pr[T >= t], T ~ Hypergeometric(population N, K marked, n drawn)."""
    lo, hi = max(0, n - (N - K)), min(K, n)
    t = max(int(t), lo)
    if t > hi:
        return 0.0
    if t <= n * K / N:
        return 1.0 - hyper_cdf(t - 1, N, K, n)
    return _walk(_hyper_logpmf(t, N, K, n),
                 lambda js: np.log((K - js) * (n - js) / ((js + 1) * (N - K - n + js + 1))), t, hi, +1)


def hyper_cdf(t, N, K, n):
    """Pr[T <= t], T ~ Hypergeometric(population N, K marked, n drawn)."""
    lo, hi = max(0, n - (N - K)), min(K, n)
    t = min(int(t), hi)
    if t < lo:
        return 0.0
    if t >= n * K / N:
        return 1.0 - hyper_sf(t + 1, N, K, n)
    return _walk(_hyper_logpmf(t, N, K, n),
                 lambda js: np.log(js * (N - K - n + js) / ((K - js + 1) * (n - js + 1))), t, lo, -1)


def _ceil(x):
    return math.ceil(x - 1e-12 * max(1.0, abs(x)))  # slack well above float rounding, far below one count


def _floor(x):
    return math.floor(x + 1e-12 * max(1.0, abs(x)))


@pytest.mark.parametrize("n, p, k", [(50, 0.3, 30), (1000, 0.5, 560), (10**5, 0.01, 1100), (10**5, 0.2, 19500),
                                     (2000, 0.999, 1990)])
def test_binomial_tail_helper_matches_scipy(n, p, k):
    # scipy.stats.binom: relative error <= 1e-11 at these sizes (measured, shared/DEPENDENCIES.md)
    assert binom_sf(k, n, p) == pytest.approx(stats.binom.sf(k - 1, n, p), rel=1e-9)
    assert binom_cdf(k, n, p) == pytest.approx(stats.binom.cdf(k, n, p), rel=1e-9)


@pytest.mark.parametrize("N, K, n, t", [(100, 40, 30, 18), (10**4, 5000, 1000, 560), (10**5, 2000, 10**4, 150),
                                        (10**5, 30000, 5 * 10**4, 14500)])
def test_hypergeometric_tail_helper_matches_scipy(N, K, n, t):
    # scipy.stats.hypergeom: relative error ~1e-10 below a population of 1e6 (measured, DEPENDENCIES.md)
    assert hyper_sf(t, N, K, n) == pytest.approx(stats.hypergeom.sf(t - 1, N, K, n), rel=1e-8)
    assert hyper_cdf(t, N, K, n) == pytest.approx(stats.hypergeom.cdf(t, N, K, n), rel=1e-8)


# ---- grids ---------------------------------------------------------------------------------------------
SIZES = [10, 1000, 10**6, 10**10]
SIZES_SLOW = [10**e for e in range(1, 11)]
EPS = [1e-2, 1e-10, 1e-30]
EPS_SLOW = [10.0 ** -e for e in range(2, 31, 2)]
FRACTIONS = [1e-3, 0.1, 0.3, 0.5]


def _worst_fractions(delta):
    # the binomial/hypergeometric tail at deviation delta is largest near p = (1 - delta)/2
    return sorted({f for f in FRACTIONS + [max(1e-3, (1 - delta) / 2)] if 0 < f < 1})


def _hoeffding_case(n, eps):
    b = fb.get("hoeffding")
    delta = b.deviation(eps, n=n)
    for p in _worst_fractions(delta):
        tail = binom_sf(_ceil(n * (p + delta)), n, p)  # Pr[mean - p >= delta]
        assert tail <= eps, (n, eps, p, delta, tail)  # Hoeffding 1963, Theorem 2


def _serfling_case(n, eps, ratio):
    b = fb.get("serfling")
    N = n * ratio
    delta = b.deviation(eps, n=n, N=N)
    for f in _worst_fractions(delta):
        K = round(f * N)
        tail = hyper_sf(_ceil(n * (K / N + delta)), N, K, n)  # Pr[sample mean - K/N >= delta]
        assert tail <= eps, (n, N, eps, K, delta, tail)  # Serfling 1974, Corollary 1.1


def _random_sampling_case(nkey, eps, ratio):
    b = fb.get("random_sampling")
    k = max(1, nkey // ratio)
    N = nkey + k
    mu = b.deviation(eps, key_bits=nkey, test_bits=k)
    for f in _worst_fractions(mu):
        K = round(f * N)
        # lambda_key - lambda_test >= mu  <=>  T <= (K - n mu) k / (n + k), T = test errors ~ Hypergeom(N, K, k)
        tail = hyper_cdf(_floor((K - nkey * mu) * k / N), N, K, k)
        assert tail <= eps, (nkey, k, eps, K, mu, tail)  # Tomamichel et al. 2012 (Serfling corollary)


def _chernoff_case(mu, eps):
    up, lo = fb.get("chernoff_upper"), fb.get("chernoff_lower")
    d_up = up.deviation(eps, mu=mu)
    try:
        d_lo = lo.deviation(eps, mu=mu)
    except Exception:
        d_lo = None  # eps below e^-mu: the lower tail bound cannot reach it
    for p in (0.5, 0.1, 1e-3, 1e-6):  # p -> 0 approaches the Poisson limit
        n = round(mu / p)
        if n < 1 or n * p != mu and abs(n * p - mu) > 1e-9 * mu:
            continue
        tail = binom_sf(_ceil((1 + d_up) * mu), n, p)
        assert tail <= eps, ("upper", mu, p, eps, d_up, tail)  # Mitzenmacher-Upfal Thm 4.4
        if d_lo is not None:
            tail = binom_cdf(_floor((1 - d_lo) * mu), n, p)
            assert tail <= eps, ("lower", mu, p, eps, d_lo, tail)  # Mitzenmacher-Upfal Thm 4.5


def _kato_case(n, eps):
    for p in (0.5, 0.1, 1e-2, 1e-3):
        m = n * p
        choices = {kato.kato_choose_a(n, m, eps, "upper"), kato.kato_choose_a(n, m, eps, "lower"), -1.0, 0.0, 1.0, 3.0}
        for a in choices:
            if 1 + 4 * a / (3 * math.sqrt(n)) <= 0 or 1 + 2 * a / math.sqrt(n) <= 0:
                continue
            b = fb.get("kato").deviation(eps, n=n, a=a)
            s = math.sqrt(n)
            # independent rounds: Lambda = n p.  Upper helper fails iff n p >= U(Gamma), U increasing in Gamma.
            cut = (m - (b - a) * s) / (1 + 2 * a / s)
            tail = binom_cdf(_floor(cut), n, p)
            assert tail <= eps, ("upper", n, p, a, eps, tail)  # Kato 2020 (statement from memory)
            # lower helper fails iff n p <= L(Gamma) = Gamma (1 + 2a/sqrt n) - (b + a) sqrt n
            cut = (m + (b + a) * s) / (1 + 2 * a / s)
            tail = binom_sf(_ceil(cut), n, p)
            assert tail <= eps, ("lower", n, p, a, eps, tail)


@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("eps", EPS)
def test_hoeffding_dominates_binomial(n, eps):
    _hoeffding_case(n, eps)


@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("eps", EPS)
@pytest.mark.parametrize("ratio", [1, 2, 10])
def test_serfling_dominates_hypergeometric(n, eps, ratio):
    _serfling_case(n, eps, ratio)


@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("eps", EPS)
@pytest.mark.parametrize("ratio", [1, 10])
def test_random_sampling_dominates_hypergeometric(n, eps, ratio):
    _random_sampling_case(n, eps, ratio)


@pytest.mark.parametrize("mu", [100, 10**4, 10**6, 10**10])
@pytest.mark.parametrize("eps", EPS)
def test_chernoff_dominates_binomial(mu, eps):
    _chernoff_case(mu, eps)


@pytest.mark.parametrize("n", [100, 10**4, 10**6, 10**10])
@pytest.mark.parametrize("eps", EPS)
def test_kato_dominates_binomial_for_independent_rounds(n, eps):
    _kato_case(n, eps)


@pytest.mark.slow
@pytest.mark.parametrize("n", SIZES_SLOW)
@pytest.mark.parametrize("eps", EPS_SLOW)
def test_reference_full_grid(n, eps):
    _hoeffding_case(n, eps)
    for ratio in (1, 2, 10, 1000):
        _serfling_case(n, eps, ratio)
        _random_sampling_case(n, eps, ratio)
    if n >= 100:
        _chernoff_case(n, eps)
        _kato_case(n, eps)


def test_tail_check_detects_a_too_small_deviation():
    # The tail helper itself must be able to fail the check: a deliberately halved Hoeffding deviation
    # at n = 1000, eps = 1e-10, p = 1/2 gives an exact tail far above eps.
    delta = fb.get("hoeffding").deviation(1e-10, n=1000) / 2
    assert binom_sf(_ceil(1000 * (0.5 + delta)), 1000, 0.5) > 1e-10


# ---- forms checked symbolically against their published statements ---------------------------------------
def test_random_sampling_equals_published_form():
    # Tomamichel, Lim, Gisin, Renner, Nat. Commun. 3, 634 (2012): exp(-2 mu^2 n k^2 / ((n+k)(k+1))), the
    # eps^2 of their Lemma 3 (S14)-(S15), checked in a stored copy of arXiv:1103.4130 (proof note)
    b = fb.get("random_sampling")
    n, k, mu = (b.symbols[x] for x in ("key_bits", "test_bits", "mu"))
    assert sp.simplify(b.failure_probability_expr - sp.exp(-2 * mu**2 * n * k**2 / ((n + k) * (k + 1)))) == 0


def test_random_sampling_maps_to_published_mu():
    # 2012 paper's mu = sqrt((n+k)/(nk) (k+1)/k ln(1/eps')) is our deviation at eps = eps'^2 (proof note)
    n, k, e = 10**6, 10**5, 1e-10
    paper = math.sqrt((n + k) / (n * k) * (k + 1) / k * math.log(1 / e))
    assert fb.get("random_sampling").deviation(e**2, key_bits=n, test_bits=k) == pytest.approx(paper, rel=1e-13)


def test_serfling_equals_published_form():
    # Serfling 1974, Corollary 1.1 with t = sqrt(n) delta: exp(-2 n delta^2 / (1 - (n-1)/N))
    b = fb.get("serfling")
    n, N, d = (b.symbols[x] for x in ("n", "N", "delta"))
    assert sp.simplify(b.failure_probability_expr - sp.exp(-2 * n * d**2 / (1 - (n - 1) / N))) == 0


def test_chernoff_equals_textbook_form():
    # Mitzenmacher-Upfal Thms 4.4/4.5: (e^d/(1+d)^(1+d))^mu and (e^-d/(1-d)^(1-d))^mu, at 50 digits
    with mpmath.workdps(50):
        for mu, d in [(100, 0.3), (1e4, 0.01), (7.5, 2.0), (1e8, 1e-4)]:
            D = mpmath.mpf(d)  # the float d, exactly
            up = (mpmath.e ** D / (1 + D) ** (1 + D)) ** mu
            assert _close(fb.get("chernoff_upper").failure_probability_mp(d, mu=mu), up)
            if d < 1:
                lo = (mpmath.e ** -D / (1 - D) ** (1 - D)) ** mu
                assert _close(fb.get("chernoff_lower").failure_probability_mp(d, mu=mu), lo)


def _close(a, b, rel=1e-40):
    return abs(a - b) <= rel * abs(b)


def test_bennett_h_float_path_matches_mpmath():
    xs = np.concatenate([-np.logspace(-12, 0, 200)[:-1], [-1.0], np.logspace(-12, 1.5, 200), [0.0999999, 0.1]])
    got = chernoff._bennett_h_float(xs)
    with mpmath.workdps(60):
        ref = [float((1 + mpmath.mpf(x)) * mpmath.log1p(mpmath.mpf(x)) - mpmath.mpf(x)) if x != -1 else 1.0
               for x in xs]
    rel = np.abs(got - ref) / np.maximum(np.abs(ref), 1e-300)
    assert rel.max() < 5e-15, xs[np.argmax(rel)]


# ---- expectation inference (decoy-state use) -------------------------------------------------------------
OBS = [0, 1, 7, 100, 12345, 10**9]


def _mp_root(o, eps, side):
    with mpmath.workdps(50):
        L = -mpmath.log(mpmath.mpf(eps))
        o = mpmath.mpf(o)
        if o == 0:
            return L if side > 0 else mpmath.mpf(0)
        F = lambda mu: mu - o + o * mpmath.log(o / mu) - L  # noqa: E731
        if side > 0:
            return mpmath.findroot(F, (o * (1 + mpmath.mpf(10) ** -30), o + 2 * L + 2 * mpmath.sqrt(2 * o * L) + 1),
                                   solver="anderson")
        return mpmath.findroot(F, (o * mpmath.exp(-1 - L / o) / 2, o * (1 - mpmath.mpf(10) ** -30)),
                               solver="anderson")


@pytest.mark.parametrize("eps", [1e-2, 1e-10, 1e-30])
def test_expectation_bounds_match_mpmath_and_certified_are_conservative(eps):
    up = chernoff.expectation_upper(OBS, eps)
    lo = chernoff.expectation_lower(OBS, eps)
    for i, o in enumerate(OBS):
        ru, rl = _mp_root(o, eps, +1), _mp_root(o, eps, -1)
        assert abs(up[i] - ru) <= 1e-12 * ru
        assert abs(lo[i] - rl) <= 1e-12 * max(rl, 1e-300)
        cu = chernoff.expectation_upper_certified(o, eps)
        cl = chernoff.expectation_lower_certified(o, eps)
        assert cu >= ru and cu - ru <= 1e-12 * ru
        assert cl <= rl and rl - cl <= 1e-12 * max(rl, 1e-300)


def test_expectation_upper_is_the_lower_tail_inverse():
    # derived-form consistency: at mu = expectation_upper(o), the lower-tail bound on Pr[X <= o] equals eps
    for o in (1, 100, 10**6):
        mu = chernoff.expectation_upper(o, 1e-9)
        assert fb.get("chernoff_lower").failure_probability(1 - o / mu, mu=mu) == pytest.approx(1e-9, rel=1e-9)
        mu = chernoff.expectation_lower(o, 1e-9)
        assert fb.get("chernoff_upper").failure_probability(o / mu - 1, mu=mu) == pytest.approx(1e-9, rel=1e-9)


@pytest.mark.parametrize("o", [0, 3, 50, 2000, 10**6])
@pytest.mark.parametrize("eps", [1e-3, 1e-10])
def test_expectation_bounds_cover_poisson(o, eps):
    # Poisson (the limit of sums of many rare independent Bernoulli variables), scipy.stats.poisson:
    # at mu = upper bound, observing <= o has probability <= eps; at mu = lower bound, observing >= o too.
    # At o = 0 the bound is attained (Poisson Pr[X = 0] = e^-mu = eps), so allow float rounding only.
    mu_u = chernoff.expectation_upper(o, eps)
    assert stats.poisson.cdf(o, mu_u) <= eps * (1 + 1e-12)
    if o > 0:
        mu_l = chernoff.expectation_lower(o, eps)
        assert stats.poisson.sf(o - 1, mu_l) <= eps * (1 + 1e-12)
    assert chernoff.expectation_lower(0, eps) == 0.0
    assert chernoff.expectation_upper(0, eps) == pytest.approx(math.log(1 / eps), rel=1e-15)


def test_expectation_bounds_reject_bad_input():
    from finitekey.errors import InputError

    for bad in (-1, float("nan"), "3", True):
        with pytest.raises(InputError, match="observed"):
            chernoff.expectation_upper(bad, 1e-3)
    with pytest.raises(InputError, match="eps"):
        chernoff.expectation_lower(5, 0)


# ---- Monte Carlo -------------------------------------------------------------------------------------------
TRIALS = 200_000
FALSE_ALARM = 1e-6


def _mc_limit(eps):
    """Largest failure count compatible with a true failure probability <= eps.

    If the true probability is q <= eps, the count is Binomial(TRIALS, q), stochastically below
    Binomial(TRIALS, eps); the check fails only if the count exceeds the 1 - 1e-6 quantile of the latter,
    which has probability <= 1e-6 when the bound is right.  The margin above eps is limit/TRIALS - eps
    (about 5.3 standard deviations: 0.0012 at eps = 1e-2, 0.00037 at eps = 1e-3).
    """
    return stats.binom.isf(FALSE_ALARM, TRIALS, eps)


MC_EPS = [1e-2, 1e-3]


@pytest.mark.parametrize("eps", MC_EPS)
def test_monte_carlo_hoeffding(eps, make_rng):
    n, p = 50, 0.5
    x = make_rng(1).binomial(n, p, TRIALS)
    fails = np.count_nonzero(x / n - p >= fb.get("hoeffding").deviation(eps, n=n))
    assert fails <= _mc_limit(eps)


@pytest.mark.parametrize("eps", MC_EPS)
def test_monte_carlo_serfling(eps, make_rng):
    N, K, n = 100, 50, 40
    x = make_rng(2).hypergeometric(K, N - K, n, TRIALS)
    fails = np.count_nonzero(x / n - K / N >= fb.get("serfling").deviation(eps, n=n, N=N))
    assert fails <= _mc_limit(eps)


@pytest.mark.parametrize("eps", MC_EPS)
def test_monte_carlo_random_sampling(eps, make_rng):
    n, k, K = 60, 40, 50
    t = make_rng(3).hypergeometric(K, n + k - K, k, TRIALS)
    mu = fb.get("random_sampling").deviation(eps, key_bits=n, test_bits=k)
    fails = np.count_nonzero((K - t) / n - t / k >= mu)
    assert fails <= _mc_limit(eps)


@pytest.mark.parametrize("eps", MC_EPS)
def test_monte_carlo_chernoff_non_identical(eps, make_rng):
    rng = make_rng(4)
    ps = np.array([0.05, 0.1, 0.2, 0.4])
    x = sum(rng.binomial(50, p, TRIALS) for p in ps)
    mu = 50 * ps.sum()
    d_up = fb.get("chernoff_upper").deviation(eps, mu=mu)
    d_lo = fb.get("chernoff_lower").deviation(eps, mu=mu)
    assert np.count_nonzero(x >= (1 + d_up) * mu) <= _mc_limit(eps)
    assert np.count_nonzero(x <= (1 - d_lo) * mu) <= _mc_limit(eps)


@pytest.mark.parametrize("eps", MC_EPS)
def test_monte_carlo_kato_dependent_rounds(eps, make_rng):
    # Two-state Markov process: Pr[xi_u = 1] is 0.6 after a 1 and 0.15 after a 0 (0.3 for the first round).
    rng = make_rng(5)
    n = 100
    prev = np.zeros(TRIALS, dtype=bool)
    lam = np.zeros(TRIALS)
    gam = np.zeros(TRIALS)
    for u in range(n):
        p = np.where(prev, 0.6, 0.15) if u else np.full(TRIALS, 0.3)
        xi = rng.random(TRIALS) < p
        lam += p
        gam += xi
        prev = xi
    expected = n * 0.15 / (1 - 0.6 + 0.15)  # stationary fraction, fixed before the run
    a_up = kato.kato_choose_a(n, expected, eps, "upper")
    a_lo = kato.kato_choose_a(n, expected, eps, "lower")
    assert np.count_nonzero(lam >= kato.kato_expectation_upper(n, gam, a_up, eps)) <= _mc_limit(eps)
    assert np.count_nonzero(lam <= kato.kato_expectation_lower(n, gam, a_lo, eps)) <= _mc_limit(eps)
