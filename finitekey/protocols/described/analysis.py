"""Certified key length of an observed block of a described protocol (collective attacks, finite size).

For a block of ``N`` rounds of which ``m`` were test rounds (everything announced) and ``n = N - m`` key
generation rounds (proofs_notes/protocols/described.md):

1. every joint probability ``p_{j,o} = Tr(rho (P_j (x) N_o))`` of a test round gets an exact
   (Clopper-Pearson) confidence interval from its count, each limit failing with probability ``eps_PE``;
2. the solver (:func:`finitekey.numerical.solver.solve`) gives a certified lower bound ``beta`` on the
   minimum of ``H(K|E)`` per round over every state with Alice's fixed marginal and statistics in the
   intervals (bits per round, sifting included);
3. the asymptotic equipartition property turns it into a smooth min-entropy of the ``n`` key-generation
   rounds, and the key length is

.. math:: \\ell = \\Big\\lfloor n\\,\\beta - n\\,\\Delta - \\mathrm{leak}_{EC} - \\lceil\\log_2\\tfrac1{\\varepsilon_{cor}}\\rceil
          - 2\\log_2\\tfrac1{2\\varepsilon_{PA}} \\Big\\rfloor,\\qquad
          \\Delta = 4\\log_2(2 + \\sqrt{d_K + 1})\\sqrt{\\log_2(2/\\bar\\varepsilon^2)/n}

evaluated in ball arithmetic, rounded down from the ball's lower end.  Secure against collective attacks
(i.i.d. rounds), ``eps_cor``-correct and ``(2K eps_PE + 2 eps_bar + eps_PA)``-secret.

References
----------
.. [1] I. George, J. Lin, N. Lütkenhaus, Phys. Rev. Research 3, 013274 (2021) -- the finite-size framework
   (collective attacks, statistics relaxed to a confidence set, AEP correction); recalled from memory.
.. [2] M. Tomamichel, R. Colbeck, R. Renner, IEEE Trans. Inf. Theory 55, 5840 (2009) -- the AEP with the
   correction term used here (Theorem 9); recalled from memory.
.. [3] V. Scarani and R. Renner, Phys. Rev. Lett. 100, 200501 (2008) -- finite-key analysis against
   collective attacks.
.. [4] C. J. Clopper and E. S. Pearson, Biometrika 26, 404 (1934) -- the exact binomial intervals.
"""

from __future__ import annotations

import math

import numpy as np
from flint import arb, ctx

from ...bounds.binomial_exact import (binomial_lower_limit, binomial_lower_limit_certified, binomial_upper_limit,
                                      binomial_upper_limit_certified)
from ...budget import Charge, Ledger, Role, TermSpec, allocate
from ...errors import ComputationError
from .._result import KEY, KeyLengthResult, NoKeyReason, Status
from .block import PROTOCOL_NAME, DescribedBlock
from .description import Description, picture, problem

__all__ = ["term_specs", "block_ledger", "interval_count", "intervals", "key_length", "key_length_batch",
           "leakage_rate", "aep_penalty", "aep_min_rounds", "verification_tag_bits", "ASSUMPTIONS", "REFERENCES",
           "FORMULA_LATEX", "solve_problem", "length_from", "NoFeasibleState"]


def term_specs(intervals_count: int) -> tuple:
    """The ledger of the analysis for ``intervals_count`` confidence intervals (proof note, ledger table).

    Each interval has two one-sided limits, each an event charged once: ``statistics_intervals`` has
    multiplicity ``2 K``.
    """
    return (
        TermSpec("error_verification", Role.CORRECTNESS, Charge.FAILURE, 1,
                 "two-universal hash of ceil(log2(1/eps)) bits fails to reveal a wrong key"),
        TermSpec("statistics_intervals", Role.SECRECY, Charge.FAILURE, 2 * int(intervals_count),
                 "one one-sided Clopper-Pearson limit of a test-round probability fails", 1 / 3),
        TermSpec("smoothing", Role.SECRECY, Charge.SMOOTHING, 1,
                 "smoothing parameter of the AEP bound on the min-entropy of the key-generation rounds", 1 / 3),
        TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
                 "two-universal hashing is this far from an ideal key (leftover hash lemma)", 1 / 3),
    )


def block_ledger(eps_sec: float, eps_cor: float, intervals_count: int, split: dict | None = None) -> Ledger:
    """Allocate the budget over :func:`term_specs`."""
    return allocate(eps_sec, eps_cor, term_specs(intervals_count), split)


