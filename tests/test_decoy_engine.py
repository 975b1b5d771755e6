"""The protocol-independent decoy engine (finitekey.decoy): LP against the closed forms (one and two
senders), validity and convergence at exact model expectations, a Monte Carlo of two-sender blocks, the
tag matrix and truncation caps against brute force, and bad input."""

import itertools
import math

import numpy as np
import pytest
from flint import arb
from scipy import stats

from finitekey import decoy as D
from finitekey.decoy import lp as LP
from finitekey.decoy import tagging as TG
from finitekey.errors import InputError


# ---------------------------------------------------------------------------------------------------------
# an independent model: yields Y_n per photon-number tag, expected counts by direct Poisson sums
# ---------------------------------------------------------------------------------------------------------
def _expected(senders, Y, N, n_cut=40):
    """Expected detections per setting and per tag: N sum_n prod_s p_s e^{-mu} mu^n/n! Y(n) (direct sums,
    Poisson weights from scipy.stats.poisson)."""
    tags_ = list(itertools.product(range(n_cut), repeat=len(senders)))
    y = np.array([Y(n) for n in tags_])
    pmf = [stats.poisson.pmf(np.arange(n_cut)[None, :], np.array(s.intensities)[:, None])
           * np.array(s.probabilities)[:, None] for s in senders]
    E, s_true = {}, {}
    for k in D.settings(senders):
        w = np.array([N * math.prod(pmf[i][k[i], n[i]] for i in range(len(senders))) for n in tags_]) * y
        E[k] = float(w.sum())
        for n, c in zip(tags_, w):
            s_true[n] = s_true.get(n, 0.0) + float(c)
    return E, s_true


def _mdi_yield(eta=0.05, dark=1e-6):
    # both photons must arrive (a coincidence-type relay), plus a background; common practice, no source
    return lambda n: (1 - (1 - eta) ** n[0]) * (1 - (1 - eta) ** n[1]) + dark


def _bb84_yield(eta=0.05, dark=1e-5):
    return lambda n: 1 - (1 - dark) * (1 - eta) ** n[0]


A3 = D.Sender((0.0, 0.1, 0.4), (0.2, 0.3, 0.5))
B3 = D.Sender((0.0, 0.08, 0.5), (0.25, 0.25, 0.5))


def _widen(E, rel):
    keys = list(E)
    return [E[k] * (1 - rel) for k in keys], [E[k] * (1 + rel) for k in keys]


# ---------------------------------------------------------------------------------------------------------
# one sender: the engine's LP is today's decoy LP; LP vs the closed forms
# ---------------------------------------------------------------------------------------------------------
def test_one_sender_lp_reproduces_the_former_decoy_bb84_lp():
    # The engine replaced protocols/_decoy_lp.py (same matrix, caps, solver and certificate).  Reference: the
    # balls that module returned for these inputs, recorded (exact floats, radius 0) from a run of both side
    # by side before its removal (2026-12-02).
    s = D.Sender((0.5, 0.1, 2e-4), (0.7, 0.2, 0.1))
    lo, hi = [arb(990000), arb(29700), arb(495)], [arb(1010000), arb(30300), arb(505)]
    former = {(0, "lower"): 3263.2887099817176, (1, "lower"): 187871.43750948735, (1, "upper"): 375113.70843991236}
    for (t, sense), value in former.items():
        new = D.bound(s, lo, hi, (t,), sense, total=1030000, method="lp")
        assert new.rad() == 0 and float(new.mid()) == value


