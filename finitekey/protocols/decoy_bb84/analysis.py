"""Decoy-state BB84 analysis: the epsilon ledger (:func:`term_specs`, :func:`block_ledger`), the certified
estimates of the vacuum and single-photon counts and the certified key length of a block (:func:`key_length`,
:func:`key_length_batch`), variable-length or fixed-length.

The closed forms, the count intervals and the linear programme are those of the decoy engine
(:mod:`finitekey.decoy`: ``closed_forms``, ``intervals``, :func:`finitekey.decoy.bound`); the phase-error
sampling bounds are in :mod:`finitekey.protocols._phase_error`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
from flint import arb, ctx

from ...bounds import get as _get_bound
from ...budget import Charge, Ledger, LedgerTerm, Role, TermSpec, allocate
from ...errors import ComputationError, InputError
from ... import decoy
from ...decoy import closed_forms as CF
from ...decoy import intervals as IV
from ...decoy import rounding as R
from .. import _phase_error as PE
from .._batch import map_in_chunks
from .._result import KEY, KeyLengthResult, NoKeyReason, Status
from .block import PROTOCOL_NAME, DecoyBlock

__all__ = ["STATISTICS", "DESIGN_STATISTICS", "DEFAULT_STATISTICS", "KATO_CONVERSIONS", "REFERENCE_UNITS", "FORMULA",
           "REFERENCES", "BLOCK_RULE_ASSUMPTION", "VARIABLE_LENGTH_ASSUMPTION", "ASSUMPTIONS", "KATO_REFERENCE",
           "KATO_ASSUMPTION", "FIXED_LENGTH_ASSUMPTION", "MAX_EXACT_TRIALS", "EC_FAILURE_TERM",
           "SINGLE_PHOTON_APPEARANCES", "CHAIN_RULES", "three_intensity_condition", "count_events", "term_specs",
           "reference_ledger", "analysis_kind", "block_ledger", "key_length", "key_length_batch"]

STATISTICS = ("exact", "chernoff", "hoeffding", "kato")
#: Methods the float design objective supports (kato has no design continuation).
DESIGN_STATISTICS = ("exact", "chernoff", "hoeffding")
#: Extra one-sided events of the kato method: conditional sums -> actual counts for s0, s1, s1Z, v1.
KATO_CONVERSIONS = 4
DEFAULT_STATISTICS = "exact"
_PREC = 128
#: The 2014 reference spends eps_sec/21 on every event.
REFERENCE_UNITS = 21

FORMULA = (r"\ell = \Big\lfloor s_{X,0}^{L} + s_{X,1}^{L}\,\big(1 - h(\phi_X^{U})\big) - \lambda_{EC}"
           r" - 2\log_2\frac{2}{\varepsilon_{ch}^2} - 2\log_2\frac{1}{2\varepsilon_{PA}}"
           r" - \log_2\frac{2}{\varepsilon_{cor}}\Big\rfloor,\quad"
           r" \Pr[\phi_X > \phi_X^{U}] \le \varepsilon_{1}^2")

REFERENCES = (
    "C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014)",
    "D. Rusca, A. Boaron, C. Gruenenfelder, A. Martin, H. Zbinden, Appl. Phys. Lett. 112, 171104 (2018)",
    "X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005)",
    "W. Hoeffding, Ann. Math. Statist. 27, 713-721 (1956)",
    "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012)",
)

#: The block rule (proofs_notes/protocols/decoy_bb84.md, "The block rule"); blocks closed by quotas are refused.
BLOCK_RULE_ASSUMPTION = (
    "block closed after a number of pulses fixed before it (closed_by = rounds), never when detection quotas "
    "fill; each pulse's intensity and both bases chosen independently with fixed probabilities and announced "
    "only after the block's last pulse is measured, so the attack cannot depend on them")

#: How the length is used (replaced by FIXED_LENGTH_ASSUMPTION for a block with an acceptance test).
VARIABLE_LENGTH_ASSUMPTION = (
    "variable-length use: the length is computed from this block's counts by a rule (statistics, epsilon split, "
    "leakage bound) fixed before the block; count-interval failures are charged once each and the phase-error "
    "bound is a smoothing term evaluated at its parameter squared (proof note finitekey/_notes/protocols/"
    "decoy_bb84.md, sections 7 and 8, which also list what is assumed about conditioning on key-basis data)")
ASSUMPTIONS = (
    "Alice's pulses are phase-randomised weak coherent states with Poissonian photon number; intensities and "
    "bases are chosen independently at random each round and the chosen intensity is not otherwise revealed",
    "Bob's detection probability and basis choice do not depend on the basis (no efficiency mismatch); "
    "threshold detectors with double clicks assigned a random bit",
    VARIABLE_LENGTH_ASSUMPTION,
    BLOCK_RULE_ASSUMPTION,
    "the single-photon key and test detections form a uniformly random split of all single-photon detections "
    "(basis chosen independently of the photon number and of the adversary)",
    "ec_leak_bits bounds what error correction can disclose: for interactive or rate-adaptive codes, the "
    "maximum over all runs, not the count of one run (proof note finitekey/_notes/reconciliation.md)",
)

#: Added to the references and assumptions of results computed with statistics="kato".
KATO_REFERENCE = "G. Kato, Concentration inequality using unconfirmed knowledge, arXiv:2002.04357 (2020)"
KATO_ASSUMPTION = ("statistics kato: for every pulse, given its photon number and everything before it, the "
                   "intensity label is independent of the detection and error outcome (labels announced after all "
                   "pulses); pulses and kato_expected were fixed before the run (Kato's statement from memory)")


def three_intensity_condition(mu) -> bool:
    """Whether intensities (descending) satisfy the closed form's ``mu1 > mu2 + mu3`` and ``mu2 > mu3 >= 0``.

    Parameters
    ----------
    mu : sequence of float

    Returns
    -------
    bool
    """
    return len(mu) == 3 and mu[0] > mu[1] + mu[2] and mu[1] > mu[2] >= 0

# ---------------------------------------------------------------------------------------------------------
# epsilon accounting
# ---------------------------------------------------------------------------------------------------------
#: Secrecy term of the two-intensity analysis whose epsilon is eps_cor (not split; see term_specs).
EC_FAILURE_TERM = "undetected_correction_failure"


def count_events(n_intensities: int, analysis: str, statistics: str | None = None) -> int:
    """Number of one-sided count intervals the analysis uses (each charged its own epsilon).

    With ``statistics="kato"`` four more one-sided events (the conversions of the conditional sums of
    ``s0``, ``s1``, ``s1Z`` and ``v1`` into bounds on the actual counts, proof note section 2a).
    """
    if statistics == "kato":
        return count_events(n_intensities, analysis) + KATO_CONVERSIONS
    if analysis == "three-intensity":
        return 12   # key: n1+, n2-, n2+, n3-, n3+; test: the same 5; test errors: m2+, m3-
    if analysis == "two-intensity":
        return 10   # key: n1+, n2-, m2+ and vacuum sampling; test: n1+, n2-, m2+, vacuum sampling, m1+, m2-
    return 6 * n_intensities  # LP: both sides for every intensity: key detections, test detections, test errors


#: Appearances of the single-photon smoothing parameter in the final smoothing: the first chain rule
#: ``H^{a+2b+c}(AB|C) >= H^b(A|BC) + H^c(B|C) - log2(2/a^2)`` puts it in the doubled slot (proof note, section 7).
SINGLE_PHOTON_APPEARANCES = 2
#: Two chain rules (single photons | rest, then vacuum | multi-photon), each with its own smoothing parameter.
CHAIN_RULES = 2


def term_specs(n_count: int, analysis: str | None = None) -> tuple:
    """Ledger terms of the decoy analysis; ``n_count`` one-sided count intervals.

    ``single_photon_smoothing`` is the smoothing parameter of the single-photon min-entropy: the phase-error
    bound is evaluated at failure probability eps^2 and, doubled by the chain rule, it costs 4 eps.  With two
    intensities the vacuum bound of the key basis uses the key-basis error counts, known only after error
    correction; an undetected correction failure (probability <= eps_cor) then breaks that bound, so
    ``undetected_correction_failure`` charges eps_cor to the secrecy too.

    Default shares follow the 2014 per-unit split (one unit per event or appearance) over the split terms.

    Parameters
    ----------
    n_count : int
        Number of one-sided count intervals.
    analysis : str, optional
        ``"three-intensity"``, ``"two-intensity"`` or None (the linear program); ``"two-intensity"`` adds the
        ``undetected_correction_failure`` term.

    Returns
    -------
    tuple of TermSpec
    """
    units = n_count + 2 * SINGLE_PHOTON_APPEARANCES + 2 * CHAIN_RULES + 1
    specs = (
        TermSpec("count_estimation", Role.SECRECY, Charge.FAILURE, n_count,
                 f"{n_count} one-sided intervals on expected detection/error counts per intensity",
                 n_count / units),
        TermSpec("single_photon_smoothing", Role.SECRECY, Charge.SMOOTHING, SINGLE_PHOTON_APPEARANCES,
                 "smoothing of the single-photon min-entropy; the phase-error bound from the test-basis "
                 "sample is evaluated at failure probability eps^2; doubled by the chain rule",
                 2 * SINGLE_PHOTON_APPEARANCES / units),
        TermSpec("chain_rule", Role.SECRECY, Charge.SMOOTHING, CHAIN_RULES,
                 "smoothing parameters of the two chain-rule splits (single / vacuum / multi-photon)",
                 2 * CHAIN_RULES / units),
        TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
                 "leftover hash lemma (two-universal hashing)", 1 / units),
    )
    if analysis == "two-intensity":
        specs += (TermSpec(EC_FAILURE_TERM, Role.SECRECY, Charge.FAILURE, 1,
                           "error correction fails undetected, so the key-basis error counts behind the "
                           "vacuum bound are wrong (probability at most eps_cor)", pinned="eps_cor"),)
    return specs + (TermSpec("correctness", Role.CORRECTNESS, Charge.FAILURE, 1,
                             "error-verification hash fails to detect a residual error"),)


def reference_ledger(eps_sec: float, eps_cor: float, n_count: int) -> Ledger:
    """The 2014 choice: every secrecy unit at eps_sec/21 (12 count intervals, 4 for the single-photon
    smoothing doubled by the chain rule, 2 + 2 for the chain rules, 1 for hashing)."""
    e = math.nextafter(eps_sec / REFERENCE_UNITS, 0.0)
    terms = []
    for s in term_specs(n_count):
        eps = eps_cor if s.role is Role.CORRECTNESS else e
        terms.append(LedgerTerm(s.name, eps, s.role, s.charge, s.multiplicity, s.description))
    led = Ledger(tuple(terms))
    units = sum(t.weight for t in terms if t.role is Role.SECRECY)
    if units != REFERENCE_UNITS or led.eps_sec > eps_sec:
        raise ComputationError(f"the 2014 accounting has {REFERENCE_UNITS} units; this analysis uses {units}")
    return led


# ---------------------------------------------------------------------------------------------------------
# key length
# ---------------------------------------------------------------------------------------------------------
def analysis_kind(mu, analysis: str | None = None) -> str:
    """Which analysis a block uses: the closed forms where they apply, else the linear programme."""
    if analysis == "linear-programme":
        return analysis
    if len(mu) == 2:
        return "two-intensity"
    if three_intensity_condition(mu):
        return "three-intensity"
    return "linear-programme"


def block_ledger(block: DecoyBlock, statistics: str, analysis: str) -> Ledger:
    """The block's ledger: the 2014 reference (hoeffding, three intensities, no split given) or the split."""
    n_count = count_events(len(block.intensities), analysis, statistics)
    if statistics == "hoeffding" and block.epsilon_split is None and analysis == "three-intensity":
        return reference_ledger(block.eps_sec, block.eps_cor, n_count)
    led = allocate(block.eps_sec, block.eps_cor, term_specs(n_count, analysis), block.epsilon_split)
    led.failure_probability("single_photon_smoothing")   # its square must be a positive float
    # The chain rule doubles the smoothing of one slot; we put the single-photon term there (proof note,
    # section 7).  With eps_ch <= eps_1 the ledger also covers the other reading of the chain rule, so a
    # split giving the chain rule more than the single-photon smoothing is refused.
    if led.smoothing("chain_rule") > led.smoothing("single_photon_smoothing"):
        fr = led.fractions()
        raise InputError("epsilon_split.chain_rule", block.epsilon_split.get("chain_rule") if block.epsilon_split
                         else fr["chain_rule"], "a share at most the single_photon_smoothing share "
                         f"({fr['single_photon_smoothing']:.6g}): both have weight 4")
    return led


