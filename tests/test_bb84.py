"""BB84 finite-key analysis: reference values, thresholds, term-by-term reproduction, monotonicity, bad input."""

import math

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from finitekey.errors import InputError
from finitekey.protocols import BlockTarget, bb84, get, names, register
from finitekey.protocols.bb84 import (BB84_PROTOCOL, key_length, parse_block, parse_scenario, sifting_fraction,
                                      verification_tag_bits, with_field)

EPS_SEC, EPS_COR = 1e-10, 1e-15


def block(**kw):
    d = {"protocol": "bb84", "key_bits": 10**6, "test_bits": 10**5, "test_errors": 2000, "ec_leak_bits": 160000,
         "eps_sec": EPS_SEC, "eps_cor": EPS_COR}
    d.update(kw)
    return parse_block(d)


def mp_h(x):
    x = mpmath.mpf(x)
    if x == 0:
        return mpmath.mpf(0)
    return -x * mpmath.log(x, 2) - (1 - x) * mpmath.log(1 - x, 2)


def mp_threshold(f):
    """Root of 1 - h(Q) - f h(Q) on (0, 1/2), at 50 digits (independent of the package)."""
    with mpmath.workdps(50):
        return mpmath.findroot(lambda q: 1 - (1 + f) * mp_h(q), (mpmath.mpf("0.01"), mpmath.mpf("0.3")),
                               solver="anderson")


# ---------------------------------------------------------------------------------------------------------------
# Asymptotic limit and thresholds
# ---------------------------------------------------------------------------------------------------------------
def test_shor_preskill_threshold_value():
    # Shor and Preskill 2000 (PRL 85, 441): 1 - 2h(Q) > 0 iff Q < ~11.0%.
    q = mp_threshold(1.0)
    assert abs(float(q) - 0.110028) < 1e-6
    sc = parse_scenario({"channel": {"qber": float(q) - 1e-4}, "budget": {"detections": 10**6},
                         "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR},
                         "reconciliation": {"efficiency": 1.0}})
    assert BB84_PROTOCOL.asymptotic_rate(sc) > 0
    sc2 = with_field(sc, "channel.qber", float(q) + 1e-4)
    assert BB84_PROTOCOL.asymptotic_rate(sc2) < 0


@pytest.mark.parametrize("n", [10**4, 10**6, 10**9, 10**12])
@pytest.mark.parametrize("stats", ["exact", "serfling"])
def test_no_key_at_or_above_eleven_percent(n, stats):
    # Shor and Preskill 2000: no key at or above Q ~ 11.00% with ideal reconciliation (f = 1), any block size.
    q = 0.1101
    k = max(n // 10, 1000)
    e = int(math.floor(q * k))  # even rounding the observed errors down
    leak = int(math.ceil(float(n * mp_h(q))))
    res = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak), stats)
    assert res.secret_key_length == 0


