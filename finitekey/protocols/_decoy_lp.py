"""Decoy-state estimation for any number of intensities by linear programming (private helper of decoy_bb84).

For one basis, let ``s_n`` be the detections of n-photon pulses (unknown) and ``p_{k|n}`` the probability that
an n-photon pulse carried intensity ``k``: ``p_{k|n} = p_k e^{-mu_k} mu_k^n / (n! tau_n)``.  The expected
count of intensity ``k`` given the photon numbers is ``sum_n p_{k|n} s_n`` and lies in the certified
interval ``[lo_k, hi_k]``; also ``sum_n s_n = n_total`` exactly.  Truncation at ``n <= M`` is made rigorous
with a tail total ``S = sum_{n>M} s_n`` and per-intensity tail contributions ``t_k`` with
``0 <= t_k <= c_k S`` where ``c_k >= sup_{n>M} p_{k|n}`` (computed analytically: beyond a finite window the
ratio to the strongest intensity decays geometrically) and ``sum_k t_k = S``.  Every true photon-number
distribution satisfies these constraints, so the LP optimum bounds the true value.

The LP is solved in float by cvxpy with HiGHS (imported on first use).  The *reported* bound does not trust
the solver: it is the weak-duality value ``h.y + d.z + sum_j min(0, r_j) x_max_j`` of the solver's duals
``y >= 0, z`` (residual ``r = c - G^T y - E^T z``, ``x_max_j = n_total``), evaluated in arb ball arithmetic,
which is a valid bound for any ``y >= 0`` and ``z`` whatever the solver's accuracy.

References
----------
.. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005) (decoy estimation as a linear
   programme over photon-number yields).
.. [2] S. Boyd and L. Vandenberghe, *Convex Optimization*, Cambridge University Press (2004), sec. 5.2
   (weak duality).
"""

from __future__ import annotations

import contextlib
import math
import os
import sys

import numpy as np
from flint import arb, ctx

from ..errors import ComputationError
from . import _decoy_analysis as A

TRUNCATION = 30
_WINDOW = 400


@contextlib.contextmanager
def _quiet_stdout():
    """Silence file descriptor 1 while the solver runs: HiGHS prints a banner from C code to stdout, which
    would corrupt the command line's JSON output."""
    sys.stdout.flush()
    try:
        saved = os.dup(1)
    except OSError:  # pragma: no cover - no usable descriptor
        yield
        return
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), 1)
            yield
    finally:
        sys.stdout.flush()
        os.dup2(saved, 1)
        os.close(saved)


#: Bound on the absolute error of every entry of the float matrix ``p_{k|n}`` (entries in [0, 1], computed in
#: log space with a few roundings: relative error far below 1e-13); widens the LP rows in the certificate.
_MATRIX_SLACK = 1e-11


def conditional_intensity(mu, p, n_max: int) -> np.ndarray:
    """Matrix ``P[k, n] = p_{k|n}`` for ``n = 0..n_max`` (float, computed in log space)."""
    mu = np.asarray(mu, dtype=float)
    p = np.asarray(p, dtype=float)
    n = np.arange(n_max + 1)
    with np.errstate(divide="ignore"):
        logw = np.log(p)[:, None] - mu[:, None] + n[None, :] * np.log(np.where(mu > 0, mu, 1.0))[:, None]
    logw = np.where((mu[:, None] == 0) & (n[None, :] > 0), -np.inf, logw)
    logw -= logw.max(axis=0, keepdims=True)
    w = np.exp(logw)
    return w / w.sum(axis=0, keepdims=True)


def tail_caps(mu, p, M: int) -> np.ndarray:
    """``c_k >= sup_{n > M} p_{k|n}`` (the factorials cancel in p_{k|n}, so this is exact arithmetic on ratios).

    On the window ``M < n <= M + W`` the maximum is taken directly; beyond it, for ``k`` other than the strongest
    intensity, ``p_{k|n} <= (p_k e^{-mu_k}) / (p_1 e^{-mu_1}) (mu_k/mu_1)^n``, decreasing in ``n``.  A relative
    margin of 1e-9 covers float rounding.
    """
    P = conditional_intensity(mu, p, M + _WINDOW)[:, M + 1:]
    caps = P.max(axis=1)
    mu = np.asarray(mu, dtype=float)
    p = np.asarray(p, dtype=float)
    n_far = M + _WINDOW + 1
    for k in range(1, len(mu)):
        if mu[k] == 0:
            far = 0.0
        else:
            far = math.exp(math.log(p[k] / p[0]) - mu[k] + mu[0] + n_far * math.log(mu[k] / mu[0]))
        caps[k] = max(caps[k], min(far, 1.0))
    caps[0] = 1.0
    return np.minimum(caps * (1 + 1e-9) + 1e-300, 1.0)