def _box_intervals(method: str, ranges, eps: float, prec: int):
    """Certified intervals valid for every observed count in the acceptance ranges ``[(a, b), ...]``.

    The lower end at ``a`` and the upper end at ``b``: the chernoff limits increase with the observed count
    and do not depend on the basis total; the hoeffding deviation ``sqrt(C/2 ln(1/eps))`` increases with the
    total ``C``, which is at most ``sum b`` on the box.  So on the box every interval of an accepted block
    lies inside these (proof note, section 7b).
    """
    lo, hi = [], []
    with ctx.workprec(prec):
        if method == "chernoff":
            for a, b in ranges:
                lo.append(IV.count_interval_certified("chernoff", a, 0, eps, prec)[0])
                hi.append(IV.count_interval_certified("chernoff", b, 0, eps, prec)[1])
        elif method == "hoeffding":
            d = (arb(sum(b for _, b in ranges)) / 2 * (1 / arb(eps)).log()).sqrt()
            for a, b in ranges:
                lo.append(arb(R.floor_arb(arb(a) - d)))
                hi.append(arb(R.ceil_arb(arb(b) + d)))
        else:
            raise ValueError(method)
    return lo, hi


def _estimates_certified(block: DecoyBlock, method: str, analysis: str, eps_c: float, prec: int,
                         box: dict | None = None) -> dict:
    """Certified (arb) s0, s1 (key basis), s1Z (test basis), v1 (test basis) for the closed forms.

    ``box``: an acceptance test's ranges; the intervals are then those valid on the whole box.
    """
    mu = [arb(m) for m in block.intensities]
    p = [arb(x) for x in block.intensity_probabilities]
    exp = R.arb_exp
    ex = block.kato_expected
    def kato(basis, kind):
        return None if method != "kato" else (block.pulses, None if ex is None else ex[basis][kind])

    def intervals(basis, kind):
        if box is not None:
            return _box_intervals(method, box[basis][kind], eps_c, prec)
        return IV.count_intervals_certified(method, getattr(block, f"{basis.split('_')[0]}_{kind}"), eps_c, prec,
                                           kato(basis, kind))

    def detections_total(basis):   # at most this many trials in the vacuum-error deviation
        if box is not None:
            return sum(b for _, b in box[basis]["detections"])
        return sum(getattr(block, f"{basis.split('_')[0]}_detections"))

    with ctx.workprec(prec):
        kl, kh = intervals("key_basis", "detections")
        tl, th = intervals("test_basis", "detections")
        el, eh = intervals("test_basis", "errors")
        s0u = s0zu = None
        if analysis == "three-intensity":
            s0, s1 = CF.three_intensity(mu, p, kl, kh, exp)
            s0z, s1z = CF.three_intensity(mu, p, tl, th, exp)
            v1 = CF.three_intensity_errors(mu, p, el, eh, exp)
        elif analysis == "two-intensity":
            kel, keh = intervals("key_basis", "errors")
            vac_key = _vacuum_deviation(method, detections_total("key_basis"), eps_c)
            vac_test = _vacuum_deviation(method, detections_total("test_basis"), eps_c)
            s0u = CF.two_intensity_vacuum_upper(mu, p, keh[1], vac_key, exp)
            s0, s1 = CF.two_intensity(mu, p, kl, kh, s0u, exp)
            s0zu = CF.two_intensity_vacuum_upper(mu, p, eh[1], vac_test, exp)
            s0z, s1z = CF.two_intensity(mu, p, tl, th, s0zu, exp)
            v1 = CF.two_intensity_errors(mu, p, el, eh, exp)
        else:
            return _lp_estimates(block, method, eps_c)
        out = {"s0": R.lower_end(R.clip0(s0)), "s1": R.lower_end(s1), "s1z": R.lower_end(s1z),
               "v1": R.upper_end(v1), "s0z": R.lower_end(R.clip0(s0z))}
        if s0u is not None:
            out["s0_upper"] = R.upper_end(s0u)
            out["s0z_upper"] = R.upper_end(s0zu)
        if method == "kato":
            out = _kato_actual_counts(block, analysis, out, eps_c, prec)
        return out


