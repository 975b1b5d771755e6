"""Closed-form decoy bounds, written once for two number types.

Every formula here is plain arithmetic (``+ - * /``) plus an ``exp`` that the caller passes, so the same
source runs on float64 numpy arrays (vectorised, for designs) and on python-flint ``arb`` balls (certified:
the ball contains the exact value of the formula at the conservative inputs).

One sender (intensities in descending order ``mu[0] > mu[1] > ...``, probabilities ``p[k]``; ``lo[k], hi[k]``
bound the expected count of intensity ``k`` given the photon numbers, ``sum_n p_{k|n} s_n``):
:func:`three_intensity`, :func:`three_intensity_errors` (Lim et al. 2014), :func:`two_intensity`,
:func:`two_intensity_vacuum_upper`, :func:`two_intensity_errors` (Rusca et al. 2018).

Two senders, each with a vacuum and two decoys (:func:`single_single_lower`, :func:`single_single_upper`):
the bounds on the counts ``s_{11}`` of pulse pairs with one photon from each sender, derived in
``proofs_notes/decoy/closed_forms.md``.

References
----------
.. [1] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014).
.. [2] D. Rusca, A. Boaron, F. Grünenfelder, A. Martin, H. Zbinden, Appl. Phys. Lett. 112, 171104 (2018).
.. [3] F. Xu, M. Curty, B. Qi, L. Qian, H.-K. Lo, New J. Phys. 15, 113007 (2013) and M. Curty, F. Xu, W. Cui,
   C. C. W. Lim, K. Tamaki, H.-K. Lo, Nat. Commun. 5, 3732 (2014): the same construction (vacuum and two
   decoys per sender); the two-sender forms here are derived in the proof note, not checked against those
   texts (only their abstracts could be read).
"""

from __future__ import annotations

from flint import arb

from .rounding import ceil_arb, clip0

__all__ = ["poisson_weights", "three_intensity", "three_intensity_errors", "two_intensity",
           "two_intensity_vacuum_upper", "two_intensity_errors", "single_single_lower", "single_single_upper"]


def poisson_weights(mu, p, exp):
    """``tau_n = sum_k p_k e^{-mu_k} mu_k^n / n!`` for ``n = 0, 1`` (probability that a pulse has n photons).

    Parameters
    ----------
    mu, p : sequences (float or arb)
    exp : callable

    Returns
    -------
    (tau0, tau1)
    """
    tau0 = sum(pk * exp(-mk) for mk, pk in zip(mu, p))
    tau1 = sum(pk * mk * exp(-mk) for mk, pk in zip(mu, p))
    return tau0, tau1


def three_intensity(mu, p, lo, hi, exp):
    """Lower bounds on vacuum and single-photon detections from three intensities (Lim et al. 2014).

    Requires ``mu[0] > mu[1] + mu[2]`` and ``mu[1] > mu[2] >= 0``.  ``lo``/``hi`` bound the expected
    detection counts per intensity (before rescaling).

    Parameters
    ----------
    mu, p, lo, hi : sequences of three (float arrays or arb)
    exp : callable

    Returns
    -------
    (s0, s1) : lower bounds on the vacuum and single-photon detections (not clipped below at 0 for s1;
        s0 clipped at 0).
    """
    m1, m2, m3 = mu
    r = [exp(mk) / pk for mk, pk in zip(mu, p)]
    n1u, n2l, n2u, n3l, n3u = r[0] * hi[0], r[1] * lo[1], r[1] * hi[1], r[2] * lo[2], r[2] * hi[2]
    tau0, tau1 = poisson_weights(mu, p, exp)
    s0 = clip0(tau0 * (m2 * n3l - m3 * n2u) / (m2 - m3))
    s1 = (tau1 * m1 * (n2l - n3u - (m2 * m2 - m3 * m3) / (m1 * m1) * (n1u - s0 / tau0))
          / (m1 * (m2 - m3) - (m2 * m2 - m3 * m3)))
    return s0, s1


def three_intensity_errors(mu, p, lo, hi, exp):
    """Upper bound on single-photon errors from the two weakest intensities (Lim et al. 2014).

    Parameters
    ----------
    mu, p, lo, hi : sequences of three (descending intensities)
    exp : callable

    Returns
    -------
    upper bound on the single-photon count of the quantity the intervals describe
    """
    m2, m3 = mu[1], mu[2]
    tau0, tau1 = poisson_weights(mu, p, exp)
    return tau1 * (exp(m2) / p[1] * hi[1] - exp(m3) / p[2] * lo[2]) / (m2 - m3)


def two_intensity(mu, p, lo, hi, s0_upper, exp):
    """Vacuum (lower) and single-photon (lower) detections from two intensities (Rusca et al. 2018).

    Parameters
    ----------
    mu, p, lo, hi : sequences of two (descending intensities)
    s0_upper : an upper bound on the vacuum detections of the same basis (from its errors)
    exp : callable

    Returns
    -------
    (s0, s1)
    """
    k1, k2 = mu
    r1, r2 = exp(k1) / p[0], exp(k2) / p[1]
    tau0, tau1 = poisson_weights(mu, p, exp)
    s0 = clip0(tau0 / (k1 - k2) * (k1 * r2 * lo[1] - k2 * r1 * hi[0]))
    s1 = (tau1 * k1 / (k2 * (k1 - k2))
          * (r2 * lo[1] - k2 * k2 / (k1 * k1) * r1 * hi[0] - (k1 * k1 - k2 * k2) / (k1 * k1) * s0_upper / tau0))
    return s0, s1