def interval_count(desc: Description) -> int:
    """K, the number of test-round probabilities given an interval: signals times Bob's outcomes."""
    return desc.signal_count() * sum(len(s.elements) for s in desc.bob)


def intervals(counts: np.ndarray, eps: float, *, certified: bool = True) -> tuple:
    """Clopper-Pearson limits ``(lower, upper)`` of every entry of ``counts`` (m = their sum), each at ``eps``.

    ``certified=False`` gives the float limits (for choosing parameters only).
    """
    m = int(round(float(np.nansum(counts))))
    lo = np.full(counts.shape, np.nan)
    hi = np.full(counts.shape, np.nan)
    for idx in np.ndindex(counts.shape):
        c = counts[idx]
        if np.isnan(c):
            continue
        c = int(c)
        if certified:
            lo[idx] = binomial_lower_limit_certified(c, m, eps)
            hi[idx] = binomial_upper_limit_certified(c, m, eps)
        else:
            lo[idx] = 0.0 if c == 0 else float(binomial_lower_limit(c, m, eps))
            hi[idx] = 1.0 if c == m else float(binomial_upper_limit(c, m, eps))
    return lo, hi


def leakage_rate(desc: Description, table: np.ndarray) -> float:
    """``sum over key pairs of H(K | Bob's outcome, announcement)`` per round, bits, from a joint table
    ``table[j, o]`` (probabilities, or test-round frequencies)."""
    from .description import picture_index
    sig, out, _, _ = picture_index(desc)
    total = 0.0
    for x, y in desc.key_pairs:
        key = desc.alice[x].key
        kept = [b for b in range(len(desc.bob[y].elements)) if b not in desc.bob[y].discard]
        for b in kept:
            col = {}
            for k in range(len(desc.alice[x].elements)):
                col[key[k]] = col.get(key[k], 0.0) + float(table[sig[(x, k)], out[(y, b)]])
            pb = math.fsum(col.values())
            for v in col.values():
                if v > 0:
                    total += v * math.log2(pb / v)
    return total


def aep_min_rounds(eps_smooth: float) -> float:
    """Smallest n for which the AEP bound is stated: (8/5) log2(2/eps^2)."""
    return 1.6 * math.log2(2.0 / (eps_smooth * eps_smooth)) if eps_smooth > 1e-150 else \
        1.6 * (1.0 - 2.0 * math.log2(eps_smooth))


def aep_penalty(n, eps_smooth, key_size: int, *, ball: bool = False):
    """``n Delta = 4 sqrt(n) log2(2 + sqrt(d_K + 1)) sqrt(log2(2/eps^2))`` bits (float, or an arb ball)."""
    if ball:
        e = arb(eps_smooth)
        two = arb(2)
        return (4 * arb(n).sqrt() * (two + arb(key_size + 1).sqrt()).log() / two.log()
                * ((two / (e * e)).log() / two.log()).sqrt())
    lg = 1.0 - 2.0 * math.log2(eps_smooth)
    return 4.0 * math.sqrt(n) * math.log2(2.0 + math.sqrt(key_size + 1)) * math.sqrt(lg)


def verification_tag_bits(eps_cor: float) -> int:
    """``ceil(log2(1/eps_cor))``: the smallest ``t`` with ``2^-t <= eps_cor``, exactly (rational comparison).

    The same rule as BB84's tag; written here because a protocol package may not import another one.
    """
    from fractions import Fraction
    x = Fraction(eps_cor)
    t = max(0, math.ceil(-math.log2(eps_cor)) - 2)
    while Fraction(1, 2 ** t) > x:
        t += 1
    return t


ASSUMPTIONS = (
    "collective attacks: the rounds are independent and identically distributed (the same attack on every "
    "round); NOT shown secure against coherent attacks (see the proof note for the postselection route and its "
    "cost, not applied here)",
    "the devices do exactly what the description says: Alice's signal states and Bob's POVM elements are "
    "characterised (trusted), in the stated dimension",
    "the block has a number of rounds N fixed before it; each round is a test round independently with a fixed "
    "probability, chosen and announced only after the quantum phase",
    "the settings of each round are chosen independently with the stated probabilities",
    "one-way error correction from Alice's key (direct reconciliation); ec_leak_bits bounds every bit disclosed, "
    "fixed as a function of the test data only",
    "error verification with a two-universal hash of ceil(log2(1/eps_cor)) bits, counted as leakage",
    "privacy amplification with two-universal hashing; the classical channel is authenticated",
)
MIXED_SIGNALS = ("a mixed signal state is purified into Alice's own system (source replacement): its mixture is "
                 "assumed private to Alice's device (trusted noise); if Eve may know or hold it (e.g. a phase "
                 "known to Eve), the key length is not shown secure")