@pytest.mark.parametrize("rel", [1e-6, 1e-3, 2e-2])
def test_one_sender_lp_at_least_as_tight_as_lim_2014(rel):
    # Closed forms of Lim et al., PRA 89, 022307 (2014), Eqs. (2)-(4): the LP over the same intervals is a
    # relaxation of nothing they use, so it is at least as tight (up to the certificate's widening, <= 1e-6
    # relative) for s0, s1 (lower) and the single-photon upper bound.
    s = D.Sender((0.5, 0.1, 2e-4), (0.7, 0.2, 0.1))
    E, truth = _expected([s], _bb84_yield(), 1e9)
    lo, hi = _widen(E, rel)
    for tgt, sense in [((0,), "lower"), ((1,), "lower"), ((1,), "upper")]:
        assert D.closed_form_name(s, tgt, sense) == "three-intensity"
        cf = D.bound(s, lo, hi, tgt, sense)
        lp = D.bound(s, lo, hi, tgt, sense, method="lp")
        c, v = float(cf.mid()), float(lp.mid())
        if sense == "lower":
            assert v >= c - 1e-6 * abs(c) and v <= truth[tgt] * (1 + 1e-9)
        else:
            assert v <= c + 1e-6 * abs(c) and v >= truth[tgt] * (1 - 1e-9)


def test_one_sender_upper_closed_form_is_optimal_when_only_its_intervals_inform():
    # v1 <= tau1 (e^{mu2} hi2/p2 - e^{mu3} lo3/p3)/(mu2 - mu3) (Lim 2014, Eq. (4)) with mu3 = 0 is attained by
    # s_0 = tau0 e^{0} lo3/p3, s_1 at the top of intensity 2, nothing else, when intensity 1 is uninformative:
    # the LP must then equal it (up to the certificate's widening).
    s = D.Sender((0.5, 0.1, 0.0), (0.7, 0.2, 0.1))
    E, _ = _expected([s], _bb84_yield(), 1e8)
    lo, hi = _widen(E, 1e-3)
    lo[0], hi[0] = 0.0, 2 * E[(0,)]
    cf = float(D.bound(s, lo, hi, (1,), "upper", method="closed").mid())
    lp = float(D.bound(s, lo, hi, (1,), "upper", method="lp").mid())
    assert lp == pytest.approx(cf, rel=1e-6)


def test_two_intensity_closed_forms_and_lp():
    # Rusca et al., APL 112, 171104 (2018) (formulas from memory): s1 lower needs an upper bound on s0
    s = D.Sender((0.5, 0.1), (0.8, 0.2))
    E, truth = _expected([s], _bb84_yield(), 1e9)
    lo, hi = _widen(E, 1e-3)
    s0u = truth[(0,)] * 1.01
    assert D.closed_form_name(s, (1,), "lower") is None
    assert D.closed_form_name(s, (1,), "lower", known={(0,): (None, s0u)}) == "two-intensity"
    cf = float(D.bound(s, lo, hi, (1,), "lower", known={(0,): (None, s0u)}).mid())
    lp = float(D.bound(s, lo, hi, (1,), "lower", known={(0,): (None, s0u)}, method="lp").mid())
    assert cf <= truth[(1,)] and lp >= cf * (1 - 1e-6) and lp <= truth[(1,)] * (1 + 1e-9)
    up_cf = float(D.bound(s, lo, hi, (1,), "upper").mid())
    up_lp = float(D.bound(s, lo, hi, (1,), "upper", method="lp").mid())
    assert up_cf >= truth[(1,)] and up_lp <= up_cf * (1 + 1e-6) and up_lp >= truth[(1,)] * (1 - 1e-9)


# ---------------------------------------------------------------------------------------------------------
# two senders
# ---------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("senders", [(A3, A3), (A3, B3)])
@pytest.mark.parametrize("rel", [1e-6, 1e-3])
def test_two_sender_lp_at_least_as_tight_as_the_closed_form(senders, rel):
    # closed form: vacuum + two decoys per sender (derived in proofs_notes/decoy/closed_forms.md; same
    # construction as Xu, Curty, Qi, Qian, Lo, NJP 15, 113007 (2013), not checked against its text); truth
    # from direct Poisson sums of an independent yield model
    E, truth = _expected(list(senders), _mdi_yield(), 1e12, n_cut=25)
    lo, hi = _widen(E, rel)
    assert D.closed_form_name(senders, (1, 1), "lower") == "two-sender-vacuum-two-decoy"
    cl = float(D.bound(senders, lo, hi, (1, 1), "lower").mid())
    ll = float(D.bound(senders, lo, hi, (1, 1), "lower", method="lp").mid())
    cu = float(D.bound(senders, lo, hi, (1, 1), "upper").mid())
    lu = float(D.bound(senders, lo, hi, (1, 1), "upper", method="lp").mid())
    t = truth[(1, 1)]
    assert cl <= ll * (1 + 1e-6) and ll <= t * (1 + 1e-9)
    assert cu >= lu * (1 - 1e-6) and lu >= t * (1 - 1e-9)
    assert cl > 0.5 * t   # not vacuous


