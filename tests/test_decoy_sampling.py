"""Phase-error sampling bounds of the decoy analysis: never below the exact hypergeometric Neyman bound at
the same epsilon, and monotone where lower bounds on the counts are plugged in."""

import math

import mpmath
import numpy as np
import pytest
from flint import arb

from finitekey.bounds.hypergeometric_exact import key_errors_upper
from finitekey.protocols import _phase_error as PE
from finitekey.protocols.decoy_bb84 import analysis as DA

# (key bits n, test bits k, test errors e): the few-error points found by review, where the 2014 gamma alone
# falls below the exact bound (gamma -> 0 as e -> 0).
FEW_ERRORS = [(1423894, 51500, 0), (1423894, 51500, 1), (1423894, 51500, 5), (1423894, 51500, 50),
              (10**6, 10**4, 10), (10**5, 10**3, 1), (10**4, 500, 0), (4234, 1908, 13), (2351000, 132700, 2925)]


@pytest.mark.parametrize("n,k,e", FEW_ERRORS)
@pytest.mark.parametrize("eps", [1e-10 / 21, 1e-6])
def test_hoeffding_phase_bound_not_below_exact_hypergeometric(n, k, e, eps):
    est = {"s1": arb(n), "s1z": arb(k), "v1": arb(e)}
    phi, extra = DA._phase_error("hoeffding", est, eps, 128)
    exact = key_errors_upper(n, k, e, eps) / n   # tightest valid (Neyman) bound on the key-bit rate
    assert float(phi.lower()) >= min(exact, 0.5)
    # the 2014 term is still reported, and the rigorous term is what carries the few-error points
    assert extra["sampling_term_2014_gamma"] >= 0
    assert extra["sampling_term_rigorous_mu"] > 0


def test_gamma_2014_alone_is_below_the_exact_bound_at_zero_errors():
    # documents why gamma is not used alone: at zero test errors it is ~1e-151 (review counterexample)
    est = {"s1": arb(1423894), "s1z": arb(51500), "v1": arb(0)}
    phi, extra = DA._phase_error("hoeffding", est, 1e-10 / 21, 128)
    exact = key_errors_upper(1423894, 51500, 0, 1e-10 / 21) / 1423894
    assert extra["sampling_term_2014_gamma"] < 1e-100 < exact
    assert float(phi.lower()) >= exact


def test_design_surrogate_serfling_matches_the_bound_at_integer_counts():
    from finitekey.bounds import get
    b = get("random_sampling")
    for n, k, eps in [(10**6, 10**4, 1e-11), (4234, 1908, 1e-6), (37, 5, 0.1)]:
        assert float(PE.random_sampling_deviation_float(n, k, eps)) == pytest.approx(
            float(b.deviation(eps, key_bits=n, test_bits=k)), rel=1e-12)


# ---- monotone phase-error bound for the exact/chernoff statistics ----------------------------------------
# (test bits k, test errors e, eps) where review saw N (1 - h(x(N)/N)) drop with the exact bound
REVIEW_POINTS = [(1908, 13, 1e-6), (1908, 13, 4.7e-12), (5 * 10**4, 500, 4.7e-12), (132700, 2925, 4.7e-12)]


def _single_bits(N, phi):
    x = mpmath.mpf(min(phi, 0.5))
    h = 0 if x <= 0 else -(x * mpmath.log(x, 2) + (1 - x) * mpmath.log(1 - x, 2))
    return N * (1 - h)


