"""MDI-BB84 link model against outside references.

Sources beside each check:

* the closed-form gains and error gains of Ma and Razavi, Phys. Rev. A 86, 062319 (2012) (recalled from memory,
  as is their reuse in Xu, Curty, Qi, Qian, Lo, New J. Phys. 15, 113007 (2013)), evaluated with mpmath at 40
  digits; the forms are typed from memory and confirmed here by the independent phase-averaged model;
* the two-single-photon yield Y11 and its X-basis error rate e11 (same papers, from memory) against the
  mixed derivative of the model's own gain (Richardson-extrapolated finite differences);
* the asymptotic rate R = Q11 (1 - h(e11)) - f Q_Z h(E_Z) (Lo, Curty, Qi, PRL 108, 130503 (2012), Eq. (1), from memory)
  with the closed forms;
* the repeaterless bound -log2(1 - eta) of Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043
  (2017), at the end-to-end fibre transmittance.
"""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest

from finitekey.channel import repeaterless_bound
from finitekey.errors import InputError
from finitekey.protocols.mdi_bb84 import scenario as S


def _model(la=20.0, lb=35.0, eff=0.6, pd=3e-6, ed=0.015, encoding="polarisation"):
    return S.RelayModel(S.Arm(la, 0.2), S.Arm(lb, 0.2), eff, pd, ed, encoding)


def _closed(model, mua, mub):
    """Ma-Razavi 2012 closed forms (from memory), mpmath at 40 digits: (Q_Z, E_Z Q_Z, Q_X, E_X Q_X)."""
    with mp.workdps(40):
        a, b = mp.mpf(model.eta_a) * mua, mp.mpf(model.eta_b) * mub
        pd, ed = mp.mpf(model.dark_count_probability), mp.mpf(model.misalignment_error)
        x, y = mp.sqrt(a * b) / 2, (1 - pd) * mp.exp(-(a + b) / 4)
        qc = 2 * (1 - pd) ** 2 * mp.exp(-(a + b) / 2) * (1 - (1 - pd) * mp.exp(-a / 2)) * (1 - (1 - pd) * mp.exp(-b / 2))
        qe = 2 * pd * (1 - pd) ** 2 * mp.exp(-(a + b) / 2) * (mp.besseli(0, 2 * x) - (1 - pd) * mp.exp(-(a + b) / 2))
        qx = 2 * y ** 2 * (1 + 2 * y ** 2 - 4 * y * mp.besseli(0, x) + mp.besseli(0, 2 * x))
        ex = qx / 2 - 2 * (mp.mpf(1) / 2 - ed) * y ** 2 * (mp.besseli(0, 2 * x) - 1)
        return qc + qe, ed * qc + (1 - ed) * qe, qx, ex


@pytest.mark.parametrize("mua,mub", [(0.5, 0.3), (0.1, 0.02), (2e-4, 0.5), (1.0, 1.0), (0.3, 0.0)])
@pytest.mark.parametrize("arms", [(20.0, 35.0), (0.0, 0.0), (80.0, 10.0)])
def test_gains_match_ma_razavi_closed_form(mua, mub, arms):
    m = _model(*arms)
    qz, ez = m.gains(mua, mub, "Z")
    qx, ex = m.gains(mua, mub, "X")
    ref = _closed(m, mua, mub)
    for got, want in zip((qz, ez, qx, ex), ref):
        assert float(got) == pytest.approx(float(want), rel=1e-11, abs=1e-300)


def test_time_bin_keeps_half_of_every_gain():
    """Time-bin (two detectors): only the psi- patterns; by the symmetry of the four modes they carry exactly
    half of each gain and error gain (Ma-Razavi 2012, the two-detector set-up; the symmetry is derived in the
    module docstring)."""
    p, t = _model(), _model(encoding="time-bin")
    for basis in ("Z", "X"):
        for mu in ((0.4, 0.3), (0.05, 0.5)):
            qp, ep = p.gains(*mu, basis)
            qt, et = t.gains(*mu, basis)
            assert float(qt) == pytest.approx(float(qp) / 2, rel=1e-13)
            assert float(et) == pytest.approx(float(ep) / 2, rel=1e-13)
    assert t.y11() == pytest.approx(p.y11() / 2) and t.e11() == p.e11()


def _mixed_derivative(f, h):
    return (f(h, h) - f(h, 0.0) - f(0.0, h) + f(0.0, 0.0)) / (h * h)


