"""BB84 design: the basis bias and epsilon split maximising the key of one block (:func:`design`) and the
smallest block reaching a target (:func:`blocksize`).  Parameters are chosen on float objectives; every
reported length is certified by :func:`.analysis.key_length`.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ...bounds.hypergeometric_exact import key_errors_upper
from ...budget import squared_down
from ...errors import ComputationError, InputError
from ...reconciliation import DisclosedLeakage
from ...searching import golden_max, maximize_box, smallest_passing
from .._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, KeyLengthResult,
                       NoKeyReason, Status, design_no_key)
from .analysis import (ASSUMPTIONS, FORMULA_LATEX, REFERENCES, _compiled, block_ledger, key_length,
                       sifting_fraction, verification_tag_bits)
from .block import PROTOCOL_NAME, BB84Block, Statistics
from .scenario import BB84Scenario, asymptotic_rate, expected_counts

__all__ = ["design", "blocksize"]

class _Objective:
    """Float key length as a function of (log10 p_Z, smoothing share) for a fixed detection count."""

    def __init__(self, sc: BB84Scenario, N: float, stats: Statistics):
        self.sc, self.N, self.stats = sc, N, stats
        self.tag = verification_tag_bits(sc.eps_cor)
        self.comp = _compiled()

    def _eps(self, share):
        eps_s = share * self.sc.eps_sec / 2
        eps_pa = (1 - share) * self.sc.eps_sec
        return eps_s, eps_pa

    def surrogate(self, log_pz, share):
        """Vectorised: Serfling exactly, or a normal approximation of the exact hypergeometric bound."""
        sc = self.sc
        pz = 10.0 ** np.asarray(log_pz, dtype=float)
        n = self.N * (1 - pz) ** 2
        k = self.N * pz ** 2
        eps_s, eps_pa = self._eps(np.asarray(share, dtype=float))
        leak = sc.leakage.bits(n, sc.qber)
        q = sc.qber
        if self.stats is Statistics.SERFLING:
            val = self.comp["serfling"].numpy(n, k, q * k, sc.overlap, leak, self.tag, eps_s, eps_pa)
            phi = q + self.comp["mu"].numpy(n, k, eps_s)
        else:
            from scipy.special import ndtri
            z = -ndtri(np.minimum(eps_s ** 2, 0.5))
            qs = np.maximum(q, 1.0 / np.maximum(k, 1.0))
            phi = q + z * np.sqrt(qs * (1 - qs) * (n + k) / (n * k)) + 1.0 / np.maximum(k, 1.0)
            val = self.comp["exact"].numpy(n, phi * n, sc.overlap, leak, self.tag, eps_pa)
        val = np.where((phi < 0.5) & (k >= 1) & (n >= 1), val, -np.abs(n) - 1.0)
        return val

    def exact_float(self, log_pz, share) -> float:
        """Scalar float key length with the exact hypergeometric bound (not certified; for choosing only)."""
        sc = self.sc
        p_x = 1 - 10.0 ** log_pz
        n, k, e = expected_counts(self.N, p_x, sc.qber)
        if n < 1 or k < 1:
            return -1.0 - n
        eps_s, eps_pa = self._eps(share)
        E = key_errors_upper(n, k, e, squared_down(eps_s))
        if 2 * E >= n:
            return -1.0 - n
        leak = float(sc.leakage.bits(n, sc.qber))
        if E == 0:
            return float(self.comp["exact0"].numpy(n, sc.overlap, leak, self.tag, eps_pa))
        return float(self.comp["exact"].numpy(n, E, sc.overlap, leak, self.tag, eps_pa))


def _choose(sc: BB84Scenario, N: float, stats: Statistics, refine: bool = True, warm: tuple | None = None):
    """Float search for (p_x, smoothing share); returns (p_x, share, float key length).

    ``warm = (p_x, share)`` from a design at a nearby size: only a narrow golden-section search around it.
    """
    obj = _Objective(sc, N, stats)
    if warm is not None:
        return _choose_warm(sc, obj, stats, *warm)
    lo_pz = math.log10(min(0.5, max(1.5 / math.sqrt(max(N, 1.0)), 1e-9)))
    hi_pz = math.log10(0.5)
    share_lo, share_hi = 0.02, 0.98
    if sc.p_x is not None:
        fixed_lpz = math.log10(1 - sc.p_x)
        lo_pz = hi_pz = fixed_lpz
    if not sc.optimise_split:
        share_lo = share_hi = sc.smoothing_share
    bounds = [(lo_pz, hi_pz), (share_lo, share_hi)]
    grid = [1 if lo_pz == hi_pz else 40, 1 if share_lo == share_hi else 9]
    x, val = maximize_box(obj.surrogate, bounds, grid)
    lpz, share = float(x[0]), float(x[1])
    if stats is Statistics.EXACT and refine and lo_pz != hi_pz:
        a, b = max(lo_pz, lpz - 0.25), min(hi_pz, lpz + 0.25)
        lpz, val = golden_max(lambda t: obj.exact_float(t, share), a, b, iters=14)
        if share_lo != share_hi:
            share, val = golden_max(lambda s_: obj.exact_float(lpz, s_), max(share_lo, share - 0.2),
                                    min(share_hi, share + 0.2), iters=10)
    elif stats is Statistics.EXACT and refine:
        if share_lo != share_hi:
            share, val = golden_max(lambda s_: obj.exact_float(lpz, s_), share_lo, share_hi, iters=14)
        else:
            val = obj.exact_float(lpz, share)
    p_x = sc.p_x if sc.p_x is not None else 1 - 10.0 ** lpz
    return p_x, share, float(val)


def _choose_warm(sc: BB84Scenario, obj: _Objective, stats: Statistics, p_x: float, share: float):
    f = obj.exact_float if stats is Statistics.EXACT else (lambda t, s_: float(obj.surrogate(t, s_)))
    lpz = math.log10(1 - p_x)
    top = math.log10(0.5)
    val = f(lpz, share)
    for width, it_p, it_s in ((0.08, 10, 8), (0.02, 6, 0)):
        if sc.p_x is None:
            lpz, val = golden_max(lambda t: f(t, share), lpz - width, min(top, lpz + width), iters=it_p)
        if sc.optimise_split and it_s:
            share, val = golden_max(lambda s_: f(lpz, s_), max(0.02, share - 0.1), min(0.98, share + 0.1),
                                    iters=it_s)
    return (sc.p_x if sc.p_x is not None else 1 - 10.0 ** lpz), share, val


def design(scenario: BB84Scenario, statistics=None, *, detections: float | None = None,
           warm: tuple | None = None) -> DesignResult:
    """Choose the basis bias (hence test fraction) and the epsilon split maximising the key of one block.

    For a fixed detection (or signal) budget, maximising the key length and maximising the key rate are the
    same objective.  Parameters are chosen on float objectives; the reported key length is certified.

    References
    ----------
    .. [1] H.-K. Lo, H. F. Chau, M. Ardehali, J. Cryptology 18, 133 (2005) -- biased basis choice.
    """
    sc = scenario
    stats = Statistics.parse(statistics) if statistics is not None else sc.statistics
    N = detections if detections is not None else sc.detection_count
    p_x, share, _ = _choose(sc, N, stats, warm=warm)
    return _design_at(sc, N, stats, p_x, share)


def _design_at(sc: BB84Scenario, N: float, stats: Statistics, p_x: float, share: float) -> DesignResult:
    n, k, e = expected_counts(N, p_x, sc.qber)
    split = {"smoothing": share, "privacy_amplification": 1.0 - share}
    if n >= 1 and k >= 1:
        block = BB84Block(n, k, e, sc.leakage, sc.eps_sec, sc.eps_cor, sc.overlap, split, sc.qber, stats)
        if sc.leakage.bits_upper(n, sc.qber) > n:
            block = replace(block, leakage=DisclosedLeakage(n))
        res = key_length(block, stats)
    else:
        led = block_ledger(sc.eps_sec, sc.eps_cor, split)
        res = KeyLengthResult(PROTOCOL_NAME, 0, led, stats.value, ASSUMPTIONS, {}, {"note_block_too_small": 1.0},
                              FORMULA_LATEX, REFERENCES,
                              status=Status.no_key(NoKeyReason.BLOCK_TOO_SMALL,
                                                   f"{N:.6g} detections give {n} key bits and {k} test bits"))
    ell = res.secret_key_length
    p_det = sc.detection_probability
    signals = N / p_det if p_det else None
    per_det = ell / N if N > 0 else 0.0
    # per signal, per second and the fill time need the number of signals (a detection budget alone has none)
    per_signal = ell / signals if signals else None
    bps = per_signal * sc.signal_rate_hz if (sc.signal_rate_hz and signals) else None
    fill = signals / sc.signal_rate_hz if (sc.signal_rate_hz and signals) else None
    params = {"p_x": p_x, "p_z": 1.0 - p_x, "sifting_fraction": sifting_fraction(p_x),
              "test_fraction": k / (n + k) if n + k else 0.0, "epsilon_split": split,
              "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor, "statistics": stats.value}
    counts = {"detections": N, "key_bits": n, "test_bits": k, "test_errors": e, "key_qber": sc.qber}
    if signals:
        counts["signals"] = signals
    r_inf = asymptotic_rate(sc)
    status = KEY if ell > 0 else design_no_key(
        res.status, NoKeyReason.THRESHOLD_EXCEEDED if r_inf <= 0 else
        (NoKeyReason.BLOCK_TOO_SMALL if res.status.reason is NoKeyReason.BLOCK_TOO_SMALL
         else NoKeyReason.NO_POSITIVE_DESIGN))
    return DesignResult(PROTOCOL_NAME, params, res, per_signal, bps, counts, fill, _echo(sc, N),
                        secret_key_rate_per_detection=per_det, asymptotic_rate_per_detection=r_inf, status=status)


def _echo(sc: BB84Scenario, N: float) -> dict:
    """The scenario as validated, with the block size the design was made for (a block-size search designs at
    sizes other than the scenario's own budget)."""
    data = {s_: dict(v) if isinstance(v, dict) else v for s_, v in sc.data.items()}
    if sc.detections is not None:
        size = N
    else:
        size = N / float(sc.detection_probability)
        size = round(size) if abs(size - round(size)) <= 1e-6 * max(1.0, size) else size
    key = "detections" if sc.detections is not None else "signals"
    if float(size) != float(data["budget"][key]):
        data["budget"][key] = int(size) if float(size).is_integer() else size
    return data


def _meets(target: BlockTarget, ell: float, N: float, r_inf: float) -> bool:
    if target.kind is BlockTargetKind.POSITIVE_KEY:
        return ell >= 1
    if target.kind is BlockTargetKind.KEY_BITS:
        return ell >= target.value
    return ell >= target.value * r_inf * N


def blocksize(scenario: BB84Scenario, target: BlockTarget, statistics=None, *, limit: float = 1e15,
              unit: str | None = None) -> BlockSizeResult:
    """Smallest block (detections, or signals for a signal budget) whose designed key reaches ``target``.

    A float search over sizes (with the design re-optimised at each size) brackets the answer; a bisection on
    certified designs (warm-started from the design at the float answer) then fixes it to a relative
    resolution of 1e-3.  The size reported always passes with the design reported.  ``unit`` may only repeat
    the unit of the scenario's budget (``"detections"`` or ``"signals"``): the size is given in it.

    Raises
    ------
    InputError
        If the QBER is at or above the threshold where the asymptotic rate vanishes, or ``unit`` is not the
        budget's unit.
    ComputationError
        If the target is not reached below ``limit``.
    """
    sc = scenario
    if unit is not None and unit != sc.size_kind:
        raise InputError("unit", unit, f"'{sc.size_kind}' for this BB84 scenario (a BB84 block size is given in "
                                       "the unit of its [budget]: detections or signals)")
    stats = Statistics.parse(statistics) if statistics is not None else sc.statistics
    r_inf = asymptotic_rate(sc)
    if r_inf <= 0:
        raise InputError("channel.qber", sc.qber, "a QBER below the threshold where log2(1/c) - h(Q) - f h(Q) > 0 "
                                                  "(no key for any block size)")
    scale = 1.0 if sc.detections is not None else float(sc.detection_probability)  # detections per size unit
    lim = int(limit)

    def float_pass(m: int) -> bool:
        N = m * scale
        if N < 4:
            return False
        _, _, val = _choose(sc, N, stats, refine=False)
        return _meets(target, math.floor(val), N, r_inf)

    m_float = smallest_passing(float_pass, max(int(64 / scale), 1), limit=lim, rel_resolution=1e-3)
    if m_float is None:
        raise ComputationError(f"target {target} not reached below {limit:.3g} {sc.size_kind}")
    # Certified stage: designs near the float answer, warm-started from the design there.
    first = design(sc, stats, detections=m_float * scale)
    warm = (first.parameters["p_x"], first.parameters["epsilon_split"]["smoothing"])
    cache: dict = {m_float: first}

    def cert(m: int) -> DesignResult:
        if m not in cache:
            cache[m] = design(sc, stats, detections=m * scale, warm=warm)
        return cache[m]

    def cert_pass(m: int) -> bool:
        return _meets(target, cert(m).expected.secret_key_length, m * scale, r_inf)

    hi = m_float
    while not cert_pass(hi):
        hi = int(math.ceil(hi * 1.05)) + 1
        if hi > lim:
            raise ComputationError(f"target {target} not reached below {limit:.3g} {sc.size_kind}")
    lo = max(1, int(hi * 0.95))
    while lo > 1 and cert_pass(lo):
        hi, lo = lo, max(1, int(lo * 0.9))
    while hi - lo > max(1, int(1e-3 * hi)):
        mid = (lo + hi) // 2
        if cert_pass(mid):
            hi = mid
        else:
            lo = mid
    return BlockSizeResult(target, hi, sc.size_kind, cert(hi), resolution=max(1, int(1e-3 * hi)))