def _lp_estimates(block: DecoyBlock, method: str, eps_c: float, prec: int = 128) -> dict:
    """s0, s1 (key basis, lower), s1Z (test basis, lower), v1 (test errors, upper) by the decoy engine's
    certified linear programme, with the exact total of each table (proof note, section 5)."""
    sender = decoy.Sender(block.intensities, block.intensity_probabilities)

    def table(counts):
        lo, hi = IV.count_intervals_certified(method, counts, eps_c, prec)
        return lambda target, sense: decoy.bound(sender, lo, hi, (target,), sense, total=sum(counts), method="lp",
                                                 prec=prec)

    key, test, errors = table(block.key_detections), table(block.test_detections), table(block.test_errors)
    return {"s0": key(0, "lower"), "s1": key(1, "lower"), "s1z": test(1, "lower"), "v1": errors(1, "upper")}


def _kato_predicted(block: DecoyBlock, analysis: str) -> dict:
    """Conditional sums of s0, s1, s1Z, v1 predicted from ``kato_expected`` (design values only).

    The float closed forms at ``lo = hi = expected``; they only fix the tilts of the conversions, so any
    pre-registered value is valid (a poor one only loosens the bound).
    """
    ex = block.kato_expected
    if ex is None:
        return {"s0": None, "s1": None, "s1z": None, "v1": None}
    mu, p = list(block.intensities), list(block.intensity_probabilities)
    kd, td = list(ex["key_basis"]["detections"]), list(ex["test_basis"]["detections"])
    te, ke = list(ex["test_basis"]["errors"]), list(ex["key_basis"]["errors"])
    if analysis == "three-intensity":
        s0, s1 = CF.three_intensity(mu, p, kd, kd, np.exp)
        _, s1z = CF.three_intensity(mu, p, td, td, np.exp)
        v1 = CF.three_intensity_errors(mu, p, te, te, np.exp)
    else:
        s0u = CF.two_intensity_vacuum_upper(mu, p, ke[1], 0.0, np.exp)
        s0, s1 = CF.two_intensity(mu, p, kd, kd, s0u, np.exp)
        s0zu = CF.two_intensity_vacuum_upper(mu, p, te[1], 0.0, np.exp)
        _, s1z = CF.two_intensity(mu, p, td, td, s0zu, np.exp)
        v1 = CF.two_intensity_errors(mu, p, te, te, np.exp)
    return {"s0": float(s0), "s1": float(s1), "s1z": float(s1z), "v1": float(v1)}


