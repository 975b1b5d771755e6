"""Kato's inequality for the sum of dependent Bernoulli rounds.

Let :math:`\\xi_1, \\dots, \\xi_n \\in \\{0, 1\\}` be revealed one by one, with
:math:`\\Lambda_n = \\sum_u \\Pr[\\xi_u = 1 \\mid \\xi_1 \\dots \\xi_{u-1}]` the sum of
conditional expectations and :math:`\\Gamma_n = \\sum_u \\xi_u` the observed sum.
For real :math:`a` and :math:`b \\ge |a|`, in the form used by later finite-key
papers,

.. math:: \\Pr\\left[\\Lambda_n - \\Gamma_n \\ge \\left(b + a\\left(\\tfrac{2\\Gamma_n}{n} - 1\\right)\\right)\\sqrt n\\right]
          \\le \\exp\\!\\left(-\\frac{2 (b^2 - a^2)}{(1 + \\frac{4a}{3\\sqrt n})^2}\\right).

**From memory** (the statement could not be confirmed from a stored copy of the
paper; searched again, only its abstract and introduction were found, which confirm
the setting -- conditional expectations given the past against observed values,
sharpened by parameters predicted in advance -- but not the formula): the exact form
above, the constant 4/3 and the conditions.  This module additionally
requires :math:`1 + 4a/(3\\sqrt n) > 0` (``a > -3 sqrt(n) / 4``), a conservative
restriction under which the right-hand side is a decreasing function of ``b``.
Tests check the statement against exact binomial tails (independent rounds) and
a Monte Carlo of a dependent (Markov) process; neither proves it.

The mirrored direction is derived, not written again: applying the inequality
to :math:`1 - \\xi_u` (same filtration) gives
:math:`\\Pr[\\Gamma_n - \\Lambda_n \\ge (b - a(2\\Gamma_n/n - 1))\\sqrt n]` with the same
right-hand side; see :func:`kato_expectation_lower`.

References
----------
.. [1] G. Kato, "Concentration inequality using unconfirmed knowledge",
   arXiv:2002.04357 (2020).
"""

from __future__ import annotations

import math

import numpy as np
import sympy as sp

from ..domains import Domain, Parameter
from ..errors import InputError
from ._base import EPS, Reference, SymbolicBound
from ._registry import register

__all__ = ["KATO", "kato_expectation_upper", "kato_expectation_lower", "kato_choose_a"]

_N = Parameter("n", "n", Domain(1, math.inf, integer=True), "number of rounds", (10, 1e10))
_A = Parameter("a", "a", Domain(-math.inf, math.inf), "tilt parameter, fixed before the rounds are observed "
               "(must satisfy a > -3 sqrt(n) / 4)", (-2.0, 5.0))
_B = Parameter("b", "b", Domain(0, math.inf, lower_open=True),
               "deviation parameter: the threshold on Lambda_n - Gamma_n is (b + a (2 Gamma_n / n - 1)) sqrt(n)")

_n = sp.Symbol("n", positive=True)
_a = sp.Symbol("a", real=True)
_b = sp.Symbol("b", positive=True)


class _KatoBound(SymbolicBound):
    def _check_joint(self, params):
        n, a = np.broadcast_arrays(np.asarray(params["n"], dtype=float), np.asarray(params["a"], dtype=float))
        bad = 1 + 4 * a / (3 * np.sqrt(n)) <= 0
        if np.any(bad):
            i = np.argmax(bad.ravel())
            raise InputError("a", a.ravel()[i].item(),
                             f"a real number > -3 sqrt(n)/4 = {-0.75 * math.sqrt(n.ravel()[i]):.6g} (n = "
                             f"{int(n.ravel()[i])})")