@pytest.mark.parametrize("f", [1.1, 1.16])
def test_threshold_matches_one_minus_h_minus_fh(f):
    # Asymptotic rate 1 - h(Q) - f h(Q) (Shor-Preskill with reconciliation efficiency f; common practice).
    q_thr = float(mp_threshold(f))
    base = {"channel": {"qber": 0.05}, "budget": {"detections": 10**12},
            "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR}, "reconciliation": {"efficiency": f}}
    sc = parse_scenario(base)
    below = with_field(sc, "channel.qber", q_thr - 2e-3)
    above = with_field(sc, "channel.qber", q_thr + 1e-4)
    assert BB84_PROTOCOL.asymptotic_rate(below) > 0 > BB84_PROTOCOL.asymptotic_rate(above)
    assert bb84.design.design(below).expected.secret_key_length > 0
    assert bb84.design.design(above).expected.secret_key_length == 0
    with pytest.raises(InputError) as ei:
        bb84.design.blocksize(above, BlockTarget.parse("positive"))
    assert ei.value.field == "channel.qber"
    # the threshold of the package's own asymptotic rate agrees with the mpmath root
    from scipy.optimize import brentq
    root = brentq(lambda q: BB84_PROTOCOL.asymptotic_rate(with_field(sc, "channel.qber", q)), 0.01, 0.3, xtol=1e-14)
    assert abs(root - q_thr) < 1e-10


def test_large_block_rate_within_one_percent_of_asymptotic():
    # At 1e12 detections the finite-key rate is within 1% of 1 - h(Q) - f h(Q) (Shor-Preskill limit with f).
    sc = parse_scenario({"channel": {"qber": 0.02}, "budget": {"detections": 10**12},
                         "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR}, "reconciliation": {"efficiency": 1.1}})
    d = bb84.design.design(sc)
    r_inf = 1 - 2.1 * float(mp_h(0.02))
    ratio = d.secret_key_rate_per_detection / r_inf
    assert 0.99 <= ratio < 1.0


# ---------------------------------------------------------------------------------------------------------------
# The 2012 formula, term by term
# ---------------------------------------------------------------------------------------------------------------
POINTS = [(10**4, 10**3, 10, 2000), (10**5, 2 * 10**4, 400, 20000), (10**6, 10**5, 2000, 160000),
          (10**9, 10**7, 3 * 10**5, 2 * 10**8), (10**12, 10**9, 2 * 10**7, 2 * 10**11)]


@pytest.mark.parametrize("n,k,e,leak", POINTS)
def test_serfling_reproduces_2012_formula_term_by_term(n, k, e, leak):
    # Tomamichel, Lim, Gisin, Renner, Nat. Commun. 3, 634 (2012):
    #   ell <= n (1 - h(Q + mu)) - leak_EC - log2(2 / (eps_sec^2 eps_cor)),
    #   mu = sqrt((n + k)/(n k) (k + 1)/k ln(X / eps_sec)).
    # X = 4 in the paper's Eq. (2) (checked in a machine-extracted copy of the paper; an earlier recollection
    # said 2).  Our ledger (secrecy 2 eps_s + eps_PA with the sampling bound at eps_s^2, default split
    # eps_s = eps_sec/4, eps_PA = eps_sec/2) gives X = 4 as well: the same formula.
    res = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak), "serfling")
    eps_s = res.ledger.epsilon("smoothing")
    eps_pa = res.ledger.epsilon("privacy_amplification")
    assert eps_s == pytest.approx(EPS_SEC / 4, rel=1e-14) and eps_pa == pytest.approx(EPS_SEC / 2, rel=1e-14)
    with mpmath.workdps(50):
        n_, k_, Q = mpmath.mpf(n), mpmath.mpf(k), mpmath.mpf(e) / k

        def mu(eps_pe):
            return mpmath.sqrt((n_ + k_) / (n_ * k_) * (k_ + 1) / k_ * mpmath.log(1 / mpmath.mpf(eps_pe)) / 2)

        mu_ours = mu(mpmath.mpf(eps_s) ** 2)
        mu_4 = mpmath.sqrt((n_ + k_) / (n_ * k_) * (k_ + 1) / k_ * mpmath.log(4 / mpmath.mpf(EPS_SEC)))
        assert abs(mu_ours / mu_4 - 1) < 1e-12
        assert float(mu_ours) == pytest.approx(res.estimates["mu"], rel=1e-12)
        hmin = n_ * (1 - mp_h(Q + mu_ours))
        assert res.terms["min_entropy"] == pytest.approx(float(hmin), rel=1e-12)
        hash_pen = 2 * mpmath.log(1 / (2 * mpmath.mpf(eps_pa)), 2)
        assert res.terms["hash_penalty"] == pytest.approx(float(2 * mpmath.log(1 / mpmath.mpf(EPS_SEC), 2)), rel=1e-12)
        tag = res.terms["verification_tag"]
        assert mpmath.log(1 / mpmath.mpf(EPS_COR), 2) <= tag <= mpmath.log(2 / mpmath.mpf(EPS_COR), 2)
        assert res.terms["ec_leakage"] == leak
        exact_value = hmin - leak - tag - hash_pen
        assert res.secret_key_length == max(0, int(mpmath.floor(exact_value)))
        # never more than the 2012 formula itself, with the paper's mu (X = 4) and its log2(2/eps_cor) tag bound
        ell_2012 = n_ * (1 - mp_h(Q + mu_4)) - leak - mpmath.log(2 / (mpmath.mpf(EPS_SEC) ** 2 * EPS_COR), 2)
        assert res.secret_key_length <= max(0, ell_2012 + 1)


@pytest.mark.parametrize("n,k,e,leak", POINTS + [(10**6, 10**5, 0, 0), (5000, 500, 0, 100)])
def test_exact_key_length_never_exceeds_formula(n, k, e, leak):
    # independent recomputation of the formula at 50 digits with mpmath, from the certified phase-error count
    res = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak), "exact")
    E = res.estimates["phase_error_count_upper"]
    with mpmath.workdps(50):
        val = (n * (1 - mp_h(mpmath.mpf(E) / n)) - leak - res.terms["verification_tag"]
               - 2 * mpmath.log(1 / (2 * mpmath.mpf(res.ledger.epsilon("privacy_amplification"))), 2))
    assert res.secret_key_length <= max(0, val)
    assert res.secret_key_length == max(0, int(mpmath.floor(val)))


