"""Design and block size of a described protocol: the key-setting probability and the test fraction.

For a block of ``N`` rounds the expected block has ``m = round(gamma N)`` test rounds with counts
``round(m P[j, o])`` (``P`` the joint probabilities of one round at the chosen setting probabilities) and
``n = N - m`` key-generation rounds, leakage ``ceil(f n H(K|B))`` from the expected statistics.  The
parameters are chosen on float evaluations (float Clopper-Pearson limits, the solver's certified bound);
the reported length is recomputed with :func:`.analysis.key_length` (certified intervals).
"""

from __future__ import annotations

import math

import numpy as np

from ...errors import ComputationError, InputError
from ...searching import golden_max
from .._result import KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, NoKeyReason, design_no_key
from .analysis import (aep_min_rounds, aep_penalty, block_ledger, interval_count, intervals, key_length,
                       leakage_rate, solve_problem, verification_tag_bits)
from .block import PROTOCOL_NAME, DescribedBlock
from .scenario import DescribedScenario, biased, joint_expected

__all__ = ["design", "blocksize", "asymptotic_rate", "expected_block"]

#: Test fractions searched (log10 range limits).
_GAMMA_MIN, _GAMMA_MAX = 1e-4, 0.5
_KEYP_MIN, _KEYP_MAX = 0.2, 0.98


def asymptotic_rate(scenario: DescribedScenario, key_probability: float | None = None) -> float:
    """Key per round for an infinite block: ``beta_inf - f H(K|B)`` with the statistics as equalities (the
    solver's certified bound), at the given (or the description's) key-setting probability.

    References
    ----------
    .. [1] A. Winick, N. Lütkenhaus, P. J. Coles, Quantum 2, 77 (2018); I. Devetak and A. Winter,
       Proc. R. Soc. A 461, 207 (2005) (the asymptotic rate H(K|E) - H(K|B)).
    """
    desc = scenario.description if key_probability is None else biased(scenario.description, key_probability)
    P = joint_expected(desc, scenario.conditional)
    res = solve_problem(desc, P, P)
    return max(0.0, float(res.certified_lower)) - scenario.efficiency * leakage_rate(desc, P)


def expected_block(scenario: DescribedScenario, rounds: int, key_probability: float, test_fraction: float,
                   split: dict | None = None) -> DescribedBlock:
    """The expected block of ``rounds`` rounds at the given parameters (counts rounded to integers)."""
    desc = biased(scenario.description, key_probability)
    P = joint_expected(desc, scenario.conditional)
    m = max(1, int(round(test_fraction * rounds)))
    counts = np.round(m * P)
    m_eff = int(counts.sum())
    if m_eff < 1 or m_eff >= rounds:
        raise InputError("design.test_fraction", test_fraction, f"a fraction leaving test and key rounds in a block "
                                                                f"of {rounds} rounds")
    n = rounds - m_eff
    leak = int(math.ceil(scenario.efficiency * n * leakage_rate(desc, P) * (1 + 1e-12)))
    return DescribedBlock(desc, int(rounds), counts, leak, None, scenario.eps_sec, scenario.eps_cor, split)


def _float_length(scenario: DescribedScenario, rounds: int, kp: float, gamma: float, cache: dict) -> float:
    key = (round(kp, 6), round(math.log10(gamma), 4), rounds)
    if key in cache:
        return cache[key]
    try:
        blk = expected_block(scenario, rounds, kp, gamma)
    except InputError:
        cache[key] = -math.inf
        return -math.inf
    desc = blk.description
    led = block_ledger(blk.eps_sec, blk.eps_cor, interval_count(desc))
    eps_bar = led.smoothing("smoothing")
    n = blk.key_rounds
    if n < aep_min_rounds(eps_bar):
        cache[key] = -math.inf
        return -math.inf
    lo, hi = intervals(blk.counts, led.failure_probability("statistics_intervals"), certified=False)
    try:
        res = solve_problem(desc, lo, hi)
    except ComputationError:
        cache[key] = -math.inf
        return -math.inf
    beta = max(0.0, float(res.certified_lower))
    val = (n * beta - aep_penalty(n, eps_bar, desc.key_size) - blk.ec_leak_bits - verification_tag_bits(blk.eps_cor)
           - 2 * math.log2(1 / (2 * led.hashing("privacy_amplification"))))
    cache[key] = val
    return val


def _choose(scenario: DescribedScenario, rounds: int, kp0: float | None = None, iters: int = 7) -> tuple:
    """Float search: golden section on log10(test fraction), then on the key probability, then the fraction again."""
    cache: dict = {}
    kp = scenario.key_probability if scenario.key_probability is not None else (
        kp0 if kp0 is not None else scenario.description.alice[scenario.description.key_pairs[0][0]].probability)
    g_lo = math.log10(max(_GAMMA_MIN, min(0.1, 200.0 / rounds)))
    g_hi = math.log10(_GAMMA_MAX)
    if scenario.test_fraction is not None:
        lg = math.log10(scenario.test_fraction)
    else:
        lg, _ = golden_max(lambda t: _float_length(scenario, rounds, kp, 10 ** t, cache), g_lo, g_hi, iters=iters)
    if scenario.key_probability is None and len(scenario.description.alice) + len(scenario.description.bob) > 2:
        kp, _ = golden_max(lambda p: _float_length(scenario, rounds, p, 10 ** lg, cache), _KEYP_MIN, _KEYP_MAX,
                           iters=iters)
        if scenario.test_fraction is None:
            lg, _ = golden_max(lambda t: _float_length(scenario, rounds, kp, 10 ** t, cache), max(g_lo, lg - 0.5),
                               min(g_hi, lg + 0.5), iters=max(3, iters - 3))
    return kp, 10 ** lg, len(cache)