KATO = register(_KatoBound(
    name="kato",
    title="Kato inequality (dependent Bernoulli rounds)",
    summary=("Deviation of the sum of conditional expectations Lambda_n of n dependent Bernoulli rounds above their "
             "observed sum Gamma_n, with a tilt a that sharpens the bound when Gamma_n/n is far from 1/2."),
    bounds="martingale_bernoulli_sum",
    parameters=[_N, _A],
    deviation_parameter=_B,
    failure_probability=sp.exp(-2 * (_b**2 - _a**2) / (1 + 4 * _a / (3 * sp.sqrt(_n)))**2),
    references=[Reference("kato2020", "G. Kato, Concentration inequality using unconfirmed knowledge (2020)",
                          "arXiv:2002.04357")],
    assumptions=["each round is a 0/1 variable; its conditional probability given all earlier rounds may depend on "
                 "them arbitrarily (no independence assumed)",
                 "n, a and b are fixed before the rounds are observed",
                 "b >= |a| and 1 + 4a/(3 sqrt(n)) > 0 (statement and conditions from memory, see module docstring)"],
))


def _width(n, observed, a, eps, sign):
    b = KATO.deviation(eps, n=n, a=a)
    return (b + sign * a * (2 * observed / n - 1)) * np.sqrt(n)


def _check_observed(n, observed):
    n = KATO.parameter("n").check(n)
    o = Domain(0, math.inf).check("observed", observed)
    if np.any(np.asarray(o) > np.asarray(n)):
        raise InputError("observed", observed, f"a count in [0, n] (n = {n})")
    return n, o


def kato_expectation_upper(n, observed, a, eps):
    """Upper bound on Lambda_n, holding except with probability ``eps``.

    ``Lambda_n < Gamma_n + (b + a (2 Gamma_n / n - 1)) sqrt(n)`` with ``b`` from
    :data:`KATO` at ``eps``; ``a`` must be fixed before the rounds are observed
    (e.g. by :func:`kato_choose_a` from an expected count).

    Parameters
    ----------
    n : int
        Number of rounds.
    observed : float or array_like
        Observed sum Gamma_n, in [0, n].
    a : float
        Tilt parameter.
    eps : float
        Failure probability.

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] G. Kato, arXiv:2002.04357 (2020).
    """
    n, o = _check_observed(n, observed)
    return o + _width(n, o, a, eps, +1)


def kato_expectation_lower(n, observed, a, eps):
    """Lower bound on Lambda_n, holding except with probability ``eps``.

    The inequality applied to the complemented rounds ``1 - xi_u`` gives
    ``Lambda_n > Gamma_n - (b - a (2 Gamma_n / n - 1)) sqrt(n)`` with the same
    ``b`` (from :data:`KATO` at ``eps``).

    References
    ----------
    .. [1] G. Kato, arXiv:2002.04357 (2020).
    """
    n, o = _check_observed(n, observed)
    return o - _width(n, o, a, eps, -1)


def kato_choose_a(n, expected, eps, direction: str = "upper") -> float:
    """Tilt ``a`` minimising the width of the Kato bound at an *expected* observed sum.

    Minimises ``b(a) + s a (2 expected / n - 1)`` (``s = +1`` for the upper bound on
    Lambda_n, ``-1`` for the lower), a convex function of ``a``, over the allowed
    range.  ``expected`` must come from the design (e.g. a channel model), not
    from the data the bound is then applied to: ``a`` is fixed in advance
    (common practice, no source).  For large ``n`` the optimum is close to
    ``s (1 - 2p) sqrt(ln(1/eps)/2) / (2 sqrt(p (1-p)))`` with ``p = expected/n``,
    and the width close to ``sqrt(2 p (1-p) n ln(1/eps))``.

    Parameters
    ----------
    n : int
    expected : float
        Expected value of Gamma_n, in [0, n].
    eps : float
    direction : {"upper", "lower"}

    Returns
    -------
    float

    References
    ----------
    .. [1] G. Kato, arXiv:2002.04357 (2020).
    """
    n, m = _check_observed(n, expected)
    eps = EPS.check(eps)
    if direction not in ("upper", "lower"):
        raise InputError("direction", direction, "one of: upper, lower")
    s = 1.0 if direction == "upper" else -1.0
    lo = -0.75 * math.sqrt(n) * (1 - 1e-9)
    hi = 10.0 * (math.sqrt(n) + math.sqrt(-math.log(eps)) + 1.0)
    from scipy import optimize  # here, not at module top: it adds about 0.2 s to every start-up

    res = optimize.minimize_scalar(lambda a: _width(n, m, a, eps, s), bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-10 * (1 + abs(hi))})
    return float(res.x)
