"""Design, block size and reach of ``tf-sns`` (imports analysis and scenario; nothing below imports it).

The design maximises the float key-length formula (:func:`.analysis.float_key_length`) at the model's
expected counts over the free parameters (signal intensity, sending probability, the two decoys, the Z-window
probability, the X-window probabilities) with the generic :func:`finitekey.searching.maximize_box`, then
computes the certified key length of the block of rounded expected counts; only that length is reported.
"""

from __future__ import annotations

import math

import numpy as np

from ...errors import InputError
from ...searching import maximize_box
from .._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, ReachResult, Status)
from . import analysis as AN
from .block import COUNT_FIELDS, parse_block
from .scenario import (PROTOCOL_NAME, SNSParameters, TFScenario, binary_entropy, optimal_asymptotic_rate)

__all__ = ["design", "blocksize", "reach", "expected_counts_array", "MAX_WINDOWS"]

MAX_WINDOWS = 1e15
#: Search box of the free parameters: (mu_z, epsilon, mu_1, mu_2 - mu_1, p_Z, p_0, share of mu_1 in the rest).
_BOX = ((0.05, 1.0), (0.005, 0.4), (0.01, 0.3), (0.05, 0.8), (0.3, 0.98), (0.1, 0.9), (0.1, 0.9))
_GRID = (5, 5, 4, 4, 4, 3, 3)


def _coords_to_params(x) -> dict:
    mu_z, e, mu1, dmu, pz, p0, share = x
    return {"signal_intensity": mu_z, "sending_probability": e, "mu1": mu1, "mu2": mu1 + dmu, "p0": p0,
            "p1": (1 - p0) * share, "p2": (1 - p0) * (1 - share), "key_window_probability": pz}


def _params_to_coords(p: SNSParameters):
    mu1, mu2 = p.decoy_intensities
    p0, p1, p2 = p.decoy_probabilities
    return (p.signal_intensity, p.sending_probability, mu1, mu2 - mu1, p.key_window_probability, p0,
            p1 / (p1 + p2))


def expected_counts_array(link, g: dict, windows: float) -> dict:
    """:func:`.scenario.expected_counts`, vectorised over the parameter arrays of ``g`` (design only)."""
    n = float(windows)
    pz, e, mu_z = g["key_window_probability"], g["sending_probability"], g["signal_intensity"]
    mu1, mu2, p0, p1, p2 = g["mu1"], g["mu2"], g["p0"], g["p1"], g["p2"]
    side = np.stack(np.broadcast_arrays(mu_z, 0.0, mu1, mu2, pz, e, p0, p1, p2)).astype(float)
    mus = side[:4]
    # every pair of one side's intensities (mu_z, 0, mu_1, mu_2) in one call: P[i, j] for Alice i, Bob j
    P = link.one_click_random_phase(mus[:, None], mus[None, :])
    p00, pab = P[1, 1], P[0, 0]
    zz = pz * pz
    key = n * zz * ((1 - e) ** 2 * p00 + e * (1 - e) * (P[0, 1] + P[1, 0]) + e * e * pab)
    key_err = n * zz * ((1 - e) ** 2 * p00 + e * e * pab)
    x = (1 - pz) ** 2
    weak = n * x * p0 * p1 * (P[2, 1] + P[1, 2])
    strong = n * x * p0 * p2 * (P[3, 1] + P[1, 3])
    vac = n * x * p0 * p0 * p00
    det, err = link.x1_click_probabilities(mu1)
    px1 = n * x * p1 * p1 * link.acceptance_width_rad / math.pi
    w = np.stack(np.broadcast_arrays(pz * e, pz * (1 - e) + (1 - pz) * p0, (1 - pz) * p1, (1 - pz) * p2))
    total = np.sum(w[:, None] * w[None, :] * P, axis=(0, 1))
    return {"key_detections": key, "key_errors": key_err, "weak_one_sided": weak, "strong_one_sided": strong,
            "vacuum": vac, "x1_detections": px1 * det, "x1_errors": px1 * err, "effective_events": n * total}


def _objective(scenario: TFScenario, statistics: str):
    link = scenario.link

    def f(*coords):
        g = _coords_to_params(coords)
        c = expected_counts_array(link, g, scenario.windows)
        with np.errstate(all="ignore"):
            ez = np.minimum(c["key_errors"] / c["key_detections"], 0.5)
        leak = scenario.ec_efficiency * c["key_detections"] * binary_entropy(ez)
        return AN.float_key_length(g, link.acceptance_width_rad, c, leak, scenario.eps_sec, scenario.eps_cor,
                                   statistics) / scenario.windows
    return f


