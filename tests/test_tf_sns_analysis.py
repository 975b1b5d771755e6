"""tf-sns: certified key length, design, bounds against outside references (sources beside each check)."""

from __future__ import annotations

import json
import math
import pathlib
import subprocess
import sys

import numpy as np
import pytest

from finitekey.errors import InputError
from finitekey.protocols.tf_sns import analysis as AN
from finitekey.protocols.tf_sns import block as B
from finitekey.protocols.tf_sns import design as DS
from finitekey.protocols.tf_sns import scenario as S

ROOT = pathlib.Path(__file__).resolve().parents[1]
BLOCK = json.loads((ROOT / "examples" / "blocks" / "tf_sns_block.json").read_text())
PARAMS = S.SNSParameters(0.45, 0.05, (0.05, 0.35), (0.3, 0.6, 0.1), 0.85)


def _link(distance=100.0, **kw):
    base = dict(distance_km=distance, fiber_loss_db_per_km=0.16, efficiency=0.5, dark_count_probability=1e-8,
                misalignment_error=0.02, phase_drift_std_rad=0.1)
    base.update(kw)
    return S.TwinFieldLink(**base)


@pytest.mark.parametrize("m,beta", [(5.0, 2.0), (60.0, 3.0), (1e4, 5.0), (3e5, 10.0)])
def test_chernoff_conversions_hold_against_exact_binomial_tails(m, beta):
    """The conversions from an expected count to the actual one, against scipy.stats.binom (n = 10 m trials,
    and the Poisson limit n = 1e6 m): each tail at most e^-beta."""
    from scipy import stats
    for n in (int(10 * m), int(1e6 * m)):
        p = m / n
        lo = AN.chernoff_actual_lower(m, beta, math.sqrt)
        hi = AN.chernoff_actual_upper(m, beta, math.sqrt)
        assert stats.binom.cdf(math.ceil(lo) - 1, n, p) <= math.exp(-beta) if lo > 0 else True
        assert stats.binom.sf(math.floor(hi), n, p) <= math.exp(-beta)


def test_single_photon_yield_bound_is_below_the_exact_yield_and_close_to_it():
    """Decoy bound at exact expected counts (no statistics) against the model's exact one-sided yield: below
    it (it is a lower bound) and within 10% for small decoys (Ma, Qi, Zhao, Lo 2005: the vacuum + weak decoy
    bound is nearly tight for weak decoys)."""
    for d in (50.0, 200.0, 400.0):
        link = _link(d)
        n = 1e12
        c = S.expected_counts(link, PARAMS, n)
        est = AN.estimates(AN.flat_parameters(PARAMS), link.acceptance_width_rad, c["weak_one_sided"],
                           c["strong_one_sided"], c["vacuum"], c["vacuum"], c["x1_errors"], 1.0, 1.0)
        true = link.single_photon_yield() * n
        assert est["y1"] <= true
        assert est["y1"] >= 0.9 * true


def test_decoy_engine_bound_agrees_with_the_closed_form_derived_in_the_note():
    """finitekey.decoy (closed form and LP) against the inequality of the note, section 3.2, at exact counts:
    the engine is never above it by more than rounding and within 1e-4 of it (closed form) and 1e-3 (LP)."""
    from flint import arb
    from finitekey import decoy
    for d in (50.0, 300.0, 450.0):
        link = _link(d)
        c = S.expected_counts(link, PARAMS, 1e12)
        own = AN.estimates(AN.flat_parameters(PARAMS), link.acceptance_width_rad, c["weak_one_sided"],
                           c["strong_one_sided"], c["vacuum"], c["vacuum"], c["x1_errors"], 1.0, 1.0)["y1"]
        eng = float(AN.single_photon_yield_lower(PARAMS, link.acceptance_width_rad, arb(c["weak_one_sided"]),
                                                 arb(c["strong_one_sided"]), arb(c["vacuum"]), arb(c["vacuum"]),
                                                 c["effective_events"]))
        assert own * (1 - 1e-4) <= eng <= own * (1 + 1e-12)
        cl = S.class_probabilities(PARAMS, link.acceptance_width_rad)
        w = (cl["strong_one_sided"], cl["weak_one_sided"], cl["vacuum"])
        q = tuple(x / sum(w) for x in w)
        mus = (PARAMS.decoy_intensities[1], PARAMS.decoy_intensities[0], 0.0)
        lo = [0.0, c["weak_one_sided"], c["vacuum"]]
        hi = [c["strong_one_sided"], c["effective_events"], c["vacuum"]]
        lp = float(decoy.bound([decoy.Sender(mus, q)], lo, hi, (1,), "lower", method="lp"))
        tau1 = sum(qq * m * math.exp(-m) for qq, m in zip(q, mus))
        assert lp / (tau1 * sum(w)) == pytest.approx(own, rel=1e-3)


