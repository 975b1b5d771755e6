"""Certified key length of a ``tf-sns`` block (proof note ``proofs_notes/protocols/tf_sns.md``).

From the block's counts the analysis bounds, with the decoy relations of section 3 of the note,

* ``y_1``: the single-photon yield of the one-sided states (lower bound; vacuum + two decoys);
* ``n_1``: the untagged key bits, Z windows where exactly one side sent and it sent one photon (lower bound);
* ``m_ph``: the phase errors of those bits, from the errors of the post-selected X1 windows (upper bound,
  including the slice-width correction ``(1 - s)/2`` with ``s = sinc(D_s/2)``),

and extracts

.. math:: \\ell = \\Big\\lfloor n_1^L\\,\\big(1 - h(m_{ph}^U / n_1^L)\\big) - \\lambda_{EC}
          - \\log_2\\tfrac{2}{\\varepsilon_{ch}^2} - 2\\log_2\\tfrac{1}{2\\varepsilon_{PA}}
          - \\log_2\\tfrac{2}{\\varepsilon_{cor}}\\Big\\rfloor .

The formulas are written once (:func:`estimates`) and run on numpy floats (design) and on arb balls (the
certified length).

References
----------
.. [1] X.-B. Wang, Z.-W. Yu, X.-L. Hu, Phys. Rev. A 98, 062323 (2018), arXiv:1805.09222 (the protocol).
.. [2] C. Jiang, Z.-W. Yu, X.-L. Hu, X.-B. Wang, Phys. Rev. Applied 12, 024061 (2019), arXiv:1904.00192
   (its finite-key analysis; the accounting here is the project's own, see the note).
.. [3] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from flint import arb, ctx

from ...budget import Charge, Ledger, Role, TermSpec, allocate
from ...errors import InputError
from ...decoy import intervals as IV
from ...decoy import rounding as R
from .. import _phase_error as PE
from .._batch import map_in_chunks
from .._result import KEY, KeyLengthResult, NoKeyReason, Status
from .block import SECRECY_TERMS, TFBlock
from .scenario import PROTOCOL_NAME, class_probabilities

__all__ = ["STATISTICS", "DEFAULT_STATISTICS", "COUNT_EVENTS", "term_specs", "block_ledger", "estimates",
           "key_length", "key_length_batch", "FORMULA", "ASSUMPTIONS", "REFERENCES"]

STATISTICS = ("exact", "chernoff")
DEFAULT_STATISTICS = "exact"
_PREC = 128
#: One-sided events at the count-estimation epsilon: weak one-sided (lower), strong one-sided (upper), vacuum
#: (upper and lower), X1 errors (upper), and the untagged key bits from their expectation (lower).
COUNT_EVENTS = 6
#: Appearances of the single-photon smoothing parameter in the final smoothing (doubled slot of the chain rule).
SINGLE_PHOTON_APPEARANCES = 2
#: One chain rule: untagged bits | the other key bits (whose min-entropy is taken as 0).
CHAIN_RULES = 1

FORMULA = (r"\ell = \Big\lfloor n_1^{L}\,\big(1 - h(m_{ph}^{U}/n_1^{L})\big) - \lambda_{EC}"
           r" - \log_2\frac{2}{\varepsilon_{ch}^2} - 2\log_2\frac{1}{2\varepsilon_{PA}}"
           r" - \log_2\frac{2}{\varepsilon_{cor}}\Big\rfloor,\quad \Pr[m_{ph} > m_{ph}^{U}] \le \varepsilon_1^2")

REFERENCES = (
    "X.-B. Wang, Z.-W. Yu, X.-L. Hu, Phys. Rev. A 98, 062323 (2018), arXiv:1805.09222",
    "C. Jiang, Z.-W. Yu, X.-L. Hu, X.-B. Wang, Phys. Rev. Applied 12, 024061 (2019), arXiv:1904.00192",
    "X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005)",
    "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012)",
    "M. Mitzenmacher, E. Upfal, Probability and Computing, Cambridge University Press (2005), Thms 4.4, 4.5",
)

ASSUMPTIONS = (
    "each side's pulses are phase-randomised weak coherent states with continuous uniform phases; the Z-window "
    "phases are never announced, the X-window phases only after the relay's announcement",
    "the relay (Charlie) and the channel are untrusted; only the announced effective events are used",
    "the phase reference that defines the accepted slices (|theta_A - theta_B - psi| <= D_s/2, or near pi) is "
    "fixed before the block, not fitted to the block's own data",
    "both sides use the same intensities and probabilities, so the merged one-sided classes (either side "
    "sending) have the single-photon state (|10><10| + |01><01|)/2; only merged counts are used; asymmetric arms "
    "are allowed and only cost key through the model's error rates",
    "window type, intensity and sending decisions are chosen independently each window with the declared "
    "probabilities and announced after the block's last window is measured",
    "block closed after a number of windows fixed before it (closed_by = rounds), never when quotas fill",
    "variable-length use: count-interval failures are charged once each; the phase-error bound is a smoothing "
    "term evaluated at its parameter squared (proof note finitekey/_notes/protocols/tf_sns.md, section 5)",
    "ec_leak_bits bounds what error correction can disclose (maximum over runs for interactive codes)",
)


def term_specs() -> tuple:
    """Ledger terms: 6 count events, the single-photon smoothing (doubled by the chain rule, event at eps^2),
    one chain rule, hashing, correctness.  Default shares: one unit per event or appearance (13 units)."""
    units = COUNT_EVENTS + 2 * SINGLE_PHOTON_APPEARANCES + 2 * CHAIN_RULES + 1
    return (
        TermSpec("count_estimation", Role.SECRECY, Charge.FAILURE, COUNT_EVENTS,
                 f"{COUNT_EVENTS} one-sided bounds: five intervals on expected counts and the untagged key bits "
                 "from their expectation", COUNT_EVENTS / units),
        TermSpec("single_photon_smoothing", Role.SECRECY, Charge.SMOOTHING, SINGLE_PHOTON_APPEARANCES,
                 "smoothing of the untagged bits' min-entropy; the phase-error bound fails with probability "
                 "at most eps^2; doubled by the chain rule", 2 * SINGLE_PHOTON_APPEARANCES / units),
        TermSpec("chain_rule", Role.SECRECY, Charge.SMOOTHING, CHAIN_RULES,
                 "smoothing parameter of the chain rule (untagged bits | other key bits)", 2 * CHAIN_RULES / units),
        TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
                 "leftover hash lemma (two-universal hashing)", 1 / units),
        TermSpec("correctness", Role.CORRECTNESS, Charge.FAILURE, 1,
                 "error-verification hash fails to detect a residual error"),
    )


def block_ledger(block: TFBlock) -> Ledger:
    """The block's ledger: eps_sec split by ``block.epsilon_split`` or the default shares."""
    led = allocate(block.eps_sec, block.eps_cor, term_specs(), block.epsilon_split)
    led.failure_probability("single_photon_smoothing")   # its square must be a positive float
    # The chain rule doubles the smoothing of one slot; we put the single-photon term there (note, section 5).
    # With eps_ch <= eps_1 the ledger also covers the other reading, as in decoy-bb84 and mdi-bb84.
    if led.smoothing("chain_rule") > led.smoothing("single_photon_smoothing"):
        fr = led.fractions()
        raise InputError("epsilon_split.chain_rule", fr["chain_rule"], "a share at most half the "
                         f"single_photon_smoothing share ({fr['single_photon_smoothing']:.6g}): the chain rule's "
                         "epsilon may not exceed the single-photon smoothing")
    return led