@pytest.mark.parametrize("n,k,e,leak", POINTS + [(10**6, 10**5, 0, 0), (2000, 200, 30, 500),
                                                   (10**7, 10**4, 100, 10**6)])
def test_exact_at_least_serfling(n, k, e, leak):
    b = block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak)
    ex, se = key_length(b, "exact"), key_length(b, "serfling")
    assert ex.secret_key_length >= se.secret_key_length
    assert ex.estimates["phase_error_rate_upper"] <= se.estimates["phase_error_rate_upper"]


def test_overlap_changes_min_entropy():
    # H >= n (log2(1/c) - h(phi)) (Tomamichel-Renner 2011 uncertainty relation); c above 1/2 costs key
    ideal = key_length(block(), "serfling")
    worse = key_length(block(overlap=0.55), "serfling")
    n = 10**6
    assert ideal.terms["min_entropy"] - worse.terms["min_entropy"] == pytest.approx(n * math.log2(0.55 / 0.5),
                                                                                    rel=1e-9)
    assert worse.secret_key_length < ideal.secret_key_length


def test_key_zero_when_phase_error_bound_reaches_half():
    res = key_length(block(key_bits=1000, test_bits=100, test_errors=45, ec_leak_bits=0), "exact")
    assert res.secret_key_length == 0 and res.estimates["phase_error_rate_upper"] >= 0.5


def test_verification_tag_is_exact_ceiling():
    for eps, t in [(1e-15, 50), (2.0**-40, 40), (2.0**-40 * 1.0000001, 40), (2.0**-40 * 0.9999999, 41), (0.5, 1),
                   (0.3, 2)]:
        assert verification_tag_bits(eps) == t  # ceil(log2(1/eps)), checked by hand
    assert key_length(block()).terms["verification_tag"] == 50


def test_ledger_adds_up_and_names_every_term():
    res = key_length(block())
    led = res.ledger
    assert [t.name for t in led.terms] == ["error_verification", "smoothing", "privacy_amplification"]
    assert led.eps_sec <= EPS_SEC and led.eps_cor <= EPS_COR
    assert led.eps_sec == pytest.approx(EPS_SEC, rel=1e-12)
    # the phase-error bound is evaluated at the smoothing parameter squared, never above it (exact rationals)
    from fractions import Fraction
    assert Fraction(led.failure_probability("smoothing")) <= Fraction(led.smoothing("smoothing")) ** 2
    assert res.estimates["parameter_estimation_failure"] == led.failure_probability("smoothing")
    d = res.to_dict()
    for key in ("protocol", "secret_key_length", "eps_total", "eps_sec", "eps_cor", "ledger", "statistics",
                "assumptions", "terms", "estimates", "formula", "references"):
        assert key in d
    assert isinstance(d["secret_key_length"], int)


def test_eps_total_and_split_forms():
    b = parse_block({"protocol": "bb84", "key_bits": 10**6, "test_bits": 10**5, "test_errors": 2000,
                     "ec_leak_bits": 160000, "eps_total": 1e-9, "eps_cor_share": 0.2,
                     "epsilon_split": {"smoothing": 0.8, "privacy_amplification": 0.2}})
    res = key_length(b)
    assert res.eps_total <= 1e-9 and res.eps_cor == pytest.approx(2e-10)
    assert res.ledger.fractions()["smoothing"] == pytest.approx(0.8)