def _kato_actual_counts(block: DecoyBlock, analysis: str, est: dict, eps_c: float, prec: int) -> dict:
    """Kato: the closed forms bound conditional sums over the pulses; convert s0, s1, s1Z (lower) and v1
    (upper) into bounds on the actual counts (4 more one-sided events, each at ``eps_c``)."""
    n = block.pulses
    pred = _kato_predicted(block, analysis)
    out = dict(est)
    for name in ("s0", "s1", "s1z"):
        a = IV.kato_tilt(n, pred[name], eps_c, "upper")
        out[name] = IV.kato_actual_lower(est[name], n, a, eps_c, prec)
    out["s0"] = R.lower_end(R.clip0(out["s0"]))
    a = IV.kato_tilt(n, pred["v1"], eps_c, "lower")
    out["v1"] = IV.kato_actual_upper(est["v1"], n, a, eps_c, prec)
    # s0Z (and the vacuum upper bounds) stay conditional sums: the test vacuum bound is not used for the
    # actual test count (k_upper = n_Z, see _physical_check) and the vacuum consistency test is skipped.
    out.pop("s0z_upper", None)
    out.pop("s0_upper", None)
    out["s0z_conditional"] = out.pop("s0z")
    return out


def _physical_check(block: DecoyBlock, est: dict, key_errors: bool = True) -> tuple:
    """Clamp upper bounds to their physical maxima and test the lower bounds against the observed totals.

    Under the good events every bound holds for the true counts, and the true counts obey
    ``s0 + s1 <= n_X`` (key-basis detections summed over intensities), ``s0Z + s1Z <= n_Z``,
    ``0 <= v1 <= m_Z`` (test-basis errors summed), vacuum errors about half the vacuum detections, and,
    with two intensities, ``s0 <= s0_upper``.  Bounds
    that violate one of these show that the block cannot come from the decoy model (or a good event
    failed): no key may be extracted.  Upper bounds are clamped to the physical maximum (``v1 <= m_Z``),
    which keeps them valid; lower bounds are never raised.

    ``key_errors=False`` skips the one check that reads the key-basis error counts (the fixed-length mode
    with three intensities, whose acceptance must not depend on a key-basis outcome; proof note, section 7b).

    Returns
    -------
    (est, violations) : the estimates with ``v1`` clamped, and the list of violated constraints (names).
    """
    n_x, n_z, m_z = sum(block.key_detections), sum(block.test_detections), sum(block.test_errors)
    def pos(x):  # a lower bound on a non-negative count, as a float
        return max(R.floor_arb(x), 0.0)

    bad = []
    if pos(est["s0"]) + pos(est["s1"]) > n_x:
        bad.append("vacuum_key_detections_lower + single_photon_key_detections_lower > key-basis detections")
    if "s0z" in est and pos(est["s0z"]) + pos(est["s1z"]) > n_z or pos(est["s1z"]) > n_z:
        bad.append("vacuum_test_detections_lower + single_photon_test_detections_lower > test-basis detections")
    if R.ceil_arb(est["v1"]) < 0:
        bad.append("single_photon_test_errors_upper < 0")
    # A vacuum detection is an error with probability 1/2 whatever the adversary does, so far fewer errors
    # than half the vacuum lower bound cannot come from the model.  This only rejects (key 0), which is
    # always safe; the threshold uses Hoeffding's deviation at eps_sec over at most n detections.
    slack = math.log(1.0 / block.eps_sec) / 2.0
    m_x = sum(block.key_errors)
    if key_errors and pos(est["s0"]) / 2.0 - math.sqrt(n_x * slack) > m_x:
        bad.append("key-basis errors fewer than half the vacuum lower bound allows")
    if "s0z" in est and pos(est["s0z"]) / 2.0 - math.sqrt(n_z * slack) > m_z:
        bad.append("test-basis errors fewer than half the vacuum lower bound allows")
    if "s0_upper" in est and (R.floor_arb(est["s0"]) > R.ceil_arb(est["s0_upper"])
                              or R.floor_arb(est["s0z"]) > R.ceil_arb(est["s0z_upper"])):
        bad.append("vacuum lower bound above the vacuum upper bound")
    est = dict(est)
    # the single-photon test detections are at most n_Z minus the vacuum test detections
    # (both integers, so K <= n_Z - ceil(s0Z_L))
    est["k_upper"] = n_z - int(math.ceil(pos(est["s0z"]))) if "s0z" in est else n_z
    est["v1_formula"] = est["v1"]
    if R.ceil_arb(est["v1"]) > m_z:
        est["v1"] = arb(m_z)
    return est, bad