@dataclass(frozen=True)
class _Ops:
    """The number type of :func:`estimates`: numpy floats or arb balls."""

    exp: object
    sqrt: object
    sin: object
    maximum: object


_FLOAT = _Ops(np.exp, np.sqrt, np.sin, np.maximum)


_ARB = _Ops(lambda x: x.exp(), lambda x: x.sqrt(), lambda x: x.sin(), None)


def estimates(params, width, weak_lo, strong_hi, vac_hi, vac_lo, x1err_hi, beta_c, beta_p, ops=_FLOAT,
              y1=None) -> dict:
    """The decoy, untagged-count and phase-error estimates from bounds on expected counts (note, section 3-4).

    Parameters
    ----------
    params : SNSParameters (or a mapping of arrays with the same names, for designs)
    width : acceptance width D_s (rad)
    weak_lo, strong_hi, vac_hi, vac_lo, x1err_hi : bounds on the expected counts of the weak and strong
        one-sided classes, the vacuum class (both sides) and the X1 errors
    beta_c, beta_p : ``ln(1/eps)`` of the untagged-count conversion and of the phase-error deviation
    ops : _Ops
    y1 : optional
        A lower bound on the one-sided single-photon yield computed elsewhere (the certified path takes it
        from :func:`finitekey.decoy.bound`); by default the vacuum + two decoys closed form below.

    Returns
    -------
    dict
        ``y1`` (lower), ``m1`` (expected untagged bits, lower), ``mph`` (expected phase errors, upper),
        ``n1`` (untagged bits, lower), ``ph`` (phase errors, upper).  Not clipped.
    """
    g = params if isinstance(params, dict) else params.__dict__
    mu_z = g["signal_intensity"]
    mu1, mu2 = g["mu1"], g["mu2"]
    cl = _classes(g, width)
    exp, sqrt = ops.exp, ops.sqrt
    c1 = weak_lo / cl["weak_one_sided"]
    c2 = strong_hi / cl["strong_one_sided"]
    c0_hi = vac_hi / cl["vacuum"]
    c0_lo = vac_lo / cl["vacuum"]
    # vacuum + two decoys (one-sided states): mu1 mu2 (mu2 - mu1) y1 >= mu2^2 e^mu1 c1 - mu1^2 e^mu2 c2
    #                                                                   - (mu2^2 - mu1^2) y0
    if y1 is None:
        y1 = (mu2 * mu2 * exp(mu1) * c1 - mu1 * mu1 * exp(mu2) * c2 - (mu2 * mu2 - mu1 * mu1) * c0_hi) / (
            mu1 * mu2 * (mu2 - mu1))
    r_z = cl["untagged_key"] * mu_z * exp(-mu_z)
    m1 = r_z * y1
    half = width / 2
    s = ops.sin(half) / half
    px1 = cl["x1"]
    t1 = (x1err_hi - px1 / 2 * exp(-2 * mu1) * c0_lo) / (px1 * 2 * mu1 * exp(-2 * mu1))
    mph = r_z / s * (t1 - (1 - s) / 2 * y1)
    return {"y1": y1, "m1": m1, "mph": mph, "s": s, "t1": t1}


