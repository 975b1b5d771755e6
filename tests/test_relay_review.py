"""Checks added by an independent review of the relay protocols (mdi-bb84, tf-sns); sources beside each."""

from __future__ import annotations

import json
import math
import pathlib

import pytest

from finitekey.errors import InputError

ROOT = pathlib.Path(__file__).resolve().parents[1]


def _tf_block(**changes):
    from finitekey.protocols.tf_sns import block as B
    data = json.loads((ROOT / "examples" / "blocks" / "tf_sns_block.json").read_text())
    data.update(changes)
    return B.parse_block(data)


def test_tf_sns_refuses_a_split_giving_the_chain_rule_more_than_the_single_photon_smoothing():
    """The chain rule H^{a+2b}(AB|C) >= H^b(A|BC) + H(B|C) - log2(2/a^2) (Vitanov, Dupuis, Tomamichel, Renner
    2013, in the form Lim et al. 2014 (B1)-(B3) apply it; decoy-bb84 note section 7) doubles one slot; the
    ledger charges the single-photon smoothing twice.  Under the other reading (the chain rule's own
    parameter doubled) the charge 2 eps_ch + 4 eps_1 covers the need 4 eps_ch + 2 eps_1 only while
    eps_ch <= eps_1, so decoy-bb84 and mdi-bb84 refuse larger chain-rule shares; tf-sns must too."""
    from finitekey.protocols.tf_sns import analysis as AN
    split = {"count_estimation": 0.4, "single_photon_smoothing": 0.1, "chain_rule": 0.45,
             "privacy_amplification": 0.05}
    blk = _tf_block(epsilon_split=split)
    with pytest.raises(InputError) as exc:
        AN.key_length(blk)
    assert "chain_rule" in str(exc.value)
    # the default split (eps_ch = eps_1) stays accepted
    assert AN.key_length(_tf_block()).secret_key_length > 0


def test_tf_sns_upper_tail_form_is_implied_by_chernoffs_bound():
    """The phase-error conversion uses Pr[X >= (1+d) m] <= exp(-d^2 m/(2+d)).  Chernoff's bound
    (e^d/(1+d)^{1+d})^m (Mitzenmacher-Upfal Thm 4.4 part 1, from memory) implies it for every d > 0 because
    (1+d) ln(1+d) - d >= d^2/(2+d); checked in mpmath at 40 digits over d from 1e-6 to 1e6, and the code's
    deviation m + (beta + sqrt(beta^2 + 8 beta m))/2 solves d^2 m/(2+d) = beta."""
    import mpmath as mp

    from finitekey.protocols.tf_sns import analysis as AN
    with mp.workdps(40):
        for k in range(-60, 61):
            d = mp.mpf(10) ** (mp.mpf(k) / 10)
            assert (1 + d) * mp.log1p(d) - d >= d * d / (2 + d)
        for m, beta in ((0.5, 3.0), (40.0, 20.0), (1e6, 25.0)):
            x = AN.chernoff_actual_upper(m, beta, math.sqrt)
            d = mp.mpf(x) / m - 1
            assert d * d * m / (2 + d) == pytest.approx(beta, rel=1e-9)


def test_tf_sns_certified_yield_is_the_lim_form_with_both_vacuum_ends():
    """The certified y_1 (decoy engine, Lim et al. 2014 three-intensity form on the virtual one-sided sender)
    re-derived here by hand: [mu_2^2 e^{mu_1} c_1 - mu_1^2 e^{mu_2} c_2 - mu_2^2 y_0^U + mu_1^2 y_0^L] /
    (mu_1 mu_2 (mu_2 - mu_1)), evaluated in mpmath at 40 digits from the same certified count intervals; it is
    below the note's form with y_0^U alone by mu_1 (y_0^U - y_0^L)/(mu_2 (mu_2 - mu_1))."""
    import mpmath as mp
    from flint import arb

    from finitekey.decoy import intervals as IV
    from finitekey.protocols.tf_sns import analysis as AN
    blk = _tf_block(vacuum=40)
    p = blk.parameters
    led = AN.block_ledger(blk)
    eps_c = led.failure_probability("count_estimation")
    T = blk.effective_events
    weak_lo = IV.count_interval_certified("exact", blk.weak_one_sided, T, eps_c)[0]
    strong_hi = IV.count_interval_certified("exact", blk.strong_one_sided, T, eps_c)[1]
    vac_lo, vac_hi = IV.count_interval_certified("exact", blk.vacuum, T, eps_c)
    eng = AN.single_photon_yield_lower(p, blk.acceptance_width_rad, weak_lo, strong_hi, vac_lo, vac_hi, T)
    with mp.workdps(40):
        mu1, mu2 = (mp.mpf(x) for x in p.decoy_intensities)
        p0, p1, p2 = (mp.mpf(x) for x in p.decoy_probabilities)
        x = (1 - mp.mpf(p.key_window_probability)) ** 2
        c1 = mp.mpf(float(weak_lo.mid())) / (2 * x * p0 * p1)
        c2 = mp.mpf(float(strong_hi.mid())) / (2 * x * p0 * p2)
        y0u, y0l = (mp.mpf(float(v.mid())) / (x * p0 * p0) for v in (vac_hi, vac_lo))
        den = mu1 * mu2 * (mu2 - mu1)
        lim = (mu2 ** 2 * mp.e ** mu1 * c1 - mu1 ** 2 * mp.e ** mu2 * c2 - mu2 ** 2 * y0u + mu1 ** 2 * y0l) / den
        note = (mu2 ** 2 * mp.e ** mu1 * c1 - mu1 ** 2 * mp.e ** mu2 * c2 - (mu2 ** 2 - mu1 ** 2) * y0u) / den
        assert float(eng.mid()) == pytest.approx(float(lim), rel=1e-9)
        assert float(eng.upper()) <= float(note)
        assert float(note - lim) == pytest.approx(float(mu1 * (y0u - y0l) / (mu2 * (mu2 - mu1))), rel=1e-9)
    assert isinstance(eng, arb)