@pytest.mark.parametrize("k,e,eps", REVIEW_POINTS)
def test_single_photon_term_non_decreasing_in_key_count(k, e, eps):
    mpmath.mp.dps = 30
    starts = [max(e + 1, 50), k // 2, 2 * k, 4234, 10 * k, 10**6]
    for n0 in starts:
        prev = None
        for N in range(n0, n0 + 150):
            phi, _, _ = PE.kl_key_rate_upper(N, k, k, e, eps)
            val = _single_bits(N, phi)
            if prev is not None:
                assert val >= prev, (N, k, e, eps)
            prev = val


def test_exact_hypergeometric_plug_in_is_not_monotone():
    # why the exact bound is not plugged in: review point (n, k, e) = (4234, 1908, 13), eps = 1e-6
    mpmath.mp.dps = 30
    vals = [_single_bits(N, key_errors_upper(N, 1908, 13, 1e-6) / N) for N in range(4234, 4294)]
    assert min(vals) < vals[0] - 1


@pytest.mark.parametrize("k,e,eps", REVIEW_POINTS + [(51500, 0, 4.8e-12), (10**4, 10, 4.8e-12), (37, 2, 1e-3)])
def test_population_rate_limit_certified_and_tight(k, e, eps):
    # checked against mpmath at 50 digits: k D(e/k || p_u) >= ln(1/eps), and not loose by more than 1e-9
    mpmath.mp.dps = 50
    pu = PE.sampling_population_rate_upper(k, e, eps)
    a = mpmath.mpf(e) / k

    def kd(p):
        p = mpmath.mpf(p)
        t = a * mpmath.log(a / p) if e > 0 else 0
        return k * (t + (1 - a) * mpmath.log((1 - a) / (1 - p)))

    target = mpmath.log(1 / mpmath.mpf(eps))
    assert pu > e / k
    assert kd(pu) >= target
    assert kd(mpmath.mpf(pu) * (1 - mpmath.mpf(1e-9))) < target


@pytest.mark.parametrize("n,k,e", FEW_ERRORS)
def test_kl_phase_bound_not_below_exact_hypergeometric(n, k, e):
    # the exact Neyman bound is the smallest valid bound of this kind; a valid bound cannot be below it
    eps = 1e-10 / 21
    phi, _, _ = PE.kl_key_rate_upper(n, k, k, e, eps)
    assert phi >= min(key_errors_upper(n, k, e, eps) / n, 0.5)


def test_plug_in_bound_covers_every_true_count_in_the_region():
    # bound at (n_L, k_L, K_U, e_U) >= the bound at any true (N, K, E) with N >= n_L, k_L <= K <= K_U, E <= e_U
    rng = np.random.default_rng(20261202)
    for _ in range(40):
        n = int(rng.integers(100, 10**6))
        k = int(rng.integers(100, 10**5))
        ku = k + int(rng.integers(0, 3 * k))
        e = int(rng.integers(0, k // 8))
        eps = float(10.0 ** rng.uniform(-12, -3))
        top, _, _ = PE.kl_key_rate_upper(n, k, ku, e, eps)
        for _ in range(5):
            N = n + int(rng.integers(0, 3 * n))
            K = int(rng.integers(k, ku + 1))
            E = int(rng.integers(0, e + 1))
            true_bound, _, _ = PE.kl_key_rate_upper(N, K, K, E, eps)
            assert min(top, 0.5) >= min(true_bound, 0.5) - 1e-15, (n, k, ku, e, N, K, E)


def test_kl_phase_bound_monte_carlo():
    # seeded Monte Carlo: population of N + K bits with T errors, a uniform test sample of K; the key-rate
    # bound must fail with frequency <= eps (here eps = 0.05, 4000 trials; the adversary places T at the
    # boundary where the bound is tightest)
    rng = np.random.default_rng(7)
    N, K, eps = 3000, 600, 0.05
    for T in (30, 90, 200):
        fails = 0
        trials = 4000
        test_err = rng.hypergeometric(T, N + K - T, K, size=trials)
        for x in np.unique(test_err):
            phi, _, _ = PE.kl_key_rate_upper(N, K, K, int(x), eps)
            if (T - x) / N > phi:
                fails += int(np.sum(test_err == x))
        assert fails / trials <= eps + 3 * math.sqrt(eps / trials)
