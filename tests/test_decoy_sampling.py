"""Phase-error sampling bounds of the decoy analysis: never below the exact hypergeometric Neyman bound at
the same epsilon, and monotone where lower bounds on the counts are plugged in."""

import math

import pytest
from flint import arb

from finitekey.bounds.hypergeometric_exact import key_errors_upper
from finitekey.protocols import decoy_bb84 as D

# (key bits n, test bits k, test errors e): the few-error points found by review, where the 2014 gamma alone
# falls below the exact bound (gamma -> 0 as e -> 0).
FEW_ERRORS = [(1423894, 51500, 0), (1423894, 51500, 1), (1423894, 51500, 5), (1423894, 51500, 50),
              (10**6, 10**4, 10), (10**5, 10**3, 1), (10**4, 500, 0), (4234, 1908, 13), (2351000, 132700, 2925)]


@pytest.mark.parametrize("n,k,e", FEW_ERRORS)
@pytest.mark.parametrize("eps", [1e-10 / 21, 1e-6])
def test_hoeffding_phase_bound_not_below_exact_hypergeometric(n, k, e, eps):
    est = {"s1": arb(n), "s1z": arb(k), "v1": arb(e)}
    phi, extra = D._phase_error("hoeffding", est, eps, 128)
    exact = key_errors_upper(n, k, e, eps) / n   # tightest valid (Neyman) bound on the key-bit rate
    assert float(phi.lower()) >= min(exact, 0.5)
    # the 2014 term is still reported, and the rigorous term is what carries the few-error points
    assert extra["sampling_term_2014_gamma"] >= 0
    assert extra["sampling_term_rigorous_mu"] > 0


def test_gamma_2014_alone_is_below_the_exact_bound_at_zero_errors():
    # documents why gamma is not used alone: at zero test errors it is ~1e-151 (review counterexample)
    est = {"s1": arb(1423894), "s1z": arb(51500), "v1": arb(0)}
    phi, extra = D._phase_error("hoeffding", est, 1e-10 / 21, 128)
    exact = key_errors_upper(1423894, 51500, 0, 1e-10 / 21) / 1423894
    assert extra["sampling_term_2014_gamma"] < 1e-100 < exact
    assert float(phi.lower()) >= exact


def test_design_surrogate_serfling_matches_the_bound_at_integer_counts():
    from finitekey.bounds import get
    from finitekey.protocols import _decoy_analysis as A
    b = get("random_sampling")
    for n, k, eps in [(10**6, 10**4, 1e-11), (4234, 1908, 1e-6), (37, 5, 0.1)]:
        assert float(A.random_sampling_deviation_float(n, k, eps)) == pytest.approx(
            float(b.deviation(eps, key_bits=n, test_bits=k)), rel=1e-12)