def design(scenario: DescribedScenario, statistics=None, *, rounds: int | None = None,
           warm: float | None = None) -> DesignResult:
    """Choose the key-setting probability and the test fraction maximising the certified key of one block.

    Parameters
    ----------
    scenario : DescribedScenario
    statistics : {"exact"}, optional
    rounds : int, optional
        Block size (default: the scenario's ``budget.rounds``).
    warm : float, optional
        Key-setting probability to start from.

    Returns
    -------
    DesignResult
        Rates per round (``secret_key_rate_per_signal``), the certified expected length with its ledger, and
        the solver's gap and iterations in the expected result's terms and estimates.
    """
    if statistics not in (None, "exact"):
        raise InputError("statistics", statistics, "one of: exact")
    sc = scenario
    N = int(rounds if rounds is not None else sc.rounds)
    kp, gamma, evals = _choose(sc, N, warm)
    return _design_at(sc, N, kp, gamma, evals)


def _design_at(sc: DescribedScenario, N: int, kp: float, gamma: float, evals: int = 0) -> DesignResult:
    blk = expected_block(sc, N, kp, gamma)
    res = key_length(blk)
    ell = res.secret_key_length
    per_round = ell / N
    bps = per_round * sc.signal_rate_hz if sc.signal_rate_hz else None
    fill = N / sc.signal_rate_hz if sc.signal_rate_hz else None
    r_inf = asymptotic_rate(sc, kp)
    desc = blk.description
    params = {"key_probability": kp, "test_fraction": gamma,
              "alice_probabilities": [s.probability for s in desc.alice],
              "bob_probabilities": [s.probability for s in desc.bob],
              "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor, "statistics": "exact", "attacks": "collective"}
    counts = {"rounds": N, "test_rounds": blk.test_rounds, "key_rounds": blk.key_rounds,
              "ec_leak_bits": blk.ec_leak_bits}
    status = KEY if ell > 0 else design_no_key(
        res.status, NoKeyReason.THRESHOLD_EXCEEDED if r_inf <= 0 else NoKeyReason.NO_POSITIVE_DESIGN)
    diag = {"float_evaluations": evals, "solver_gap": res.terms.get("solver_gap"),
            "solver_iterations": res.estimates.get("solver_iterations"),
            "asymptotic_rate_per_round": r_inf}
    data = {s: dict(v) if isinstance(v, dict) else v for s, v in sc.data.items()}
    data["budget"]["rounds"] = N
    notes = ("rates are per round (signal sent); secure against collective attacks only (i.i.d. rounds)",
             f"asymptotic rate at these setting probabilities: {r_inf:.6g} bits per round")
    return DesignResult(PROTOCOL_NAME, params, res, per_round, bps, counts, fill, data,
                        secret_key_rate_per_detection=None, asymptotic_rate_per_detection=None,
                        diagnostics={k: v for k, v in diag.items() if v is not None}, status=status, notes=notes)


def _meets(target: BlockTarget, ell: float, N: int, r_inf: float) -> bool:
    if target.kind is BlockTargetKind.POSITIVE_KEY:
        return ell >= 1
    if target.kind is BlockTargetKind.KEY_BITS:
        return ell >= target.value
    return ell >= target.value * r_inf * N


def blocksize(scenario: DescribedScenario, target: BlockTarget, statistics=None, *, limit: float = 1e15,
              unit: str | None = None) -> BlockSizeResult:
    """Smallest block (rounds) whose designed key reaches ``target``, to a relative resolution of 1e-2.

    The key-setting probability is chosen once, at the scenario's block size; at each size tried the test
    fraction is re-optimised (float), and the size reported passes with a certified design.

    Raises
    ------
    InputError
        When the asymptotic rate is not positive, or ``unit`` is not ``"rounds"``.
    ComputationError
        When the target is not reached below ``limit``.
    """
    if statistics not in (None, "exact"):
        raise InputError("statistics", statistics, "one of: exact")
    if unit is not None and unit != "rounds":
        raise InputError("unit", unit, "'rounds' (a described protocol's block size is its number of rounds)")
    sc = scenario
    kp, _, _ = _choose(sc, sc.rounds, iters=5)
    r_inf = asymptotic_rate(sc, kp)
    if r_inf <= 0:
        raise InputError("statistics", "the expected statistics", "statistics with a positive asymptotic rate "
                         f"(it is {r_inf:.4g} bits per round: no block size gives a key)")
    fixed = sc if sc.key_probability is not None else _with_kp(sc, kp)
    designs: dict = {}

    def cert(N: int) -> DesignResult:
        if N not in designs:
            _, gamma, ev = _choose(fixed, N, kp, iters=5)
            designs[N] = _design_at(fixed, N, kp, gamma, ev)
        return designs[N]

    def passes(N: int) -> bool:
        return _meets(target, cert(N).expected.secret_key_length, N, r_inf)

    lo, hi = None, 10 ** 6
    while not passes(hi):
        lo = hi
        hi *= 10
        if hi > limit:
            raise ComputationError(f"target {target} not reached below {limit:.3g} rounds")
    if lo is None:
        lo = hi
        while lo > 10 ** 3 and passes(lo // 10):
            lo //= 10
        hi, lo = lo, lo // 10
    while hi - lo > max(1, int(1e-2 * hi)):
        mid = int(math.sqrt(lo * hi)) if hi > 4 * lo else (lo + hi) // 2
        if passes(mid):
            hi = mid
        else:
            lo = mid
    return BlockSizeResult(target, hi, "rounds", cert(hi), resolution=max(1, int(1e-2 * hi)))


def _with_kp(sc: DescribedScenario, kp: float) -> DescribedScenario:
    from dataclasses import replace
    return replace(sc, key_probability=kp)
