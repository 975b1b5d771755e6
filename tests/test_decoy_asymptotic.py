"""Asymptotic decoy-state rate with infinitely many decoys: published reach and the repeaterless bound."""

import numpy as np
import pytest

from finitekey.channel import Detector, Link, LinkModel, repeaterless_bound
from finitekey.protocols.decoy_bb84 import optimal_gllp_rate


def _early_link(L):
    # Early fibre parameter set (0.21 dB/km, Bob's efficiency 4.5%, dark yield 1.7e-6 = 2 p_dc, detection error
    # 3.3%, f = 1.22) as used by Ma, Qi, Zhao, Lo, Phys. Rev. A 72, 012326 (2005); parameters from memory.
    return LinkModel(Link(L, 0.21), Detector(0.045, 1.7e-6 / 2, 0.0, 0.033))


def _reach(lo=50.0, hi=250.0):
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        if optimal_gllp_rate(_early_link(mid), 1.22)[0] > 0:
            lo = mid
        else:
            hi = mid
    return lo


def test_infinite_decoy_reach_about_142_km():
    # Ma, Qi, Zhao, Lo (2005) report a reach of "over 140 km" for this set; the 142 km figure is from memory.
    reach = _reach()
    assert 140.0 < reach < 144.5


def test_optimal_signal_intensity_is_order_one_half():
    # Ma et al. (2005): with infinite decoys the optimal mu is about 0.5 at long distance (from memory).
    rate, mu = optimal_gllp_rate(_early_link(100.0), 1.22)
    assert rate > 0
    assert 0.35 < mu < 0.7


@pytest.mark.parametrize("L", [0.0, 20.0, 60.0, 100.0, 140.0])
def test_below_repeaterless_bound(L):
    # Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043 (2017): no repeaterless protocol beats
    # -log2(1 - eta) per channel use.  eta here is the channel transmittance (fibre only; detector counted
    # as part of the channel makes the bound smaller, so this is the stricter check).
    m = _early_link(L)
    rate, _ = optimal_gllp_rate(m, 1.22, sifting=1.0)
    assert rate < repeaterless_bound(m.eta)


def test_rate_decreases_with_distance():
    rates = [optimal_gllp_rate(_early_link(L), 1.22)[0] for L in np.linspace(0, 140, 15)]
    assert all(a > b for a, b in zip(rates, rates[1:]))
