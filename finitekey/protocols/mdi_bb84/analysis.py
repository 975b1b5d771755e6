"""MDI-BB84 finite-key analysis: observed block -> certified secret key length.

From the counts of every intensity pair in the key basis Z and the test basis X, the analysis bounds

* ``s11``: the Z-basis detections in which both senders emitted exactly one photon (lower bound, all pairs
  together, tagged formulation),
* ``k11`` (lower and upper) and ``v11`` (upper): the X-basis detections of such photon pairs and their errors,
* ``phi``: the phase-error rate of the ``s11`` key bits (upper bound, by random sampling: with both bases
  chosen independently of the photon numbers, the X-basis (1,1) detections are a uniformly random part of
  all same-basis (1,1) detections),

and extracts

.. math:: \\ell = \\Big\\lfloor s_{11}^{L}\\,(1 - h(\\phi^{U})) - \\lambda_{EC} - \\log_2\\tfrac{2}{\\varepsilon_{ch}^2}
          - 2\\log_2\\tfrac{1}{2\\varepsilon_{PA}} - \\log_2\\tfrac{2}{\\varepsilon_{cor}}\\Big\\rfloor ,

with ``phi`` failing with probability at most ``eps_1^2`` (the single-photon smoothing parameter squared).

Decoy bounds: with three intensities per side ``mu > nu > omega >= 0`` (index 0, 1, 2) a closed form
(:func:`s11_lower`, :func:`v11_upper`; proof note section 3): vacuum terms cancel exactly in
``D(a, b) = M_ab - M_a,omega - M_omega,b + M_omega,omega``; otherwise, or with joint constraints, the linear
programme of the decoy engine (:mod:`finitekey.decoy`).  Counts: intervals on expected counts given the
photon-number tags (``exact`` Clopper-Pearson, ``chernoff``, ``hoeffding``), as decoy-bb84.

See proofs_notes/protocols/mdi_bb84.md for the derivation, the epsilon accounting and the assumptions.

References
----------
.. [1] H.-K. Lo, M. Curty, B. Qi, Phys. Rev. Lett. 108, 130503 (2012).
.. [2] M. Curty, F. Xu, W. Cui, C. C. W. Lim, K. Tamaki, H.-K. Lo, Nat. Commun. 5, 3732 (2014).
.. [3] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014) (the
   accounting style and the tagged count intervals).
.. [4] Y.-H. Zhou, Z.-W. Yu, X.-B. Wang, Phys. Rev. A 93, 042324 (2016) (joint constraints).
"""

from __future__ import annotations

import math

from flint import arb, ctx

from ...budget import Charge, Ledger, Role, TermSpec, allocate
from ...errors import InputError
from .._batch import map_in_chunks
from ...decoy.intervals import count_interval_certified
from ...decoy.rounding import arb_exp, ceil_arb, floor_arb
from .._phase_error import binary_entropy_arb_upper, kl_key_rate_upper
from .._result import KEY, KeyLengthResult, NoKeyReason, Status
from .block import MdiBlock
from .scenario import PROTOCOL_NAME

__all__ = ["STATISTICS", "DEFAULT_STATISTICS", "ANALYSES", "analysis_kind", "count_events", "joint_events",
           "term_specs", "block_ledger", "s11_lower", "v11_upper", "k11_upper", "key_length", "key_length_batch"]

STATISTICS = ("exact", "chernoff", "hoeffding")
DEFAULT_STATISTICS = "exact"
ANALYSES = ("closed-form", "linear-programme")
_PREC = 128
#: Appearances of the single-photon smoothing in the final smoothing (the chain rule's doubled slot).
SINGLE_PHOTON_APPEARANCES = 2
#: One chain rule: the (1,1) key bits given the rest.
CHAIN_RULES = 1
#: One-sided count intervals of the closed form: s11 (Z) 7, k11 lower 7 and upper 4 (X), v11 4 (X errors).
CLOSED_FORM_EVENTS = 22

FORMULA = (r"\ell = \Big\lfloor s_{11}^{L}\,\big(1 - h(\phi_{11}^{U})\big) - \lambda_{EC}"
           r" - \log_2\frac{2}{\varepsilon_{ch}^2} - 2\log_2\frac{1}{2\varepsilon_{PA}}"
           r" - \log_2\frac{2}{\varepsilon_{cor}}\Big\rfloor,\quad \Pr[\phi_{11} > \phi_{11}^{U}] \le \varepsilon_1^2")

