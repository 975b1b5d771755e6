"""Decoy-state BB84 with statistics="kato": Kato's inequality over all pulses (dependent rounds).

Outside references: a seeded Monte Carlo of a dependent (two-state Markov) detection process whose
conditional probabilities are known exactly; Azuma-Hoeffding (K. Azuma, Tohoku Math. J. 19, 357 (1967);
W. Hoeffding, JASA 58, 13 (1963)) recomputed in mpmath; the channel model's expected counts.
"""

import json
import math

import mpmath
import numpy as np
import pytest
from flint import arb

from finitekey.channel import Detector, Link, LinkModel
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.decoy import intervals as IV
from finitekey.protocols import decoy_bb84 as D


def _block_dict(L=50.0, N=1e10, mu=(0.5, 0.1, 2e-4), p=(0.7, 0.2, 0.1), q=0.9, expected=True):
    m = LinkModel(Link(L, 0.2), Detector(0.1, 6e-7, 0.0, 0.005))
    c = m.expected_counts(N, mu, p, q)
    r = lambda xs: [int(round(x)) for x in xs]  # noqa: E731
    kd, ke = r(c.key_detections), r(c.key_errors)
    nx = sum(kd)
    qb = sum(ke) / nx
    leak = int(math.ceil(1.16 * nx * (-(qb * math.log2(qb) + (1 - qb) * math.log2(1 - qb)))))
    d = {"protocol": "decoy-bb84", "intensities": list(mu), "intensity_probabilities": list(p),
         "key_basis": {"detections": kd, "errors": ke},
         "test_basis": {"detections": r(c.test_detections), "errors": r(c.test_errors)},
         "ec_leak_bits": leak, "eps_sec": 1e-10, "eps_cor": 1e-15, "pulses": int(N)}
    if expected:   # pre-registered: the channel model's expectations (fixed before the data)
        f = lambda xs: [float(x) for x in xs]  # noqa: E731
        d["kato_expected"] = {"key_basis": {"detections": f(c.key_detections), "errors": f(c.key_errors)},
                              "test_basis": {"detections": f(c.test_detections), "errors": f(c.test_errors)}}
    return d


def _markov_run(rng, trials, n, p_low=0.02, p_high=0.2):
    """Dependent rounds: the detection probability of round u is p_high right after a detection, else p_low.

    Returns the observed sums Gamma and the exact sums of conditional probabilities Lambda."""
    state = np.zeros(trials, dtype=bool)
    gamma = np.zeros(trials)
    lam = np.zeros(trials)
    for _ in range(n):
        pu = np.where(state, p_high, p_low)
        x = rng.random(trials) < pu
        lam += pu
        gamma += x
        state = x
    return gamma, lam


def _per_value(f, values):
    """f evaluated once per distinct value (the sums take few distinct values), mapped back."""
    u, inv = np.unique(values, return_inverse=True)
    return np.array([f(v) for v in u])[inv]


@pytest.mark.parametrize("eps", [1e-2, 1e-3])
def test_markov_monte_carlo_intervals_and_conversions_cover(eps):
    # Seeded Monte Carlo (numpy Generator): 20000 runs of 1500 dependent rounds.
    rng = np.random.default_rng(20260212)
    runs, n = 20000, 1500
    gamma, lam = _markov_run(rng, runs, n)
    # Pre-registered expected count: stationary detection rate p_low / (1 - p_high + p_low) (exact for the chain).
    expected = n * 0.02 / (1 - 0.2 + 0.02)
    a_lo, a_hi = IV.kato_tilt(n, expected, eps, "lower"), IV.kato_tilt(n, expected, eps, "upper")
    assert a_hi > 0 > a_lo   # tuned for a rate far below 1/2
    hi = _per_value(lambda g: float(IV.kato_count_interval_certified(int(g), n, a_lo, a_hi, eps)[1].upper()), gamma)
    lo = _per_value(lambda g: float(IV.kato_count_interval_certified(int(g), n, a_lo, a_hi, eps)[0].lower()), gamma)
    # conversions: the actual sum bounded from the (here exactly known) conditional sum
    clo = _per_value(lambda x: float(IV.kato_actual_lower(arb(float(x)), n, a_hi, eps).lower()), lam)
    cup = _per_value(lambda x: float(IV.kato_actual_upper(arb(float(x)), n, a_lo, eps).upper()), lam)
    # Margin: binomial(runs, eps) mean + 4 standard deviations + 1 (a true failure rate eps would pass).
    margin = runs * eps + 4 * math.sqrt(runs * eps) + 1
    fails = [np.sum(hi < lam), np.sum(lo > lam), np.sum(clo > gamma), np.sum(cup < gamma)]
    assert max(fails) <= margin, fails
    # Power: intervals of half the width miss far more often than eps, so the check above can fail
    # (measured, one run: half-width failure rates 5.2% / 6.9% at eps 1e-2, 1.7% / 3.1% at 1e-3).
    assert np.sum(gamma + (hi - gamma) / 2 < lam) > margin
    assert np.sum(gamma - (gamma - lo) / 2 > lam) > margin


