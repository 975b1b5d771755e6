"""Certified and float bounds on photon-number-resolved counts: the public entry points of the engine.

:func:`bound` returns a certified arb bound (an exact ball at a float) on ``s_target``: by a closed form
where one exists for the sender count, the intensities and the target (:mod:`.closed_forms`), else by the
linear programme with rigorous truncation and a weak-duality certificate (:mod:`.lp`).
:func:`bound_float` is its float twin, vectorised over extra trailing axes of ``lo``/``hi`` (designs).
"""

from __future__ import annotations


import numpy as np
from flint import arb, ctx

from ..errors import InputError
from . import closed_forms as CF
from . import lp as LP
from .model import (ANY, JointRow, as_senders, joint_coefficients, parse_intervals, parse_joint, parse_known,
                    parse_target, settings)
from .rounding import arb_exp, clip0, lower_end, upper_end

__all__ = ["METHODS", "SENSES", "closed_form_name", "bound", "bound_float"]

#: Accepted ``method`` values: closed form where available else LP; closed form only; LP only.
METHODS = ("auto", "closed", "lp")
#: Accepted ``sense`` values.
SENSES = ("lower", "upper")


def _check_choice(field, value, choices):
    if value not in choices:
        raise InputError(field, value, "one of " + ", ".join(choices))


def _descending(sender):
    order = sorted(range(sender.size), key=lambda i: -float(sender.intensities[i]))
    return order


def _mdi_roles(sender):
    """Index order (vacuum, weak, strong) if the sender has exactly a vacuum and two decoys, else None."""
    if sender.size != 3:
        return None
    order = sorted(range(3), key=lambda i: float(sender.intensities[i]))
    if float(sender.intensities[order[0]]) != 0.0:
        return None
    return order


def closed_form_name(senders, target, sense, known=None) -> str | None:
    """Name of the closed form :func:`bound` would use with ``method="auto"``, or None (then the LP).

    Parameters
    ----------
    senders : Sender or sequence of senders
    target : see :func:`bound`
    sense : "lower" or "upper"
    known : mapping, optional
        Known bounds (the two-intensity single-photon bound needs an upper bound on ``(0,)``).

    Returns
    -------
    str or None
        ``"three-intensity"``, ``"two-intensity"``, ``"two-sender-vacuum-two-decoy"`` or None.
    """
    ss = as_senders(senders)
    pats = parse_target(ss, target)
    _check_choice("sense", sense, SENSES)
    return _closed_choice(ss, pats, sense, known)[0]


def _closed_choice(ss, pats, sense, known):
    none = (None, None)
    if len(pats) != 1:
        return none
    (pat,) = pats
    if ANY in pat:
        return none
    if len(ss) == 1:
        s = ss[0]
        order = _descending(s)
        mu = [float(s.intensities[i]) for i in order]
        if s.size == 3 and mu[0] > mu[1] + mu[2] and mu[1] > mu[2] >= 0:
            if (pat == (0,) and sense == "lower") or pat == (1,):
                return "three-intensity", order
        if s.size == 2:
            s0u = _known_vacuum_upper(ss, known)
            if (pat == (0,) and sense == "lower") or (pat == (1,) and sense == "upper") \
                    or (pat == (1,) and sense == "lower" and s0u is not None):
                return "two-intensity", order
        return none
    if len(ss) == 2 and pat == (1, 1):
        roles = [_mdi_roles(s) for s in ss]
        if all(r is not None for r in roles):
            return "two-sender-vacuum-two-decoy", roles
    return none


def _known_vacuum_upper(ss, known):
    for t, (lo, hi) in (known or {}).items():
        if hi is not None and parse_target(ss, t) == frozenset({(0,)}):
            return hi
    return None