def _box(scenario: TFScenario):
    bounds = list(_BOX)
    grid = list(_GRID)
    fx = scenario.fixed_parameters
    fixed_index = {"signal_intensity": (0,), "sending_probability": (1,), "key_window_probability": (4,)}
    for name, idx in fixed_index.items():
        if name in fx:
            bounds[idx[0]] = (fx[name], fx[name])
            grid[idx[0]] = 1
    if "decoy_intensities" in fx:
        mu1, mu2 = fx["decoy_intensities"]
        bounds[2], bounds[3] = (mu1, mu1), (mu2 - mu1, mu2 - mu1)
        grid[2] = grid[3] = 1
    if "decoy_probabilities" in fx:
        p0, p1, p2 = fx["decoy_probabilities"]
        bounds[5], bounds[6] = (p0, p0), (p1 / (p1 + p2), p1 / (p1 + p2))
        grid[5] = grid[6] = 1
    return bounds, grid


def _parameters(x) -> SNSParameters:
    g = _coords_to_params([float(v) for v in x])
    p0 = g["p0"]
    p1 = g["p1"]
    return SNSParameters(g["signal_intensity"], g["sending_probability"], (g["mu1"], g["mu2"]),
                         (p0, p1, 1.0 - p0 - p1), g["key_window_probability"])


def expected_block(scenario: TFScenario, params: SNSParameters) -> dict:
    """The block of rounded expected counts of a design (what ``keylength`` of it would certify)."""
    from .scenario import expected_counts
    c = expected_counts(scenario.link, params, scenario.windows)
    counts = {k: int(round(c[k])) for k in COUNT_FIELDS}
    counts["x1_errors"] = min(counts["x1_errors"], counts["x1_detections"])
    total = max(int(round(c["effective_events"])), sum(v for k, v in counts.items() if k != "x1_errors"))
    ez = min(c["key_errors"] / c["key_detections"], 0.5) if c["key_detections"] > 0 else 0.5
    leak = min(int(math.ceil(scenario.ec_efficiency * counts["key_detections"] * float(binary_entropy(ez)))),
               counts["key_detections"])
    return {"protocol": PROTOCOL_NAME, "signal_intensity": params.signal_intensity,
            "sending_probability": params.sending_probability, "decoy_intensities": list(params.decoy_intensities),
            "decoy_probabilities": list(params.decoy_probabilities),
            "key_window_probability": params.key_window_probability,
            "acceptance_width_rad": scenario.link.acceptance_width_rad, **counts, "effective_events": total,
            "ec_leak_bits": leak, "eps_sec": scenario.eps_sec, "eps_cor": scenario.eps_cor,
            "windows": int(scenario.windows)}


def design(scenario: TFScenario, statistics: str | None = None) -> DesignResult:
    """Choose the free parameters for ``scenario`` and certify the key of its expected block.

    Returns
    -------
    DesignResult
        ``secret_key_rate_per_signal`` is per window (one pulse per side).
    """
    method = AN._check_statistics(statistics)
    bounds, grid = _box(scenario)
    # the search uses closed-form intervals (much faster than the exact tails); only the final length is certified
    f = _objective(scenario, "fast")
    x, val = maximize_box(f, bounds, grid, xatol=1e-4, maxiter=150)
    # a second, narrower grid and polish around the first optimum (the objective has shallow ridges)
    near = [(lo, hi) if lo == hi else (max(lo, xi - 0.15 * (hi - lo)), min(hi, xi + 0.15 * (hi - lo)))
            for (lo, hi), xi in zip(bounds, x)]
    x2, val2 = maximize_box(f, near, [1 if lo == hi else 3 for lo, hi in near], xatol=1e-5, maxiter=150)
    if val2 > val:
        x, val = x2, val2
    params = _parameters(x)
    data = expected_block(scenario, params)
    result = AN.key_length(parse_block(data), method)
    n = scenario.windows
    rate = result.secret_key_length / n
    f = scenario.link.repetition_rate_hz
    counts = {k: data[k] for k in COUNT_FIELDS}
    counts.update(effective_events=data["effective_events"], ec_leak_bits=data["ec_leak_bits"])
    return DesignResult(
        protocol=PROTOCOL_NAME, parameters=params.as_dict(), expected=result, secret_key_rate_per_signal=rate,
        secret_key_rate_bps=None if f is None else rate * f, expected_counts=counts,
        block_fill_time_s=None if f is None else n / f, scenario=scenario.as_dict(),
        diagnostics={"float_objective_per_window": float(val) if math.isfinite(val) else -1.0},
        notes=("rates are per window: one pulse from each side; the block is closed after block.windows windows",))


