"""Link and detector model: formulas against independent recomputation, Poisson averaging, validation."""

import math

import numpy as np
import pytest
from scipy import stats

from finitekey.channel import Detector, Link, LinkModel, Source, check_intensity_list, repeaterless_bound, transmittance
from finitekey.errors import InputError


def _model(**kw):
    det = dict(efficiency=0.1, dark_count_probability=6e-7, afterpulse_probability=0.0, misalignment_error=0.005,
               dead_time_s=0.0)
    det.update({k: v for k, v in kw.items() if k in det})
    link = dict(distance_km=50.0, fiber_loss_db_per_km=0.2, extra_loss_db=0.0)
    link.update({k: v for k, v in kw.items() if k in link})
    return LinkModel(Link(**link), Detector(**det), Source(kw.get("repetition_rate_hz")))


def test_transmittance_formula():
    # eta = eta_det 10^(-(alpha L + extra)/10): the textbook definition of dB loss (common practice, no source).
    m = _model(distance_km=37.5, fiber_loss_db_per_km=0.21, extra_loss_db=1.3, efficiency=0.2)
    assert m.eta == pytest.approx(0.2 * 10 ** (-(0.21 * 37.5 + 1.3) / 10), rel=1e-14)
    assert transmittance(3.0103, 1.0) == pytest.approx(0.5, rel=1e-4)


def test_click_and_error_probability_match_the_stated_formulas():
    # D = 1 - (1 - 2 pdc) e^{-eta mu}, E = pdc + e_mis (1 - e^{-eta mu})  (Ma, Qi, Zhao, Lo, PRA 72, 012326 (2005)).
    m = _model()
    mu = np.array([0.6, 0.1, 1e-3])
    eta = m.eta
    d = 1 - (1 - 2 * 6e-7) * np.exp(-eta * mu)
    e = 6e-7 + 0.005 * (1 - np.exp(-eta * mu))
    np.testing.assert_allclose(m.click_probability(mu), d, rtol=1e-9)  # reference loses digits to cancellation
    np.testing.assert_allclose(m.error_probability(mu), e, rtol=1e-12)


def test_afterpulsing_modifies_as_stated():
    m0, m1 = _model(), _model(afterpulse_probability=0.03)
    mu = 0.4
    assert m1.click_probability(mu) == pytest.approx(m0.click_probability(mu) * 1.03, rel=1e-13)
    assert m1.error_probability(mu) == pytest.approx(m0.error_probability(mu) + 0.015 * m0.click_probability(mu),
                                                     rel=1e-13)


def test_poisson_average_of_photon_yields_gives_pulse_probabilities():
    # Averaging the n-photon yields over Poisson(mu) (scipy.stats.poisson) must give D(mu) and E(mu).
    m = _model(distance_km=20.0, afterpulse_probability=0.01)
    mu = 0.7
    n = np.arange(0, 80)
    w = stats.poisson.pmf(n, mu)
    assert np.dot(w, m.photon_yield(n)) == pytest.approx(float(m.click_probability(mu)), rel=1e-12)
    assert np.dot(w, m.photon_error_yield(n)) == pytest.approx(float(m.error_probability(mu)), rel=1e-12)
    # vacuum: a dark click is an error half the time
    assert m.photon_error_yield(0) / m.photon_yield(0) == pytest.approx(0.5)


def test_counts_basis_weights_and_monte_carlo():
    m = _model(distance_km=10.0)
    mu, p, q = [0.5, 0.1, 0.0], [0.6, 0.3, 0.1], 0.8
    c = m.expected_counts(1e6, mu, p, q)
    d = m.click_probability(mu)
    np.testing.assert_allclose(c.key_detections, 1e6 * np.array(p) * q * q * d)
    np.testing.assert_allclose(c.test_detections, 1e6 * np.array(p) * (1 - q) ** 2 * d)
    # Monte Carlo (seeded numpy Generator): simulate intensity, both bases, Poisson photons, losses, dark counts.
    rng = np.random.default_rng(12345)
    N = 400_000
    k = rng.choice(3, size=N, p=p)
    a = rng.random(N) < q
    b = rng.random(N) < q
    photons = rng.poisson(np.array(mu)[k])
    arrived = rng.binomial(photons, m.eta)
    signal = arrived > 0
    dark = rng.random((N, 2)) < 6e-7
    click = signal | dark.any(axis=1)
    sel = click & a & b & (k == 0)
    expected = 1e6 * p[0] * q * q * float(d[0]) * N / 1e6
    assert abs(sel.sum() - expected) < 5 * math.sqrt(expected)


def test_dead_time_live_fraction():
    # non-paralysable dead time: live fraction 1/(1 + f Dbar tau) (common practice, no source)
    m = _model(dead_time_s=1e-6, repetition_rate_hz=1e9, distance_km=0.0)
    c = m.expected_counts(1e6, [0.5], [1.0], 0.5)
    dbar = float(m.click_probability(0.5))
    assert c.live_fraction == pytest.approx(1 / (1 + 1e9 * dbar * 1e-6))
    assert c.key_detections[0] == pytest.approx(1e6 * 0.25 * dbar * c.live_fraction)
    assert _model(dead_time_s=1e-6).expected_counts(1e6, [0.5], [1.0], 0.5).live_fraction == 1.0
    assert m.block_fill_time_s(1e9) == pytest.approx(1.0)


def test_repeaterless_bound():
    # Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043 (2017): -log2(1 - eta); at eta = 1/2 it is 1.
    assert repeaterless_bound(0.5) == pytest.approx(1.0)
    assert repeaterless_bound(1e-6) == pytest.approx(1e-6 / math.log(2), rel=1e-5)


@pytest.mark.parametrize("cls,kw,field", [
    (Link, dict(distance_km=-1.0), "link.distance_km"),
    (Link, dict(distance_km=1.0, fiber_loss_db_per_km=-0.2), "link.fiber_loss_db_per_km"),
    (Link, dict(distance_km=1.0, extra_loss_db=-3.0), "link.extra_loss_db"),
    (Detector, dict(efficiency=0.0, dark_count_probability=1e-6), "detector.efficiency"),
    (Detector, dict(efficiency=1.2, dark_count_probability=1e-6), "detector.efficiency"),
    (Detector, dict(efficiency=0.1, dark_count_probability=-1e-6), "detector.dark_count_probability"),
    (Detector, dict(efficiency=0.1, dark_count_probability=1e-6, misalignment_error=0.6),
     "detector.misalignment_error"),
    (Detector, dict(efficiency=0.1, dark_count_probability=1e-6, dead_time_s=-1.0), "detector.dead_time_s"),
    (Source, dict(repetition_rate_hz=0.0), "source.repetition_rate_hz"),
])
def test_bad_device_values_name_the_field(cls, kw, field):
    with pytest.raises(InputError) as ei:
        cls(**kw)
    assert ei.value.field == field


def test_intensity_order_checked():
    assert check_intensity_list("intensities", [0.5, 0.1, 0.0]) == (0.5, 0.1, 0.0)
    with pytest.raises(InputError) as ei:
        check_intensity_list("intensities", [0.1, 0.5])
    assert ei.value.field == "intensities[1]"
    with pytest.raises(InputError) as ei:
        check_intensity_list("intensities", [0.5, -0.1])
    assert ei.value.field == "intensities[1]"


def test_models_are_frozen():
    m = _model()
    with pytest.raises(Exception):
        m.link.distance_km = 3.0
