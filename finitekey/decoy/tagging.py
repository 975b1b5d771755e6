"""The tag matrix ``p_{k|n}`` and the caps that make photon-number truncation rigorous.

For one sender with intensities ``mu_k`` chosen with probabilities ``p_k``, a pulse with ``n`` photons came
from intensity ``k`` with probability ``p_{k|n} = p_k e^{-mu_k} mu_k^n / (n! tau_n)``.  With several
independent senders the tag of a pulse is the tuple of photon numbers and ``p_{k|n} = prod_s p_{s,k_s|n_s}``
(proof note ``proofs_notes/decoy/tagging.md``).

Truncation keeps the tags with every ``n_s <= M`` (the *box*) as variables.  The tags outside the box are
split into regions ``R_s``: ``n_s > M`` and ``n_r <= M`` for every ``r < s``.  On ``R_s`` every ``p_{k|n}`` is
at most ``c_{k,s} = cap_s(k_s) prod_{r<s} boxmax_r(k_r) prod_{r>s} supall_r(k_r)``, which the functions
below compute with a relative margin that covers float rounding.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from .model import as_senders

__all__ = ["conditional_intensity", "tail_caps", "tags", "region_caps", "WINDOW", "CAP_MARGIN"]

#: Photon numbers beyond the box on which ``sup p_{k|n}`` is taken directly; past it a geometric bound.
WINDOW = 400
#: Relative margin on every cap (the float ``p_{k|n}`` has relative error far below 1e-13).
CAP_MARGIN = 1e-9


def conditional_intensity(mu, p, n_max: int) -> np.ndarray:
    """Matrix ``P[k, n] = p_{k|n}`` of one sender for ``n = 0..n_max`` (float, computed in log space).

    Parameters
    ----------
    mu, p : sequences of float
        Intensities and their probabilities.
    n_max : int

    Returns
    -------
    numpy.ndarray, shape (len(mu), n_max + 1)
        Columns sum to 1.
    """
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
    """``c_k >= sup_{n > M} p_{k|n}`` for one sender (the factorials cancel in ``p_{k|n}``).

    On the window ``M < n <= M + WINDOW`` the maximum is taken directly; beyond it, for ``k`` other than the
    strongest intensity ``j``, ``p_{k|n} <= (p_k e^{-mu_k}) / (p_j e^{-mu_j}) (mu_k/mu_j)^n``, decreasing in
    ``n``; ``c_j = 1``.  A relative margin ``CAP_MARGIN`` covers float rounding.

    Parameters
    ----------
    mu, p : sequences of float
    M : int
        Largest photon number kept as a variable.

    Returns
    -------
    numpy.ndarray, shape (len(mu),)
    """
    P = conditional_intensity(mu, p, M + WINDOW)[:, M + 1:]
    caps = P.max(axis=1)
    mu = np.asarray(mu, dtype=float)
    p = np.asarray(p, dtype=float)
    j = int(np.argmax(mu))
    n_far = M + WINDOW + 1
    for k in range(len(mu)):
        if k == j:
            continue
        if mu[k] == 0:
            far = 0.0
        else:
            far = math.exp(math.log(p[k] / p[j]) - mu[k] + mu[j] + n_far * math.log(mu[k] / mu[j]))
        caps[k] = max(caps[k], min(far, 1.0))
    caps[j] = 1.0
    return np.minimum(caps * (1 + CAP_MARGIN) + 1e-300, 1.0)


def tags(senders, n_max: int) -> np.ndarray:
    """The tag matrix ``P[k, n] = p_{k|n}`` for every setting ``k`` and box tag ``n`` (all ``n_s <= n_max``).

    Parameters
    ----------
    senders : Sender or sequence of senders (see :func:`finitekey.decoy.model.as_senders`)
    n_max : int
        Largest photon number per sender.

    Returns
    -------
    numpy.ndarray, shape (K, (n_max + 1) ** S)
        Rows in setting order (:func:`finitekey.decoy.model.settings`), columns in the order of
        ``itertools.product(range(n_max + 1), repeat=S)``; every column sums to 1 (up to rounding).
    """
    ss = as_senders(senders)
    mats = [conditional_intensity(s.intensities, s.probabilities, n_max) for s in ss]
    P = mats[0]
    for m in mats[1:]:
        # rows: settings (product order), columns: tags (product order)
        P = np.einsum("an,bm->abnm", P, m).reshape(P.shape[0] * m.shape[0], P.shape[1] * m.shape[1])
    return P


def box_tags(S: int, n_max: int) -> tuple:
    """The box tags in column order of :func:`tags`."""
    return tuple(itertools.product(range(n_max + 1), repeat=S))


def region_caps(senders, n_max: int) -> np.ndarray:
    """Caps ``c[s, k] >= sup_{n in R_s} p_{k|n}`` for the tail regions ``R_s`` of the box.

    ``R_s``: ``n_s > n_max`` and ``n_r <= n_max`` for every earlier sender ``r < s`` (later senders free).
    The cap is the product of ``tail_caps`` of sender ``s``, the box maxima of the earlier senders and the
    maxima over all photon numbers of the later ones, each with the relative margin ``CAP_MARGIN``.

    Parameters
    ----------
    senders : Sender or sequence of senders
    n_max : int

    Returns
    -------
    numpy.ndarray, shape (S, K)
    """
    ss = as_senders(senders)
    tail, boxmax, supall = [], [], []
    for s in ss:
        P = conditional_intensity(s.intensities, s.probabilities, n_max)
        t = tail_caps(s.intensities, s.probabilities, n_max)
        b = np.minimum(P.max(axis=1) * (1 + CAP_MARGIN), 1.0)
        tail.append(t)
        boxmax.append(b)
        supall.append(np.maximum(b, t))
    if len(ss) == 1:
        return tail[0][None, :]
    out = []
    for s in range(len(ss)):
        factors = [boxmax[r] if r < s else (tail[r] if r == s else supall[r]) for r in range(len(ss))]
        c = factors[0]
        for f in factors[1:]:
            c = np.outer(c, f).ravel()
        out.append(np.minimum(c * (1 + CAP_MARGIN), 1.0))
    return np.array(out)