REFERENCES = (
    "H.-K. Lo, M. Curty, B. Qi, Phys. Rev. Lett. 108, 130503 (2012)",
    "M. Curty, F. Xu, W. Cui, C. C. W. Lim, K. Tamaki, H.-K. Lo, Nat. Commun. 5, 3732 (2014)",
    "C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014)",
    "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012)",
)

ASSUMPTIONS = (
    "the relay is untrusted (it may be run by the adversary); only its public announcements are used",
    "each sender's pulses are phase-randomised weak coherent states with Poissonian photon number and the "
    "characterised intensities; the encoded BB84 states are exact (no source flaws, no side channels from "
    "the senders' devices); intensities and bases chosen independently at random each round",
    "block closed after a number of pulse pairs fixed before it (closed_by = rounds); intensities and bases "
    "announced only after the block, so the attack cannot depend on them",
    "variable-length use: the length is computed from this block's counts by a rule fixed before the block; "
    "count intervals charged once each, the phase-error bound is a smoothing term evaluated at its parameter "
    "squared (proof note finitekey/_notes/protocols/mdi_bb84.md)",
    "the (1,1) X-basis detections form a uniformly random part of all same-basis (1,1) detections (basis "
    "choices independent of the photon numbers and announced after the block)",
    "ec_leak_bits bounds what error correction can disclose (maximum over all runs for interactive codes)",
)

_JOINT_ASSUMPTION = ("joint constraints: the count of a union of intensity pairs is itself a sum of independent "
                     "Bernoulli trials given the tags; each union interval is one more failure event")


# ---------------------------------------------------------------------------------------------------------
# epsilon accounting
# ---------------------------------------------------------------------------------------------------------
def analysis_kind(block: MdiBlock, analysis: str | None = None) -> str:
    """``"closed-form"`` for three intensities per side without joint constraints, else
    ``"linear-programme"`` (or the analysis asked for)."""
    if analysis is not None:
        if analysis not in ANALYSES:
            raise InputError("analysis", analysis, "one of: " + ", ".join(ANALYSES))
        if analysis == "closed-form" and (block.shape != (3, 3) or block.joint_constraints):
            raise InputError("analysis", analysis, "linear-programme for this block (the closed form needs three "
                             "intensities per side and no joint constraints)")
        return analysis
    return "closed-form" if block.shape == (3, 3) and not block.joint_constraints else "linear-programme"


def count_events(analysis: str, ka: int, kb: int) -> int:
    """One-sided count intervals the analysis uses (each charged its own failure probability).

    The linear programme uses both sides of every pair's Z detections, X detections and X errors.
    """
    return CLOSED_FORM_EVENTS if analysis == "closed-form" else 6 * ka * kb


def joint_events(ka: int, kb: int) -> int:
    """One-sided intervals of the joint constraints: per count table (Z detections, X detections, X errors),
    both sides of the union over all pairs with Alice's weakest intensity and of the one with Bob's."""
    return 3 * 2 * 2


def term_specs(n_count: int, n_joint: int = 0) -> tuple:
    """Ledger terms of the MDI analysis.

    Parameters
    ----------
    n_count : int
        One-sided intervals on the counts of single pairs.
    n_joint : int
        One-sided intervals on counts of unions of pairs (joint constraints); 0 without them.

    Returns
    -------
    tuple of TermSpec
    """
    units = n_count + n_joint + 2 * SINGLE_PHOTON_APPEARANCES + 2 * CHAIN_RULES + 1
    specs = [TermSpec("count_estimation", Role.SECRECY, Charge.FAILURE, n_count,
                      f"{n_count} one-sided intervals on expected counts per intensity pair", n_count / units)]
    if n_joint:
        specs.append(TermSpec("joint_estimation", Role.SECRECY, Charge.FAILURE, n_joint,
                              f"{n_joint} one-sided intervals on expected counts of unions of intensity pairs",
                              n_joint / units))
    specs += [
        TermSpec("single_photon_smoothing", Role.SECRECY, Charge.SMOOTHING, SINGLE_PHOTON_APPEARANCES,
                 "smoothing of the (1,1) min-entropy; the phase-error bound from the X-basis sample is evaluated "
                 "at failure probability eps^2; doubled by the chain rule", 2 * SINGLE_PHOTON_APPEARANCES / units),
        TermSpec("chain_rule", Role.SECRECY, Charge.SMOOTHING, CHAIN_RULES,
                 "smoothing parameter of the chain rule splitting the (1,1) key bits from the rest",
                 2 * CHAIN_RULES / units),
        TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
                 "leftover hash lemma (two-universal hashing)", 1 / units),
        TermSpec("correctness", Role.CORRECTNESS, Charge.FAILURE, 1,
                 "error-verification hash fails to detect a residual error"),
    ]
    return tuple(specs)


