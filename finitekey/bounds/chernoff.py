"""Multiplicative Chernoff bounds for a sum of independent Bernoulli variables.

For :math:`X = \\sum_i X_i` with independent :math:`X_i \\in \\{0, 1\\}` and
:math:`\\mu = E[X]`,

.. math::
    \\Pr[X \\ge (1+d)\\mu] \\le \\left(\\frac{e^{d}}{(1+d)^{1+d}}\\right)^{\\mu}, \\quad d > 0,
    \\qquad
    \\Pr[X \\le (1-d)\\mu] \\le \\left(\\frac{e^{-d}}{(1-d)^{1-d}}\\right)^{\\mu}, \\quad 0 < d \\le 1.

Both are :math:`\\exp(-\\mu\\, h(x))` with Bennett's function
:math:`h(x) = (1+x)\\ln(1+x) - x` at :math:`x = d` and :math:`x = -d`; this one
expression is written once (:func:`chernoff_log_tail`) and every other form is
derived from it: the two registered bounds (``chernoff_upper``,
``chernoff_lower``), whose deviations have no closed form and are found by
root finding, and the inference of an expectation from an observed count
(:func:`expectation_upper`, :func:`expectation_lower` and their certified
variants), which decoy-state analyses apply to detection counts.

:func:`bennett_h` is evaluated without cancellation in float64 (a series for
:math:`|x| < 0.1`), with guard digits in mpmath, and in ball arithmetic for the
certified forms; a test checks the float path against mpmath.

References
----------
.. [1] H. Chernoff, "A measure of asymptotic efficiency for tests of a
   hypothesis based on the sum of observations", Ann. Math. Statist. 23 (1952)
   493-507.
.. [2] M. Mitzenmacher, E. Upfal, *Probability and Computing*, Cambridge
   University Press (2005), Theorems 4.4 and 4.5 (the forms used here).
.. [3] G. Bennett, "Probability inequalities for the sum of independent random
   variables", J. Amer. Statist. Assoc. 57 (1962) 33-45 (the function h).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import sympy as sp
from flint import arb, ctx
from sympy.utilities.lambdify import implemented_function

from ..compile import compile_expression, to_arb
from ..domains import Domain, Parameter
from ..errors import ComputationError
from ._base import EPS, Reference, SymbolicBound
from ._registry import register

__all__ = ["CHERNOFF_UPPER", "CHERNOFF_LOWER", "bennett_h", "chernoff_log_tail", "expectation_upper",
           "expectation_lower", "expectation_upper_certified", "expectation_lower_certified"]

# Coefficients of h(x) / x**2 = sum_j (-1)**j x**j / ((j+1)(j+2)); 22 terms give < 1e-20 relative error at |x| < 0.1.
_SERIES = np.array([(-1) ** j / ((j + 1) * (j + 2)) for j in range(22)])
_SERIES_RADIUS = 0.1


def _bennett_h_float(x):
    from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up

    x = np.asarray(x, dtype=float)
    with np.errstate(all="ignore"):
        direct = special.xlog1py(1.0 + x, x) - x
        poly = np.zeros_like(x)
        for c in _SERIES[::-1]:
            poly = poly * x + c
        out = np.where(np.abs(x) < _SERIES_RADIUS, x * x * poly, direct)
    return out if out.ndim else float(out)


def _bennett_h_mp(x):
    if x == 0:
        return mpmath.mpf(0)
    if x == -1:
        return mpmath.mpf(1)
    # (1+x) log1p(x) - x cancels about log2(1/|x|) bits; add them as guard bits.
    with mpmath.extraprec(max(0, -int(mpmath.mag(x))) + 20):
        return (1 + x) * mpmath.log1p(x) - x


def _bennett_h_arb(x):
    if x == -1:  # exact ball at -1: the limit (1+x) log(1+x) -> 0
        return arb(1)
    return (1 + x) * x.log1p() - x


def _bennett_h(x):
    if isinstance(x, arb):
        return _bennett_h_arb(x)
    if isinstance(x, mpmath.mpf):
        return _bennett_h_mp(x)
    return _bennett_h_float(x)


#: Bennett's function h(x) = (1+x) log(1+x) - x, x >= -1, as a sympy function with
#: float64, mpmath and arb implementations (dispatched on the argument type).
bennett_h = implemented_function("bennett_h", _bennett_h)


def chernoff_log_tail(mu, x):
    """Exponent of both Chernoff tails: the bound is ``exp(-chernoff_log_tail(mu, x))``.

    Parameters
    ----------
    mu : sympy.Expr
        Expectation of the sum.
    x : sympy.Expr
        Signed relative deviation: ``d`` for the upper tail, ``-d`` for the lower tail.

    Returns
    -------
    sympy.Expr
        :math:`\\mu\\, h(x)`.

    References
    ----------
    .. [1] H. Chernoff, Ann. Math. Statist. 23 (1952) 493-507.
    """
    return mu * bennett_h(x)


_MU = Parameter("mu", r"\mu", Domain(0, math.inf, lower_open=True),
                "expectation of the sum of independent Bernoulli variables (a count)", (100, 1e10))
_mu, _d = sp.symbols("mu d", positive=True)

_REFS = [
    Reference("chernoff1952", "H. Chernoff, Ann. Math. Statist. 23, 493-507 (1952)", "10.1214/aoms/1177729330"),
    Reference("mitzenmacher2005", "M. Mitzenmacher, E. Upfal, Probability and Computing, Cambridge Univ. Press "
              "(2005), Thms 4.4-4.5"),
]
_ASSUMPTIONS = ["the summands are independent Bernoulli variables (not necessarily identically distributed)",
                "mu is the exact expectation of the sum (or, for the tail direction used, a bound on it)"]


def _upper_bracket(params):
    # h(d) >= 3d/4 for d >= 3, so at d = max(3, 1000/mu) the bound is below exp(-750): every eps is reached.
    return 1e-300, max(3.0, 1000.0 / params["mu"])


def _lower_bracket(params):
    return 1e-300, 1.0


CHERNOFF_UPPER = register(SymbolicBound(
    name="chernoff_upper",
    title="Multiplicative Chernoff bound, upper tail",
    summary="Relative excess d of a sum of independent Bernoulli variables over its expectation mu: X >= (1+d) mu.",
    bounds="poisson_binomial_upper_relative",
    parameters=[_MU],
    deviation_parameter=Parameter("d", "d", Domain(0, math.inf, lower_open=True),
                                  "relative deviation above the expectation"),
    failure_probability=sp.exp(-chernoff_log_tail(_mu, _d)),
    references=_REFS,
    assumptions=_ASSUMPTIONS,
    deviation_bracket=_upper_bracket,
    size_parameters=("mu",),
))

CHERNOFF_LOWER = register(SymbolicBound(
    name="chernoff_lower",
    title="Multiplicative Chernoff bound, lower tail",
    summary="Relative shortfall d of a sum of independent Bernoulli variables below its expectation mu: "
            "X <= (1-d) mu.",
    bounds="poisson_binomial_lower_relative",
    parameters=[_MU],
    deviation_parameter=Parameter("d", "d", Domain(0, 1, lower_open=True),
                                  "relative deviation below the expectation (at most 1)"),
    failure_probability=sp.exp(-chernoff_log_tail(_mu, -_d)),
    references=_REFS,
    assumptions=_ASSUMPTIONS,
    deviation_bracket=_lower_bracket,
    size_parameters=("mu",),
))

# ---- inference of an expectation from an observed count -------------------------------------
# With x = observed/mu - 1, exp(-chernoff_log_tail(mu, x)) is the upper-tail bound on Pr[X >= observed]
# when mu < observed and the lower-tail bound on Pr[X <= observed] when mu > observed.
_obs = sp.Symbol("observed", nonnegative=True)
_REJECTION = compile_expression(chernoff_log_tail(_mu, _obs / _mu - 1), (_mu, _obs))
_OBSERVED = Parameter("observed", "k", Domain(0, math.inf), "observed value of the sum (a count)")


def _newton_log(observed, L, mu0):
    """Newton iteration on u = log(mu) for F(mu) = L, F(mu) = mu h(o/mu - 1); F is convex in u,
    so starting where F >= L the iterates move monotonically towards the root on that side."""
    u = np.log(mu0)
    for _ in range(200):
        mu = np.exp(u)
        f = _REJECTION.numpy(mu, observed) - L
        slope = mu - observed  # d F / d log(mu)
        step = np.where(slope != 0, f / np.where(slope != 0, slope, 1.0), 0.0)
        u = u - step
        if np.all(np.abs(step) <= 1e-15):
            break
    return np.exp(u)


def expectation_upper(observed, eps):
    """Largest expectation not rejected by the lower Chernoff tail at level ``eps`` (float64, vectorised).

    Returns the supremum of the ``mu`` for which the lower-tail bound on
    ``Pr[X <= observed | mu]`` exceeds ``eps``: the root above ``observed`` of
    ``mu h(observed/mu - 1) = ln(1/eps)``.  For ``observed = 0`` it is ``ln(1/eps)``.

    Parameters
    ----------
    observed : float or array_like
        Observed value of the sum, >= 0.
    eps : float or array_like
        Failure probability in (0, 1).

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] H. Chernoff, Ann. Math. Statist. 23 (1952) 493-507.
    """
    o = np.asarray(_OBSERVED.check(observed), dtype=float)
    L = -np.log(np.asarray(EPS.check(eps), dtype=float))
    o, L = np.broadcast_arrays(o, L)
    # F(o + z) >= z^2 / (2 (o + z)) (from log(1+y) <= y - y^2/(2(1+y))), so this start has F >= L.
    start = o + L + np.sqrt(L * L + 2 * L * o)
    out = _newton_log(o, L, start)
    return out if out.ndim else float(out)


def expectation_lower(observed, eps):
    """Smallest expectation not rejected by the upper Chernoff tail at level ``eps`` (float64, vectorised).

    Returns the infimum of the ``mu`` for which the upper-tail bound on
    ``Pr[X >= observed | mu]`` exceeds ``eps``: the root below ``observed`` of
    ``mu h(observed/mu - 1) = ln(1/eps)``.  For ``observed = 0`` it is 0.

    Parameters
    ----------
    observed : float or array_like
        Observed value of the sum, >= 0.
    eps : float or array_like
        Failure probability in (0, 1).

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] H. Chernoff, Ann. Math. Statist. 23 (1952) 493-507.
    """
    o = np.asarray(_OBSERVED.check(observed), dtype=float)
    L = -np.log(np.asarray(EPS.check(eps), dtype=float))
    o, L = np.broadcast_arrays(o, L)
    pos = o > 0
    safe_o = np.where(pos, o, 1.0)
    # Both starts have F >= L: F(mu) >= (o - mu)^2 / (2 o) below o, and F(o e^-c) >= o (c - 1).
    start = np.maximum(safe_o - np.sqrt(2 * safe_o * L), safe_o * np.exp(-1 - L / safe_o))
    out = np.where(pos, _newton_log(safe_o, L, start), 0.0)
    return out if out.ndim else float(out)


def _certify(observed, eps, estimate, direction, prec):
    o = _OBSERVED.check(observed)
    e = EPS.check(eps)
    if isinstance(o, np.ndarray) or isinstance(e, np.ndarray):
        raise ComputationError("certified expectation bounds take scalar inputs")
    with ctx.workprec(prec):
        L = -to_arb(e).log()
        m = float(estimate)
        step = 2.0 ** -52
        for _ in range(200):
            on_side = m > o if direction > 0 else m < o
            if on_side and m > 0:
                F = _REJECTION.certified(m, o, prec=prec)
                if F > L:  # certainly rejected, and on the correct side of the root
                    return m
            m = m * (1 + step) if direction > 0 else m * (1 - step)
            step *= 2
            if direction < 0 and (m <= 0 or step >= 1):
                return 0.0
    raise ComputationError(f"could not certify the expectation bound for observed = {o}, eps = {e}")


def expectation_upper_certified(observed, eps, prec: int = 128) -> float:
    """A float guaranteed to be >= the exact :func:`expectation_upper` (scalar inputs).

    The float estimate is moved outwards until ball arithmetic proves that the
    lower-tail bound there is below ``eps`` (so the exact root lies below it).

    References
    ----------
    .. [1] F. Johansson, IEEE Trans. Computers 66 (2017) 1281-1292 (ball arithmetic).
    """
    return _certify(observed, eps, expectation_upper(observed, eps), +1, prec)


def expectation_lower_certified(observed, eps, prec: int = 128) -> float:
    """A float guaranteed to be <= the exact :func:`expectation_lower` (scalar inputs); 0 when observed = 0.

    References
    ----------
    .. [1] F. Johansson, IEEE Trans. Computers 66 (2017) 1281-1292 (ball arithmetic).
    """
    if _OBSERVED.check(observed) == 0:
        return 0.0
    return _certify(observed, eps, expectation_lower(observed, eps), -1, prec)