def test_phase_error_bound_at_exact_counts_is_above_the_models_exact_phase_errors():
    """At exact expected counts the expected-phase-error bound must dominate the model's exact value
    (exact single-photon X1 errors, section 3.4), and be close when the vacuum term is small."""
    for d in (50.0, 300.0):
        link = _link(d)
        n = 1e12
        c = S.expected_counts(link, PARAMS, n)
        est = AN.estimates(AN.flat_parameters(PARAMS), link.acceptance_width_rad, c["weak_one_sided"],
                           c["strong_one_sided"], c["vacuum"], c["vacuum"], c["x1_errors"], 1.0, 1.0)
        cl = S.class_probabilities(PARAMS, link.acceptance_width_rad)
        untagged = n * cl["untagged_key"] * PARAMS.signal_intensity * math.exp(-PARAMS.signal_intensity) \
            * link.single_photon_yield()
        exact = untagged * S.exact_phase_error_rate(link)
        assert est["mph"] >= exact
        assert est["mph"] <= 1.5 * exact + 0.01 * untagged


def _simulate_block(rng, link, params, windows, eps_sec):
    """A block drawn from the model: independent binomial counts per window class (iid windows), with the
    true untagged bits and their phase errors drawn too (model: each untagged bit errs with the exact
    phase-error probability)."""
    c = S.expected_counts(link, params, windows)
    cl = S.class_probabilities(params, link.acceptance_width_rad)
    one = link.one_click_random_phase
    n = int(windows)
    draw = {}
    x = (1 - params.key_window_probability) ** 2
    p0, p1, p2 = params.decoy_probabilities
    for name, prob in (("weak_one_sided", c["weak_one_sided"] / n), ("strong_one_sided", c["strong_one_sided"] / n),
                       ("vacuum", c["vacuum"] / n)):
        draw[name] = int(rng.binomial(n, prob))
    nx1 = int(rng.binomial(n, cl["x1"]))
    det, err = link.x1_click_probabilities(params.decoy_intensities[0])
    x1_err = int(rng.binomial(nx1, float(err)))
    x1_det = x1_err + int(rng.binomial(nx1 - x1_err, float((det - err) / (1 - err))))
    # Z windows where exactly one side sends: photon number 1 with prob mu e^-mu, then the one-sided yield
    nz = int(rng.binomial(n, cl["untagged_key"]))
    mu = params.signal_intensity
    single = int(rng.binomial(nz, mu * math.exp(-mu)))
    untagged = int(rng.binomial(single, link.single_photon_yield()))
    phase_err = int(rng.binomial(untagged, S.exact_phase_error_rate(link)))
    key = max(int(rng.poisson(c["key_detections"])), untagged)
    total = max(int(rng.poisson(c["effective_events"])), key + sum(draw.values()) + x1_det)
    data = {**BLOCK, "signal_intensity": params.signal_intensity, "sending_probability": params.sending_probability,
            "decoy_intensities": list(params.decoy_intensities), "decoy_probabilities": list(params.decoy_probabilities),
            "key_window_probability": params.key_window_probability,
            "acceptance_width_rad": link.acceptance_width_rad, "key_detections": key, **draw,
            "x1_detections": x1_det, "x1_errors": x1_err, "effective_events": total, "ec_leak_bits": 0,
            "eps_sec": eps_sec, "eps_cor": 1e-3, "windows": n}
    data.pop("label", None)
    return B.parse_block(data), untagged, phase_err