def _vacuum_deviation(method: str, n_detections: int, eps: float) -> arb:
    """Deviation of the vacuum error count below half the vacuum detections (at most n_detections trials).

    Hoeffding's ``sqrt(n/2 ln(1/eps))`` for every method (the trials are fair coins; common practice as in
    Rusca et al. 2018, from memory).
    """
    return (arb(n_detections) / 2 * (1 / arb(eps)).log()).sqrt()


def _phase_error_hoeffding(s1: arb, s1z: arb, v1: arb, eps_p: float, prec: int):
    """Phase-error rate for ``statistics="hoeffding"``: ``lambda + max(gamma_2014, mu_rigorous)``.

    ``eps_p`` is the failure probability of the bound: the square of the single-photon smoothing parameter.

    ``gamma_2014`` is the 2014 sampling term (kept so the reference is reproduced where it is at least as
    conservative); it is not a valid bound on its own (it tends to 0 with the test error rate).
    ``mu_rigorous`` is the random-sampling (Serfling) deviation of ``finitekey.bounds.random_sampling`` at
    the same epsilon, evaluated at ``n = ceil(s1_L)`` key and ``k = ceil(s1z_L)`` test bits; it decreases
    in both, so plugging in lower bounds keeps it valid (proof note, section 6).
    """
    with ctx.workprec(prec):
        lam = arb(max(R.ceil_arb(v1 / s1z), 0.0))      # upper end of v1_U / s1z_L
        if lam >= arb(0.5):
            return arb(0.5), {"single_photon_error_rate_test_upper": 0.5}
        g2 = PE.sampling_gamma(arb(eps_p), lam if lam > 0 else arb(1e-300), s1z, s1, lambda x: x.log())
        g2u = R.ceil_arb(g2)                          # upper end: gamma is an upper-bound quantity
        gamma = arb(R.ceil_arb(arb(g2u).sqrt())) if g2u > 0 else arb(0)
        n = int(math.ceil(R.floor_arb(s1)))
        k = int(math.ceil(R.floor_arb(s1z)))
        mu = _get_bound("random_sampling").deviation_certified(eps_p, prec, key_bits=n, test_bits=k).hi
        phi = lam + (gamma if gamma >= arb(mu) else arb(mu))
    phi_u = R.ceil_arb(phi)
    return arb(min(phi_u, 0.5)), {"single_photon_error_rate_test_upper": R.ceil_arb(lam),
                                  "sampling_term_2014_gamma": R.ceil_arb(gamma),
                                  "sampling_term_rigorous_mu": float(mu)}


def _phase_error(method: str, est: dict, eps_p: float, prec: int):
    """Upper bound on the single-photon phase-error rate of the key, as an exact arb ball (or 1/2 cap).

    ``eps_p``: failure probability of the bound, the square of the single-photon smoothing parameter.
    """
    s1, s1z, v1 = est["s1"], est["s1z"], est["v1"]
    if not (s1 > 0 and s1z > 0):
        return arb(0.5), {}
    if method == "hoeffding":
        return _phase_error_hoeffding(s1, s1z, v1, eps_p, prec)
    # Lower bounds on integer counts: the count is at least the ceiling; upper bounds: at most the floor.
    n = int(math.ceil(R.floor_arb(s1)))
    k = int(math.ceil(R.floor_arb(s1z)))
    e = max(int(math.floor(R.ceil_arb(v1))), 0)
    k_hi = est.get("k_upper")
    k_hi = k if k_hi is None else max(int(k_hi), k)
    if n < 1 or k < 1:
        return arb(0.5), {}
    # The exact hypergeometric bound x(N)/N is not monotone in N (x steps by 1), so it cannot take the
    # lower bound s1_L in place of the unknown N; the Chernoff-Hoeffding form is monotone (proof note, sec. 6).
    phi, p1, _ = PE.kl_key_rate_upper(n, k, k_hi, e, eps_p, prec)
    extra = {"single_photon_key_count": float(n), "single_photon_test_count": float(k),
             "single_photon_test_count_upper": float(k_hi), "single_photon_test_errors_upper": float(e),
             "single_photon_population_rate_upper": p1}
    return (arb(0.5) if phi >= 0.5 else arb(phi)), extra


