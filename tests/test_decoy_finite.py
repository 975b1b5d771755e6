"""Finite-key decoy-state BB84 (three intensities): the 2014 reference term by term, exact vs reference,
monotonicity, validation."""

import math

import mpmath
import pytest

from finitekey.channel import Detector, Link, LinkModel
from finitekey.errors import InputError
from finitekey.protocols import decoy_bb84 as D
from finitekey.protocols import get


def _block(L=50.0, N=1e10, mu=(0.5, 0.1, 2e-4), p=(0.7, 0.2, 0.1), q=0.9, eps_sec=1e-10, eps_cor=1e-15, f=1.16):
    m = LinkModel(Link(L, 0.2), Detector(0.1, 6e-7, 0.0, 0.005))
    c = m.expected_counts(N, mu, p, q)
    kd = [int(round(x)) for x in c.key_detections]
    ke = [int(round(x)) for x in c.key_errors]
    nX = sum(kd)
    qber = sum(ke) / nX
    leak = int(math.ceil(f * nX * (-(qber * math.log2(qber) + (1 - qber) * math.log2(1 - qber)))))
    leak = min(leak, nX)  # a block cannot disclose more than its key bits (parse_block enforces it)
    return D.parse_block({
        "protocol": "decoy-bb84", "intensities": list(mu), "intensity_probabilities": list(p),
        "key_basis": {"detections": kd, "errors": ke},
        "test_basis": {"detections": [int(round(x)) for x in c.test_detections],
                       "errors": [int(round(x)) for x in c.test_errors]},
        "ec_leak_bits": leak, "eps_sec": eps_sec, "eps_cor": eps_cor})


def _lim2014_reference(b):
    """Independent recomputation of Lim, Curty, Walenta, Xu, Zbinden, PRA 89, 022307 (2014), formulas from
    memory, with mpmath at 40 digits."""
    mp = mpmath.mp
    mp.dps = 40
    mu = [mpmath.mpf(x) for x in b.intensities]
    p = [mpmath.mpf(x) for x in b.intensity_probabilities]
    es = mpmath.mpf(b.eps_sec)
    tau0 = sum(p[k] * mpmath.exp(-mu[k]) for k in range(3))
    tau1 = sum(p[k] * mu[k] * mpmath.exp(-mu[k]) for k in range(3))

    def pm(counts):
        tot = sum(counts)
        d = mpmath.sqrt(tot / 2 * mpmath.log(21 / es))
        return ([mpmath.exp(mu[k]) / p[k] * (counts[k] - d) for k in range(3)],
                [mpmath.exp(mu[k]) / p[k] * (counts[k] + d) for k in range(3)])

    def s01(counts):
        lo, hi = pm(counts)
        s0 = max(tau0 * (mu[1] * lo[2] - mu[2] * hi[1]) / (mu[1] - mu[2]), 0)
        s1 = (tau1 * mu[0] * (lo[1] - hi[2] - (mu[1] ** 2 - mu[2] ** 2) / mu[0] ** 2 * (hi[0] - s0 / tau0))
              / (mu[0] * (mu[1] - mu[2]) - mu[1] ** 2 + mu[2] ** 2))
        return s0, s1

    s0x, s1x = s01(b.key_detections)
    _, s1z = s01(b.test_detections)
    lo, hi = pm(b.test_errors)
    v1z = tau1 * (hi[1] - lo[2]) / (mu[1] - mu[2])
    # the one departure from the 2014 formulas: v1 is clamped to the observed test errors (v1 <= m_Z holds for
    # the true counts, so the clamp keeps the bound valid)
    lam = min(v1z, sum(b.test_errors)) / s1z
    c, d = s1z, s1x
    gamma = mpmath.sqrt((c + d) * (1 - lam) * lam / (c * d * mpmath.log(2))
                        * mpmath.log((c + d) / (c * d * (1 - lam) * lam) * (21 / es) ** 2, 2))
    # gamma alone is not a valid bound (it tends to 0 with lam); the phase term is max(gamma, mu) with mu the
    # random-sampling (Serfling) deviation exp(-2 mu^2 n k^2 / ((n+k)(k+1))) = eps of Tomamichel, Lim, Gisin,
    # Renner, Nat. Commun. 3, 634 (2012), at n = ceil(s1), k = ceil(s1z) key/test bits
    n, k = mpmath.ceil(s1x), mpmath.ceil(s1z)
    # the bound guards the single-photon smoothing (eps_sec/21), so it fails with probability (eps_sec/21)^2,
    # the same probability that the 2014 gamma carries in its logarithm
    mu_rig = mpmath.sqrt((n + k) * (k + 1) * mpmath.log((21 / es) ** 2) / (2 * n * k ** 2))
    phi = lam + max(gamma, mu_rig)
    h = -phi * mpmath.log(phi, 2) - (1 - phi) * mpmath.log(1 - phi, 2)
    ell = (s0x + s1x - s1x * h - b.ec_leak_bits - 6 * mpmath.log(21 / es, 2) - mpmath.log(2 / mpmath.mpf(b.eps_cor), 2))
    return {"s0": s0x, "s1": s1x, "s1z": s1z, "v1": v1z, "phi": phi, "ell": ell, "gamma": gamma, "mu": mu_rig}