def test_two_sender_upper_closed_form_is_optimal_when_only_its_intervals_inform():
    # the upper bound uses (0,0), (0,nu), (nu,0), (nu,nu) only; with the other settings uninformative it is
    # attained (all excess on the (1,1) tag), so the LP equals it
    E, _ = _expected([A3, A3], _mdi_yield(), 1e12, n_cut=25)
    lo, hi = _widen(E, 1e-4)
    keys = D.settings([A3, A3])
    for i, k in enumerate(keys):
        if 2 in k:
            lo[i], hi[i] = 0.0, 2 * E[k]
    cu = float(D.bound([A3, A3], lo, hi, (1, 1), "upper", method="closed").mid())
    lu = float(D.bound([A3, A3], lo, hi, (1, 1), "upper", method="lp").mid())
    assert lu == pytest.approx(cu, rel=1e-6)


def test_two_sender_closed_form_float_twin_agrees_with_certified():
    E, _ = _expected([A3, B3], _mdi_yield(), 1e12, n_cut=25)
    lo, hi = _widen(E, 1e-3)
    c = float(D.bound([A3, B3], lo, hi, (1, 1), "lower").mid())
    f = D.bound_float([A3, B3], np.array(lo), np.array(hi), (1, 1), "lower")
    assert f == pytest.approx(c, rel=1e-12)
    # vectorised: a batch of two columns
    both = D.bound_float([A3, B3], np.stack([lo, lo], 1), np.stack([hi, hi], 1), (1, 1), "lower")
    assert both.shape == (2,) and both[0] == pytest.approx(c, rel=1e-12)
    lpf = D.bound_float([A3, B3], np.array(lo), np.array(hi), (1, 1), "lower", method="lp")
    lpc = float(D.bound([A3, B3], lo, hi, (1, 1), "lower", method="lp").mid())
    assert lpf == pytest.approx(lpc, rel=1e-6)


def test_wildcard_targets_contain_the_truth():
    E, truth = _expected([A3, B3], _mdi_yield(), 1e12, n_cut=25)
    lo, hi = _widen(E, 1e-6)
    # the one-photon state of a sending-or-not-sending window is the pair (1,0) + (0,1): a union target
    for tgt in [(0, "*"), ("*", 0), [(0, "*"), ("*", 0)], (1, 0), (2, 1), [(1, 0), (0, 1)]]:
        pats = tgt if isinstance(tgt, list) else [tgt]
        t = sum(v for n, v in truth.items() if any(all(e == "*" or e == m for e, m in zip(p, n)) for p in pats))
        lo_b = float(D.bound([A3, B3], lo, hi, tgt, "lower").mid())
        up_b = float(D.bound([A3, B3], lo, hi, tgt, "upper").mid())
        assert lo_b <= t * (1 + 1e-9) and up_b >= t * (1 - 1e-9)


def test_joint_rows_enter_and_are_valid():
    # a joint row sum_k c_k E_k in an interval around its true value (Zhou, Yu, Wang, PRA 93, 042324 (2016)
    # use such combinations): the bounds stay valid and cannot get looser
    E, truth = _expected([A3, A3], _mdi_yield(), 1e12, n_cut=25)
    lo, hi = _widen(E, 1e-2)
    keys = D.settings([A3, A3])
    c = {(1, 1): 1.0, (0, 1): -1.0, (1, 0): -1.0, (0, 0): 1.0}
    val = sum(cv * E[k] for k, cv in c.items())
    row = D.JointRow(c, val - 1e-4 * abs(val), val + 1e-4 * abs(val))
    plain = float(D.bound([A3, A3], lo, hi, (1, 1), "lower").mid())
    plain_lp = float(D.bound([A3, A3], lo, hi, (1, 1), "lower", method="lp").mid())
    joint = float(D.bound([A3, A3], lo, hi, (1, 1), "lower", joint=[row]).mid())
    assert joint >= plain_lp * (1 - 1e-9) and joint >= plain and joint <= truth[(1, 1)]
    assert joint > plain_lp * 1.001   # the joint row carries information the separate intervals lack
    assert len(keys) == 9