def block_ledger(block: MdiBlock, analysis: str) -> Ledger:
    """The block's ledger: eps_sec split by the block's ``epsilon_split`` or the default shares.

    A split giving the chain rule more than the single-photon smoothing is refused (then the ledger covers
    either reading of which chain-rule slot is doubled, as in decoy-bb84).
    """
    ka, kb = block.shape
    specs = term_specs(count_events(analysis, ka, kb), joint_events(ka, kb) if block.joint_constraints else 0)
    led = allocate(block.eps_sec, block.eps_cor, specs, block.epsilon_split)
    led.failure_probability("single_photon_smoothing")    # its square must be a positive float
    if led.smoothing("chain_rule") > led.smoothing("single_photon_smoothing"):
        fr = led.fractions()
        raise InputError("epsilon_split.chain_rule", fr["chain_rule"], "a share at most half the "
                         f"single_photon_smoothing share ({fr['single_photon_smoothing']:.6g}): the chain rule's "
                         "epsilon may not exceed the single-photon smoothing")
    return led


# ---------------------------------------------------------------------------------------------------------
# closed forms (three intensities per side), written once for float (numpy) and arb
# ---------------------------------------------------------------------------------------------------------
def _tau1(mu, p, exp):
    return sum(pk * m * exp(-m) for pk, m in zip(p, mu))


def _M(mu_a, mu_b, p_a, p_b, i, j, count, exp):
    """``e^{mu_a_i + mu_b_j} / (p_a_i p_b_j)`` times a bound on the expected count of pair (i, j)."""
    return exp(mu_a[i] + mu_b[j]) / (p_a[i] * p_b[j]) * count


def s11_lower(mu_a, mu_b, p_a, p_b, lo, hi, exp):
    """Lower bound on the (1,1) detections of one basis from three intensities per side (closed form).

    ``lo[i][j]``, ``hi[i][j]``: bounds on the expected count of pair ``(i, j)`` given the tags.  With
    ``g(n) = (nu^n - omega^n) / (mu^n - omega^n)`` (decreasing in n), ``r = max over sides of g(2)/g(1) =
    (nu + omega)/(mu + omega)`` and ``c = g_a(1) g_b(1) r``, every (n, m) != (1, 1) term of
    ``D(nu, nu) - c D(mu, mu)`` has a coefficient <= 0, so
    ``s11 >= tau1_a tau1_b [D(nu,nu) - c D(mu,mu)] / ((nu_a - omega_a)(nu_b - omega_b)(1 - r))``
    (proof note section 3; the same construction as the two-decoy method of Xu et al. 2013, derived here).
    """
    def M(i, j, which):
        return _M(mu_a, mu_b, p_a, p_b, i, j, (lo if which == "lo" else hi)[i][j], exp)

    (ma, na, wa), (mb, nb, wb) = mu_a, mu_b
    ra, rb = (na + wa) / (ma + wa), (nb + wb) / (mb + wb)
    r = (ra + rb + abs(ra - rb)) / 2        # max(ra, rb); for balls, a ball containing the maximum
    c = (na - wa) / (ma - wa) * (nb - wb) / (mb - wb) * r
    bracket = (M(1, 1, "lo") - M(1, 2, "hi") - M(2, 1, "hi") + (1 - c) * M(2, 2, "lo")
               - c * (M(0, 0, "hi") - M(0, 2, "lo") - M(2, 0, "lo")))
    return _tau1(mu_a, p_a, exp) * _tau1(mu_b, p_b, exp) * bracket / ((na - wa) * (nb - wb) * (1 - r))