def test_monte_carlo_blocks_fall_inside_the_certified_bounds_at_a_loose_epsilon():
    """Monte Carlo (numpy, 300 blocks of 1e9 windows at 100 km) at eps_sec = 0.65 (each count event at 0.05):
    the certified untagged-bit lower bound fails in at most the stated 5 x 0.05 of the blocks, the phase-error
    upper bound in at most 6 x 0.05 + 0.05^2 (union of the events it rests on); with 3-sigma slack."""
    rng = np.random.default_rng(20261202)
    link = _link(100.0)
    trials, bad_n1, bad_ph = 300, 0, 0
    for _ in range(trials):
        blk, untagged, phase_err = _simulate_block(rng, link, PARAMS, 1e9, 0.65)
        res = AN.key_length(blk, "exact")
        eps_c = res.ledger.failure_probability("count_estimation")
        assert eps_c == pytest.approx(0.05, rel=1e-6)
        bad_n1 += untagged < res.estimates["untagged_bits_lower"]
        bad_ph += phase_err > res.estimates["phase_errors_upper"]
    for bad, p in ((bad_n1, 5 * 0.05), (bad_ph, 6 * 0.05 + 0.05 ** 2)):
        assert bad <= trials * p + 3 * math.sqrt(trials * p * (1 - p)), (bad_n1, bad_ph)
    # and the bounds are not vacuous: the untagged bound is within 10% of the truth on average
    assert res.estimates["untagged_bits_lower"] > 0.8 * untagged


def test_example_block_has_a_key_and_its_float_twin_agrees():
    """The example block (rounded expected counts of the coastal link's design) has a certified key; the
    design's float formula at the same counts agrees to 0.1% (same code, floats vs arb)."""
    blk = B.parse_block(BLOCK)
    res = AN.key_length(blk)
    assert res.secret_key_length > 0 and res.status.key
    counts = {k: BLOCK[k] for k in B.COUNT_FIELDS}
    counts["effective_events"] = BLOCK["effective_events"]
    fl = AN.float_key_length(AN.flat_parameters(blk.parameters), blk.acceptance_width_rad, counts,
                             BLOCK["ec_leak_bits"], blk.eps_sec, blk.eps_cor, "exact")
    assert float(fl) == pytest.approx(res.secret_key_length, rel=1e-3)


def test_worse_x1_errors_never_give_a_longer_key():
    """Monotonicity of the certified length in the X1 errors (more observed errors, never more key)."""
    prev = None
    for extra in (0, 50, 500, 5000):
        res = AN.key_length(B.parse_block({**BLOCK, "x1_errors": BLOCK["x1_errors"] + extra}))
        if prev is not None:
            assert res.secret_key_length <= prev
        prev = res.secret_key_length


def test_finite_rate_tends_to_the_asymptotic_rate():
    """Finite to asymptotic: the design rate over the asymptotic rate grows with the block and is above 0.9 at
    1e17 windows (0.95 measured; the rest: three decoys instead of infinitely many, and p_Z < 1)."""
    sc = S.default_scenario().at_distance(200.0)
    asym = S.optimal_asymptotic_rate(sc.link, sc.ec_efficiency)[0]
    ratios = [DS.design(sc.with_windows(n)).secret_key_rate_per_signal / asym for n in (1e10, 1e12, 1e14, 1e17)]
    assert all(a < b for a, b in zip(ratios, ratios[1:])), ratios
    assert 0.9 < ratios[-1] <= 1.0, ratios