@pytest.mark.parametrize("L,N", [(20.0, 1e9), (50.0, 1e10), (80.0, 1e11), (100.0, 1e12)])
def test_hoeffding_reproduces_2014_formulas_term_by_term(L, N):
    b = _block(L, N)
    ref = _lim2014_reference(b)
    r = D.key_length(b, "hoeffding")
    e = r.estimates
    # certified values are rounded outwards, so they lie within a relative 1e-12 of the reference, on the safe side
    assert e["single_photon_key_detections_lower"] == pytest.approx(float(ref["s1"]), rel=1e-10)
    assert e["single_photon_key_detections_lower"] <= float(ref["s1"]) * (1 + 1e-15)
    assert e["single_photon_test_detections_lower"] == pytest.approx(float(ref["s1z"]), rel=1e-10)
    assert e["single_photon_test_errors_upper_before_clipping"] == pytest.approx(float(ref["v1"]), rel=1e-10)
    # the bound used is clamped to the observed test errors (v1 <= m_Z), which keeps it valid
    assert e["single_photon_test_errors_upper"] == pytest.approx(min(float(ref["v1"]), sum(b.test_errors)), rel=1e-10)
    assert e["sampling_term_2014_gamma"] == pytest.approx(float(ref["gamma"]), rel=1e-10)
    assert e["sampling_term_rigorous_mu"] == pytest.approx(float(ref["mu"]), rel=1e-10)
    assert e["sampling_term_rigorous_mu"] >= float(ref["mu"]) * (1 - 1e-15)
    assert e["phase_error_rate_upper"] == pytest.approx(float(ref["phi"]), rel=1e-10)
    assert e["phase_error_rate_upper"] >= float(ref["phi"]) * (1 - 1e-15)
    assert e["vacuum_key_detections_lower"] == pytest.approx(float(ref["s0"]), rel=1e-9, abs=1e-9)
    # the key length is the floor of the reference value (or one less from outward rounding)
    assert int(mpmath.floor(ref["ell"])) - 1 <= r.secret_key_length <= int(mpmath.floor(ref["ell"]))
    assert r.terms["chain_rule_penalty"] + r.terms["hash_penalty"] == pytest.approx(
        6 * math.log2(21 / b.eps_sec), rel=1e-12)
    assert r.terms["verification_tag"] == pytest.approx(math.log2(2 / b.eps_cor), rel=1e-12)


def test_reference_ledger_spends_eps_sec_over_21_per_event():
    r = D.key_length(_block(), "hoeffding")
    for t in r.ledger.terms:
        if t.role.value == "secrecy":
            assert t.epsilon == pytest.approx(1e-10 / 21, rel=1e-12)
    assert r.ledger.eps_sec <= 1e-10
    # the 2014 accounting spends all 21 units: 12 count intervals, 4 for the single-photon smoothing (doubled
    # by the chain rule, twice in trace distance), 2 + 2 for the chain rules, 1 for hashing
    assert r.ledger.eps_sec == pytest.approx(1e-10, rel=1e-12)
    units = {t.name: t.weight for t in r.ledger.terms if t.role.value == "secrecy"}
    assert units == {"count_estimation": 12, "single_photon_smoothing": 4, "chain_rule": 4,
                     "privacy_amplification": 1}
    assert r.ledger.eps_cor == pytest.approx(1e-15)
    d = r.to_dict()
    for key in ("protocol", "secret_key_length", "eps_total", "eps_sec", "eps_cor", "ledger", "statistics",
                "assumptions", "terms", "estimates", "formula", "references"):
        assert key in d


@pytest.mark.parametrize("L,N", [(10.0, 1e7), (30.0, 1e8), (50.0, 1e9), (80.0, 1e10), (100.0, 1e11),
                                 (120.0, 1e12)])
def test_default_at_least_reference(L, N):
    b = _block(L, N)
    exact = D.key_length(b).secret_key_length
    cher = D.key_length(b, "chernoff").secret_key_length
    ref = D.key_length(b, "hoeffding").secret_key_length
    assert exact >= ref
    assert cher >= ref


def test_exact_ledger_spends_at_most_eps_sec():
    r = D.key_length(_block())
    assert r.statistics == "exact"
    assert r.ledger.eps_sec <= 1e-10
    assert r.ledger.eps_sec == pytest.approx(1e-10, rel=1e-9)