# ---------------------------------------------------------------------------------------------------------
# exact expectations: validity and convergence with many decoys
# ---------------------------------------------------------------------------------------------------------
def test_one_sender_bounds_converge_with_many_decoys():
    # with exact expected counts (no statistics) the bounds contain the true s1 and close in on it as the
    # number of decoys grows (Ma, Qi, Zhao, Lo, PRA 72, 012326 (2005): infinitely many decoys pin Y_1 down)
    gaps = []
    for mus in [(0.5, 0.1, 0.0), (0.5, 0.25, 0.1, 0.0), (0.5, 0.3, 0.2, 0.1, 0.05, 0.02, 0.0)]:
        s = D.Sender(mus, tuple([1 / len(mus)] * len(mus)))
        E, truth = _expected([s], _bb84_yield(), 1e9)
        lo, hi = _widen(E, 1e-12)
        a = float(D.bound(s, lo, hi, (1,), "lower", method="lp").mid())
        b = float(D.bound(s, lo, hi, (1,), "upper", method="lp").mid())
        assert a <= truth[(1,)] <= b
        gaps.append((b - a) / truth[(1,)])
    assert gaps[0] > gaps[1] > gaps[2] and gaps[2] < 2e-3


def test_two_sender_bounds_converge_with_more_decoys():
    gaps = []
    for mus in [(0.0, 0.1, 0.4), (0.0, 0.05, 0.1, 0.2, 0.4)]:
        s = D.Sender(mus, tuple([1 / len(mus)] * len(mus)))
        E, truth = _expected([s, s], _mdi_yield(), 1e12, n_cut=25)
        lo, hi = _widen(E, 1e-12)
        a = float(D.bound([s, s], lo, hi, (1, 1), "lower", method="lp").mid())
        b = float(D.bound([s, s], lo, hi, (1, 1), "upper", method="lp").mid())
        assert a <= truth[(1, 1)] <= b
        gaps.append((b - a) / truth[(1, 1)])
    assert gaps[1] < 0.5 * gaps[0]


# ---------------------------------------------------------------------------------------------------------
# Monte Carlo: two-sender blocks
# ---------------------------------------------------------------------------------------------------------
def _mc_cells(senders, Y, n_cut=8):
    """Cells (setting, tag) with their probabilities and yields; tags above n_cut are left out (their
    probability, below 1e-9 here, is put on the last cell so that the probabilities sum to 1)."""
    keys = D.settings(senders)
    tags_ = list(itertools.product(range(n_cut + 1), repeat=2))
    probs, cells = [], []
    for k in keys:
        for n in tags_:
            w = 1.0
            for s, ks, ns in zip(senders, k, n):
                w *= s.probabilities[ks] * stats.poisson.pmf(ns, s.intensities[ks])
            probs.append(w)
            cells.append((k, n))
    probs = np.array(probs)
    probs[-1] += 1.0 - probs.sum()
    return keys, cells, probs, np.array([Y(n) for _, n in cells])


def _mc_block(rng, keys, cells, probs, yields, N):
    """One block: multinomial pulses per (setting, tag), binomial detections."""
    pulses = rng.multinomial(int(N), probs)
    det = rng.binomial(pulses, yields)
    counts = {k: 0 for k in keys}
    s11 = 0
    for (k, n), d in zip(cells, det):
        counts[k] += int(d)
        if n == (1, 1):
            s11 += int(d)
    return counts, s11


