"""Monte Carlo coverage of the decoy-state estimates (seeded numpy Generator).

Blocks are simulated at the photon-number level: pulses per intensity and basis pair (multinomial), photon
numbers (Poisson), clicks with the n-photon yield and errors with the n-photon error yield of the link model
(Ma, Qi, Zhao, Lo, PRA 72, 012326 (2005) model), single-photon phase errors of the key basis with the
single-photon error rate (symmetric channel).  Each analysis bound must hold for the *actual* photon-number
counts of the simulated block except with its failure probability; eps_sec is set large (1e-2) so that a
bound that were too tight would show up as excess failures.
"""

import math

import numpy as np
import pytest
from scipy import stats

from finitekey.channel import Detector, Link, LinkModel
from finitekey.protocols import decoy_bb84 as D

MODEL = LinkModel(Link(30.0, 0.2), Detector(0.1, 6e-7, 0.0, 0.01))
N_MAX = 12


def _simulate(rng, N, mu, p, q):
    mu, p = np.asarray(mu), np.asarray(p)
    pairs = rng.multinomial(N, np.concatenate([p * q * q, p * (1 - q) ** 2, [1 - q * q - (1 - q) ** 2]]))
    K = len(mu)
    n = np.arange(N_MAX + 1)
    y = MODEL.photon_yield(n)
    ey = MODEL.photon_error_yield(n) / y
    out = {}
    for b, off in (("key", 0), ("test", K)):
        det, err, s = np.zeros(K, int), np.zeros(K, int), np.zeros(N_MAX + 1, int)
        v = np.zeros(N_MAX + 1, int)
        for k in range(K):
            w = stats.poisson.pmf(n, mu[k])
            w[-1] += 1 - w.sum()
            pulses = rng.multinomial(pairs[off + k], w)
            clicks = rng.binomial(pulses, y)
            errors = rng.binomial(clicks, ey)
            det[k], err[k] = clicks.sum(), errors.sum()
            s += clicks
            v += errors
        out[b] = (det, err, s, v)
    e1 = float(MODEL.photon_error_yield(1) / MODEL.photon_yield(1))
    phase_errors = rng.binomial(out["key"][2][1], e1)
    return out, phase_errors


@pytest.mark.parametrize("method", ["exact", "hoeffding"])
def test_bounds_cover_actual_counts(method):
    rng = np.random.default_rng(2024)
    mu, p, q, N = (0.5, 0.1, 2e-4), (0.6, 0.3, 0.1), 0.7, 2e7
    trials, failures = 150, 0
    for _ in range(trials):
        sim, ph = _simulate(rng, N, mu, p, q)
        kd, ke, ks, _ = sim["key"]
        td, te, ts, tv = sim["test"]
        blk = D.parse_block({"intensities": list(mu), "intensity_probabilities": list(p),
                             "key_basis": {"detections": kd.tolist(), "errors": ke.tolist()},
                             "test_basis": {"detections": td.tolist(), "errors": te.tolist()},
                             "ec_leak_bits": 0, "eps_sec": 1e-2, "eps_cor": 1e-12})
        e = D.key_length(blk, method).estimates
        ok = (e["vacuum_key_detections_lower"] <= ks[0] and e["single_photon_key_detections_lower"] <= ks[1]
              and e["single_photon_test_detections_lower"] <= ts[1]
              and e["single_photon_test_errors_upper"] >= tv[1] and e["phase_error_rate_upper"] >= ph / ks[1])
        failures += not ok
    # total failure probability of the estimation events is below eps_sec = 1e-2 per block, so the number
    # of failing blocks exceeds `limit` with probability < 1e-4 (binomial tail, scipy.stats)
    limit = next(k for k in range(trials) if stats.binom.sf(k, trials, 1e-2) < 1e-4)
    assert failures <= limit


def test_simulation_matches_expected_counts():
    # the simulator itself agrees with the model's expected counts (sanity of the reference)
    rng = np.random.default_rng(99)
    mu, p, q, N = (0.5, 0.1, 2e-4), (0.6, 0.3, 0.1), 0.7, 2e7
    sim, _ = _simulate(rng, N, mu, p, q)
    c = MODEL.expected_counts(N, mu, p, q)
    for got, want in zip(sim["key"][0], c.key_detections):
        assert abs(got - want) < 6 * math.sqrt(want) + 1
