"""Exact binomial and hypergeometric tails, Clopper-Pearson limits and the hypergeometric sampling bound.

Outside references used here:
* scipy.stats.binom / scipy.stats.hypergeom (exact distributions, small and moderate sizes);
* mpmath at 60 digits with exact rational summation of the terms (independent code in this file),
  for populations 1e9..1e12 where scipy is imprecise;
* scipy.stats.binomtest(...).proportion_ci(method='exact') and scipy.special.betainccinv /
  betaincinv (Clopper-Pearson);
* brute-force scans of scipy.stats.hypergeom for the Neyman upper limit;
* Monte Carlo with a seeded numpy Generator for the coverage of the sampling bound.
"""

from __future__ import annotations

import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from flint import arb, ctx
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special, stats

from finitekey import bounds
from finitekey.bounds.binomial_exact import (binomial_cdf, binomial_cdf_certified, binomial_lower_limit,
                                             binomial_lower_limit_certified, binomial_upper_limit,
                                             binomial_upper_limit_certified)
from finitekey.bounds.hypergeometric_exact import (hypergeometric_cdf, hypergeometric_cdf_certified,
                                                   key_errors_upper, key_errors_upper_certified)
from finitekey.errors import InputError


# ---- independent 60-digit references (exact rational term ratios, mpmath lgamma start term) -------------
def _mp_sum_down(log_start, ratio, x, lo):
    """sum_{j <= x} p(j) with p(j-1) = p(j) * ratio(j); terms decrease (x at or below the mode)."""
    term = mpmath.exp(log_start)
    total = term
    j = x
    while j > lo:
        term *= ratio(j)
        total += term
        j -= 1
        if term < total * mpmath.mpf(10) ** -58:
            break
    return total


def mp_binom_cdf(x, n, p):
    """Pr[X <= x] for Binomial(n, p), x below the mode, at 60 digits; p is taken exactly."""
    with mpmath.workdps(60):
        p = mpmath.mpf(p)
        q = 1 - p
        ls = (mpmath.loggamma(n + 1) - mpmath.loggamma(x + 1) - mpmath.loggamma(n - x + 1)
              + x * mpmath.log(p) + (n - x) * mpmath.log(q))
        return _mp_sum_down(ls, lambda j: mpmath.mpf(j) * q / ((n - j + 1) * p), x, 0)


def mp_hypergeom_cdf(x, N, K, k):
    """Pr[X <= x] for the hypergeometric law (sample k of N, K marked), x below the mode, 60 digits."""
    with mpmath.workdps(60):
        lg = lambda m: mpmath.loggamma(m + 1)  # noqa: E731
        lc = lambda a, b: lg(a) - lg(b) - lg(a - b)  # noqa: E731
        ls = lc(K, x) + lc(N - K, k - x) - lc(N, k)
        ratio = lambda j: mpmath.mpf(j * (N - K - k + j)) / ((K - j + 1) * (k - j + 1))  # noqa: E731
        return _mp_sum_down(ls, ratio, x, max(0, k - (N - K)))


def _rel(a, b):
    return abs(float(a) - float(b)) / abs(float(b))


# ---- tails against scipy.stats ----------------------------------------------------------------------------
@pytest.mark.parametrize("n,p", [(10, 0.3), (1000, 0.1), (10**5, 0.02), (10**6, 0.5)])
def test_binomial_cdf_matches_scipy(n, p):
    # reference: scipy.stats.binom (relative error <= 1e-11 at these sizes, shared/DEPENDENCIES.md)
    mean, sd = n * p, math.sqrt(n * p * (1 - p))
    for x in sorted({0, max(0, int(mean - 5 * sd)), int(mean - sd), int(mean), int(mean + 2 * sd), n - 1}):
        ref = stats.binom.cdf(x, n, p)
        if 0 <= x < n and ref > 1e-290:  # below that the float value underflows
            assert _rel(binomial_cdf(x, n, p), ref) < 1e-10
            enc = binomial_cdf_certified(x, n, p)
            assert enc.lo <= ref * (1 + 1e-10) and ref * (1 - 1e-10) <= enc.hi