def test_efficiency_leakage_form():
    # leak = f n h(q) rounded up (efficiency model, common practice, no source); h recomputed with mpmath
    res = key_length(parse_block({"protocol": "bb84", "key_bits": 10**6, "test_bits": 10**5, "test_errors": 2000,
                                  "ec_efficiency": 1.1, "key_qber": 0.02, "eps_sec": EPS_SEC, "eps_cor": EPS_COR}))
    assert res.terms["ec_leakage"] == math.ceil(float(1.1 * 10**6 * mp_h(0.02)))


# ---------------------------------------------------------------------------------------------------------------
# Monotonicity (hypothesis)
# ---------------------------------------------------------------------------------------------------------------
counts = st.tuples(st.integers(2000, 10**7), st.integers(200, 10**5), st.floats(0.0, 0.08))


@settings(max_examples=25, deadline=None)
@given(counts, st.sampled_from(["exact", "serfling"]), st.floats(1.01, 3.0))
def test_monotone_in_block_size(c, stats, factor):
    n, k, q = c
    e = int(q * k)
    leak = int(0.05 * n)
    a = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak), stats)
    b = key_length(block(key_bits=int(n * factor), test_bits=k, test_errors=e, ec_leak_bits=leak), stats)
    assert b.secret_key_length >= a.secret_key_length


@settings(max_examples=25, deadline=None)
@given(counts, st.sampled_from(["exact", "serfling"]), st.floats(-12, -2), st.floats(1.5, 100))
def test_monotone_in_epsilons(c, stats, log_eps, factor):
    n, k, q = c
    e = int(q * k)
    leak = int(0.05 * n)
    eps = 10.0 ** log_eps
    kw = dict(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak)
    base = key_length(block(eps_sec=eps / factor, eps_cor=eps / factor, **kw), stats)
    more_sec = key_length(block(eps_sec=min(eps, 0.5), eps_cor=eps / factor, **kw), stats)
    more_cor = key_length(block(eps_sec=eps / factor, eps_cor=min(eps, 0.5), **kw), stats)
    assert more_sec.secret_key_length >= base.secret_key_length
    assert more_cor.secret_key_length >= base.secret_key_length


@settings(max_examples=25, deadline=None)
@given(counts, st.sampled_from(["exact", "serfling"]), st.integers(1, 500), st.integers(1, 10**5))
def test_monotone_down_in_errors_and_leakage(c, stats, de, dl):
    n, k, q = c
    e = int(q * k)
    leak = int(0.05 * n)
    base = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=leak), stats)
    more_e = key_length(block(key_bits=n, test_bits=k, test_errors=min(k, e + de), ec_leak_bits=leak), stats)
    more_l = key_length(block(key_bits=n, test_bits=k, test_errors=e, ec_leak_bits=min(n, leak + dl)), stats)
    assert more_e.secret_key_length <= base.secret_key_length
    assert more_l.secret_key_length <= base.secret_key_length


# ---------------------------------------------------------------------------------------------------------------
# Sifting and Monte Carlo
# ---------------------------------------------------------------------------------------------------------------
def test_sifting_fraction_matches_monte_carlo(make_rng):
    # independent basis choices of Alice and Bob (seeded Monte Carlo): kept fraction p_X^2 + p_Z^2
    rng = make_rng(84)
    for p in (0.5, 0.8, 0.97):
        N = 200_000
        a = rng.random(N) < p
        b = rng.random(N) < p
        kept = np.mean(a == b)
        expected = sifting_fraction(p)
        assert expected == pytest.approx(p * p + (1 - p) ** 2)
        assert abs(kept - expected) < 5 * math.sqrt(expected * (1 - expected) / N)
        key_frac = np.mean(a & b)
        assert abs(key_frac - p * p) < 5 * math.sqrt(p * p * (1 - p * p) / N)