def test_key_length_monotone_in_epsilons():
    lens = [D.key_length(_block(eps_sec=e)).secret_key_length for e in (1e-14, 1e-12, 1e-10, 1e-8, 1e-6)]
    assert lens == sorted(lens) and lens[0] < lens[-1]
    lens = [D.key_length(_block(eps_cor=e)).secret_key_length for e in (1e-20, 1e-15, 1e-10)]
    assert lens == sorted(lens) and lens[0] < lens[-1]


def test_key_length_monotone_in_block_and_distance():
    lens = [D.key_length(_block(N=N)).secret_key_length for N in (1e8, 1e9, 1e10, 1e11)]
    assert all(a < b for a, b in zip(lens, lens[1:]))
    lens = [D.key_length(_block(L=L)).secret_key_length for L in (10.0, 40.0, 70.0, 100.0)]
    assert all(a > b for a, b in zip(lens, lens[1:]))


def test_no_key_from_nothing():
    b = _block(L=300.0, N=1e8)
    assert D.key_length(b).secret_key_length == 0
    assert D.key_length(b, "hoeffding").secret_key_length == 0


def test_registry_and_protocol_object():
    proto = get("decoy-bb84")
    assert proto.default_statistics == "exact"
    b = proto.parse_block(_block().as_dict())
    assert proto.key_length(b).secret_key_length == D.key_length(_block()).secret_key_length
    with pytest.raises(InputError) as ei:
        proto.key_length(b, "gaussian")
    assert ei.value.field == "statistics"


# ---- bad input ------------------------------------------------------------------------------------------
def _bad(mod):
    d = _block().as_dict()
    mod(d)
    with pytest.raises(InputError) as ei:
        D.parse_block(d)
    return ei.value.field


def test_bad_blocks_name_the_field():
    assert _bad(lambda d: d.__setitem__("intensities", [0.1, 0.5, 0.0])) == "intensities[1]"
    assert _bad(lambda d: d.__setitem__("intensities", [0.5, 0.1, -0.01])) == "intensities[2]"
    assert _bad(lambda d: d.__setitem__("intensity_probabilities", [0.5, 0.2, 0.2])) == "intensity_probabilities"
    assert _bad(lambda d: d.__setitem__("intensity_probabilities", [0.7, 0.3])) == "intensity_probabilities"
    assert _bad(lambda d: d["key_basis"].__setitem__("errors", [10**9, 1, 1])) == "key_basis.errors[0]"
    assert _bad(lambda d: d["test_basis"].__setitem__("detections", [1, 2])) == "test_basis.detections"
    assert _bad(lambda d: d["test_basis"].__setitem__("detections", [1, -2, 3])) == "test_basis.detections[1]"
    assert _bad(lambda d: d.pop("test_basis")) == "test_basis"
    assert _bad(lambda d: d["key_basis"].pop("errors")) == "key_basis.errors"
    assert _bad(lambda d: d.__setitem__("eps_sec", 1.5)) == "eps_sec"
    assert _bad(lambda d: d.__setitem__("ec_leak_bits", -3)) == "ec_leak_bits"
    assert _bad(lambda d: d.__setitem__("colour", "blue")) == "colour"
    assert _bad(lambda d: d.__setitem__("protocol", "bb84")) == "protocol"


def test_block_label_is_carried():
    # A post-processing stack tags each block; the label must be accepted and kept, and must be text.
    import json
    from pathlib import Path

    from finitekey import protocols
    from finitekey.errors import InputError

    proto = protocols.get("decoy-bb84")
    data = json.loads((Path(__file__).parent.parent / "examples" / "blocks" / "decoy_block.json").read_text())
    assert proto.parse_block(data).label == data["label"]
    # the same rule as BB84 blocks: an integer label is kept as its text, anything else that is not text is refused
    assert proto.parse_block({**data, "label": 7}).label == "7"
    with pytest.raises(InputError, match="label"):
        proto.parse_block({**data, "label": [7]})


def test_leakage_above_the_key_basis_detections_is_rejected():
    # Reconciliation cannot disclose more bits than the sifted key has (same rule as for BB84 blocks).
    import json
    from pathlib import Path

    from finitekey import protocols
    from finitekey.errors import InputError

    proto = protocols.get("decoy-bb84")
    data = json.loads((Path(__file__).parent.parent / "examples" / "blocks" / "decoy_block.json").read_text())
    n_key = sum(data["key_basis"]["detections"])
    assert proto.parse_block({**data, "ec_leak_bits": n_key}).ec_leak_bits == n_key
    with pytest.raises(InputError, match="ec_leak_bits"):
        proto.parse_block({**data, "ec_leak_bits": n_key + 1})