def test_design_with_a_big_block_beats_the_repeaterless_bound_at_long_distance():
    """Certified design rate at 450 km with 1e14 windows above -log2(1 - eta) of the whole fibre (Pirandola et
    al. 2017), and below the one-middle-node bound of the worse arm (Pirandola 2019)."""
    sc = S.default_scenario().at_distance(450.0).with_windows(1e14)
    d = DS.design(sc)
    assert d.status.key
    assert d.secret_key_rate_per_signal > S.repeaterless_bound_total(sc.link)
    assert d.secret_key_rate_per_signal < S.relay_bound(sc.link)


_BAD = [
    ({"x1_errors": BLOCK["x1_detections"] + 1}, "x1_errors"),
    ({"decoy_intensities": [0.3, 0.1]}, "decoy_intensities[1]"),
    ({"decoy_intensities": [0.1]}, "decoy_intensities"),
    ({"decoy_probabilities": [0.5, 0.3, 0.3]}, "decoy_probabilities"),
    ({"effective_events": 10}, "effective_events"),
    ({"closed_by": "quota"}, "closed_by"),
    ({"ec_leak_bits": BLOCK["key_detections"] + 1}, "ec_leak_bits"),
    ({"weak_one_sided": -1}, "weak_one_sided"),
    ({"acceptance_width_rad": 4.0}, "acceptance_width_rad"),
    ({"sending_probability": 1.0}, "sending_probability"),
    ({"intensities": [0.5, 0.1]}, "intensities"),
]


@pytest.mark.parametrize("change,field", _BAD)
def test_bad_block_input_names_the_field(change, field):
    with pytest.raises(InputError) as e:
        B.parse_block({**BLOCK, **change})
    assert e.value.field == field


def test_missing_block_field_names_it():
    data = dict(BLOCK)
    del data["x1_errors"]
    with pytest.raises(InputError) as e:
        B.parse_block(data)
    assert e.value.field == "x1_errors"


@pytest.mark.parametrize("section,key,value,field", [
    ("link", "alice_fraction", 1.5, "link.alice_fraction"),
    ("phase", "drift_std_rad", -0.1, "phase.drift_std_rad"),
    ("phase", "acceptance_width_rad", 0.0, "phase.acceptance_width_rad"),
    ("protocol", "decoy_intensities", [0.2, 0.2], "protocol.decoy_intensities[1]"),
    ("block", "pulses", 1e12, "block.pulses"),
    ("detector", "misalignment_error", 0.5, "detector.misalignment_error"),
])
def test_bad_scenario_input_names_the_field(section, key, value, field):
    d = S.default_scenario().as_dict()
    d[section][key] = value
    with pytest.raises(InputError) as e:
        S.parse_scenario(d)
    assert e.value.field == field


def test_cli_bad_block_is_one_line_and_exit_2(tmp_path):
    """Bad input through the command line: exit status 2, one line naming the field, no traceback."""
    p = tmp_path / "bad.json"
    p.write_text(json.dumps({**BLOCK, "x1_errors": BLOCK["x1_detections"] + 1}))
    r = subprocess.run([sys.executable, "-m", "finitekey.cli", "keylength", str(p)], capture_output=True,
                       text=True, cwd=ROOT)
    assert r.returncode == 2
    assert "x1_errors" in r.stderr and "Traceback" not in r.stderr
    assert len([ln for ln in r.stderr.splitlines() if ln.strip()]) == 1


def test_cli_scenario_without_phase_section_is_refused(tmp_path):
    text = (ROOT / "examples" / "coastal_relay_tf.toml").read_text()
    cut = text.split("[phase]")[0] + "[source]" + text.split("[source]")[1]
    p = tmp_path / "nophase.toml"
    p.write_text(cut)
    r = subprocess.run([sys.executable, "-m", "finitekey.cli", "design", str(p)], capture_output=True, text=True,
                       cwd=ROOT)
    assert r.returncode == 2 and "phase" in r.stderr and "Traceback" not in r.stderr
