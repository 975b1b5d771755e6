"""Leakage models of finitekey.reconciliation, against mpmath and a direct variance computation."""

import math

import mpmath
import numpy as np
import pytest
from scipy import stats

from finitekey.errors import InputError
from finitekey.reconciliation import (DISPERSION_EXPR, DisclosedLeakage, FixedEfficiency, SecondOrderLeakage,
                                      leakage_model, _DISP)


def mp_h(q):
    q = mpmath.mpf(q)
    return -q * mpmath.log(q, 2) - (1 - q) * mpmath.log(1 - q, 2)


@pytest.mark.parametrize("n,q,f", [(10**3, 0.01, 1.0), (10**6, 0.02, 1.1), (10**9, 0.05, 1.16),
                                   (10**12, 0.11, 1.05)])
def test_fixed_efficiency_against_mpmath(n, q, f):
    with mpmath.workdps(40):
        exact = f * n * mp_h(q)
    m = FixedEfficiency(f)
    assert m.bits(n, q) == pytest.approx(float(exact), rel=1e-12)
    up = m.bits_upper(n, q)
    assert exact <= up < exact + 1
    assert m.bits_upper(n, 0.0) == 0


@pytest.mark.parametrize("q", [1e-4, 0.01, 0.05, 0.2, 0.45])
def test_dispersion_is_variance_of_information_density(q):
    # BSC information density -log2 P(x|y): -log2 q with probability q, -log2(1-q) otherwise (direct variance)
    vals = np.array([-math.log2(q), -math.log2(1 - q)])
    probs = np.array([q, 1 - q])
    mean = probs @ vals
    var = probs @ (vals - mean) ** 2
    assert float(_DISP.numpy(q)) == pytest.approx(var, rel=1e-10)


@pytest.mark.parametrize("n,q,fer", [(10**4, 0.02, 1e-2), (10**6, 0.05, 1e-3), (10**8, 0.01, 0.1)])
def test_second_order_against_recomputation(n, q, fer):
    # Tomamichel, Martinez-Mateo, Pacher, Elkouss 2017 (QIP 16, 280), second-order form, from memory;
    # quantile from scipy.stats.norm, entropy and dispersion with mpmath.
    z = stats.norm.isf(fer)
    with mpmath.workdps(40):
        v = q * (1 - q) * mpmath.log((1 - q) / q, 2) ** 2
        exact = n * mp_h(q) + mpmath.sqrt(n * v) * z - mpmath.log(n, 2) / 2
    m = SecondOrderLeakage(fer)
    assert m.bits(n, q) == pytest.approx(float(exact), rel=1e-9)
    up = m.bits_upper(n, q)
    assert exact <= up < exact + 1 + 1e-6 * float(exact)


def test_second_order_approaches_first_order():
    m = SecondOrderLeakage(1e-2)
    q = 0.02
    gaps = [m.bits(n, q) / (n * float(mp_h(q))) - 1 for n in (10**3, 10**5, 10**7, 10**9)]
    assert all(g > 0 for g in gaps)
    assert all(a > b for a, b in zip(gaps, gaps[1:]))
    assert gaps[-1] < 1e-3


def test_disclosed_and_bad_parameters():
    assert DisclosedLeakage(123).bits_upper(10**6) == 123
    for bad in (lambda: FixedEfficiency(0.9), lambda: SecondOrderLeakage(0.0), lambda: SecondOrderLeakage(0.6),
                lambda: DisclosedLeakage(-1), lambda: leakage_model("turbo"),
                lambda: FixedEfficiency(1.1).bits_upper(100, 0.5)):
        with pytest.raises(InputError):
            bad()
    assert str(DISPERSION_EXPR)  # the formula is kept as a sympy expression


def test_design_with_second_order_model_is_below_efficiency_one():
    from finitekey.protocols import bb84
    base = {"channel": {"qber": 0.02}, "budget": {"detections": 10**5},
            "security": {"eps_sec": 1e-10, "eps_cor": 1e-15}, "design": {"p_x": 0.9}}
    so = bb84.design.design(bb84.parse_scenario({**base, "reconciliation": {"model": "second_order"}}))
    f1 = bb84.design.design(bb84.parse_scenario({**base, "reconciliation": {"efficiency": 1.0}}))
    assert so.expected.secret_key_length < f1.expected.secret_key_length
    assert so.expected.terms["ec_leakage"] > f1.expected.terms["ec_leakage"]