def v11_upper(mu_a, mu_b, p_a, p_b, lo, hi, exp):
    """Upper bound on the (1,1) count of one table (errors, or detections) from the weak decoys (closed form):
    every coefficient of ``D(nu, nu)`` is >= 0 and the (1,1) one is ``(nu_a - omega_a)(nu_b - omega_b)``."""
    def M(i, j, which):
        return _M(mu_a, mu_b, p_a, p_b, i, j, (lo if which == "lo" else hi)[i][j], exp)

    (_, na, wa), (_, nb, wb) = mu_a, mu_b
    d = M(1, 1, "hi") - M(1, 2, "lo") - M(2, 1, "lo") + M(2, 2, "hi")
    return _tau1(mu_a, p_a, exp) * _tau1(mu_b, p_b, exp) * d / ((na - wa) * (nb - wb))


k11_upper = v11_upper


# ---------------------------------------------------------------------------------------------------------
# certified estimates
# ---------------------------------------------------------------------------------------------------------
def _intervals(method: str, table, eps: float, prec: int):
    flat = [c for row in table for c in row]
    total = sum(flat)
    lo, hi = [], []
    for row in table:
        a_row, b_row = [], []
        for c in row:
            a, b = count_interval_certified(method, c, total, eps, prec)
            a_row.append(arb(max(floor_arb(a), 0.0)))
            b_row.append(b)
        lo.append(a_row)
        hi.append(b_row)
    return lo, hi


def _closed_form_estimates(block: MdiBlock, method: str, eps_c: float, prec: int) -> dict:
    (mua, mub), (pa, pb) = block.intensities, block.intensity_probabilities
    with ctx.workprec(prec):
        A = [arb(m) for m in mua]
        B = [arb(m) for m in mub]
        PA = [arb(x) for x in pa]
        PB = [arb(x) for x in pb]
        zl, zh = _intervals(method, block.key_detections, eps_c, prec)
        xl, xh = _intervals(method, block.test_detections, eps_c, prec)
        el, eh = _intervals(method, block.test_errors, eps_c, prec)
        s11 = s11_lower(A, B, PA, PB, zl, zh, arb_exp)
        k11 = s11_lower(A, B, PA, PB, xl, xh, arb_exp)
        k11u = k11_upper(A, B, PA, PB, xl, xh, arb_exp)
        v11 = v11_upper(A, B, PA, PB, el, eh, arb_exp)
    return {"s11": floor_arb(s11), "k11": floor_arb(k11), "k11_upper": ceil_arb(k11u), "v11": ceil_arb(v11)}


def _engine_estimates(block: MdiBlock, method: str, eps_c: float, eps_j: float | None, prec: int) -> dict:
    """Bounds from the decoy engine's linear programme (two senders), with joint rows when asked."""
    from ... import decoy   # the decoy engine sits below protocols
    senders = tuple(decoy.Sender(m, p) for m, p in zip(block.intensities, block.intensity_probabilities))
    out = {}
    for name, basis, kind, sense in (("s11", "key_basis", "detections", "lower"),
                                     ("k11", "test_basis", "detections", "lower"),
                                     ("k11_upper", "test_basis", "detections", "upper"),
                                     ("v11", "test_basis", "errors", "upper")):
        table = block.table(basis, kind)
        lo, hi = _intervals(method, table, eps_c, prec)
        flat_lo = [x for row in lo for x in row]
        flat_hi = [x for row in hi for x in row]
        joint = _joint_rows(block, table, method, eps_j, prec) if eps_j is not None else ()
        total = sum(c for row in table for c in row)
        b = decoy.bound(senders, flat_lo, flat_hi, (1, 1), sense, total=total, method="lp", joint=joint)
        out[name] = floor_arb(b) if sense == "lower" else ceil_arb(b)
    return out


def _joint_rows(block: MdiBlock, table, method: str, eps_j: float, prec: int) -> tuple:
    """Joint rows: the union of all pairs with Alice's weakest intensity, and the one with Bob's; the count of
    a union is a count (sum of independent Bernoulli trials given the tags), so one certified interval on its
    expectation is rigorous."""
    from ... import decoy
    ka, kb = block.shape
    total = sum(c for row in table for c in row)
    rows = []
    for side in (0, 1):
        members = [(i, j) for i in range(ka) for j in range(kb) if (i if side == 0 else j) == (ka if side == 0
                                                                                                else kb) - 1]
        c = sum(table[i][j] for i, j in members)
        lo, hi = count_interval_certified(method, c, total, eps_j, prec)
        coeffs = {(i, j): (1.0 if (i, j) in members else 0.0) for i in range(ka) for j in range(kb)}
        rows.append(decoy.JointRow(coeffs, arb(max(floor_arb(lo), 0.0)), hi))
    return tuple(rows)


