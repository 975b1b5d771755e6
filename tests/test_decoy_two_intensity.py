"""One-decoy (two-intensity) analysis: formulas recomputed independently, validity against the model."""

import math

import mpmath
import numpy as np
import pytest

from finitekey.channel import Detector, Link, LinkModel
from finitekey.protocols import decoy_bb84 as D
from finitekey.decoy import closed_forms as CF


def _model(L):
    return LinkModel(Link(L, 0.2), Detector(0.1, 6e-7, 0.0, 0.005))


def _block(L=50.0, N=1e10, mu=(0.5, 0.15), p=(0.8, 0.2), q=0.9):
    c = _model(L).expected_counts(N, mu, p, q)
    r = lambda a: [int(round(x)) for x in a]
    nX = sum(c.key_detections)
    Q = sum(c.key_errors) / nX
    leak = int(math.ceil(1.16 * nX * (-Q * math.log2(Q) - (1 - Q) * math.log2(1 - Q))))
    return D.parse_block({"intensities": list(mu), "intensity_probabilities": list(p),
                          "key_basis": {"detections": r(c.key_detections), "errors": r(c.key_errors)},
                          "test_basis": {"detections": r(c.test_detections), "errors": r(c.test_errors)},
                          "ec_leak_bits": leak, "eps_sec": 1e-10, "eps_cor": 1e-15})


def _rusca2018(b, eps):
    """Rusca, Boaron, Grünenfelder, Martin, Zbinden, APL 112, 171104 (2018), with Hoeffding intervals;
    formulas from memory, recomputed with mpmath (40 digits)."""
    mpmath.mp.dps = 40
    k1, k2 = (mpmath.mpf(x) for x in b.intensities)
    p1, p2 = (mpmath.mpf(x) for x in b.intensity_probabilities)
    t0 = p1 * mpmath.exp(-k1) + p2 * mpmath.exp(-k2)
    t1 = p1 * k1 * mpmath.exp(-k1) + p2 * k2 * mpmath.exp(-k2)
    L = mpmath.log(1 / mpmath.mpf(eps))

    def pm(c):
        d = mpmath.sqrt(sum(c) / 2 * L)
        return [c[0] - d, c[1] - d], [c[0] + d, c[1] + d]

    def s01(det, err):
        lo, hi = pm(det)
        elo, ehi = pm(err)
        s0u = 2 * (t0 * mpmath.exp(k2) / p2 * ehi[1] + mpmath.sqrt(sum(det) / 2 * L))
        s0 = max(t0 / (k1 - k2) * (k1 * mpmath.exp(k2) / p2 * lo[1] - k2 * mpmath.exp(k1) / p1 * hi[0]), 0)
        s1 = t1 * k1 / (k2 * (k1 - k2)) * (mpmath.exp(k2) / p2 * lo[1] - k2 ** 2 / k1 ** 2 * mpmath.exp(k1) / p1 * hi[0]
                                           - (k1 ** 2 - k2 ** 2) / k1 ** 2 * s0u / t0)
        return s0, s1, s0u

    s0, s1, s0u = s01(b.key_detections, b.key_errors)
    _, s1z, _ = s01(b.test_detections, b.test_errors)
    lo, hi = pm(b.test_errors)
    v1 = t1 / (k1 - k2) * (mpmath.exp(k1) / p1 * hi[0] - mpmath.exp(k2) / p2 * lo[1])
    return {"s0": s0, "s1": s1, "s1z": s1z, "v1": v1, "s0u": s0u}


@pytest.mark.parametrize("L,N", [(30.0, 1e9), (80.0, 1e11)])
def test_two_intensity_formulas_term_by_term(L, N):
    b = _block(L, N)
    r = D.key_length(b, "hoeffding")
    assert r.settings["analysis"] == "two-intensity" and not any("analysis:" in a for a in r.assumptions)
    eps = r.ledger.epsilon("count_estimation")
    ref = _rusca2018(b, eps)
    e = r.estimates
    assert e["single_photon_key_detections_lower"] == pytest.approx(float(ref["s1"]), rel=1e-10)
    assert e["single_photon_key_detections_lower"] <= float(ref["s1"]) * (1 + 1e-15)
    assert e["single_photon_test_detections_lower"] == pytest.approx(float(ref["s1z"]), rel=1e-9)
    assert e["single_photon_test_errors_upper_before_clipping"] == pytest.approx(float(ref["v1"]), rel=1e-10)
    # the bound used is clamped to the observed test errors (v1 <= m_Z), which keeps it valid
    assert e["single_photon_test_errors_upper"] == pytest.approx(min(float(ref["v1"]), sum(b.test_errors)), rel=1e-10)
    assert e["vacuum_key_detections_lower"] == pytest.approx(float(ref["s0"]), rel=1e-9, abs=1e-6)


@pytest.mark.parametrize("method", ["exact", "chernoff", "hoeffding"])
def test_two_intensity_bounds_contain_truth(method):
    # Validity against the model's photon-number-resolved expectations (Ma, Qi, Zhao, Lo (2005) yields).
    L, N, mu, p, q = 50.0, 1e10, (0.5, 0.15), (0.8, 0.2), 0.9
    b = _block(L, N, mu, p, q)
    m = _model(L)
    tau0 = sum(pk * math.exp(-k) for k, pk in zip(mu, p))
    tau1 = sum(pk * k * math.exp(-k) for k, pk in zip(mu, p))
    s0_true = N * q * q * tau0 * float(m.photon_yield(0))
    s1_true = N * q * q * tau1 * float(m.photon_yield(1))
    v1_true = N * (1 - q) ** 2 * tau1 * float(m.photon_error_yield(1))
    r = D.key_length(b, method)
    assert r.estimates["vacuum_key_detections_lower"] <= s0_true
    assert 0.8 * s1_true < r.estimates["single_photon_key_detections_lower"] <= s1_true
    assert r.estimates["single_photon_test_errors_upper"] >= v1_true
    assert r.secret_key_length > 0
    # the vacuum upper bound from error counts is above the truth too
    with np.errstate(all="ignore"):
        s0u = CF.two_intensity_vacuum_upper(list(mu), list(p), b.key_errors[1] + 5 * math.sqrt(b.key_errors[1]),
                                           math.sqrt(sum(b.key_detections) / 2 * math.log(1e12)), np.exp)
    assert s0u >= s0_true


def test_two_intensity_default_at_least_reference():
    for L, N in [(20.0, 1e8), (60.0, 1e10), (100.0, 1e12)]:
        b = _block(L, N)
        assert D.key_length(b).secret_key_length >= D.key_length(b, "hoeffding").secret_key_length