def _closed_value(name, order, ss, lo, hi, pats, sense, known, exp, number):
    """Evaluate the chosen closed form (``number`` converts floats: arb or identity)."""
    (pat,) = pats
    if len(ss) == 1:
        s = ss[0]
        mu = [number(s.intensities[i]) for i in order]
        p = [number(s.probabilities[i]) for i in order]
        L = [lo[i] for i in order]
        H = [hi[i] for i in order]
        if name == "three-intensity":
            if sense == "upper":
                return CF.three_intensity_errors(mu, p, L, H, exp)
            s0, s1 = CF.three_intensity(mu, p, L, H, exp)
            return s0 if pat == (0,) else s1
        if sense == "upper":
            return CF.two_intensity_errors(mu, p, L, H, exp)
        s0u = _known_vacuum_upper(ss, known) if pat == (1,) else 0 * L[0]
        s0, s1 = CF.two_intensity(mu, p, L, H, s0u, exp)
        return s0 if pat == (0,) else s1
    ra, rb = order
    K_b = ss[1].size
    mu_a = [number(ss[0].intensities[i]) for i in ra]
    p_a = [number(ss[0].probabilities[i]) for i in ra]
    mu_b = [number(ss[1].intensities[j]) for j in rb]
    p_b = [number(ss[1].probabilities[j]) for j in rb]
    L = [[lo[i * K_b + j] for j in rb] for i in ra]
    H = [[hi[i * K_b + j] for j in rb] for i in ra]
    f = CF.single_single_lower if sense == "lower" else CF.single_single_upper
    return f(mu_a, p_a, mu_b, p_b, L, H, exp)


def _n_max(ss, n_max):
    if n_max is None:
        return LP.default_n_max(len(ss))
    if isinstance(n_max, bool) or not isinstance(n_max, int) or not 1 <= n_max <= 200:
        raise InputError("n_max", n_max, "an integer in [1, 200]")
    if len(ss) >= 2 and (n_max + 1) ** len(ss) > 20000:
        raise InputError("n_max", n_max, f"at most {int(20000 ** (1 / len(ss))) - 1} for {len(ss)} senders")
    return n_max


def _total(total):
    if total is None:
        return None
    if isinstance(total, bool) or not isinstance(total, (int, np.integer)) or total < 0:
        raise InputError("total", total, "an integer >= 0 (the exact sum of the counts) or None")
    return int(total)


def bound(senders, lo, hi, target, sense, total=None, method="auto", *, joint=(), known=None,
          n_max=None, prec: int = 128) -> arb:
    """Certified bound on the photon-number-resolved count ``s_target``.

    Parameters
    ----------
    senders : Sender, or sequence of Sender or ``(intensities, probabilities)`` pairs
    lo, hi : sequence in setting order (:func:`finitekey.decoy.settings`) or mapping setting -> value
        Certified interval on the expected count of every setting given the photon numbers,
        ``E_k = sum_n p_{k|n} s_n`` (int, float, Fraction or arb; arb balls are used by their outer ends).
    target : tuple or sequence of tuples
        Photon-number pattern(s), one entry per sender, each an int or ``"*"``: ``(1,)``, ``(1, 1)``,
        ``(0, "*")``; a list means the union.
    sense : {"lower", "upper"}
    total : int, optional
        The exact ``sum_n s_n`` (LP only; closed forms do not use it).
    method : {"auto", "closed", "lp"}
        ``auto``: the closed form where one exists (:func:`closed_form_name`) and no joint row is given,
        else the LP.  The closed forms use neither ``total`` nor ``known`` bounds other than the
        two-intensity vacuum bound.
    joint : sequence of JointRow, optional
        Certified intervals on linear combinations of the expected counts (LP only).
    known : mapping target -> (lo or None, hi or None), optional
        Certified bounds on photon-number counts, e.g. ``{(0,): (None, s0_upper)}``.
    n_max : int, optional
        LP truncation per sender (default 30 for one sender, 20 for two, 10 for more); the tail is kept rigorously.
    prec : int
        arb precision.

    Returns
    -------
    arb
        An exact ball at a float: below the true count (lower, clipped at 0) or above it (upper), whenever
        every given interval holds.

    Raises
    ------
    InputError
        Mismatched lengths, a missing setting, ``lo > hi``, a negative or repeated intensity, an unknown
        target, sense or method, or ``method="closed"`` where no closed form applies.
    """
    ss = as_senders(senders)
    _check_choice("sense", sense, SENSES)
    _check_choice("method", method, METHODS)
    lo_a, hi_a = parse_intervals(ss, lo, hi)
    pats = parse_target(ss, target)
    jt = parse_joint(ss, joint)
    kn = parse_known(ss, known)
    tot = _total(total)
    M = _n_max(ss, n_max)
    name, order = (None, None) if method == "lp" or (method == "auto" and jt) else \
        _closed_choice(ss, pats, sense, known)
    if method == "closed" and name is None:
        raise InputError("method", method, "auto or lp: no closed form for these senders, target and sense")
    if name is not None:
        with ctx.workprec(prec):
            kn_arb = {t: (a, None if b is None else _as_arb(b)) for t, (a, b) in (known or {}).items()}
            v = _closed_value(name, order, ss, lo_a, hi_a, pats, sense, kn_arb, arb_exp, arb)
            return lower_end(clip0(v)) if sense == "lower" else upper_end(v)
    st = LP.structure(ss, M)
    return LP.solve_certified(st, lo_a, hi_a, pats, 1 if sense == "lower" else -1, tot, jt, kn, prec)