def test_design_counts_follow_sifting():
    sc = parse_scenario({"channel": {"qber": 0.02}, "budget": {"detections": 10**6},
                         "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR}, "design": {"p_x": 0.8}})
    d = bb84.design.design(sc)
    c = d.expected_counts
    assert abs(c["key_bits"] - 0.64e6) <= 1 and abs(c["test_bits"] - 0.04e6) <= 1
    assert d.parameters["sifting_fraction"] == pytest.approx(0.68)


@pytest.mark.parametrize("stats", ["exact", "serfling"])
def test_phase_error_bound_fails_no_more_often_than_eps(stats, make_rng):
    # Monte Carlo (seeded numpy Generator): T errors placed at random among n + k bits, k test bits sampled
    # uniformly; the bound on the key-bit errors may fail with probability at most its eps (+ 4 sigma margin).
    from finitekey.bounds.hypergeometric_exact import key_errors_upper
    from finitekey.protocols.bb84.analysis import _compiled
    rng = make_rng(2012)
    n, k, eps_pe = 2000, 400, 0.05
    eps_s = math.sqrt(eps_pe)
    trials = 3000
    mu = float(_compiled()["mu"].numpy(n, k, eps_s))
    cache = {}

    def bound(e):
        if stats == "exact":
            if e not in cache:
                cache[e] = key_errors_upper(n, k, e, eps_pe)
            return cache[e]
        return (e / k + mu) * n

    for T in (40, 150, 400):
        bits = np.zeros(n + k, dtype=bool)
        bits[:T] = True
        fails = 0
        naive_fails = 0
        for _ in range(trials):
            perm = rng.permutation(n + k)
            e = int(bits[perm[:k]].sum())
            key_err = T - e
            fails += key_err > bound(e)
            naive_fails += key_err > e / k * n  # point estimate: fails often, so the check has teeth
        assert fails <= eps_pe * trials + 4 * math.sqrt(eps_pe * trials)
        assert naive_fails > 0.3 * trials


# ---------------------------------------------------------------------------------------------------------------
# Design and block size
# ---------------------------------------------------------------------------------------------------------------
def test_design_beats_unbiased_and_default_split():
    sc = BB84_PROTOCOL.default_scenario()
    d = bb84.design.design(sc)
    unbiased = bb84.design.design(with_field(sc, "design.p_x", 0.5))
    fixed_split = bb84.design.design(with_field(sc, "design.optimise_split", False))
    assert d.expected.secret_key_length > unbiased.expected.secret_key_length
    assert d.expected.secret_key_length >= fixed_split.expected.secret_key_length
    assert d.parameters["p_x"] > 0.5
    assert d.secret_key_rate_bps == pytest.approx(d.secret_key_rate_per_signal * 1e9)
    assert d.block_fill_time_s == pytest.approx(10.0)


@pytest.mark.parametrize("text", ["positive", "bits=100000", "fraction=0.5"])
def test_blocksize_reaches_target_and_is_nearly_smallest(text):
    sc = parse_scenario({"channel": {"qber": 0.02}, "budget": {"detections": 10**6},
                         "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR}})
    t = BlockTarget.parse(text)
    res = bb84.design.blocksize(sc, t)
    r_inf = BB84_PROTOCOL.asymptotic_rate(sc)

    def meets(d, N):
        ell = d.expected.secret_key_length
        return {"positive": ell >= 1, "bits": ell >= 100000, "fraction": ell >= 0.5 * r_inf * N}[t.kind.value]

    assert res.size_kind == "detections"
    assert meets(res.design, res.size)
    smaller = int(res.size * 0.98)
    assert not meets(bb84.design.design(sc, detections=smaller), smaller)


def test_block_target_parse():
    assert BlockTarget.parse("bits:500").value == 500
    for bad in ("bits=0", "bits=1.5", "fraction=1", "fraction=0", "lots", "bits=x", 3):
        with pytest.raises(InputError):
            BlockTarget.parse(bad)


# ---------------------------------------------------------------------------------------------------------------
# Registry and bad input
# ---------------------------------------------------------------------------------------------------------------
def test_registry():
    assert "bb84" in names() and get("bb84") is BB84_PROTOCOL
    with pytest.raises(ValueError):
        register(BB84_PROTOCOL)
    with pytest.raises(InputError) as ei:
        get("b92")
    assert ei.value.field == "protocol"


GOOD = {"protocol": "bb84", "key_bits": 1000, "test_bits": 100, "test_errors": 2, "ec_leak_bits": 100,
        "eps_sec": 1e-10, "eps_cor": 1e-15}


@pytest.mark.parametrize("change,field", [
    ({"test_errors": 101}, "test_errors"),
    ({"key_bits": -5}, "key_bits"),
    ({"test_bits": 10.5}, "test_bits"),
    ({"test_errors": 2.5}, "test_errors"),
    ({"eps_sec": 0.0}, "eps_sec"),
    ({"eps_cor": 1.0}, "eps_cor"),
    ({"eps_sec": 1.5}, "eps_sec"),
    ({"ec_leak_bits": 1001}, "ec_leak_bits"),
    ({"ec_leak_bits": None}, "ec_leak_bits"),
    ({"key_bits": "1000"}, "key_bits"),
    ({"key_bits": True}, "key_bits"),
    ({"colour": "blue"}, "colour"),
    ({"protocol": "decoy-bb84"}, "protocol"),
    ({"overlap": 0.4}, "overlap"),
    ({"statistics": "gaussian"}, "statistics"),
    ({"epsilon_split": {"smoothing": 0.7}}, "epsilon_split.privacy_amplification"),
    ({"epsilon_split": {"smoothing": 0.7, "privacy_amplification": 0.7}}, "epsilon_split"),
])
def test_bad_blocks(change, field):
    d = dict(GOOD)
    for k, v in change.items():
        if v is None:
            d.pop(k)
        else:
            d[k] = v
    with pytest.raises(InputError) as ei:
        parse_block(d)
    assert ei.value.field == field


@pytest.mark.parametrize("extra,field", [({"key_qber": 0.5, "ec_efficiency": 1.1}, "key_qber"),
                                         ({"key_qber": 0.02}, "ec_efficiency"),
                                         ({"ec_efficiency": 0.9, "key_qber": 0.02}, "ec_efficiency")])
def test_bad_efficiency_form(extra, field):
    d = {k: v for k, v in GOOD.items() if k != "ec_leak_bits"}
    d.update(extra)
    with pytest.raises(InputError) as ei:
        parse_block(d)
    assert ei.value.field == field


def test_missing_fields():
    for name in ("key_bits", "test_bits", "test_errors", "eps_sec", "eps_cor"):
        d = {k: v for k, v in GOOD.items() if k != name}
        with pytest.raises(InputError) as ei:
            parse_block(d)
        assert ei.value.field == name
    with pytest.raises(InputError):
        parse_block([1, 2])


@pytest.mark.parametrize("data,field", [
    ({"channel": {"qber": 0.6}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9}}, "channel.qber"),
    ({"channel": {}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9}}, "channel.qber"),
    ({"channel": {"qber": 0.02}, "budget": {"signals": 1e9}, "security": {"eps_total": 1e-9}},
     "budget.detection_probability"),
    ({"channel": {"qber": 0.02}, "budget": {"detections": 1.5e3 + 0.5}, "security": {"eps_total": 1e-9}},
     "budget.detections"),
    ({"channel": {"qber": 0.02}, "budget": {"detections": 1e6}, "security": {"eps_sec": 1e-9}}, "security.eps_cor"),
    ({"channel": {"qber": 0.02}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9},
      "link": {"distance_km": 5}}, "link"),
    ({"channel": {"qber": 0.02, "loss": 1}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9}},
     "channel.loss"),
    ({"channel": {"qber": 0.02}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9},
      "reconciliation": {"model": "turbo"}}, "reconciliation.model"),
    ({"channel": {"qber": 0.02}, "budget": {"detections": 1e6}, "security": {"eps_total": 1e-9},
      "design": {"optimise_split": "yes"}}, "design.optimise_split"),
])
def test_bad_scenarios(data, field):
    with pytest.raises(InputError) as ei:
        parse_scenario(data)
    assert ei.value.field == field