def test_montecarlo_two_sender_blocks_contain_the_realised_s11():
    # Blocks drawn from a two-sender model (numpy generator passed in).  Intervals on the expected counts
    # given the tags: multiplicative Chernoff limits of each setting count (finitekey.bounds.chernoff, valid
    # for independent non-identical Bernoulli trials), 18 one-sided intervals at eps = 5e-3: the certified
    # bounds on the realised s11 fail in at most 9% of blocks.  A yield that is zero for multi-photon tags
    # keeps the upper bound within a few standard deviations of the truth, so a wrong bound would show.
    # Check: misses <= the 99.9% quantile of Binomial(blocks, 0.09) (scipy.stats).
    from finitekey.bounds.chernoff import expectation_lower, expectation_upper
    rng = np.random.default_rng(20261202)
    Y = lambda n: 0.03 if n == (1, 1) else (2e-4 if sum(n) <= 1 else 0.0)
    eps, blocks, misses_lo, misses_hi = 5e-3, 40, 0, 0
    cells = _mc_cells([A3, A3], Y)
    for _ in range(blocks):
        counts, s11 = _mc_block(rng, *cells, 2e8)
        c = np.array(list(counts.values()), dtype=float)
        lo, hi = list(expectation_lower(c, eps)), list(expectation_upper(c, eps))
        n = int(c.sum())
        L = float(D.bound([A3, A3], lo, hi, (1, 1), "lower", total=n, method="lp", n_max=10).mid())
        U = float(D.bound([A3, A3], lo, hi, (1, 1), "upper", total=n, method="lp", n_max=10).mid())
        misses_lo += L > s11
        misses_hi += U < s11
        assert L > 0.5 * s11 and U < s11 + 15 * math.sqrt(s11)   # informative
    q = stats.binom.ppf(0.999, blocks, 18 * eps)
    assert misses_lo <= q and misses_hi <= q


# ---------------------------------------------------------------------------------------------------------
# the tag matrix and the truncation caps
# ---------------------------------------------------------------------------------------------------------
def test_two_sender_tag_matrix_against_mpmath():
    # p_{k|n} = prod_s p_{s,k_s} e^{-mu} mu^n / sum_j ...: mpmath at 40 digits, within the certificate's slack
    import mpmath
    senders = [D.Sender((0.0, 0.02, 0.6), (0.3, 0.3, 0.4)), D.Sender((1.5, 0.3, 0.0), (0.5, 0.3, 0.2))]
    M = 12
    P = D.tags(senders, M)
    keys = D.settings(senders)
    worst = 0.0
    with mpmath.workdps(40):
        def cond(s, k, n):
            w = [mpmath.mpf(p) * mpmath.exp(-mpmath.mpf(m)) * (mpmath.mpf(m) ** n if m > 0 else int(n == 0))
                 for m, p in zip(s.intensities, s.probabilities)]
            return w[k] / sum(w)
        for j, n in enumerate(itertools.product(range(M + 1), repeat=2)):
            for i, k in enumerate(keys):
                ref = cond(senders[0], k[0], n[0]) * cond(senders[1], k[1], n[1])
                worst = max(worst, abs(float(ref) - P[i, j]))
    assert worst <= LP.MATRIX_SLACK / 1000
    np.testing.assert_allclose(P.sum(axis=0), 1.0, rtol=1e-13)


def test_region_caps_bound_the_tail_by_brute_force():
    # sup over tags outside the box, region by region, brute force over a long range (scipy.stats.poisson)
    senders = [D.Sender((0.0, 0.1, 0.6), (0.3, 0.3, 0.4)), D.Sender((0.05, 0.8), (0.5, 0.5))]
    M = 6
    caps = TG.region_caps(senders, M)
    keys = D.settings(senders)

    def cond(s, n):
        mu, p = np.array(s.intensities), np.array(s.probabilities)
        w = p[:, None] * stats.poisson.pmf(n[None, :], mu[:, None])
        with np.errstate(invalid="ignore"):
            return np.nan_to_num(w / w.sum(axis=0, keepdims=True))
    big = np.arange(0, 600)
    c0, c1 = cond(senders[0], big), cond(senders[1], big)
    for i, k in enumerate(keys):
        # region 0: n_0 > M, n_1 anything; region 1: n_0 <= M, n_1 > M
        r0 = c0[k[0], M + 1:].max() * c1[k[1], :].max()
        r1 = c0[k[0], :M + 1].max() * c1[k[1], M + 1:].max()
        assert r0 <= caps[0, i] and r1 <= caps[1, i]
    # one sender: the caps are those of the single-sender tail (the strongest intensity gets 1)
    one = TG.region_caps([senders[1]], M)
    assert one[0, 1] == 1.0 and one[0, 0] < 1.0