ROUNDED_FACTORS = ("the solver's certificate used float factors of the key map (an element was positive "
                   "semidefinite only within the tolerance): its convexity step then holds up to the factor "
                   "rounding (about 1e-13 bits per round measured), an open assumption of "
                   "finitekey/_notes/numerical/solver.md section 4, not a proven bound")
MODELLED_LEAKAGE = ("leakage is MODELLED as ceil(ec_efficiency * n * H(K|B)) with H(K|B) from the test-round "
                    "frequencies, not measured: secure only if reconciliation disclosed at most that many bits")

REFERENCES = (
    "I. George, J. Lin, N. Lütkenhaus, Phys. Rev. Research 3, 013274 (2021) (finite-size framework, from memory)",
    "M. Tomamichel, R. Colbeck, R. Renner, IEEE Trans. Inf. Theory 55, 5840 (2009) (AEP, from memory)",
    "A. Winick, N. Lütkenhaus, P. J. Coles, Quantum 2, 77 (2018) (numerical key rates)",
    "C. J. Clopper and E. S. Pearson, Biometrika 26, 404 (1934)",
)

FORMULA_LATEX = (r"\ell = \left\lfloor n\beta - 4\sqrt{n}\log_2(2+\sqrt{d_K+1})\sqrt{\log_2(2/\bar\varepsilon^2)}"
                 r" - \mathrm{leak}_{EC} - \lceil\log_2(1/\varepsilon_{cor})\rceil - 2\log_2\frac{1}{2\varepsilon_{PA}}"
                 r"\right\rfloor,\quad \beta \le \min_{\rho:\,p(\rho)\in I} H(K|E)_\rho")


class NoFeasibleState(ComputationError):
    """The statistics (with their intervals) fit no state with Alice's fixed marginal."""


def solve_problem(desc: Description, lower: np.ndarray, upper: np.ndarray):
    """Solve the key-rate problem with the given intervals; returns the solver's result (bits per round).

    Raises
    ------
    NoFeasibleState
        When the solver finds the constraints infeasible (the statistics contradict the description).
    ComputationError
        When the solver or its certificate fails (no certified bound).
    """
    from ...errors import InputError
    from ...numerical.solver import solve   # cvxpy/qics behind it: imported on use (seconds of import time)
    pic = picture(desc)
    prob = problem(desc, pic, lower, upper)
    try:
        return solve(prob)
    except InputError as exc:
        if exc.field == "constraints":
            raise NoFeasibleState(str(exc)) from None
        raise
    except (np.linalg.LinAlgError, FloatingPointError, ValueError) as exc:
        # a failure inside the solver or its certificate: no bound, so no key length can be vouched for
        raise ComputationError(f"the numerical solver failed ({type(exc).__name__}: {exc}); no certified "
                               "bound for these statistics") from None


def length_from(n: int, beta: float, leak: int, tag: int, eps_smooth: float, eps_pa: float, key_size: int,
                prec: int = 128) -> tuple:
    """``(length, ball)``: the certified key length and the ball of the formula (before rounding)."""
    with ctx.workprec(prec):
        two = arb(2)
        ball = (arb(n) * arb(beta) - aep_penalty(n, eps_smooth, key_size, ball=True) - arb(leak) - arb(tag)
                - 2 * (1 / (two * arb(eps_pa))).log() / two.log())
    if not ball.is_finite():
        raise ComputationError(f"certified key-length evaluation did not give a finite ball: {ball}")
    lo = ball.lower()
    if lo <= 0:
        return 0, ball
    z = lo.floor().unique_fmpz()
    return max(0, int(z) if z is not None else int(math.floor(float(lo))) - 1), ball