@pytest.mark.parametrize("N,K,k", [(50, 10, 20), (1000, 100, 50), (10**5, 3000, 10**4), (10**5, 60000, 50000)])
def test_hypergeometric_cdf_matches_scipy(N, K, k):
    # reference: scipy.stats.hypergeom (relative error ~1e-10 at population 1e5-1e6)
    mean = k * K / N
    sd = math.sqrt(max(mean * (1 - K / N) * (N - k) / (N - 1), 1.0))
    lo, hi = max(0, k - (N - K)), min(k, K)
    for x in sorted({lo, int(mean - 4 * sd), int(mean), int(mean + 3 * sd), hi - 1}):
        if lo <= x < hi:
            ref = stats.hypergeom.cdf(x, N, K, k)
            if ref < 1e-290:  # below that the float value underflows
                continue
            assert _rel(hypergeometric_cdf(x, N, K, k), ref) < 1e-9
    assert hypergeometric_cdf(lo - 1, N, K, k) == 0.0 if lo > 0 else True
    assert hypergeometric_cdf(hi, N, K, k) == 1.0


# ---- tails at populations 1e9..1e12 against 60-digit mpmath ---------------------------------------------
BIG_BINOM = [(10**9, 2e-6, 1800), (10**12, 1e-9, 850), (10**12, 3e-9, 2800), (10**12, 1e-6, 997_000)]
BIG_HYPER = [(10**9, 2 * 10**7, 10**5, 1800), (10**12, 10**9, 10**6, 880), (10**12, 3 * 10**10, 4 * 10**4, 1000),
             (10**12, 10**10, 10**8, 997_000)]


@pytest.mark.parametrize("n,p,x", BIG_BINOM)
def test_binomial_tail_large_n_vs_mpmath(n, p, x):
    ref = mp_binom_cdf(x, n, p)
    assert _rel(binomial_cdf(x, n, p), ref) < 1e-11
    enc = binomial_cdf_certified(x, n, p)
    assert enc.lo <= ref <= enc.hi           # certified enclosure contains the 60-digit value
    assert enc.width < 1e-6 * float(ref)     # and is tight enough to be useful


@pytest.mark.parametrize("N,K,k,x", BIG_HYPER)
def test_hypergeometric_tail_large_N_vs_mpmath(N, K, k, x):
    ref = mp_hypergeom_cdf(x, N, K, k)
    assert _rel(hypergeometric_cdf(x, N, K, k), ref) < 1e-11
    enc = hypergeometric_cdf_certified(x, N, K, k)
    assert enc.lo <= ref <= enc.hi
    assert enc.width < 1e-6 * float(ref)


def test_hypergeometric_scipy_is_imprecise_where_we_are_not():
    # scipy.stats.hypergeom loses accuracy at population 1e9 (shared/DEPENDENCIES.md: ~2e-7 relative);
    # our value must be at least 1000 times closer to the mpmath reference than a 1e-7 error.
    N, K, k, x = BIG_HYPER[0]
    ref = mp_hypergeom_cdf(x, N, K, k)
    assert _rel(hypergeometric_cdf(x, N, K, k), ref) < 1e-10