def key_length(block: DecoyBlock, statistics: str | None = None, prec: int = _PREC,
               analysis: str | None = None, check_worse_data: bool = True) -> KeyLengthResult:
    """Certified secret key length of an observed decoy-state block.

    Parameters
    ----------
    block : DecoyBlock
    statistics : {"exact", "chernoff", "hoeffding", "kato"}, optional
        Default ``"exact"``.  ``"kato"`` needs the block field ``pulses``.
    prec : int
        Bits of ball arithmetic.
    analysis : {None, "linear-programme"}
        Force the linear programme (otherwise the closed form is used where it applies).
    check_worse_data : bool
        Re-evaluate a block with a key at three worse variants of its weakest-intensity data and flag it when
        one gives a longer key (proof note, section 7a); the reported length never changes.  Design searches
        switch it off (it costs about three more evaluations).

    Returns
    -------
    KeyLengthResult
        ``secret_key_length`` rounded down from the lower end of a ball containing the key-length formula
        evaluated at conservative (outward-rounded) estimates; 0 when negative.

    References
    ----------
    .. [1] C. C. W. Lim et al., Phys. Rev. A 89, 022307 (2014).
    .. [2] D. Rusca et al., Appl. Phys. Lett. 112, 171104 (2018).
    """
    result = _key_length(block, statistics, prec, analysis)
    if check_worse_data and result.secret_key_length > 0:
        result = _flag_worse_data(block, statistics, prec, analysis, result)
    return result


#: Perturbations that make a block's data worse (proof note, section 7a): (basis table, kind, change).
_WORSE = (("test", "errors", +1), ("test", "detections", -1), ("key", "detections", -1))


def _flag_worse_data(block, statistics, prec, analysis, result):
    """Flag a block whose key grows when its weakest-intensity data get worse (one more test error, one
    test or key detection fewer).  Each bound stays valid, so this is not a leak; it is reported because a
    counting error upstream would inflate such a key (proof note, section 7a)."""
    w = len(block.intensities) - 1
    longer = []
    for basis, kind, delta in _WORSE:
        counts = list(getattr(block, f"{basis}_{kind}"))
        errors = list(getattr(block, f"{basis}_errors"))
        new = counts[w] + delta
        detections = getattr(block, f"{basis}_detections")[w]
        if new < 0 or (kind == "detections" and new < errors[w]) or (kind == "errors" and new > detections):
            continue
        counts[w] = new
        changed = {f"{basis}_{kind}": tuple(counts)}
        if basis == "key" and kind == "detections" and block.ec_leak_bits > sum(counts):
            continue
        try:
            other = _key_length(replace(block, **changed), statistics, prec, analysis)
        except ComputationError:    # a perturbed block the solver cannot certify: no comparison
            continue
        if other.secret_key_length > result.secret_key_length:
            longer.append((other.secret_key_length - result.secret_key_length,
                           f"{basis}_basis.{kind}[{w}] {'+' if delta > 0 else '-'}1 gives "
                           f"{other.secret_key_length} bits"))
    if not longer:
        return result
    gain = max(g for g, _ in longer)
    longer = [t for _, t in longer]
    note = ("flag: worse data at the weakest intensity give a longer key (" + "; ".join(longer) + "); each bound "
            "is valid, but check the counts: a counting error upstream would inflate this key")
    return replace(result, assumptions=result.assumptions + (note,),
                   estimates={**result.estimates, "note_longer_key_with_worse_data": 1.0,
                              "worse_data_key_gain_bits": float(gain)})


def _key_length(block: DecoyBlock, statistics, prec, analysis) -> KeyLengthResult:
    if block.acceptance is not None:
        return _fixed_length(block, statistics, prec, analysis)
    method = _check_statistics(statistics)
    if method == "exact":
        _check_exact_range(block)
    analysis = analysis_kind(block.intensities, analysis)
    if method == "kato":
        _check_kato(block, analysis)
    ledger = block_ledger(block, method, analysis)
    eps_c = ledger.failure_probability("count_estimation")
    est = _estimates_certified(block, method, analysis, eps_c, prec)
    est, violations = _physical_check(block, est)
    if violations:
        return _inconsistent_result(block, method, analysis, ledger, est, violations)
    return _finish(block, method, analysis, ledger, est, prec, block.ec_leak_bits)


FIXED_LENGTH_ASSUMPTION = (
    "fixed-length protocol: the key length and the acceptance test (count ranges, statistics, leakage bound) "
    "were fixed before the block; an accepted block gets the length certified for the whole acceptance box, a "
    "rejected one aborts (proof note, section 7b)")