def key_length(block: DescribedBlock, statistics=None, *, prec: int = 128) -> KeyLengthResult:
    """Certified secret key length of one block (see the module docstring).

    Parameters
    ----------
    block : DescribedBlock
    statistics : {"exact"}, optional
        Only the exact (Clopper-Pearson) intervals are offered.
    prec : int
        Working precision of the ball arithmetic, in bits.

    Returns
    -------
    KeyLengthResult
        Terms: the certified entropy per round and the solver's primal value and gap, the AEP penalty, the
        leakage and the penalties; estimates: the rounds, the interval count and the solver's iterations.
    """
    if statistics not in (None, "exact"):
        from ...errors import InputError
        raise InputError("statistics", statistics, "one of: exact")
    desc = block.description
    K = interval_count(desc)
    ledger = block_ledger(block.eps_sec, block.eps_cor, K, block.epsilon_split)
    eps_pe = ledger.failure_probability("statistics_intervals")
    eps_bar = ledger.smoothing("smoothing")
    eps_pa = ledger.hashing("privacy_amplification")
    tag = verification_tag_bits(block.eps_cor)
    n, m = block.key_rounds, block.test_rounds
    assumptions = ASSUMPTIONS
    if block.ec_leak_bits is not None:
        leak = int(block.ec_leak_bits)
    else:
        rate = leakage_rate(desc, block.counts / m)
        leak = int(math.ceil(block.ec_efficiency * n * rate * (1 + 1e-12)))
        assumptions = assumptions + (MODELLED_LEAKAGE,)
    if any(np.linalg.matrix_rank(rho, tol=desc.tolerance) > 1 for s in desc.alice for rho in s.elements):
        assumptions = assumptions + (MIXED_SIGNALS,)
    lo, hi = intervals(block.counts, eps_pe)
    estimates = {"test_rounds": m, "key_rounds": n, "intervals": K, "interval_failure_probability": eps_pe}
    settings = {"attacks": block.attacks, "finite_size": "collective-attack AEP (George, Lin, Lütkenhaus 2021)"}
    try:
        res = solve_problem(desc, lo, hi)
    except NoFeasibleState as exc:
        led_terms = {"ec_leakage": float(leak), "verification_tag": float(tag)}
        return KeyLengthResult(PROTOCOL_NAME, 0, ledger, "exact", assumptions, led_terms, estimates, FORMULA_LATEX,
                               REFERENCES, Status.no_key(NoKeyReason.INCONSISTENT_BLOCK,
                                                         f"the solver found no state for these statistics: {exc}"),
                               settings)
    beta = max(0.0, float(res.certified_lower))
    if res.details.get("exact_factors") is False:
        assumptions = assumptions + (ROUNDED_FACTORS,)
    estimates.update({"solver_iterations": int(res.iterations), "solver_seconds": float(res.seconds)})
    settings.update({"solver": str(res.solver), "solver_status": str(res.status)})
    terms = {"entropy_per_round_certified": beta, "entropy_per_round_primal": float(res.primal),
             "solver_gap": float(res.gap), "ec_leakage": float(leak), "verification_tag": float(tag),
             "hash_penalty": 2 * math.log2(1 / (2 * eps_pa))}
    if n < aep_min_rounds(eps_bar):
        terms["aep_penalty"] = math.inf
        st = Status.no_key(NoKeyReason.BLOCK_TOO_SMALL, f"{n} key-generation rounds, below the "
                                                        f"{aep_min_rounds(eps_bar):.4g} the AEP bound needs")
        terms.pop("aep_penalty")
        return KeyLengthResult(PROTOCOL_NAME, 0, ledger, "exact", assumptions, terms, estimates, FORMULA_LATEX,
                               REFERENCES, st, settings)
    terms["aep_penalty"] = aep_penalty(n, eps_bar, desc.key_size)
    terms["min_entropy"] = n * beta - terms["aep_penalty"]
    length, ball = length_from(n, beta, leak, tag, eps_bar, eps_pa, desc.key_size, prec)
    terms["key_length_lower_bound"] = float(ball.lower())
    estimates["key_rate_per_round"] = length / block.rounds
    return KeyLengthResult(PROTOCOL_NAME, length, ledger, "exact", assumptions, terms, estimates, FORMULA_LATEX,
                           REFERENCES, _status(length, terms), settings)


def _status(length: int, terms: dict) -> Status:
    if length > 0:
        return KEY
    cost = terms["ec_leakage"] + terms["verification_tag"] + terms["hash_penalty"]
    detail = (f"min-entropy bound {terms['min_entropy']:.6g} bits (entropy {terms['entropy_per_round_certified']:.6g}"
              f" per round, AEP penalty {terms['aep_penalty']:.6g}) against leakage {terms['ec_leakage']:.6g} + "
              f"tag {terms['verification_tag']:.6g} + hash penalty {terms['hash_penalty']:.4g} bits")
    reason = (NoKeyReason.PENALTIES_EXCEED_ENTROPY if terms["min_entropy"] - cost < 1 else NoKeyReason.BELOW_ONE_BIT)
    return Status.no_key(reason, detail)


def key_length_batch(blocks, statistics=None, *, prec: int = 128, jobs: int = 1) -> list:
    """Key lengths of many blocks, one after the other (each block is one solver call)."""
    return [key_length(b, statistics, prec=prec) for b in blocks]
