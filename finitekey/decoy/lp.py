"""Decoy-state estimation by linear programming, for any number of senders, with a certified value.

Variables (all counts divided by a scale ``T``): ``s_n`` for the box tags ``n`` (every ``n_s <= M``); for each
tail region ``R_s`` (:mod:`.tagging`) its total ``T_s`` and its share ``t_{k,s}`` of every setting ``k``.

Constraints (every true photon-number distribution satisfies all of them; proof note
``proofs_notes/decoy/lp.md``):

* ``lo_k <= sum_n p_{k|n} s_n + sum_s t_{k,s} <= hi_k`` for every setting (the certified intervals);
* ``0 <= t_{k,s} <= c_{k,s} T_s`` and ``sum_k t_{k,s} = T_s`` (the tail caps; ``sum_k p_{k|n} = 1``);
* optional: ``sum_n s_n + sum_s T_s = total`` (exact observed total), joint rows
  ``lo <= sum_k c_k E_k <= hi``, known bounds on photon-number counts.

The LP is solved in float by cvxpy with HiGHS (imported on first use).  The *reported* bound does not trust
the solver: it is the weak-duality value ``h.y + d.z + sum_j min(0, r_j) x_max_j`` of the solver's duals
``y >= 0, z`` (residual ``r = c - G^T y - E^T z``, ``x_max_j = 1`` after scaling), evaluated in arb ball
arithmetic with every row containing float ``p_{k|n}`` widened by ``MATRIX_SLACK``; valid for any duals
(Boyd and Vandenberghe, *Convex Optimization*, 2004, sec. 5.2).

References
----------
.. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005) (decoy estimation as a linear
   programme over photon-number yields).
.. [2] S. Boyd and L. Vandenberghe, *Convex Optimization*, Cambridge University Press (2004), sec. 5.2.
"""

from __future__ import annotations

import contextlib
import functools
import os
import sys
from dataclasses import dataclass

import numpy as np
from flint import arb, ctx

from ..errors import ComputationError
from .model import ANY
from .rounding import ceil_arb, clip0, floor_arb, lower_end, upper_end
from .tagging import box_tags, region_caps, tags

__all__ = ["MATRIX_SLACK", "default_n_max", "Structure", "structure", "solve_certified", "solve_float"]

#: Bound on the absolute error of every entry of the float matrix ``p_{k|n}`` (entries in [0, 1], computed in
#: log space with a few roundings, products of at most a few such factors: error far below 1e-13); widens the
#: LP rows in the certificate (tested against mpmath at 40 digits).
MATRIX_SLACK = 1e-11


def default_n_max(n_senders: int) -> int:
    """Default truncation: 30 photons for one sender, 20 per sender for two, 10 for more.

    Parameters
    ----------
    n_senders : int

    Returns
    -------
    int
    """
    return {1: 30, 2: 20}.get(n_senders, 10)


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


@dataclass(frozen=True)
class Structure:
    """The fixed part of the LP for given senders and truncation (no data).

    Attributes
    ----------
    P : numpy.ndarray (K, B)
        Tag matrix on the box.
    caps : numpy.ndarray (S, K)
        Region caps.
    box : tuple of tuple
        Box tags, column order of ``P``.
    n_max : int
    """

    P: np.ndarray
    caps: np.ndarray
    box: tuple
    n_max: int

    @property
    def K(self) -> int:
        """Number of settings."""
        return self.P.shape[0]

    @property
    def S(self) -> int:
        """Number of senders (tail regions)."""
        return self.caps.shape[0]

    @property
    def nvar(self) -> int:
        """Number of LP variables."""
        return self.P.shape[1] + self.S * (1 + self.K)

    def region_offset(self, s: int) -> int:
        """Index of ``T_s``; ``t_{k,s}`` follow it."""
        return self.P.shape[1] + s * (1 + self.K)


@functools.lru_cache(maxsize=32)
def structure(senders: tuple, n_max: int) -> Structure:
    """The cached :class:`Structure` of ``senders`` (a tuple of Sender) at truncation ``n_max``.

    Parameters
    ----------
    senders : tuple of Sender
    n_max : int

    Returns
    -------
    Structure
    """
    P = tags(senders, n_max)
    P.setflags(write=False)
    caps = region_caps(senders, n_max)
    caps.setflags(write=False)
    return Structure(P, caps, box_tags(len(senders), n_max), n_max)


def _matches(pattern, n) -> bool:
    return all(e == ANY or e == m for e, m in zip(pattern, n))


def _region_meets(pattern, s: int, M: int) -> bool:
    """Whether the tail region ``R_s`` contains a tag matching ``pattern``."""
    for r, e in enumerate(pattern):
        if e == ANY:
            continue
        if r < s and e > M:
            return False
        if r == s and e <= M:
            return False
    return True