def _classes(g, width):
    pz, e = g["key_window_probability"], g["sending_probability"]
    p0, p1, p2 = g["p0"], g["p1"], g["p2"]
    x = (1 - pz) * (1 - pz)
    return {"untagged_key": 2 * pz * pz * e * (1 - e), "weak_one_sided": 2 * x * p0 * p1,
            "strong_one_sided": 2 * x * p0 * p2, "vacuum": x * p0 * p0, "x1": x * p1 * p1 * width / _pi(width)}


def _pi(width):
    return arb.pi() if isinstance(width, arb) else math.pi


def flat_parameters(p) -> dict:
    """The parameters as the flat mapping :func:`estimates` reads."""
    return {"signal_intensity": p.signal_intensity, "sending_probability": p.sending_probability,
            "mu1": p.decoy_intensities[0], "mu2": p.decoy_intensities[1], "p0": p.decoy_probabilities[0],
            "p1": p.decoy_probabilities[1], "p2": p.decoy_probabilities[2],
            "key_window_probability": p.key_window_probability}


def chernoff_actual_lower(m, beta, sqrt):
    """``m - sqrt(2 beta m)``: a sum of independent Bernoulli variables with mean ``m`` is below it with
    probability at most ``e^{-beta}`` (Mitzenmacher-Upfal Thm 4.5); non-decreasing in ``m`` where positive."""
    return m - sqrt(2 * beta * m)