def _fixed_length(block: DecoyBlock, statistics, prec, analysis) -> KeyLengthResult:
    """Fixed-length mode: the length certified on the whole acceptance box; 0 (abort) outside it, or when the
    block's own counts fail the variable-length consistency checks."""
    acc = block.acceptance
    if statistics is not None and statistics != acc.statistics:
        raise InputError("statistics", statistics, f"'{acc.statistics}' or none: a block with an acceptance test "
                         "is analysed with the test's own statistics")
    analysis = analysis_kind(block.intensities, analysis)
    if analysis == "linear-programme":
        raise InputError("acceptance", "given", "a block of 2 intensities, or 3 with mu1 > mu2 + mu3 (the closed "
                         "forms; the linear programme has no acceptance-test mode)")
    method = acc.statistics
    ledger = block_ledger(block, method, analysis)
    eps_c = ledger.failure_probability("count_estimation")
    est = _estimates_certified(block, method, analysis, eps_c, prec, box=acc.ranges)
    pos = lambda x: max(R.floor_arb(x), 0.0)  # noqa: E731
    est = dict(est)
    # on an accepted block the test detections and errors are at most the sums of the range tops
    n_z = sum(b for _, b in acc.ranges["test_basis"]["detections"])
    m_z = sum(b for _, b in acc.ranges["test_basis"]["errors"])
    n_x_min = sum(a for a, _ in acc.ranges["key_basis"]["detections"])
    if pos(est["s0"]) + pos(est["s1"]) > n_x_min:
        raise InputError("acceptance", "given", "ranges consistent with the decoy model: the certified vacuum and "
                         f"single-photon key detections ({pos(est['s0']) + pos(est['s1']):.6g}) exceed the fewest "
                         f"key-basis detections the test accepts ({n_x_min})")
    est["k_upper"] = n_z - int(math.ceil(pos(est["s0z"])))
    est["v1_formula"] = est["v1"]
    if R.ceil_arb(est["v1"]) > m_z:
        est["v1"] = arb(m_z)
    fixed = _finish(block, method, analysis, ledger, est, prec, acc.ec_leak_bits)
    settings = {**fixed.settings, "mode": "fixed-length"}
    assumptions = tuple(FIXED_LENGTH_ASSUMPTION if a == VARIABLE_LENGTH_ASSUMPTION else a
                        for a in fixed.assumptions)
    bad = acc.violations(block)
    if not bad:
        # An accepted block must also pass the variable-length consistency checks on its own counts (the
        # box bounds are weaker, so they cannot detect it): the fixed length never exceeds the variable one.
        # With three intensities the check on the key-basis errors is left out: acceptance must not depend
        # on a key-basis outcome (proof note, section 7b).
        own = _estimates_certified(block, method, analysis, eps_c, prec)
        _, violations = _physical_check(block, own, key_errors=analysis == "two-intensity")
        if violations:
            return replace(fixed, secret_key_length=0, assumptions=assumptions, settings=settings,
                           status=Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, "; ".join(violations)))
        return replace(fixed, assumptions=assumptions, settings=settings)
    return replace(fixed, secret_key_length=0, assumptions=assumptions, settings=settings,
                   status=Status.no_key(NoKeyReason.ACCEPTANCE_FAILED, "; ".join(bad)))


def _finish(block, method, analysis, ledger, est, prec, leak_bits) -> KeyLengthResult:
    """Phase-error bound and the key-length formula from certified estimates (one place for both modes)."""
    eps_p = ledger.failure_probability("single_photon_smoothing")    # eps^2: the smoothing's event
    eps_ch = ledger.smoothing("chain_rule")
    eps_pa = ledger.hashing("privacy_amplification")
    phi, extra = _phase_error(method, est, eps_p, prec)
    with ctx.workprec(prec):
        s0 = est["s0"]
        s1 = R.clip0(est["s1"])
        h = PE.binary_entropy_arb_upper(phi)
        ln2 = arb(2).log()
        # each chain rule costs log2(2/eps_ch^2) bits; the leftover hash lemma 2 log2(1/(2 eps_PA))
        chain = CHAIN_RULES * (2 / (arb(eps_ch) * arb(eps_ch))).log() / ln2
        pa = 2 * (1 / (2 * arb(eps_pa))).log() / ln2
        tag = (2 / arb(block.eps_cor)).log() / ln2
        leak = arb(leak_bits)
        single = s1 * (1 - h)
        total = s0 + single - leak - chain - pa - tag
    # A float certainly below the ball (float(total.lower()) would round to nearest whenever the caller's
    # flint precision exceeds 53 bits, and could land on the integer just above the lower end).
    lower = R.floor_arb(total) if total.is_finite() else -math.inf
    length = max(0, int(math.floor(lower))) if math.isfinite(lower) else 0
    terms = {"vacuum_bits": R.floor_arb(s0), "single_photon_bits": R.floor_arb(single),
             "ec_leakage": float(leak_bits), "chain_rule_penalty": R.ceil_arb(chain),
             "hash_penalty": R.ceil_arb(pa), "verification_tag": R.ceil_arb(tag),
             "key_length_lower_bound": R.floor_arb(total)}
    estimates = {"vacuum_key_detections_lower": R.floor_arb(est["s0"]),
                 "single_photon_key_detections_lower": R.floor_arb(est["s1"]),
                 "single_photon_test_detections_lower": R.floor_arb(est["s1z"]),
                 "single_photon_test_errors_upper": R.ceil_arb(est["v1"]),
                 "single_photon_test_errors_upper_before_clipping": R.ceil_arb(est["v1_formula"]),
                 "phase_error_rate_upper": R.ceil_arb(phi), **extra}
    return KeyLengthResult(
        protocol=PROTOCOL_NAME, secret_key_length=length, ledger=ledger, statistics=method,
        assumptions=ASSUMPTIONS + _kato_extra(method, KATO_ASSUMPTION), terms=terms,
        estimates=estimates, formula=FORMULA, references=REFERENCES + _kato_extra(method, KATO_REFERENCE),
        status=_key_status(length, terms, estimates), settings={"analysis": analysis})


