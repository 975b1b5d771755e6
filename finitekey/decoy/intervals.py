"""Certified intervals on expected counts, the inputs of the decoy estimates (one per setting).

Given the photon-number tags of the counted rounds, the count of one setting is a sum of independent,
non-identical Bernoulli variables (``proofs_notes/decoy/tagging.md``); these functions turn an observed
count into an interval on its expectation, failing with at most ``eps`` per side, float (vectorised, for
designs) or certified (arb balls, exact at conservative floats).  Statistics ``kato``: Kato's inequality over
all rounds, for sums of conditional probabilities (``proofs_notes/protocols/decoy_bb84.md``, section 2a).

Moved from the former ``protocols/_decoy_analysis.py`` (unchanged).
"""

from __future__ import annotations

import math

import numpy as np
from flint import arb, ctx

from ..bounds.binomial_exact import (binomial_lower_limit_certified, binomial_upper_limit_certified)
from ..bounds.chernoff import (expectation_lower, expectation_lower_certified, expectation_upper,
                               expectation_upper_certified)
from ..bounds.kato import KATO, kato_choose_a
from ..compile import to_arb
from .rounding import ceil_arb, floor_arb, lower_end, upper_end

__all__ = ["COUNT_METHODS", "KATO_METHOD", "count_interval_float", "count_interval_certified", "kato_tilt",
           "kato_count_interval_certified", "count_intervals_certified", "kato_actual_lower", "kato_actual_upper"]

LN2 = math.log(2.0)

#: Count-statistics methods: how an interval on an expected count is inferred from an observed count.
COUNT_METHODS = ("exact", "chernoff", "hoeffding")
#: Kato's inequality over all pulses (dependent rounds); certified key length only, no float design path.
KATO_METHOD = "kato"



# ---------------------------------------------------------------------------------------------------------
# intervals on expected counts
# ---------------------------------------------------------------------------------------------------------
def count_interval_float(method: str, observed, total, eps):
    """Float (vectorised, real-valued) interval ``(lo, hi)`` on the expected count.

    ``observed`` counts among ``total`` detections of the basis; ``eps`` the failure probability of each
    side.  Accepts non-integer counts (expected counts during design); NOT certified.
    """
    c = np.asarray(observed, dtype=float)
    C = np.asarray(total, dtype=float)
    eps = np.asarray(eps, dtype=float)
    if method == "hoeffding":
        d = np.sqrt(C / 2.0 * np.log(1.0 / eps))
        return c - d, c + d
    if method == "exact":
        from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up

        with np.errstate(all="ignore"):
            cc = np.clip(c, 0.0, C)
            up = C * special.betainccinv(cc + 1.0, np.maximum(C - cc, 1e-300), eps)
            lo = np.where(cc > 0, C * special.betaincinv(np.maximum(cc, 1e-300), C - cc + 1.0, eps), 0.0)
        up = np.where(cc >= C, C, np.maximum(up, cc + 1.0))
        lo = np.maximum(np.minimum(lo, cc - 1.0), 0.0)
        return lo, np.minimum(up, C)
    if method == "chernoff":
        cc = np.maximum(c, 0.0)
        return expectation_lower(cc, eps), expectation_upper(cc, eps)
    raise ValueError(method)


def count_interval_certified(method: str, observed: int, total: int, eps: float, prec: int = 128):
    """Certified interval ``(lo, hi)`` (arb balls, exact at conservative floats) on an expected count.

    Methods
    -------
    hoeffding : ``observed -/+ sqrt(total/2 ln(1/eps))`` (Hoeffding 1963, independent trials in [0, 1]).
    exact : ``total`` times the one-sided Clopper-Pearson limits; valid for independent, non-identical
        Bernoulli trials because the Poisson-binomial tail is dominated by the binomial one with the same
        mean when the limit lies at least one count beyond the observation (Hoeffding 1956), which the
        clamp ``hi >= observed + 1``, ``lo <= observed - 1`` enforces.
    chernoff : multiplicative Chernoff bound (independent, non-identical Bernoulli trials).
    """
    c, C = int(observed), int(total)
    with ctx.workprec(prec):
        if method == "hoeffding":
            d = (arb(C) / 2 * (1 / to_arb(eps)).log()).sqrt()
            return arb(c) - d, arb(c) + d
        if method == "exact":
            if C == 0:
                return arb(0), arb(0)
            pu = binomial_upper_limit_certified(c, C, eps, prec)
            pl = binomial_lower_limit_certified(c, C, eps, prec)
            hi = arb(pu) * C
            hi = arb(ceil_arb(hi))
            if hi < c + 1:
                hi = arb(min(c + 1, C))
            lo = arb(floor_arb(arb(pl) * C))
            if lo > c - 1:
                lo = arb(max(c - 1, 0))
            return lo, hi
        if method == "chernoff":
            return arb(expectation_lower_certified(c, eps, prec)), arb(expectation_upper_certified(c, eps, prec))
    raise ValueError(method)