def chernoff_actual_upper(m, beta, sqrt):
    """``m + (beta + sqrt(beta^2 + 8 beta m))/2``: exceeded with probability at most ``e^{-beta}``
    (Mitzenmacher-Upfal Thm 4.4, ``exp(-d^2 m/(2+d))`` form); increasing in ``m``."""
    return m + (beta + sqrt(beta * beta + 8 * beta * m)) / 2


def single_photon_yield_lower(params, width, weak_lo, strong_hi, vac_lo, vac_hi, total, prec=_PREC) -> arb:
    """Certified lower bound on the one-sided single-photon yield ``y_1`` from the decoy engine.

    The merged one-sided classes (strong, weak, vacuum) are one virtual sender with intensities
    ``(mu_2, mu_1, 0)`` chosen with probabilities proportional to the class probabilities ``P_k``
    (note, section 3.2); the counts are rescaled by ``q_k / P_k`` so that :func:`finitekey.decoy.bound`'s
    single-photon count ``s_1`` (the closed form of Lim et al. 2014 here: the vacuum + two decoys form of
    :func:`estimates` with its vacuum term split as ``-mu_2^2 y_0^U + mu_1^2 y_0^L``, lower by
    ``mu_1 (y_0^U - y_0^L) / (mu_2 (mu_2 - mu_1))``; equal at exact counts) gives ``y_1 = s_1 / tau_1``.  Sides of the intervals the analysis does not charge are given
    their trivial values (0 and ``total``), which always hold.

    Returns
    -------
    arb
    """
    from ... import decoy   # the decoy engine sits below the protocols
    g = {k: arb(v) for k, v in flat_parameters(params).items()}
    with ctx.workprec(prec):
        cl = _classes(g, arb(width))
        weights = (cl["strong_one_sided"], cl["weak_one_sided"], cl["vacuum"])
        tot = weights[0] + weights[1] + weights[2]
        q = tuple(float(w / tot) for w in weights)     # any positive floats would do: the counts are rescaled
        mus = (params.decoy_intensities[1], params.decoy_intensities[0], 0.0)
        # E[C_k] = P_k sum_n e^{-mu_k} mu_k^n/n! y_n, so E[C_k] q_k / P_k has the engine's form with
        # s_n / tau_n = y_n exactly (tau_n over the floats q)
        r = [arb(qq) / w for qq, w in zip(q, weights)]
        lo = [arb(0), weak_lo * r[1], vac_lo * r[2]]
        hi = [strong_hi * r[0], arb(total) * r[1], vac_hi * r[2]]
        s1 = decoy.bound([decoy.Sender(mus, q)], lo, hi, (1,), "lower", prec=prec)
        tau1 = sum((arb(qq) * arb(m) * (-arb(m)).exp() for qq, m in zip(q, mus)), arb(0))
        return s1 / tau1


def _check_statistics(statistics):
    if statistics is None:
        return DEFAULT_STATISTICS
    if statistics not in STATISTICS:
        raise InputError("statistics", statistics, "one of: " + ", ".join(STATISTICS))
    return statistics


