"""Twin-field (sending-or-not-sending) link model and asymptotic rate: physics checks with named sources."""

from __future__ import annotations

import math

import numpy as np
import pytest

from finitekey.protocols.tf_sns import scenario as S


def _link(**kw):
    base = dict(distance_km=300.0, fiber_loss_db_per_km=0.16, efficiency=0.5, dark_count_probability=1e-8,
                misalignment_error=0.02, phase_drift_std_rad=0.1)
    base.update(kw)
    return S.TwinFieldLink(**base)


def _one_click_direct(link, mu_a, mu_b, phases):
    """Average over the given relative phases of the exactly-one-click probability, from the detector model
    itself (two threshold detectors, I_L/R = (a+b)/2 +- V sqrt(ab) cos phi)."""
    ar = link.arms()
    a, b = ar.eta_a * mu_a, ar.eta_b * mu_b
    q = 1 - link.dark_count_probability
    c = link.visibility * math.sqrt(a * b)
    il = (a + b) / 2 + c * np.cos(phases)
    ir = (a + b) / 2 - c * np.cos(phases)
    left = (1 - q * np.exp(-il)) * q * np.exp(-ir)
    right = (1 - q * np.exp(-ir)) * q * np.exp(-il)
    return left, right


def test_random_phase_click_probability_matches_a_direct_phase_average():
    """Bessel closed form against a 200000-point average over the relative phase (numerical integration)."""
    link = _link(alice_fraction=0.3)
    ph = np.linspace(0, 2 * np.pi, 200001)[:-1]
    for mu_a, mu_b in ((0.3, 0.2), (0.5, 0.0), (0.0, 0.0), (1.2, 0.9)):
        left, right = _one_click_direct(link, mu_a, mu_b, ph)
        assert float(link.one_click_random_phase(mu_a, mu_b)) == pytest.approx((left + right).mean(), rel=1e-9)


def test_x1_window_probabilities_match_a_monte_carlo_average_over_slice_and_drift():
    """Quadrature over the slice and the Gaussian drift against plain Monte Carlo (4e6 draws, numpy)."""
    link = _link(distance_km=50.0, phase_drift_std_rad=0.3, acceptance_width_rad=0.8)
    rng = np.random.default_rng(1)
    ph = rng.uniform(-0.4, 0.4, 4_000_000) + rng.normal(0, 0.3, 4_000_000)
    left, right = _one_click_direct(link, 0.2, 0.2, ph)
    det, err = link.x1_click_probabilities(0.2)
    assert float(err) == pytest.approx(right.mean(), rel=2e-3)
    assert float(det) == pytest.approx((left + right).mean(), rel=2e-3)


def test_ideal_link_has_no_phase_errors_whatever_the_slice_width():
    """With no drift, full visibility, no dark counts and equal arms, the untagged bits' phase-error rate is 0:
    the slice-width correction removes exactly the error the slice itself prepares (proof note, section 3)."""
    for width in (0.1, math.pi / 8, 1.0, math.pi):
        link = _link(dark_count_probability=0.0, misalignment_error=0.0, phase_drift_std_rad=0.0,
                     acceptance_width_rad=width)
        assert S.exact_phase_error_rate(link) == pytest.approx(0.0, abs=1e-12)
    assert S.exact_phase_error_rate(_link(phase_drift_std_rad=0.3)) > S.exact_phase_error_rate(_link())


def _rate(link):
    return S.optimal_asymptotic_rate(link, 1.1)[0]


def test_rate_scales_as_the_square_root_of_the_total_transmittance():
    """Twin-field key rate ~ sqrt(eta) at long distance (Lucamarini et al., Nature 557, 400 (2018); Wang, Yu,
    Hu, PRA 98, 062323 (2018)): log-log slope against the end-to-end transmittance close to 1/2."""
    link = _link(dark_count_probability=1e-11)
    d = np.array([300.0, 350.0, 400.0, 450.0])
    r = np.array([_rate(link.at_distance(x)) for x in d])
    eta = np.array([link.at_distance(x).fibre_transmittance() for x in d])
    slope = np.polyfit(np.log(eta), np.log(r), 1)[0]
    assert 0.45 < slope < 0.56, slope


def test_beats_the_repeaterless_bound_beyond_some_distance():
    """Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043 (2017): -log2(1 - eta) per channel use.
    Twin-field papers report beating it at long distance; here at 450 km but not at 100 km."""
    near, far = _link(distance_km=100.0), _link(distance_km=450.0)
    assert _rate(near) < S.repeaterless_bound_total(near)
    assert _rate(far) > S.repeaterless_bound_total(far)


@pytest.mark.parametrize("fraction", [0.5, 0.3, 0.1])
def test_never_exceeds_the_single_middle_node_bound(fraction):
    """Repeater-chain capacity with one middle node, min over the arms of -log2(1 - eta_arm) (Pirandola, Commun.
    Phys. 2, 51 (2019); symmetric: -log2(1 - sqrt(eta_total))), on ideal devices, where the rate is highest."""
    for d in (1.0, 20.0, 100.0, 300.0, 600.0):
        link = _link(distance_km=d, alice_fraction=fraction, dark_count_probability=0.0, misalignment_error=0.0,
                     phase_drift_std_rad=0.0, efficiency=1.0)
        assert _rate(link) <= S.relay_bound(link)
    sym = _link(distance_km=200.0, efficiency=1.0)
    assert S.relay_bound(sym) == pytest.approx(-math.log2(1 - math.sqrt(sym.fibre_transmittance())), rel=1e-12)