# ---------------------------------------------------------------------------------------------------------
# Kato's inequality over the rounds (statistics="kato"; proof note, section 2a)
# ---------------------------------------------------------------------------------------------------------
def kato_tilt(n: int, expected, eps: float, direction: str) -> float:
    """Tilt ``a`` of Kato's inequality fixed from a pre-registered expected sum (``None``: ``a = 0``).

    ``direction="upper"`` tunes the event ``Lambda - Gamma >= (b + a (2 Gamma/n - 1)) sqrt(n)`` (upper bound
    on ``Lambda``, or lower bound on ``Gamma`` from ``Lambda``), ``"lower"`` the mirrored event.  ``a = 0`` is
    Azuma-Hoeffding.  The result must depend on design values only, never on the observed block.
    """
    if expected is None:
        return 0.0
    m = min(max(float(expected), 0.0), float(n))
    a = kato_choose_a(int(n), m, eps, direction)
    # the conversions divide by 1 + 2a/sqrt(n); keep it >= 1/2 (a rule on design values only)
    return a if 1 + 2 * a / math.sqrt(n) >= 0.5 else 0.0


def _kato_b(n: int, a: float, eps: float, prec: int) -> arb:
    """Exact ball at a float >= Kato's ``b`` at (n, a, eps)."""
    return arb(KATO.deviation_certified(eps, prec, n=int(n), a=float(a)).hi)


def kato_count_interval_certified(observed: int, n: int, a_lo: float, a_hi: float, eps: float, prec: int = 128):
    """Certified interval on ``Lambda_n`` (sum over ``n`` rounds of the conditional probabilities) from the
    observed sum ``Gamma_n = observed``: each side fails with probability at most ``eps`` (Kato 2020, from
    memory; the lower side is the inequality for the complemented rounds).

    ``hi = Gamma + (b(a_hi) + a_hi (2 Gamma/n - 1)) sqrt(n)``, ``lo = Gamma - (b(a_lo) - a_lo (2 Gamma/n - 1))
    sqrt(n)``, as exact balls at outward-rounded floats, clipped to ``[0, n]``.
    """
    c, n = int(observed), int(n)
    with ctx.workprec(prec):
        rn = arb(n).sqrt()
        t = 2 * arb(c) / n - 1
        hi = arb(c) + (_kato_b(n, a_hi, eps, prec) + arb(a_hi) * t) * rn
        lo = arb(c) - (_kato_b(n, a_lo, eps, prec) - arb(a_lo) * t) * rn
        hi = arb(min(ceil_arb(hi), float(n)))
        lo = arb(max(floor_arb(lo), 0.0))
    return lo, hi


def count_intervals_certified(method: str, counts, eps: float, prec: int = 128, kato=None):
    """Certified intervals on the expected counts of one table, one per intensity: ``(lower ends, upper ends)``.

    ``kato = (pulses, expected list or None)`` for ``method="kato"`` (Kato intervals on sums of conditional
    probabilities, tilts from the pre-registered expected counts); otherwise :func:`count_interval_certified`
    of each count within the table's total.
    """
    if method == "kato":
        n, expected = kato
        lo, hi = [], []
        for i, c in enumerate(counts):
            m = None if expected is None else expected[i]
            a_lo, a_hi = kato_tilt(n, m, eps, "lower"), kato_tilt(n, m, eps, "upper")
            a, b = kato_count_interval_certified(c, n, a_lo, a_hi, eps, prec)
            lo.append(a)
            hi.append(b)
        return lo, hi
    total = sum(counts)
    lo, hi = [], []
    for c in counts:
        a, b = count_interval_certified(method, c, total, eps, prec)
        lo.append(a)
        hi.append(b)
    return lo, hi


def kato_actual_lower(lam_lower, n: int, a: float, eps: float, prec: int = 128):
    """Lower bound on an actual count ``Gamma_n`` from a lower bound on its conditional sum ``Lambda_n``.

    On the complement of ``Lambda - Gamma >= (b + a (2 Gamma/n - 1)) sqrt(n)`` (probability <= eps),
    ``Gamma (1 + 2a/sqrt(n)) > Lambda - (b - a) sqrt(n)``; the right side increases in ``Lambda``, so its
    lower bound may be plugged in.  Requires ``1 + 2a/sqrt(n) > 0`` (:func:`kato_tilt` ensures >= 1/2).
    """
    with ctx.workprec(prec):
        rn = arb(int(n)).sqrt()
        aa = arb(a)
        val = (lam_lower - (_kato_b(n, a, eps, prec) - aa) * rn) / (1 + 2 * aa / rn)
    return lower_end(val)


def kato_actual_upper(lam_upper, n: int, a: float, eps: float, prec: int = 128):
    """Upper bound on an actual count ``Gamma_n`` from an upper bound on ``Lambda_n``.

    On the complement of the mirrored event ``Gamma - Lambda >= (b - a (2 Gamma/n - 1)) sqrt(n)``,
    ``Gamma (1 + 2a/sqrt(n)) < Lambda + (b + a) sqrt(n)`` (increasing in ``Lambda``).
    """
    with ctx.workprec(prec):
        rn = arb(int(n)).sqrt()
        aa = arb(a)
        val = (lam_upper + (_kato_b(n, a, eps, prec) + aa) * rn) / (1 + 2 * aa / rn)
    return upper_end(val)