def key_length(block: TFBlock, statistics: str | None = None, prec: int = _PREC) -> KeyLengthResult:
    """Certified secret key length of an observed ``tf-sns`` block.

    Parameters
    ----------
    block : TFBlock
    statistics : {"exact", "chernoff"}, optional
        Intervals on the expected counts: exact binomial (Clopper-Pearson over ``effective_events`` trials,
        default) or multiplicative Chernoff.
    prec : int
        Bits of ball arithmetic.

    Returns
    -------
    KeyLengthResult
        Rounded down from the lower end of a ball containing the key-length formula at conservative inputs.
    """
    method = _check_statistics(statistics)
    ledger = block_ledger(block)
    eps_c = ledger.failure_probability("count_estimation")
    eps_p = ledger.failure_probability("single_photon_smoothing")     # eps_1^2
    eps_ch = ledger.smoothing("chain_rule")
    eps_pa = ledger.hashing("privacy_amplification")
    T = block.effective_events
    with ctx.workprec(prec):
        def iv(c):
            return IV.count_interval_certified(method, c, T, eps_c, prec)
        weak_lo = iv(block.weak_one_sided)[0]
        strong_hi = iv(block.strong_one_sided)[1]
        vac_lo, vac_hi = iv(block.vacuum)
        x1_hi = iv(block.x1_errors)[1]
        g = {k: arb(v) for k, v in flat_parameters(block.parameters).items()}
        beta_c = -arb(eps_c).log()
        beta_p = -arb(eps_p).log()
        y1 = single_photon_yield_lower(block.parameters, block.acceptance_width_rad, weak_lo, strong_hi, vac_lo,
                                       vac_hi, T, prec)
        est = estimates(g, arb(block.acceptance_width_rad), weak_lo, strong_hi, vac_hi, vac_lo, x1_hi, beta_c,
                        beta_p, _ARB, y1=y1)
        y1_lo = R.floor_arb(est["y1"])
        m1_lo = max(R.floor_arb(est["m1"]), 0.0) if y1_lo > 0 else 0.0
        n1 = chernoff_actual_lower(arb(m1_lo), beta_c, lambda x: x.sqrt()) if m1_lo > 0 else arb(0)
        n1_lo = max(math.ceil(R.floor_arb(n1)), 0) if n1 > 0 else 0    # an integer count >= a real bound
        mph_hi = max(R.ceil_arb(est["mph"]), 0.0)
        ph = chernoff_actual_upper(arb(mph_hi), beta_p, lambda x: x.sqrt())
        ph_hi = int(math.floor(R.ceil_arb(ph)))                        # an integer count <= a real bound
        if n1_lo >= 1:
            phi = arb(min(R.ceil_arb(arb(ph_hi) / n1_lo), 0.5))
        else:
            phi = arb(0.5)
        h = PE.binary_entropy_arb_upper(phi)
        ln2 = arb(2).log()
        chain = CHAIN_RULES * (2 / (arb(eps_ch) * arb(eps_ch))).log() / ln2
        pa = 2 * (1 / (2 * arb(eps_pa))).log() / ln2
        tag = (2 / arb(block.eps_cor)).log() / ln2
        single = arb(n1_lo) * (1 - h)
        total = single - block.ec_leak_bits - chain - pa - tag
    lower = R.floor_arb(total) if total.is_finite() else -math.inf
    length = max(0, int(math.floor(lower))) if math.isfinite(lower) else 0
    terms = {"untagged_bits": R.floor_arb(single), "ec_leakage": float(block.ec_leak_bits),
             "chain_rule_penalty": R.ceil_arb(chain), "hash_penalty": R.ceil_arb(pa),
             "verification_tag": R.ceil_arb(tag), "key_length_lower_bound": lower if math.isfinite(lower) else -1e300}
    estimates_out = {"single_photon_yield_lower": y1_lo, "untagged_expected_lower": m1_lo,
                     "untagged_bits_lower": float(n1_lo), "phase_errors_expected_upper": mph_hi,
                     "phase_errors_upper": float(ph_hi), "phase_error_rate_upper": R.ceil_arb(phi),
                     "slice_factor_sinc": R.floor_arb(est["s"])}
    status = KEY
    if length == 0:
        status = _no_key(block, n1_lo, phi, terms)
    if n1_lo > block.key_detections:
        length = 0
        status = Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, f"untagged key bits lower bound {n1_lo} above the "
                               f"key detections {block.key_detections}")
    return KeyLengthResult(protocol=PROTOCOL_NAME, secret_key_length=length, ledger=ledger, statistics=method,
                           assumptions=ASSUMPTIONS, terms=terms, estimates=estimates_out, formula=FORMULA,
                           references=REFERENCES, status=status, settings={"analysis": "one-sided decoy bound by finitekey.decoy (vacuum + two decoys)"})