# ---- Clopper-Pearson -----------------------------------------------------------------------------------
@pytest.mark.parametrize("x,n", [(0, 10), (3, 10), (10, 10), (7, 1000), (500, 1000), (12345, 10**6)])
@pytest.mark.parametrize("eps", [1e-2, 1e-6])
def test_clopper_pearson_vs_scipy_binomtest(x, n, eps):
    # reference: scipy.stats.binomtest(...).proportion_ci(method='exact').  One-sided mapping:
    # alternative='less' at confidence_level = 1 - eps gives [0, p_upper]; alternative='greater' gives
    # [p_lower, 1].
    up = stats.binomtest(x, n, alternative="less").proportion_ci(confidence_level=1 - eps, method="exact").high
    low = stats.binomtest(x, n, alternative="greater").proportion_ci(confidence_level=1 - eps, method="exact").low
    assert binomial_upper_limit(x, n, eps) == pytest.approx(up, rel=1e-9, abs=1e-15)
    assert binomial_lower_limit(x, n, eps) == pytest.approx(low, rel=1e-9, abs=1e-15)
    # two-sided mapping: confidence_level = 1 - 2 eps has eps in each tail
    two = stats.binomtest(x, n).proportion_ci(confidence_level=1 - 2 * eps, method="exact")
    assert binomial_upper_limit(x, n, eps) == pytest.approx(two.high, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize("x,n", [(0, 10**9), (20_000, 10**9), (10**4, 10**12)])
def test_clopper_pearson_vs_betainccinv_and_defining_equation(x, n):
    eps = 1e-10
    # reference: scipy.special.betainccinv (shared/DEPENDENCIES.md: accurate to ~1e-16 at n = 1e9)
    pu = binomial_upper_limit(x, n, eps)
    assert pu == pytest.approx(special.betainccinv(x + 1, n - x, eps), rel=1e-13)
    if x == 0:  # closed form from the definition: (1 - p)^n = eps
        assert pu == pytest.approx(-math.expm1(math.log(eps) / n), rel=1e-14)
    pc = binomial_upper_limit_certified(x, n, eps)
    assert pc >= pu and (pc - pu) <= 1e-12 * pu
    # the defining equation, against the 60-digit reference: Pr[X <= x | pc] <= eps
    if x > 0:
        assert mp_binom_cdf(x, n, pc) <= eps
    pl = binomial_lower_limit_certified(x, n, eps)
    assert pl <= binomial_lower_limit(x, n, eps)


def test_certified_limits_are_conservative_small():
    # reference: scipy.stats.binom tails at the certified limits
    for x, n, eps in [(3, 50, 1e-3), (40, 50, 1e-3), (1, 2, 0.1), (999, 1000, 1e-8)]:
        pu = binomial_upper_limit_certified(x, n, eps)
        assert stats.binom.cdf(x, n, pu) <= eps * (1 + 1e-12)
        pl = binomial_lower_limit_certified(x, n, eps)
        assert stats.binom.sf(x - 1, n, pl) <= eps * (1 + 1e-12)
    assert binomial_upper_limit_certified(5, 5, 1e-3) == 1.0
    assert binomial_lower_limit_certified(0, 5, 1e-3) == 0.0


def test_binomial_exact_bound_interface():
    b = bounds.get("binomial_exact")
    assert b.exact
    eps = 1e-9
    d = b.deviation(eps, n=10**6, x=1234)
    assert d == pytest.approx(special.betainccinv(1235, 10**6 - 1234, eps) - 1234 / 10**6, rel=1e-14)
    assert b.failure_probability(d, n=10**6, x=1234) == pytest.approx(eps, rel=1e-8)
    enc = b.deviation_certified(eps, n=10**6, x=1234)
    assert enc.lo <= d <= enc.hi and enc.width < 1e-9 * d
    fe = b.failure_probability_certified(d, n=10**6, x=1234)
    assert fe.lo <= stats.binom.cdf(1234, 10**6, 1234 / 10**6 + d) <= fe.hi
    assert float(b.failure_probability_mp(d, n=10**6, x=1234)) == pytest.approx(eps, rel=1e-8)
    assert float(b.deviation_mp(eps, n=1000, x=10)) == pytest.approx(b.deviation(eps, n=1000, x=10), rel=1e-13)
    arr = b.deviation(np.array([1e-3, 1e-6]), n=np.array([100, 1000]), x=np.array([3, 40]))
    assert arr.shape == (2,) and np.all(np.diff(arr) > -1)


# ---- the hypergeometric sampling bound -----------------------------------------------------------------
def brute_force_key_errors(n, k, e, eps):
    """Neyman T_u - e by scanning scipy.stats.hypergeom over every T in [e, e + n]."""
    T = np.arange(e, e + n + 1)
    cdf = stats.hypergeom.cdf(e, n + k, T, k)
    return int(T[cdf > eps].max()) - e


@pytest.mark.parametrize("n,k,e,eps", [
    (1, 1, 0, 0.1), (1, 1, 1, 0.1), (10, 1, 0, 0.05), (10, 1, 1, 0.05), (40, 20, 0, 1e-3), (40, 20, 20, 1e-3),
    (300, 100, 7, 1e-6), (2000, 500, 25, 1e-9), (5, 200, 3, 0.3), (1000, 1000, 500, 1e-12),
])
def test_key_errors_upper_equals_brute_force(n, k, e, eps):
    ref = brute_force_key_errors(n, k, e, eps)
    assert key_errors_upper(n, k, e, eps) == ref
    assert key_errors_upper_certified(n, k, e, eps) == ref


def test_key_errors_upper_random_small_cases():
    rng = np.random.default_rng(20261202)
    for _ in range(150):
        n, k = int(rng.integers(1, 80)), int(rng.integers(1, 80))
        e, eps = int(rng.integers(0, k + 1)), float(10 ** rng.uniform(-9, -0.5))
        assert key_errors_upper(n, k, e, eps) == brute_force_key_errors(n, k, e, eps), (n, k, e, eps)


@pytest.mark.parametrize("n,k,e", [(9 * 10**8, 10**5, 2000), (10**12 - 10**6, 10**6, 900)])
def test_key_errors_upper_large_population_vs_mpmath(n, k, e):
    # Neyman property checked on the 60-digit reference: tail at T_u above eps, at T_u + 1 not.
    eps = 1e-10
    m = key_errors_upper(n, k, e, eps)
    assert key_errors_upper_certified(n, k, e, eps) == m
    tu = e + m
    assert mp_hypergeom_cdf(e, n + k, tu, k) > eps >= mp_hypergeom_cdf(e, n + k, tu + 1, k)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 300), k=st.integers(1, 200), data=st.data())