def _target_vectors(st: Structure, pats) -> tuple:
    """Box indicator of the target set and the list of regions it meets."""
    ind = np.zeros(len(st.box))
    for j, n in enumerate(st.box):
        if any(_matches(pt, n) for pt in pats):
            ind[j] = 1.0
    regions = [s for s in range(st.S) if any(_region_meets(pt, s, st.n_max) for pt in pats)]
    return ind, regions


def _setting_row(st: Structure, k: int, B: int) -> np.ndarray:
    r = np.zeros(st.nvar)
    r[:B] = st.P[k]
    for s in range(st.S):
        r[st.region_offset(s) + 1 + k] = 1.0
    return r


def _rows(st: Structure, lo_f, hi_f, joint, known):
    """``G x >= h``, ``E x = d`` (float) and, per row of G, the kind of its right side for the certificate.

    Row kinds: ``("lo", k)``, ``("hi", k)``, ``("cap",)``, ``("jlo", i, w)``, ``("jhi", i, w)``,
    ``("klo", i)``, ``("khi", i)`` (``w`` = sum of |coefficients|, the widening factor).
    """
    B = len(st.box)
    rows, h, kinds = [], [], []
    for k in range(st.K):
        r = _setting_row(st, k, B)
        rows.append(r)
        h.append(lo_f[k])
        kinds.append(("lo", k))
        rows.append(-r)
        h.append(-hi_f[k])
        kinds.append(("hi", k))
    for s in range(st.S):
        off = st.region_offset(s)
        for k in range(st.K):
            r = np.zeros(st.nvar)
            r[off] = st.caps[s, k]
            r[off + 1 + k] = -1.0
            rows.append(r)
            h.append(0.0)
            kinds.append(("cap",))
    for i, (coef, jlo, jhi) in enumerate(joint):
        r = sum(c * _setting_row(st, k, B) for k, c in enumerate(coef) if c != 0.0)
        if isinstance(r, int):
            r = np.zeros(st.nvar)
        w = float(sum(abs(c) for c in coef))
        if jlo is not None:
            rows.append(r)
            h.append(jlo[0])
            kinds.append(("jlo", i, w))
        if jhi is not None:
            rows.append(-r)
            h.append(-jhi[0])
            kinds.append(("jhi", i, w))
    for i, (pats, klo, khi) in enumerate(known):
        ind, regions = _target_vectors(st, pats)
        if klo is not None:
            r = np.zeros(st.nvar)
            r[:B] = ind
            for s in regions:
                r[st.region_offset(s)] = 1.0
            rows.append(r)
            h.append(klo)
            kinds.append(("klo", i))
        if khi is not None:
            r = np.zeros(st.nvar)
            r[:B] = -ind
            rows.append(r)
            h.append(-khi)
            kinds.append(("khi", i))
    E = np.zeros((st.S + 1, st.nvar))
    for s in range(st.S):
        off = st.region_offset(s)
        E[s, off + 1:off + 1 + st.K] = 1.0
        E[s, off] = -1.0
        E[st.S, off] = 1.0
    E[st.S, :B] = 1.0
    d = np.zeros(st.S + 1)
    d[st.S] = 1.0
    return np.array(rows), np.array(h), kinds, E, d


def _objective(st: Structure, pats, sign: int) -> np.ndarray:
    ind, regions = _target_vectors(st, pats)
    c = np.zeros(st.nvar)
    c[:len(st.box)] = sign * ind
    if sign < 0:   # an upper bound must count the tail tags the target may contain
        for s in regions:
            c[st.region_offset(s)] = -1.0
    return c


def _scale(lo, hi, total):
    """Scale ``T``: the exact total if given, else a float >= sum of the upper ends (>= every variable)."""
    if total is not None:
        return float(total)
    with ctx.workprec(128):
        return ceil_arb(sum(hi, arb(0)))


def _float_rows(lo, hi, joint, known, T):
    lo_f = np.array([floor_arb(x) for x in lo]) / T
    hi_f = np.array([ceil_arb(x) for x in hi]) / T
    jf = [(c, None if a is None else (floor_arb(a) / T,), None if b is None else (ceil_arb(b) / T,))
          for c, a, b in joint]
    kf = [(p, None if a is None else floor_arb(a) / T, None if b is None else ceil_arb(b) / T) for p, a, b in known]
    return lo_f, hi_f, jf, kf