def _consistency(block: MdiBlock, est: dict) -> tuple:
    """Clamp upper bounds to their physical maxima; list bounds that contradict the block's totals."""
    n_z = sum(map(sum, block.key_detections))
    n_x = sum(map(sum, block.test_detections))
    m_x = sum(map(sum, block.test_errors))
    bad = []
    if est["s11"] > n_z:
        bad.append("single_photon_pair_key_detections_lower > key-basis detections")
    if est["k11"] > n_x:
        bad.append("single_photon_pair_test_detections_lower > test-basis detections")
    if est["k11_upper"] < max(est["k11"], 0.0):
        bad.append("single_photon_pair_test_detections upper bound below its lower bound")
    if est["v11"] < 0:
        bad.append("single_photon_pair_test_errors_upper < 0")
    est = dict(est)
    est["v11_formula"] = est["v11"]
    est["v11"] = min(est["v11"], float(m_x))
    est["k11_upper"] = min(est["k11_upper"], float(n_x))
    return est, bad


def _phase_error(est: dict, eps_p: float, prec: int):
    n = int(math.ceil(est["s11"]))
    k = int(math.ceil(est["k11"]))
    ku = max(int(math.floor(est["k11_upper"])), k)
    e = max(int(math.floor(est["v11"])), 0)
    if n < 1 or k < 1:
        return arb(0.5), {}
    phi, p1, _ = kl_key_rate_upper(n, k, ku, e, eps_p, prec)
    extra = {"single_photon_pair_key_count": float(n), "single_photon_pair_test_count": float(k),
             "single_photon_pair_test_count_upper": float(ku), "single_photon_pair_test_errors_upper": float(e),
             "single_photon_pair_population_rate_upper": p1}
    return (arb(0.5) if phi >= 0.5 else arb(phi)), extra


def key_length(block: MdiBlock, statistics: str | None = None, prec: int = _PREC,
               analysis: str | None = None) -> KeyLengthResult:
    """Certified secret key length of an observed MDI-BB84 block.

    Parameters
    ----------
    block : MdiBlock
    statistics : {"exact", "chernoff", "hoeffding"}, optional
        How count intervals are inferred (default ``"exact"``).
    prec : int
        Bits of ball arithmetic.
    analysis : {None, "closed-form", "linear-programme"}
        Force an analysis (default: the closed form for three intensities per side, else the engine's LP).

    Returns
    -------
    KeyLengthResult
        ``secret_key_length`` rounded down from the lower end of a ball containing the key-length formula at
        conservative (outward-rounded) estimates; 0 when negative.
    """
    method = check_statistics(statistics)
    if method == "exact":
        _check_exact_range(block)
    kind = analysis_kind(block, analysis)
    ledger = block_ledger(block, kind)
    eps_c = ledger.failure_probability("count_estimation")
    eps_j = ledger.failure_probability("joint_estimation") if block.joint_constraints else None
    if kind == "closed-form":
        est = _closed_form_estimates(block, method, eps_c, prec)
    else:
        est = _engine_estimates(block, method, eps_c, eps_j, prec)
    est, bad = _consistency(block, est)
    assumptions = ASSUMPTIONS + ((_JOINT_ASSUMPTION,) if block.joint_constraints else ())
    settings = {"analysis": kind, "joint_constraints": "yes" if block.joint_constraints else "no"}
    estimates = {"single_photon_pair_key_detections_lower": est["s11"],
                 "single_photon_pair_test_detections_lower": est["k11"],
                 "single_photon_pair_test_detections_upper": est["k11_upper"],
                 "single_photon_pair_test_errors_upper": est["v11"],
                 "single_photon_pair_test_errors_upper_before_clipping": est["v11_formula"]}
    if bad:
        return KeyLengthResult(
            protocol=PROTOCOL_NAME, secret_key_length=0, ledger=ledger, statistics=method, assumptions=assumptions,
            terms={"key_length_lower_bound": 0.0}, estimates={**estimates, "phase_error_rate_upper": 0.5,
                                                              "note_block_inconsistent_with_decoy_model": 1.0},
            formula=FORMULA, references=REFERENCES, settings=settings,
            status=Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, "; ".join(bad)))
    eps_p = ledger.failure_probability("single_photon_smoothing")
    eps_ch = ledger.smoothing("chain_rule")
    eps_pa = ledger.hashing("privacy_amplification")
    phi, extra = _phase_error(est, eps_p, prec)
    with ctx.workprec(prec):
        s11 = arb(max(est["s11"], 0.0))
        h = binary_entropy_arb_upper(phi)
        ln2 = arb(2).log()
        chain = CHAIN_RULES * (2 / (arb(eps_ch) * arb(eps_ch))).log() / ln2
        pa = 2 * (1 / (2 * arb(eps_pa))).log() / ln2
        tag = (2 / arb(block.eps_cor)).log() / ln2
        single = s11 * (1 - h)
        total = single - arb(block.ec_leak_bits) - chain - pa - tag
    lower = floor_arb(total) if total.is_finite() else -math.inf
    length = max(0, int(math.floor(lower))) if math.isfinite(lower) else 0
    terms = {"single_photon_pair_bits": floor_arb(single), "ec_leakage": float(block.ec_leak_bits),
             "chain_rule_penalty": ceil_arb(chain), "hash_penalty": ceil_arb(pa), "verification_tag": ceil_arb(tag),
             "key_length_lower_bound": lower}
    estimates = {**estimates, "phase_error_rate_upper": ceil_arb(phi), **extra}
    return KeyLengthResult(
        protocol=PROTOCOL_NAME, secret_key_length=length, ledger=ledger, statistics=method, assumptions=assumptions,
        terms=terms, estimates=estimates, formula=FORMULA, references=REFERENCES,
        status=_status(length, terms, estimates), settings=settings)