def _as_arb(x):
    from .model import _exact
    return _exact("known", x)


def bound_float(senders, lo, hi, target, sense, total=None, method="auto", *, joint=(), known=None,
                n_max=None):
    """Float twin of :func:`bound` (not certified; for designs), vectorised over trailing axes.

    Parameters
    ----------
    senders, target, sense, method, joint, known, n_max : as :func:`bound`
    lo, hi : array_like, shape (K, ...)
        Interval ends per setting (setting order), with any trailing batch shape.
    total : array_like or None
        Broadcast against the batch shape (LP only).

    Returns
    -------
    float or numpy.ndarray
        Batch shape; closed forms are not clipped at 0 (a continuation for searches); the LP gives ``nan``
        where infeasible.
    """
    ss = as_senders(senders)
    _check_choice("sense", sense, SENSES)
    _check_choice("method", method, METHODS)
    K = len(settings(ss))
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    if lo.shape != hi.shape or lo.ndim < 1 or lo.shape[0] != K:
        raise InputError("lo", f"shape {lo.shape} and hi shape {hi.shape}", f"equal shapes (K={K}, ...)")
    if not (np.all(np.isfinite(lo)) and np.all(np.isfinite(hi))):
        raise InputError("lo", "non-finite entries", "finite expected counts")
    pats = parse_target(ss, target)
    name, order = (None, None) if method == "lp" or (method == "auto" and joint) else \
        _closed_choice(ss, pats, sense, known)
    if method == "closed" and name is None:
        raise InputError("method", method, "auto or lp: no closed form for these senders, target and sense")
    if name is not None:
        kn = {t: (a, None if b is None else np.asarray(b, dtype=float)) for t, (a, b) in (known or {}).items()}
        v = _closed_value(name, order, ss, list(lo), list(hi), pats, sense, kn, np.exp, float)
        v = np.asarray(v, dtype=float) * np.ones(lo.shape[1:])
        return float(v) if v.ndim == 0 else v
    st = LP.structure(ss, _n_max(ss, n_max))
    batch = lo.shape[1:]
    tot = None if total is None else np.broadcast_to(np.asarray(total, dtype=float), batch)
    keys = settings(ss)
    jt = []
    for i, row in enumerate(joint or ()):
        if isinstance(row, (tuple, list)) and len(row) == 3:
            row = JointRow(*row)
        if not isinstance(row, JointRow):
            raise InputError(f"joint[{i}]", row, "a JointRow(coefficients, lo, hi)")
        jt.append((joint_coefficients(keys, row.coefficients, i), row.lo, row.hi))
    kn = [(parse_target(ss, t), a, b) for t, (a, b) in (known or {}).items()]
    out = np.empty(batch)
    sign = 1 if sense == "lower" else -1
    for idx in np.ndindex(*batch) if batch else [()]:
        sl = (slice(None),) + idx
        jrow = [(c, None if a is None else float(np.asarray(a)[idx]), None if b is None else float(np.asarray(b)[idx]))
                for c, a, b in jt]
        krow = [(p, None if a is None else float(np.asarray(a)[idx]), None if b is None else float(np.asarray(b)[idx]))
                for p, a, b in kn]
        out[idx] = LP.solve_float(st, lo[sl], hi[sl], pats, sign, None if tot is None else tot[idx], jrow, krow)
    return float(out) if out.ndim == 0 else out