def _meets(result: DesignResult, target: BlockTarget, windows: float, asym: float) -> bool:
    ell = result.expected.secret_key_length
    if target.kind is BlockTargetKind.POSITIVE_KEY:
        return ell > 0
    if target.kind is BlockTargetKind.KEY_BITS:
        return ell >= target.value
    return ell / windows >= target.value * asym


def blocksize(scenario: TFScenario, target: BlockTarget, statistics: str | None = None, unit: str | None = None,
              max_windows: float = MAX_WINDOWS) -> BlockSizeResult:
    """Smallest number of windows whose design reaches ``target`` (bisection on log10 of the windows, to 1e-2).

    ``fraction=F`` is a fraction of :func:`.scenario.optimal_asymptotic_rate` (infinite decoys, ``p_Z -> 1``).
    """
    if unit not in (None, "windows"):
        raise InputError("unit", unit, "'windows' (tf-sns block sizes are numbers of windows)")
    method = AN._check_statistics(statistics)
    asym = 0.0
    if target.kind is BlockTargetKind.RATE_FRACTION:
        asym = optimal_asymptotic_rate(scenario.link, scenario.ec_efficiency)[0]
        if asym <= 0:
            raise InputError("target", str(target), "a link with a positive asymptotic rate")
    cache = {}

    def at(x):
        if x not in cache:
            n = float(round(10 ** x))
            cache[x] = (n, design(scenario.with_windows(n), method))
        return cache[x]

    top = math.log10(max_windows)
    lo = hi = None
    x = min(math.log10(scenario.windows), top)
    n, res = at(x)
    if _meets(res, target, n, asym):
        hi = x
        while True:
            x -= 0.5
            if x < 4:
                lo = x
                break
            n, res = at(x)
            if not _meets(res, target, n, asym):
                lo = x
                break
            hi = x
    else:
        lo = x
        while True:
            if lo >= top:
                raise InputError("target", str(target), f"a target reachable with at most {max_windows:g} windows")
            x = min(lo + 0.5, top)
            n, res = at(x)
            if _meets(res, target, n, asym):
                hi = x
                break
            lo = x
    while hi - lo > 1e-2:
        mid = 0.5 * (lo + hi)
        n, res = at(mid)
        if _meets(res, target, n, asym):
            hi = mid
        else:
            lo = mid
    n, res = at(hi)
    return BlockSizeResult(target, int(n), "windows", res, resolution=max(1, int(n - 10 ** lo)))


def reach(scenario: TFScenario, statistics: str | None = None, tolerance_km: float = 1.0,
          max_km: float = 1000.0) -> ReachResult:
    """Largest total distance with a positive certified key (the arm split ``link.alice_fraction`` kept)."""
    method = AN._check_statistics(statistics)
    if not scenario.link.fiber_loss_db_per_km > 0:
        raise InputError("link.fiber_loss_db_per_km", scenario.link.fiber_loss_db_per_km,
                         "a positive fibre loss for a reach (with 0 dB/km every distance gives the same key)")

    def positive(L):
        res = design(scenario.at_distance(L), method)
        return res.expected.secret_key_length > 0, res

    ok, best = positive(0.0)
    if not ok:
        return ReachResult(None, method, tolerance_km, max_km,
                           Status.no_key(best.status.reason, "at 0 km: " + best.status.detail))
    lo, hi, step = 0.0, None, 100.0
    while hi is None:
        L = min(lo + step, max_km)
        ok, res = positive(L)
        if ok and L >= max_km:
            return ReachResult(None, method, tolerance_km, max_km,
                               Status(None, f"key at every distance tried up to the search limit {max_km:g} km; "
                                            "the reach lies beyond it"), limit_reached=True, at_reach=res)
        if ok:
            lo, best = L, res
        else:
            hi = L
    while hi - lo > tolerance_km:
        mid = 0.5 * (lo + hi)
        ok, res = positive(mid)
        if ok:
            lo, best = mid, res
        else:
            hi = mid
    return ReachResult(lo, method, tolerance_km, max_km, KEY, at_reach=best)