def _status(length: int, terms: dict, estimates: dict) -> Status:
    if length > 0:
        return KEY
    s11, k11 = (estimates["single_photon_pair_key_detections_lower"],
                estimates["single_photon_pair_test_detections_lower"])
    if not (s11 >= 1 and k11 >= 1):
        return Status.no_key(NoKeyReason.NO_SINGLE_PHOTON_BOUND, f"(1,1) lower bounds: key basis {s11:.6g}, test "
                                                                 f"basis {k11:.6g}")
    if estimates["phase_error_rate_upper"] >= 0.5:
        return Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, "(1,1) phase-error upper bound "
                                                            f"{estimates['phase_error_rate_upper']:.4g} >= 1/2")
    gain = terms["single_photon_pair_bits"]
    cost = terms["ec_leakage"] + terms["chain_rule_penalty"] + terms["hash_penalty"] + terms["verification_tag"]
    detail = (f"(1,1) bits {gain:.6g} against leakage {terms['ec_leakage']:.6g} + chain rule "
              f"{terms['chain_rule_penalty']:.4g} + hash {terms['hash_penalty']:.4g} + verification "
              f"{terms['verification_tag']:.4g} bits")
    reason = NoKeyReason.PENALTIES_EXCEED_ENTROPY if gain - cost < 1 else NoKeyReason.BELOW_ONE_BIT
    return Status.no_key(reason, detail)


def check_statistics(statistics) -> str:
    """The statistics method (default ``"exact"``); an unknown one is refused."""
    if statistics is None:
        return DEFAULT_STATISTICS
    if statistics not in STATISTICS:
        raise InputError("statistics", statistics, "one of: " + ", ".join(STATISTICS))
    return statistics


#: The exact binomial tails accept at most this many trials.
MAX_EXACT_TRIALS = 2**50


def _check_exact_range(block: MdiBlock) -> None:
    for basis in ("key_basis", "test_basis"):
        total = sum(block.flat(basis, "detections"))
        if total > MAX_EXACT_TRIALS:
            raise InputError(f"{basis}.detections", total, f"counts summing to at most 2**50 for statistics='exact' "
                             "(use 'chernoff' or 'hoeffding' for larger blocks)")


def key_length_batch(blocks, statistics: str | None = None, *, prec: int = _PREC, jobs: int = 1) -> list:
    """Key lengths of many blocks, in order; each identical to :func:`key_length` of that block.

    Parameters
    ----------
    blocks : sequence of MdiBlock
    statistics : str, optional
    prec : int
    jobs : int
        Worker processes (for at least 200 blocks).

    Returns
    -------
    list of KeyLengthResult
    """
    check_statistics(statistics)
    return map_in_chunks(_batch_chunk, blocks, jobs, 200, (statistics, prec))


def _batch_chunk(blocks, statistics, prec) -> list:
    return [key_length(b, statistics, prec) for b in blocks]