def _key_status(length: int, terms: dict, estimates: dict) -> Status:
    """Key, or which part of the formula left none: no single photons, the phase-error bound at 1/2, or the
    leakage and penalties exceeding the vacuum and single-photon bits."""
    if length > 0:
        return KEY
    s1, s1z = estimates["single_photon_key_detections_lower"], estimates["single_photon_test_detections_lower"]
    if not (s1 >= 1 and s1z >= 1):
        return Status.no_key(NoKeyReason.NO_SINGLE_PHOTON_BOUND, f"single-photon lower bounds: key basis "
                                                                 f"{s1:.6g}, test basis {s1z:.6g}")
    if estimates["phase_error_rate_upper"] >= 0.5:
        return Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, f"single-photon phase-error upper bound "
                                                            f"{estimates['phase_error_rate_upper']:.4g} >= 1/2")
    gain = terms["vacuum_bits"] + terms["single_photon_bits"]
    cost = terms["ec_leakage"] + terms["chain_rule_penalty"] + terms["hash_penalty"] + terms["verification_tag"]
    detail = (f"vacuum {terms['vacuum_bits']:.6g} + single-photon {terms['single_photon_bits']:.6g} bits "
              f"against leakage {terms['ec_leakage']:.6g} + chain rule {terms['chain_rule_penalty']:.4g} + hash "
              f"{terms['hash_penalty']:.4g} + verification {terms['verification_tag']:.4g} bits")
    reason = NoKeyReason.PENALTIES_EXCEED_ENTROPY if gain - cost < 1 else NoKeyReason.BELOW_ONE_BIT
    return Status.no_key(reason, detail)


def key_length_batch(blocks, statistics: str | None = None, *, prec: int = _PREC, jobs: int = 1) -> list:
    """Key lengths of many blocks, in order; each result identical to :func:`key_length` of that block.

    The same shape as BB84's ``key_length_batch``.  Every block is computed on its own (the decoy analysis has
    no cache shared between blocks); ``jobs > 1`` splits a batch of at least ``_PARALLEL_MIN`` blocks into
    contiguous chunks computed in worker processes and joined in order (:func:`._batch.map_in_chunks`).

    Parameters
    ----------
    blocks : sequence of DecoyBlock
    statistics : {"exact", "chernoff", "hoeffding", "kato"}, optional
    prec : int
        Bits of ball arithmetic.
    jobs : int
        Worker processes.

    Returns
    -------
    list of KeyLengthResult
    """
    _check_statistics(statistics)  # fail before any block is computed
    return map_in_chunks(_batch_chunk, blocks, jobs, _PARALLEL_MIN, (statistics, prec))


#: Smallest batch worth splitting over processes (a decoy block costs milliseconds; start-up about a second).
_PARALLEL_MIN = 200


def _batch_chunk(blocks, statistics, prec) -> list:
    return [key_length(b, statistics, prec) for b in blocks]


def _kato_extra(method: str, text: str) -> tuple:
    return (text,) if method == "kato" else ()


def _inconsistent_result(block, method, analysis, ledger, est, violations) -> KeyLengthResult:
    """Zero key for a block whose decoy bounds contradict its own totals (see :func:`_physical_check`)."""
    estimates = {"vacuum_key_detections_lower": R.floor_arb(est["s0"]),
                 "single_photon_key_detections_lower": R.floor_arb(est["s1"]),
                 "single_photon_test_detections_lower": R.floor_arb(est["s1z"]),
                 "single_photon_test_errors_upper": R.ceil_arb(est["v1"]),
                 "phase_error_rate_upper": 0.5, "note_block_inconsistent_with_decoy_model": 1.0}
    return KeyLengthResult(
        protocol=PROTOCOL_NAME, secret_key_length=0, ledger=ledger, statistics=method,
        assumptions=ASSUMPTIONS + _kato_extra(method, KATO_ASSUMPTION),
        terms={"key_length_lower_bound": 0.0}, estimates=estimates, formula=FORMULA,
        references=REFERENCES + _kato_extra(method, KATO_REFERENCE),
        status=Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, "; ".join(violations)), settings={"analysis": analysis})


#: The exact binomial tails accept at most this many trials (finitekey.bounds.binomial_exact).
MAX_EXACT_TRIALS = 2**50


def _check_exact_range(block: DecoyBlock) -> None:
    """The exact intervals treat a basis's total detections as the number of trials: at most 2**50."""
    for name, det in (("key_basis", block.key_detections), ("test_basis", block.test_detections)):
        allowed = (f"counts whose sum over intensities is at most 2**50 = {MAX_EXACT_TRIALS} for "
                   f"statistics='exact' (use 'chernoff' or 'hoeffding' for larger blocks)")
        for i, d in enumerate(det):
            if d > MAX_EXACT_TRIALS:
                raise InputError(f"{name}.detections[{i}]", d, allowed)
        if sum(det) > MAX_EXACT_TRIALS:
            raise InputError(f"{name}.detections", list(det), allowed)


def _check_kato(block: DecoyBlock, analysis: str) -> None:
    if block.pulses is None:
        raise InputError("pulses", None, "the total number of pulses sent in the block (required for "
                         "statistics='kato': Kato's inequality runs over all pulses)")
    if analysis == "linear-programme":
        raise InputError("statistics", "kato", "exact, chernoff or hoeffding for this block: kato supports the "
                         "closed forms only (2 intensities, or 3 with mu1 > mu2 + mu3)")


def _check_design_statistics(statistics):
    method = _check_statistics(statistics)
    if method not in DESIGN_STATISTICS:
        raise InputError("statistics", method, "design supports " + ", ".join(DESIGN_STATISTICS))
    return method


def _check_statistics(statistics):
    if statistics is None:
        return DEFAULT_STATISTICS
    if statistics not in STATISTICS:
        raise InputError("statistics", statistics, "one of: " + ", ".join(STATISTICS))
    return statistics