def two_intensity_vacuum_upper(mu, p, err_hi_weak, vac_dev, exp):
    """Upper bound on vacuum detections from the weak intensity's error count (Rusca et al. 2018).

    A vacuum detection is an error with probability 1/2 whatever the adversary does, so
    ``s0/2 - vac_dev <= v0 <= tau0 e^{mu_w} / p_w * E[m_w]`` except with the deviation's failure probability.

    Parameters
    ----------
    mu, p : sequences of two (descending)
    err_hi_weak : upper bound on the weak intensity's expected error count
    vac_dev : the deviation of the fair-coin errors of the vacuum detections
    exp : callable

    Returns
    -------
    upper bound on the vacuum detections
    """
    tau0, _ = poisson_weights(mu, p, exp)
    return 2 * (tau0 * exp(mu[1]) / p[1] * err_hi_weak + vac_dev)


def two_intensity_errors(mu, p, lo, hi, exp):
    """Upper bound on single-photon errors from two intensities (Rusca et al. 2018).

    Parameters
    ----------
    mu, p, lo, hi : sequences of two (descending)
    exp : callable

    Returns
    -------
    upper bound on the single-photon count of the quantity the intervals describe
    """
    k1, k2 = mu
    _, tau1 = poisson_weights(mu, p, exp)
    return tau1 / (k1 - k2) * (exp(k1) / p[0] * hi[0] - exp(k2) / p[1] * lo[1])


# ---------------------------------------------------------------------------------------------------------
# two senders: vacuum + two decoys each
# ---------------------------------------------------------------------------------------------------------
def _ratio_cap(ra, rb):
    """A number ``t`` with ``t >= ra`` and ``t >= rb`` (for arb: an exact float above both balls)."""
    if isinstance(ra, arb) or isinstance(rb, arb):
        return arb(max(ceil_arb(arb(ra)), ceil_arb(arb(rb))))
    import numpy as np
    return np.maximum(ra, rb)


def _scaled(mu_a, p_a, mu_b, p_b, E, exp):
    """``e^{mu_a,i + mu_b,j} / (p_a,i p_b,j) E[i][j]`` for the roles i, j in (0: vacuum, 1: weak, 2: strong)."""
    return [[exp(mu_a[i] + mu_b[j]) / (p_a[i] * p_b[j]) * E[i][j] for j in range(3)] for i in range(3)]


def _tau1(mu, p, exp):
    return sum(pk * mk * exp(-mk) for mk, pk in zip(mu, p))


def single_single_lower(mu_a, p_a, mu_b, p_b, lo, hi, exp):
    """Lower bound on ``s_{11}`` (one photon from each sender) from a vacuum and two decoys per sender.

    With ``D(a, b) = F_{ab} - F_{a0} - F_{0b} + F_{00}``, ``F_{ab} = e^{a+b} E_{ab} / (p_a p_b)``, and
    ``t = max(nu_a/mu_a, nu_b/mu_b) < 1``::

        y_11 >= [D(nu_a, nu_b) / (nu_a nu_b) - t D(mu_a, mu_b) / (mu_a mu_b)] / (1 - t),   s_11 = tau_a1 tau_b1 y_11

    (for equal intensities ``[mu^3 D(nu) - nu^3 D(mu)] / (mu^2 nu^2 (mu - nu))``); each expected count
    enters through the end of its interval that keeps the inequality valid (proof note
    ``proofs_notes/decoy/closed_forms.md``).

    Parameters
    ----------
    mu_a, p_a, mu_b, p_b : sequences of three
        Each sender's intensities and probabilities in the role order (vacuum 0, weak ``nu``, strong ``mu``),
        ``0 = mu[0] < mu[1] < mu[2]``.
    lo, hi : 3x3 nested sequences
        ``lo[i][j], hi[i][j]``: interval on the expected count of setting (role i of sender a, role j of b).
    exp : callable

    Returns
    -------
    lower bound on ``s_11`` (not clipped at 0)
    """
    L = _scaled(mu_a, p_a, mu_b, p_b, lo, exp)
    U = _scaled(mu_a, p_a, mu_b, p_b, hi, exp)
    na, ma, nb, mb = mu_a[1], mu_a[2], mu_b[1], mu_b[2]
    t = _ratio_cap(na / ma, nb / mb)
    d_weak = (L[1][1] - U[1][0] - U[0][1]) / (na * nb)
    d_strong = (U[2][2] - L[2][0] - L[0][2]) / (ma * mb)
    vac = (1 / (na * nb) - t / (ma * mb)) * L[0][0]
    y11 = (d_weak - t * d_strong + vac) / (1 - t)
    return _tau1(mu_a, p_a, exp) * _tau1(mu_b, p_b, exp) * y11


def single_single_upper(mu_a, p_a, mu_b, p_b, lo, hi, exp):
    """Upper bound on ``s_{11}`` from the vacuum and weak decoys: ``tau_a1 tau_b1 D(nu_a, nu_b)/(nu_a nu_b)``.

    Used for the errors of single-photon pairs (intervals on error counts).  Parameters as
    :func:`single_single_lower`.

    Parameters
    ----------
    mu_a, p_a, mu_b, p_b, lo, hi, exp : as :func:`single_single_lower`

    Returns
    -------
    upper bound on ``s_11``
    """
    L = _scaled(mu_a, p_a, mu_b, p_b, lo, exp)
    U = _scaled(mu_a, p_a, mu_b, p_b, hi, exp)
    na, nb = mu_a[1], mu_b[1]
    y11 = (U[1][1] - L[1][0] - L[0][1] + U[0][0]) / (na * nb)
    return _tau1(mu_a, p_a, exp) * _tau1(mu_b, p_b, exp) * y11