def _solve_bound(P, caps, lo, hi, total, target: int, sign: int, use_total: bool = True):
    """Certified bound on ``s_target`` (sign=+1: lower bound of the minimum; -1: upper bound of the maximum).

    ``lo``, ``hi`` are arb balls; returns an arb exact ball.  ``use_total=False`` drops the constraint
    ``sum_n s_n = total`` (then the LP is the pure decoy relaxation that the closed forms also bound; the
    variables are still capped at ``total`` in the weak-duality residual term, which is always valid).
    """
    import cvxpy as cp  # imported on use: about 2 s

    K, M1 = P.shape
    nvar = M1 + 1 + K
    T = float(total)
    if T <= 0:
        return arb(0)
    lo_f = np.array([A.floor_arb(x) for x in lo]) / T
    hi_f = np.array([A.ceil_arb(x) for x in hi]) / T
    # G x >= h
    rows, h = [], []
    for k in range(K):
        r = np.zeros(nvar)
        r[:M1] = P[k]
        r[M1 + 1 + k] = 1.0
        rows.append(r)
        h.append(lo_f[k])
        rows.append(-r)
        h.append(-hi_f[k])
    for k in range(K):
        r = np.zeros(nvar)
        r[M1] = caps[k]
        r[M1 + 1 + k] = -1.0
        rows.append(r)
        h.append(0.0)
    G = np.array(rows)
    h = np.array(h)
    E = np.zeros((2, nvar))
    E[0, M1 + 1:] = 1.0
    E[0, M1] = -1.0
    E[1, :M1 + 1] = 1.0
    d = np.array([0.0, 1.0])
    if not use_total:
        E, d = E[:1], d[:1]
    c = np.zeros(nvar)
    c[target] = float(sign)
    x = cp.Variable(nvar, nonneg=True)
    cons = [G @ x >= h, E @ x == d]
    prob = cp.Problem(cp.Minimize(c @ x), cons)
    try:
        with _quiet_stdout():
            prob.solve(solver=cp.HIGHS, output_flag=False)
    except cp.error.SolverError as exc:  # pragma: no cover - solver failure
        raise ComputationError(f"decoy LP failed: {exc}") from exc
    if prob.status not in ("optimal", "optimal_inaccurate"):
        # infeasible intervals: no valid bound beyond the trivial one
        return arb(0) if sign > 0 else arb(T)
    y = np.maximum(np.asarray(cons[0].dual_value, dtype=float), 0.0)
    # cvxpy's equality multipliers enter its Lagrangian with the opposite sign to the dual used here
    z = -np.asarray(cons[1].dual_value, dtype=float)
    # weak duality in ball arithmetic.  The interval ends enter exactly (arb division by T, not the float
    # lo_f/hi_f the solver saw), and every row with entries of the float matrix P is widened by
    # _MATRIX_SLACK: a true solution (sum_n s_n <= 1 after scaling) meets the float rows up to
    # max |P_float - P_true| <= _MATRIX_SLACK (second review).  Any y >= 0 then gives a valid bound.
    with ctx.workprec(128):
        ya = [arb(float(v)) for v in y]
        za = [arb(float(v)) for v in z]
        hb = []
        slack_p = arb(_MATRIX_SLACK)
        for k in range(K):
            hb.append(arb(A.floor_arb(lo[k])) / T - slack_p)
            hb.append(-(arb(A.ceil_arb(hi[k])) / T + slack_p))
        hb += [arb(0)] * K
        val = sum((ya[i] * hb[i] for i in range(len(ya))), arb(0)) + (za[1] if use_total else arb(0))
        slack = arb(0)
        Gt = G.T
        Et = E.T
        for j in range(nvar):
            r = arb(float(c[j])) - sum((arb(float(Gt[j, i])) * ya[i] for i in np.nonzero(Gt[j])[0]), arb(0)) \
                - sum((arb(float(Et[j, i])) * za[i] for i in np.nonzero(Et[j])[0]), arb(0))
            if not r >= 0:
                slack += arb(min(A.floor_arb(r), 0.0))   # x_j <= 1 after scaling
        bound = (val + slack) * T
    if sign > 0:
        return A.clip0(A.lower_end(bound))
    return A.upper_end(-bound)


def basis_bounds(mu, p, lo, hi, total, targets, use_total: bool = True):
    """Certified bounds for several (index, sign) targets in one basis."""
    P = conditional_intensity(mu, p, TRUNCATION)
    caps = tail_caps(mu, p, TRUNCATION)
    return [_solve_bound(P, caps, lo, hi, total, t, s, use_total) for t, s in targets]


def estimates(block, method: str, eps_c: float, prec: int = 128, use_total: bool = True) -> dict:
    """s0, s1 (key basis, lower), s1z (test, lower), v1 (test errors, upper) by linear programming."""
    mu, p = block.intensities, block.intensity_probabilities
    kl, kh = A.count_intervals_certified(method, block.key_detections, eps_c, prec)
    tl, th = A.count_intervals_certified(method, block.test_detections, eps_c, prec)
    el, eh = A.count_intervals_certified(method, block.test_errors, eps_c, prec)
    s0, s1 = basis_bounds(mu, p, kl, kh, sum(block.key_detections), [(0, 1), (1, 1)], use_total)
    (s1z,) = basis_bounds(mu, p, tl, th, sum(block.test_detections), [(1, 1)], use_total)
    (v1,) = basis_bounds(mu, p, el, eh, sum(block.test_errors), [(1, -1)], use_total)
    return {"s0": s0, "s1": s1, "s1z": s1z, "v1": v1}