def test_key_errors_upper_monotone(n, k, data):
    # exact construction, no outside value: larger e never lowers the bound, larger eps never raises it
    e = data.draw(st.integers(0, k - 1))
    eps = data.draw(st.floats(1e-12, 0.5))
    eps2 = data.draw(st.floats(eps, 0.9))
    m = key_errors_upper(n, k, e, eps)
    assert key_errors_upper(n, k, e + 1, eps) >= m
    assert key_errors_upper(n, k, e, eps2) <= m


@pytest.mark.parametrize("eps", [1e-2, 3e-3, 1e-3])
def test_sampling_bound_coverage_monte_carlo(eps):
    # Monte Carlo: T errors among n + k positions, a uniformly random k of them tested.  The number of
    # errors in the test set is drawn with Generator.hypergeometric (the law of that count).  The true
    # T is the worst case in the range (largest exact miss probability), so the check is sharp.
    n, k, trials = 300, 200, 400_000
    table = np.array([e + key_errors_upper(n, k, e, eps) for e in range(k + 1)])
    N = n + k
    worst_T, worst_p = None, -1.0
    for T in range(1, N - 50):
        xs = np.arange(0, k + 1)
        miss = stats.hypergeom.pmf(xs, N, T, k)[table < T].sum()
        if miss > worst_p:
            worst_T, worst_p = T, miss
    assert worst_p <= eps * (1 + 1e-9)        # exact coverage (scipy.stats.hypergeom pmf)
    rng = np.random.default_rng(12345)
    x = rng.hypergeometric(worst_T, N - worst_T, k, size=trials)
    freq = np.mean(table[x] < worst_T)
    margin = 4 * math.sqrt(eps / trials)      # four binomial standard deviations
    assert freq <= eps + margin
    assert abs(freq - worst_p) <= 5 * math.sqrt(worst_p / trials) + 1e-6  # the simulation itself agrees


def test_hypergeometric_bound_interface():
    h = bounds.get("hypergeometric_sampling")
    assert h.exact
    n, k, e, eps = 10**9 - 10**7, 10**7, 200_000, 1e-10
    m = key_errors_upper(n, k, e, eps)
    d = h.deviation(eps, n=n, k=k, e=e)
    assert d == pytest.approx(m / n - e / k, rel=1e-15)
    fp = h.failure_probability(d, n=n, k=k, e=e)
    assert fp <= eps and fp > eps * 0.99       # the smallest rejected T is just past the threshold
    enc = h.deviation_certified(eps, n=n, k=k, e=e)
    assert enc.lo <= Fraction(m, n) - Fraction(e, k) <= enc.hi   # the exact rational deviation
    assert enc.width < 1e-15
    fe = h.failure_probability_certified(d, n=n, k=k, e=e)
    assert fe.lo <= fp * (1 + 1e-10) and fp * (1 - 1e-10) <= fe.hi and fe.hi <= eps
    small = dict(n=900, k=100, e=3)
    ds = h.deviation(1e-6, **small)
    assert float(h.deviation_mp(1e-6, **small)) == pytest.approx(ds, rel=1e-14)
    ref = stats.hypergeom.cdf(3, 1000, 3 + key_errors_upper(900, 100, 3, 1e-6) + 1, 100)
    assert float(h.failure_probability_mp(ds, **small)) == pytest.approx(ref, rel=1e-9)
    assert h.failure_probability(-0.5, **small) == 1.0 and h.failure_probability(0.99, **small) == 0.0
    assert h.deviation(1e-3, n=50, k=10, e=10) == pytest.approx(0.0)   # all tested bits wrong: no bound