def solve_certified(st: Structure, lo, hi, pats, sign: int, total=None, joint=(), known=(),
                    prec: int = 128) -> arb:
    """Certified bound on the target count (``sign=+1``: lower bound; ``-1``: upper bound).

    Parameters
    ----------
    st : Structure
    lo, hi : lists of arb
        Certified intervals per setting.
    pats : frozenset of patterns
        The target (see :func:`finitekey.decoy.model.parse_target`).
    sign : int
        +1 for a lower bound, -1 for an upper bound.
    total : int or None
        Exact ``sum_n s_n`` if known.
    joint, known : tuples from :func:`finitekey.decoy.model.parse_joint` / ``parse_known``
    prec : int
        arb working precision of the certificate.

    Returns
    -------
    arb
        An exact ball at a float: a lower bound (clipped at 0) or an upper bound.
    """
    import cvxpy as cp  # imported on use: about 2 s

    T = _scale(lo, hi, total)
    if T <= 0:
        return arb(0)
    lo_f, hi_f, jf, kf = _float_rows(lo, hi, joint, known, T)
    G, h, kinds, E, d = _rows(st, lo_f, hi_f, jf, kf)
    use_total = total is not None
    if not use_total:
        E, d = E[:-1], d[:-1]
    c = _objective(st, pats, sign)
    nvar = st.nvar
    x = cp.Variable(nvar, nonneg=True)
    cons = [G @ x >= h, E @ x == d]
    prob = cp.Problem(cp.Minimize(c @ x), cons)
    try:
        with _quiet_stdout():
            prob.solve(solver=cp.HIGHS, output_flag=False)
    except cp.error.SolverError as exc:  # pragma: no cover - solver failure
        raise ComputationError(f"decoy LP failed: {exc}") from exc
    if prob.status not in ("optimal", "optimal_inaccurate") or cons[0].dual_value is None:
        # infeasible intervals: no valid bound beyond the trivial one
        return arb(0) if sign > 0 else arb(T)
    y = np.maximum(np.asarray(cons[0].dual_value, dtype=float), 0.0)
    # cvxpy's equality multipliers enter its Lagrangian with the opposite sign to the dual used here
    z = -np.asarray(cons[1].dual_value, dtype=float)
    # weak duality in ball arithmetic.  The interval ends enter exactly (arb division by T, not the floats
    # the solver saw), and every row with entries of the float matrix P is widened by MATRIX_SLACK (times
    # the sum of |coefficients| for a joint row): a true solution (sum of the variables <= 1 after scaling)
    # meets the float rows up to max |P_float - P_true| <= MATRIX_SLACK.  Any y >= 0 then gives a valid bound.
    with ctx.workprec(prec):
        ya = [arb(float(v)) for v in y]
        za = [arb(float(v)) for v in z]
        hb = []
        slack_p = arb(MATRIX_SLACK)
        for kind in kinds:
            tag = kind[0]
            if tag == "lo":
                hb.append(arb(floor_arb(lo[kind[1]])) / T - slack_p)
            elif tag == "hi":
                hb.append(-(arb(ceil_arb(hi[kind[1]])) / T + slack_p))
            elif tag == "cap":
                hb.append(arb(0))
            elif tag == "jlo":
                hb.append(arb(floor_arb(joint[kind[1]][1])) / T - 2 * slack_p * arb(kind[2]))
            elif tag == "jhi":
                hb.append(-(arb(ceil_arb(joint[kind[1]][2])) / T + 2 * slack_p * arb(kind[2])))
            elif tag == "klo":
                hb.append(arb(floor_arb(known[kind[1]][1])) / T)
            else:
                hb.append(-(arb(ceil_arb(known[kind[1]][2])) / T))
        val = sum((ya[i] * hb[i] for i in range(len(ya))), arb(0)) + (za[-1] if use_total else arb(0))
        slack = arb(0)
        Gt = G.T
        Et = E.T
        for j in range(nvar):
            r = arb(float(c[j])) - sum((arb(float(Gt[j, i])) * ya[i] for i in np.nonzero(Gt[j])[0]), arb(0)) \
                - sum((arb(float(Et[j, i])) * za[i] for i in np.nonzero(Et[j])[0]), arb(0))
            if not r >= 0:
                slack += arb(min(floor_arb(r), 0.0))   # x_j <= 1 after scaling
        bound = (val + slack) * T
    if sign > 0:
        return clip0(lower_end(bound))
    return upper_end(-bound)


def solve_float(st: Structure, lo, hi, pats, sign: int, total=None, joint=(), known=()) -> float:
    """Float optimum of the same LP (scipy's HiGHS; not certified: for designs).

    Parameters
    ----------
    st : Structure
    lo, hi : sequences of float
    pats, sign, total : as :func:`solve_certified`
    joint, known : as :func:`solve_certified` but with float ends

    Returns
    -------
    float
        The optimum (``nan`` if the LP is infeasible).
    """
    from scipy.optimize import linprog  # imported on use: scipy.optimize costs about 0.2 s at start-up

    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    T = float(total) if total is not None else float(np.sum(hi))
    if not T > 0:
        return 0.0
    jf = [(c, None if a is None else (float(a) / T,), None if b is None else (float(b) / T,)) for c, a, b in joint]
    kf = [(p, None if a is None else float(a) / T, None if b is None else float(b) / T) for p, a, b in known]
    G, h, _, E, d = _rows(st, lo / T, hi / T, jf, kf)
    if total is None:
        E, d = E[:-1], d[:-1]
    c = _objective(st, pats, sign)
    res = linprog(c, A_ub=-G, b_ub=-h, A_eq=E, b_eq=d, bounds=(0, None), method="highs")
    if res.status != 0:
        return float("nan")
    return float(sign * res.fun * T)