def _no_key(block, n1_lo, phi, terms) -> Status:
    if n1_lo < 1:
        return Status.no_key(NoKeyReason.NO_SINGLE_PHOTON_BOUND, "the decoy bounds certify no untagged key bits")
    if phi >= arb(0.5):
        return Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, "phase-error upper bound of the untagged bits >= 1/2")
    gain = terms["untagged_bits"]
    cost = terms["ec_leakage"] + terms["chain_rule_penalty"] + terms["hash_penalty"] + terms["verification_tag"]
    detail = (f"untagged {gain:.6g} bits against leakage {terms['ec_leakage']:.6g} + chain rule "
              f"{terms['chain_rule_penalty']:.4g} + hash {terms['hash_penalty']:.4g} + verification "
              f"{terms['verification_tag']:.4g} bits")
    reason = NoKeyReason.PENALTIES_EXCEED_ENTROPY if gain - cost < 1 else NoKeyReason.BELOW_ONE_BIT
    return Status.no_key(reason, detail)


def key_length_batch(blocks, statistics: str | None = None, *, prec: int = _PREC, jobs: int = 1) -> list:
    """Key lengths of many blocks, in order; each identical to :func:`key_length` of that block."""
    _check_statistics(statistics)
    return map_in_chunks(_batch_chunk, blocks, jobs, 200, (statistics, prec))


def _batch_chunk(blocks, statistics, prec) -> list:
    return [key_length(b, statistics, prec) for b in blocks]


def float_key_length(g: dict, width: float, counts: dict, leak, eps_sec: float, eps_cor: float, method: str,
                     fractions: dict | None = None):
    """The key-length formula in floats at (expected) counts, vectorised over the parameter arrays of ``g``;
    for designs only (never a reported length).  ``method`` ``"fast"``: closed-form Chernoff-type intervals
    ``c - sqrt(2 b c)``, ``c + b + sqrt(b^2 + 2 b c)`` (``b = ln(1/eps)``) instead of the method's own."""
    specs = term_specs()
    fr = fractions or {s.name: s.default_fraction for s in specs if s.role is Role.SECRECY}
    w = {s.name: s.weight for s in specs}
    eps = {n: eps_sec * fr[n] / w[n] for n in SECRECY_TERMS}
    eps_c, eps_1, eps_ch, eps_pa = (eps["count_estimation"], eps["single_photon_smoothing"], eps["chain_rule"],
                                    eps["privacy_amplification"])
    T = counts["effective_events"]

    def iv(c):
        if method == "fast":   # design searches: closed-form Chernoff-type interval, no special functions
            b = math.log(1 / eps_c)
            c = np.maximum(c, 0.0)
            return np.maximum(c - np.sqrt(2 * b * c), 0.0), c + b + np.sqrt(b * b + 2 * b * c)
        return IV.count_interval_float(method, c, T, eps_c)
    weak_lo = iv(counts["weak_one_sided"])[0]
    strong_hi = iv(counts["strong_one_sided"])[1]
    vac_lo, vac_hi = iv(counts["vacuum"])
    x1_hi = iv(counts["x1_errors"])[1]
    beta_c = math.log(1 / eps_c)
    beta_p = 2 * math.log(1 / eps_1)
    est = estimates(g, width, weak_lo, strong_hi, vac_hi, vac_lo, x1_hi, beta_c, beta_p, _FLOAT)
    with np.errstate(all="ignore"):
        m1 = np.maximum(est["m1"], 0.0)
        n1 = np.maximum(chernoff_actual_lower(m1, beta_c, np.sqrt), 0.0)
        ph = chernoff_actual_upper(np.maximum(est["mph"], 0.0), beta_p, np.sqrt)
        phi = np.where(n1 > 0, np.minimum(ph / np.maximum(n1, 1e-300), 0.5), 0.5)
        from .scenario import binary_entropy
        single = n1 * (1 - np.where(phi >= 0.5, 1.0, binary_entropy(phi)))
        pen = (CHAIN_RULES * math.log2(2 / eps_ch ** 2) + 2 * math.log2(1 / (2 * eps_pa)) + math.log2(2 / eps_cor))
        out = single - leak - pen
    return np.where(np.isfinite(out), out, -np.inf)