def test_sampling_bound_coverage_literal_placement():
    # Monte Carlo, literally: T error positions among n + k, a uniformly random k-subset tested
    # (Generator.permuted row by row); coverage frequency within eps + 4 standard deviations.
    n, k, eps, trials = 120, 80, 1e-2, 20_000
    N = n + k
    table = np.array([e + key_errors_upper(n, k, e, eps) for e in range(k + 1)])
    xs = np.arange(0, k + 1)
    miss = [stats.hypergeom.pmf(xs, N, T, k)[table < T].sum() for T in range(N + 1)]
    T = int(np.argmax(miss))
    rng = np.random.default_rng(777)
    rows = np.zeros((trials, N), dtype=bool)
    rows[:, :T] = True
    x = rng.permuted(rows, axis=1)[:, :k].sum(axis=1)
    freq = np.mean(table[x] < T)
    assert freq <= eps + 4 * math.sqrt(eps / trials)
    assert abs(freq - miss[T]) <= 5 * math.sqrt(miss[T] / trials) + 1e-6


# ---- bad input -----------------------------------------------------------------------------------------
@pytest.mark.parametrize("call,field", [
    (lambda: key_errors_upper(100, 10, 11, 1e-3), "e"),
    (lambda: key_errors_upper(100, 10, -1, 1e-3), "e"),
    (lambda: key_errors_upper(100.5, 10, 1, 1e-3), "n"),
    (lambda: key_errors_upper(100, 0, 0, 1e-3), "k"),
    (lambda: key_errors_upper(100, 10, 1, 0.0), "eps"),
    (lambda: key_errors_upper(100, 10, 1, 1.0), "eps"),
    (lambda: key_errors_upper(100, 10, 1, float("nan")), "eps"),
    (lambda: key_errors_upper_certified(100, 10, 2.5, 1e-3), "e"),
    (lambda: binomial_upper_limit(11, 10, 1e-3), "x"),
    (lambda: binomial_upper_limit(3, 10, 1.5), "eps"),
    (lambda: binomial_lower_limit(-2, 10, 1e-3), "x"),
    (lambda: binomial_upper_limit(3, float("nan"), 1e-3), "n"),
    (lambda: bounds.get("binomial_exact").deviation(1e-3, n=10, x=12), "x"),
    (lambda: bounds.get("hypergeometric_sampling").deviation(1e-3, n=10, k=5, e=6), "e"),
    (lambda: bounds.get("hypergeometric_sampling").failure_probability(float("nan"), n=10, k=5, e=1), "delta"),
])
def test_bad_input_names_field(call, field):
    with pytest.raises(InputError) as info:
        call()
    assert info.value.field == field


@pytest.mark.slow
def test_binomial_many_terms_at_1e12_vs_mpmath():
    # ~4e5 terms: the float path corrects the shared rounding of (1-p)/p, which otherwise grows
    # linearly along the walk (was 1.4e-12 relative here); reference: 60-digit mpmath sum.
    n, x = 10**12, 5 * 10**9
    p = binomial_upper_limit(x, n, 0.01)
    ref = mp_binom_cdf(x, n, p)
    assert _rel(binomial_cdf(x, n, p), ref) < 2e-13
    enc = binomial_cdf_certified(x, n, p)
    assert enc.lo <= ref <= enc.hi
    assert float(ref) == pytest.approx(0.01, rel=1e-12)   # the limit solves its defining equation