def test_truncation_is_rigorous_when_mass_sits_in_the_tail():
    # a model whose detections come mostly from tags outside a tiny box: the bounds must still hold
    E, truth = _expected([A3, A3], lambda n: 1.0 if max(n) >= 3 else 1e-4, 1e9, n_cut=30)
    lo, hi = _widen(E, 1e-9)
    for tgt in [(1, 1), (0, "*")]:
        t = sum(v for n, v in truth.items() if all(e == "*" or e == m for e, m in zip(tgt, n)))
        a = float(D.bound([A3, A3], lo, hi, tgt, "lower", method="lp", n_max=2).mid())
        b = float(D.bound([A3, A3], lo, hi, tgt, "upper", method="lp", n_max=2).mid())
        assert a <= t * (1 + 1e-9) and b >= t * (1 - 1e-9)


# ---------------------------------------------------------------------------------------------------------
# bad input: one InputError naming the field
# ---------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("call,field", [
    (lambda: D.Sender((0.5, -0.1), (0.5, 0.5)), "senders.intensities"),
    (lambda: D.Sender((0.5, 0.1), (0.5,)), "senders.probabilities"),
    (lambda: D.Sender((0.5, 0.5), (0.5, 0.5)), "senders.intensities"),
    (lambda: D.Sender((0.5, 0.1), (0.7, 0.5)), "senders.probabilities"),
    (lambda: D.bound([A3, A3], [1.0] * 8, [2.0] * 9, (1, 1), "lower"), "lo"),
    (lambda: D.bound([A3, A3], {k: 1.0 for k in D.settings([A3, A3])[:-1]}, [2.0] * 9, (1, 1), "lower"),
     "lo[(2, 2)]"),
    (lambda: D.bound([A3], [3.0, 1.0, 1.0], [2.0, 2.0, 2.0], (1,), "lower"), "lo[(0,)]"),
    (lambda: D.bound([A3], [-3.0, -3.0, -3.0], [2.0, 2.0, -1.0], (1,), "lower"), "hi[(2,)]"),
    (lambda: D.bound([A3], [1.0] * 3, [2.0] * 3, (1, 1), "lower"), "target"),
    (lambda: D.bound([A3], [1.0] * 3, [2.0] * 3, (1,), "below"), "sense"),
    (lambda: D.bound([A3], [1.0] * 3, [2.0] * 3, (1,), "lower", method="simplex"), "method"),
    (lambda: D.bound([A3, B3], [1.0] * 9, [2.0] * 9, (0, "*"), "lower", method="closed"), "method"),
    (lambda: D.bound([A3], [1.0] * 3, [2.0] * 3, (1,), "lower", total=-3), "total"),
    (lambda: D.bound([A3], [1.0] * 3, [float("nan")] * 3, (1,), "lower"), "hi[(0,)]"),
    (lambda: D.bound([A3], [1.0] * 3, [2.0] * 3, (1,), "lower", joint=[D.JointRow([1.0, 2.0], 0, 1)]),
     "joint[0].coefficients"),
    (lambda: D.bound_float([A3], np.ones(2), np.ones(2), (1,), "lower"), "lo"),
])
def test_bad_input_is_one_input_error(call, field):
    with pytest.raises(InputError) as exc:
        call()
    assert exc.value.field == field
    assert "\n" not in str(exc.value)