def test_a_zero_is_azuma_hoeffding():
    # Azuma (1967) / Hoeffding (1963) for a martingale with increments in a range of length 1:
    # Pr[Lambda - Gamma >= t] <= exp(-2 t^2 / n), so the interval is Gamma -/+ sqrt(n ln(1/eps) / 2).
    for n, c, eps in [(10**10, 2345678, 3.7e-12), (5000, 120, 1e-3), (10**6, 500000, 1e-9)]:
        lo, hi = IV.kato_count_interval_certified(c, n, 0.0, 0.0, eps)
        with mpmath.workdps(40):
            d = mpmath.sqrt(mpmath.mpf(n) * mpmath.log(1 / mpmath.mpf(eps)) / 2)
            up, dn = mpmath.mpf(c) + d, max(mpmath.mpf(c) - d, 0)
        assert float(hi.upper()) >= up and float(hi.upper()) <= up * (1 + 1e-12) + 1e-9
        assert float(lo.lower()) <= dn and float(lo.lower()) >= dn * (1 - 1e-12) - 1e-9
        # conversions with a = 0: Gamma >= Lambda - d and Gamma <= Lambda + d
        lam = arb(c)
        assert abs(float(IV.kato_actual_lower(lam, n, 0.0, eps).lower()) - float(c - d)) <= 1e-9 * (1 + float(d))
        assert abs(float(IV.kato_actual_upper(lam, n, 0.0, eps).upper()) - float(c + d)) <= 1e-9 * (1 + float(d))
    assert IV.kato_tilt(5000, None, 1e-3, "upper") == 0.0


@pytest.mark.parametrize("mu,p", [((0.5, 0.1, 2e-4), (0.7, 0.2, 0.1)), ((0.5, 0.1), (0.7, 0.3))])
def test_key_length_positive_at_50_km_and_ledger(mu, p):
    d = _block_dict(mu=mu, p=p)
    b = D.parse_block(d)
    rk = D.key_length(b, "kato")
    re = D.key_length(b, "exact")
    nx = sum(b.key_detections)
    assert 0 < rk.secret_key_length <= nx - b.ec_leak_bits
    # Not required to be below exact; measured ratio kato/exact (one run) about 0.994 for both analyses.
    ratio = rk.secret_key_length / re.secret_key_length
    assert 0.9 < ratio < 1.1
    assert rk.statistics == "kato"
    assert any("Kato" in r for r in rk.references) and not any("Kato" in r for r in re.references)
    ce = [t for t in rk.ledger.terms if t.name == "count_estimation"][0]
    base = D.count_events(len(mu), D.analysis_kind(mu))
    assert ce.weight == base + 4   # 4 conversions conditional sum -> actual count
    assert rk.ledger.eps_sec <= b.eps_sec
    # a = 0 (no pre-registered expectation) is Azuma: far too loose for 1e10 pulses at 50 km
    d0 = dict(d)
    del d0["kato_expected"]
    assert D.key_length(D.parse_block(d0), "kato").secret_key_length < rk.secret_key_length
    # round trip of the new fields
    assert D.parse_block(b.as_dict()) == b


def test_bad_input_names_the_field():
    d = _block_dict()
    del d["pulses"]
    with pytest.raises(InputError) as ei:
        D.key_length(D.parse_block(d), "kato")
    assert ei.value.field == "pulses"
    d = _block_dict()
    d["kato_expected"]["key_basis"]["detections"] = [1.0, 2.0]
    with pytest.raises(InputError) as ei:
        D.parse_block(d)
    assert ei.value.field == "kato_expected.key_basis.detections"
    d = _block_dict()
    d["kato_expected"]["test_basis"]["errors"][1] = -1.0
    with pytest.raises(InputError) as ei:
        D.parse_block(d)
    assert ei.value.field == "kato_expected.test_basis.errors[1]"
    d = _block_dict()
    d["pulses"] = 1000
    with pytest.raises(InputError) as ei:
        D.parse_block(d)
    assert ei.value.field == "pulses"
    with pytest.raises(InputError) as ei:
        D.key_length(D.parse_block(_block_dict()), "kato", analysis="linear-programme")
    assert ei.value.field == "statistics"
    with pytest.raises(InputError) as ei:
        D.DECOY_BB84.design(D.default_scenario(), "kato")
    assert ei.value.field == "statistics"


def test_cli_statistics_kato(tmp_path, capsys):
    path = tmp_path / "b.json"
    path.write_text(json.dumps(_block_dict()))
    rc = main(["keylength", str(path), "--json", "--statistics", "kato"])
    out, err = capsys.readouterr()
    assert rc == 0
    res = json.loads(out)
    assert res["statistics"] == "kato" and res["secret_key_length"] > 0