def test_scenario_fields_and_with_field():
    sc = BB84_PROTOCOL.default_scenario()
    fields = BB84_PROTOCOL.scenario_fields()
    assert "channel.qber" in fields and "budget.signals" in fields
    sc2 = with_field(sc, "budget.detections", 5000)
    assert sc2.detections == 5000 and sc2.signals is None
    with pytest.raises(InputError):
        with_field(sc, "channel.qber", 0.7)
    with pytest.raises(InputError):
        with_field(sc, "link.distance_km", 3)


def test_exact_statistics_size_limit_names_block_field():
    b = block(key_bits=10**16, test_bits=10**9, test_errors=10**7, ec_leak_bits=10**15)
    with pytest.raises(InputError) as ei:
        key_length(b, "exact")
    assert ei.value.field == "key_bits"
    assert key_length(b, "serfling").secret_key_length > 0


def test_batch_equals_single():
    blocks = [block(test_errors=e) for e in (100, 2000, 2000, 5000, 9000)]
    batch = bb84.key_length_batch(blocks)
    assert [r.secret_key_length for r in batch] == [key_length(b).secret_key_length for b in blocks]


def test_dispatch_and_signal_budget():
    from finitekey.optimize import dispatch
    data = {"protocol": {"name": "bb84"}, "channel": {"qber": 0.02},
            "budget": {"signals": 10**9, "detection_probability": 1e-3, "signal_rate_hz": 1e8},
            "security": {"eps_sec": EPS_SEC, "eps_cor": EPS_COR}}
    d = dispatch.design(data)
    assert d.expected_counts["detections"] == pytest.approx(1e6)
    assert d.secret_key_rate_per_signal == pytest.approx(d.expected.secret_key_length / 1e9)
    assert d.block_fill_time_s == pytest.approx(10.0)
    res = dispatch.blocksize(data, "positive")
    assert res.size_kind == "signals" and res.design.expected.secret_key_length >= 1
    with pytest.raises(InputError):
        dispatch.design({"protocol": {"name": "b92"}})


