"""Compile one sympy expression into numpy, mpmath and certified (arb) code.

Each bound is written once as a sympy expression.  :func:`compile_expression`
turns it into three callables that share that source expression:

* ``numpy``: vectorised float64 code built by :func:`sympy.lambdify` with
  common-subexpression elimination;
* ``mp``: mpmath code evaluated at a requested number of decimal digits;
* ``certified``: ball arithmetic with python-flint's ``arb``.  The mpmath
  printer writes rational constants as ``mpf(p)/mpf(q)``; mapping ``mpf`` to
  ``arb`` keeps them exact, so the ball returned is guaranteed to contain the
  exact real value of the expression at the given (exactly converted) inputs.

The compiled numpy function keeps its source expression in its docstring, so a
number can always be traced back to the formula that produced it.  Results are
cached on the expression and its argument list.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Callable, Sequence

import mpmath
import numpy as np
import sympy as sp
from flint import arb, ctx

from .errors import ComputationError

__all__ = ["Enclosure", "CompiledExpression", "compile_expression", "to_arb"]


@dataclass(frozen=True, slots=True)
class Enclosure:
    """A closed interval ``[lo, hi]`` of floats guaranteed to contain an exact value.

    ``lo`` is rounded towards minus infinity and ``hi`` towards plus infinity
    when converted from a ball, so the float interval still contains the value.
    """

    lo: float
    hi: float

    def __post_init__(self):
        if not (self.lo <= self.hi):
            raise ComputationError(f"empty or undefined enclosure [{self.lo}, {self.hi}]")

    @classmethod
    def from_arb(cls, ball: arb) -> "Enclosure":
        """Outward-rounded float interval of an arb ball."""
        if not ball.is_finite():
            raise ComputationError(f"certified evaluation did not give a finite enclosure: {ball}")
        lo = float(ball.lower())
        hi = float(ball.upper())
        return cls(math.nextafter(lo, -math.inf), math.nextafter(hi, math.inf))

    def contains(self, x) -> bool:
        """Whether the number ``x`` (float or mpf) lies in the interval."""
        return self.lo <= x <= self.hi

    @property
    def width(self) -> float:
        return self.hi - self.lo


def to_arb(x) -> arb:
    """Convert an int, float, mpf or arb exactly to an arb ball.

    Parameters
    ----------
    x : int, float, numpy scalar, mpmath.mpf or flint.arb

    Returns
    -------
    flint.arb
        A ball containing exactly ``x`` (a point ball for ints, floats and mpf).

    Raises
    ------
    TypeError
        For any other type (a decimal string would not convert exactly).
    """
    if isinstance(x, arb):
        return x
    if isinstance(x, (int, np.integer)):
        return arb(int(x))
    if isinstance(x, mpmath.mpf):
        man, exp = x.man_exp
        return arb(int(man)) * arb(2) ** int(exp)
    if isinstance(x, (float, np.floating)):
        return arb(float(x))
    raise TypeError(f"cannot convert {type(x).__name__} to arb exactly")


def _unary(method: str) -> Callable:
    def f(x):
        return getattr(to_arb(x), method)()

    f.__name__ = method
    return f


def _arb_pow(x, y):
    x = to_arb(x)
    if isinstance(y, (int, np.integer)):
        return x ** int(y)
    return x ** to_arb(y)


_ARB_NAMESPACE = {
    "mpf": arb,
    "exp": _unary("exp"),
    "expm1": _unary("expm1"),
    "log": _unary("log"),
    "log1p": _unary("log1p"),
    "sqrt": _unary("sqrt"),
    "fabs": abs,
    "lambertw": _unary("lambertw"),
    "pi": arb.pi(),
    "e": arb.const_e(),
    "power": _arb_pow,
}


@dataclass(frozen=True)
class CompiledExpression:
    """A sympy expression with its three compiled evaluators.

    Each evaluator is generated on its first use (``lambdify`` costs milliseconds per expression, and most
    callers use one or two of the three), then kept.

    Attributes
    ----------
    expr : sympy.Expr
        The source expression.
    symbols : tuple of sympy.Symbol
        Argument order of every evaluator.
    """

    expr: sp.Expr
    symbols: tuple

    @functools.cached_property
    def _numpy(self) -> Callable:
        np_expr, np_symbols = _numpy_form(self.expr, self.symbols)
        # The numpy module itself, not the name "numpy": the name makes sympy run ``from numpy import *``, which
        # loads numpy's lazy submodules (f2py, testing, ...) and costs about 0.1 s the first time.
        fn = sp.lambdify(np_symbols, np_expr, modules=[np], cse=True)
        fn.__doc__ = f"Compiled from the sympy expression:\n\n    {self.expr}\n\n(float64 form: {np_expr})\n"
        return fn

    @functools.cached_property
    def _mp(self) -> Callable:
        return sp.lambdify(self.symbols, self.expr, modules="mpmath")

    @functools.cached_property
    def _arb(self) -> Callable:
        return sp.lambdify(self.symbols, self.expr, modules=[_ARB_NAMESPACE, "mpmath"])

    def numpy(self, *args):
        """Evaluate in float64; arguments broadcast as numpy arrays.

        Integer arguments are converted to float64 first, so that products of counts cannot overflow
        int64 (e.g. ``(n + k) (k + 1)`` at n = 1e10, k = 1e9).
        """
        args = [np.asarray(a, dtype=float) if isinstance(a, np.ndarray) and a.dtype.kind in "iuO"
                else (float(a) if isinstance(a, (int, np.integer)) else a) for a in args]
        with np.errstate(all="ignore"):
            return self._numpy(*args)

    def mp(self, *args, dps: int = 50):
        """Evaluate with mpmath at ``dps`` decimal digits; arguments are converted exactly."""
        with mpmath.workdps(dps):
            conv = [mpmath.mpf(a) if not isinstance(a, (int, np.integer)) else mpmath.mpf(int(a)) for a in args]
            return +self._mp(*conv)

    def certified(self, *args, prec: int = 128) -> arb:
        """Evaluate in ball arithmetic at ``prec`` bits; the ball contains the exact value."""
        with ctx.workprec(prec):
            return self._arb(*[to_arb(a) for a in args])

    def certified_enclosure(self, *args, prec: int = 128) -> Enclosure:
        """Outward-rounded float :class:`Enclosure` of :meth:`certified`."""
        return Enclosure.from_arb(self.certified(*args, prec=prec))

    def latex(self) -> str:
        """LaTeX of the source expression (``sympy.latex``).

        Returns
        -------
        str
        """
        return sp.latex(self.expr)


def _merge_square_roots(expr: sp.Expr) -> sp.Expr:
    """Rewrite each product of square roots as one square root: ``sqrt(a) sqrt(b) / sqrt(c) -> sqrt(a b / c)``.

    Exact wherever the original is real (every base non-negative); only the float64 code uses it, where it
    saves array passes and square roots.  Outside that set the original gives NaN and the public methods
    reject such inputs before evaluating.
    """
    if not expr.args:
        return expr
    expr = expr.func(*[_merge_square_roots(a) for a in expr.args])
    if isinstance(expr, sp.Mul):
        roots, rest = [], []
        for f in expr.args:
            if isinstance(f, sp.Pow) and f.exp in (sp.S.Half, -sp.S.Half):
                roots.append(f.base if f.exp > 0 else 1 / f.base)
            else:
                rest.append(f)
        if len(roots) > 1:
            return sp.Mul(*rest) * sp.sqrt(sp.Mul(*roots))
    return expr


def _numpy_form(expr: sp.Expr, symbols: tuple):
    """Expression and arguments for the float64 code: assumption-free symbols, so that merged roots stay merged."""
    plain = tuple(sp.Symbol(s.name) for s in symbols)
    return _merge_square_roots(expr.xreplace(dict(zip(symbols, plain)))), plain


@functools.lru_cache(maxsize=None)
def _compile(expr: sp.Expr, symbols: tuple) -> CompiledExpression:
    return CompiledExpression(expr, symbols)


def compile_expression(expr: sp.Expr, symbols: Sequence[sp.Symbol]) -> CompiledExpression:
    """Compile ``expr`` with arguments ``symbols`` into numpy, mpmath and arb code (cached).

    Parameters
    ----------
    expr : sympy.Expr
        Expression to compile.  Write constants as exact ``Rational`` so that
        the certified evaluator treats them exactly.
    symbols : sequence of sympy.Symbol
        Argument order.

    Returns
    -------
    CompiledExpression

    References
    ----------
    .. [1] F. Johansson, "Arb: efficient arbitrary-precision midpoint-radius
       interval arithmetic", IEEE Trans. Computers 66 (2017) 1281-1292.
    """
    return _compile(sp.sympify(expr), tuple(symbols))