# ---- the fast inversion (predictor + one certified walk) against brute force and the plain search ----------
@settings(max_examples=300, deadline=None)
@given(n=st.integers(1, 400), k=st.integers(1, 300), data=st.data())
def test_fast_inversion_equals_brute_force_grid(n, k, data):
    # reference: brute-force scan of scipy.stats.hypergeom.cdf over every T (exact at these sizes)
    e = data.draw(st.integers(0, k))
    eps = data.draw(st.one_of(st.floats(1e-30, 1e-3), st.floats(1e-3, 0.99)))
    ref = brute_force_key_errors(n, k, e, eps)
    cdf = stats.hypergeom.cdf(e, n + k, e + ref + np.arange(2), k)
    if abs(cdf[0] / eps - 1) < 1e-9 or (ref < n and abs(cdf[1] / eps - 1) < 1e-9):
        return  # a tail equal to eps to scipy's accuracy: the scan itself cannot decide
    assert key_errors_upper(n, k, e, eps) == ref, (n, k, e, eps)
    assert key_errors_upper_certified(n, k, e, eps) == ref, (n, k, e, eps)


@pytest.mark.parametrize("n,k,e,eps", [
    (2 * 10**4, 3000, 60, 1e-20), (5 * 10**4, 5 * 10**4, 1000, 1e-6), (10**5, 200, 0, 1e-12),
    (3 * 10**4, 10**4, 2500, 1e-3),
])
def test_fast_inversion_neyman_property_vs_mpmath(n, k, e, eps):
    # 60-digit mpmath reference (independent code above): tail at T_u above eps, at T_u + 1 at most eps
    import finitekey.bounds.hypergeometric_exact as hx
    t, probe = hx._fast_search(hx._SamplingTail(n, k, e), eps)
    assert probe is not None and probe.T == t + 1  # the predictor path, not the fallback scan
    m = key_errors_upper_certified(n, k, e, eps)
    assert m == key_errors_upper(n, k, e, eps) == t - e
    assert mp_hypergeom_cdf(e, n + k, e + m, k) > eps >= mp_hypergeom_cdf(e, n + k, e + m + 1, k)


def test_fast_inversion_equals_plain_search_large():
    # against the plain bracketed search kept as the fallback (the implementation before the predictor):
    # the same float bound, and the same certified bound, on random blocks from 1e6 to 1e12 positions
    import finitekey.bounds.hypergeometric_exact as hx
    rng = np.random.default_rng(99)
    for i in range(60):
        N = int(10 ** rng.uniform(6, 12 if i < 6 else 9.5))
        k = int(N * 10 ** rng.uniform(-3, -0.3))
        n = N - k
        e = int(k * 10 ** rng.uniform(-4, -1)) if i % 7 else 0
        eps = float(10 ** rng.uniform(-35, -2))
        tail = hx._SamplingTail(n, k, e)
        t_old = hx._search(tail, eps)
        cert_old = hx._certified_upper_T(tail, eps, t_old, 128)
        assert key_errors_upper(n, k, e, eps) == t_old - e, (n, k, e, eps)
        assert key_errors_upper_certified(n, k, e, eps) == cert_old - e, (n, k, e, eps)


def test_ball_of_kept_walk_is_the_plain_ball():
    # the certificate built from the search's walk is the very ball cdf_ball computes, and holds the
    # 60-digit mpmath value
    from finitekey.bounds._logconcave import Hypergeometric, _walk, cdf_ball, cdf_ball_of_walk
    N, K, k, x = 10**9, 2 * 10**7, 10**5, 1800
    fam = Hypergeometric(N, K, k)
    for first in (512, 37):  # the default chunking and another one
        w = _walk(fam, x, -1, keep=True, first_chunk=first)
        with ctx.workprec(128):
            b = cdf_ball_of_walk(fam, x, w, fam.log_pmf_arb(x))
        ref = mp_hypergeom_cdf(x, N, K, k)
        assert b.lower() <= arb(str(ref)) <= b.upper()
        assert float(b.rad()) / float(b.mid()) < 1e-8
        if first == 512:
            plain = cdf_ball(fam, x)
            assert b.mid() == plain.mid() and b.rad() == plain.rad()
        assert w.values.size == w.terms and abs(float(w.values.sum()) / w.total - 1) < 1e-13
    with pytest.raises(ValueError):
        cdf_ball_of_walk(fam, 3000, w, fam.log_pmf_arb(3000))  # above the mode: not a downward walk


def test_certified_inversion_higher_precision_same_result():
    # the certificate at 256 bits recomputes the start term at that precision; same integer here
    n, k, e, eps = 10**8, 5 * 10**6, 10**5, 1e-21
    assert key_errors_upper_certified(n, k, e, eps, prec=256) == key_errors_upper_certified(n, k, e, eps)