@pytest.mark.slow
def test_phase_error_bound_monte_carlo_large(make_rng):
    # Larger seeded Monte Carlo of the exact hypergeometric bound (Neyman 1937 construction), eps = 0.01.
    from finitekey.bounds.hypergeometric_exact import key_errors_upper
    rng = make_rng(7)
    n, k, eps = 5000, 1000, 0.01
    for T in (60, 300, 1500):
        e = rng.hypergeometric(T, n + k - T, k, size=40000)
        bounds = {int(v): key_errors_upper(n, k, int(v), eps) for v in np.unique(e)}
        fails = sum((T - int(v)) > bounds[int(v)] for v in e)
        assert fails <= eps * e.size + 4 * math.sqrt(eps * e.size)


def test_modelled_leakage_is_flagged_in_the_assumptions():
    # A run-time block whose leakage is modelled from an efficiency, not measured, must say so in its result
    # (a key that is secure only if reconciliation disclosed no more than the model's bits).
    from finitekey.protocols import bb84 as mod

    base = {"key_bits": 10**6, "test_bits": 10**5, "test_errors": 5000, "eps_sec": 1e-10, "eps_cor": 1e-15}
    measured = mod.key_length(mod.parse_block({**base, "ec_leak_bits": 300000}))
    modelled = mod.key_length(mod.parse_block({**base, "ec_efficiency": 1.1, "key_qber": 0.05}))
    assert mod.MODELLED_LEAKAGE_ASSUMPTION not in measured.assumptions
    assert mod.MODELLED_LEAKAGE_ASSUMPTION in modelled.assumptions
    assert "MODELLED" in " ".join(modelled.to_dict()["assumptions"])


def test_parallel_batch_equals_serial_batch():
    # Splitting a batch over worker processes must not change any result (same lengths, same ledgers).
    import numpy as np

    from finitekey.protocols import bb84 as mod

    rng = np.random.default_rng(7)
    blocks = [mod.parse_block({"key_bits": int(n), "test_bits": int(k), "test_errors": int(rng.integers(0, k // 20)),
                               "ec_leak_bits": int(n // 5), "eps_sec": 1e-10, "eps_cor": 1e-15})
              for n, k in zip(rng.integers(10**4, 10**7, 2100), rng.integers(10**3, 10**5, 2100))]
    serial = mod.key_length_batch(blocks)
    parallel = mod.key_length_batch(blocks, jobs=2)
    assert [r.secret_key_length for r in parallel] == [r.secret_key_length for r in serial]
    assert [r.ledger for r in parallel] == [r.ledger for r in serial]
    assert any(r.secret_key_length > 0 for r in serial)