@pytest.mark.parametrize("arms,pd", [((20.0, 35.0), 3e-6), ((0.0, 50.0), 1e-5), ((60.0, 60.0), 1e-7)])
def test_y11_and_e11_closed_forms_are_the_model_derivative(arms, pd):
    """Y11 = d^2/(dmu_a dmu_b) [Q e^{mu_a + mu_b}] at 0; e11 Y11 the same of the X error gain (the
    photon-number expansion of a phase-randomised coherent state); Richardson extrapolation in h."""
    m = _model(*arms, pd=pd)

    def G(basis, which):
        return lambda u, v: float(m.gains(u, v, basis)[which]) * math.exp(u + v)

    for basis in ("Z", "X"):
        d = [_mixed_derivative(G(basis, 0), h) for h in (2e-3, 1e-3)]
        y11 = 2 * d[1] - d[0]
        assert y11 == pytest.approx(m.y11(), rel=2e-4)
    d = [_mixed_derivative(G("X", 1), h) for h in (2e-3, 1e-3)]
    assert (2 * d[1] - d[0]) / m.y11() == pytest.approx(m.e11(), rel=2e-3)


def test_asymptotic_rate_matches_ma_razavi_closed_form():
    """R = mu_a mu_b e^{-mu_a-mu_b} Y11 (1 - h(e11)) - f Q_Z h(E_Z) with the closed forms (mpmath)."""
    def h(x):
        return -x * mp.log(x, 2) - (1 - x) * mp.log(1 - x, 2)

    for arms, mu in (((20.0, 35.0), (0.4, 0.3)), ((50.0, 50.0), (0.3, 0.3)), ((10.0, 70.0), (0.1, 0.6))):
        m = _model(*arms)
        qz, ez, _, _ = _closed(m, *mu)
        with mp.workdps(40):
            pd, ed = mp.mpf(m.dark_count_probability), mp.mpf(m.misalignment_error)
            ea, eb = mp.mpf(m.eta_a), mp.mpf(m.eta_b)
            y11 = (1 - pd) ** 2 * (ea * eb / 2 + (2 * ea + 2 * eb - 3 * ea * eb) * pd + 4 * (1 - ea) * (1 - eb) * pd ** 2)
            e11 = (y11 / 2 - (mp.mpf(1) / 2 - ed) * (1 - pd) ** 2 * ea * eb / 2) / y11
            r = mu[0] * mu[1] * mp.exp(-mu[0] - mu[1]) * y11 * (1 - h(e11)) - mp.mpf(1.16) * qz * h(ez / qz)
        assert float(S.asymptotic_rate(m, *mu, 1.16)) == pytest.approx(float(r), rel=1e-9)


@pytest.mark.parametrize("encoding", S.ENCODINGS)
def test_every_asymptotic_rate_is_below_the_repeaterless_bound(encoding):
    """Pirandola et al. 2017: no repeaterless protocol beats -log2(1 - eta) at the end-to-end transmittance."""
    for la in (0.0, 10.0, 40.0, 100.0, 150.0):
        for lb in (0.0, 25.0, 100.0):
            if la == lb == 0.0:
                continue      # eta = 1: the bound is infinite
            m = S.RelayModel(S.Arm(la, 0.2), S.Arm(lb, 0.2), 1.0, 1e-8, 0.0, encoding)
            rate, _, _ = S.optimal_asymptotic_rate(m, 1.0)
            assert rate < float(repeaterless_bound(m.end_to_end_transmittance)), (la, lb)


def test_scenario_round_trip_and_one_sided_intensities_refused():
    sc = S.default_scenario()
    assert S.parse_scenario(sc.as_dict()) == sc
    d = sc.as_dict()
    d["protocol"]["alice_intensities"] = [0.5, 0.1, 0.0]
    with pytest.raises(InputError, match="protocol.bob_intensities"):
        S.parse_scenario(d)
    d["protocol"]["bob_intensities"] = [0.5, 0.1]
    with pytest.raises(InputError, match=r"protocol.bob_intensities.*3 intensities"):
        S.parse_scenario(d)
    moved = S.with_field(S.with_field(sc, "link.distance_km", 40.0), "link.alice_fraction", 0.25)
    assert (moved.model.alice.distance_km, moved.model.bob.distance_km) == (10.0, 30.0)
    assert S.parse_scenario(moved.as_dict()) == moved
    assert moved.at_total_distance(80.0).model.bob.distance_km == 60.0
    with pytest.raises(InputError, match="protocol.encoding"):
        S.with_field(sc, "protocol.encoding", "phase")
