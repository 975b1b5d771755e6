"""The common shape of every finite-size bound, and the symbolic implementation.

A bound relates a *deviation* (how far an observed statistic may sit from the
quantity it estimates) to a *failure probability* ``eps`` (the probability that
the true deviation exceeds it).  Every bound offers the same public methods:

``deviation(eps, **params)``
    the deviation guaranteed except with probability ``eps`` (float64, broadcasts);
``failure_probability(deviation, **params)``
    the inverse map;
``deviation_mp`` / ``failure_probability_mp``
    the same at a chosen number of decimal digits with mpmath;
``deviation_certified`` / ``failure_probability_certified``
    an outward-rounded :class:`~finitekey.compile.Enclosure` that contains the exact value;
``latex()``
    the formulas, for reports.

Public methods validate their inputs against the declared parameter domains
(raising :class:`~finitekey.errors.InputError`); subclasses implement private
hooks.  :class:`SymbolicBound` implements all hooks from a single sympy
expression for the failure probability: the deviation is obtained by solving it
symbolically where sympy finds a closed form, and by bracketed root finding
otherwise.
"""

from __future__ import annotations

import abc
import functools
import math
from dataclasses import dataclass
from typing import Mapping

import mpmath
import numpy as np
import sympy as sp
from flint import ctx

from ..compile import CompiledExpression, Enclosure, compile_expression, to_arb
from ..domains import DPS, PROBABILITY, Parameter
from ..errors import ComputationError, InputError

__all__ = ["Bound", "SymbolicBound", "EPS", "Reference"]

EPS = Parameter("eps", r"\varepsilon", PROBABILITY, "failure probability of the bound", (1e-30, 1e-2))


@dataclass(frozen=True, slots=True)
class Reference:
    """A published source: short key, full citation, optional DOI or arXiv id."""

    key: str
    citation: str
    doi: str = ""

    def __str__(self) -> str:
        return self.citation + (f" doi:{self.doi}" if self.doi and not self.doi.startswith("arXiv") else
                                (f" {self.doi}" if self.doi else ""))


class Bound(abc.ABC):
    """Abstract finite-size bound; see the module docstring for the interface.

    Subclasses set the class attributes below and implement the ``_`` hooks.

    Attributes
    ----------
    name : str
        Registry key, used on the command line (``finitekey bound NAME``).
    title : str
        One-line human name.
    summary : str
        What is bounded, in a sentence or two.
    bounds : str
        Which distribution the deviation bounds, for generic tests, e.g.
        ``"binomial_mean"`` or ``"hypergeometric_sampling"``.
    parameters : tuple of Parameter
        Parameters other than ``eps`` and the deviation.
    deviation_parameter : Parameter
        The deviation, with its domain.
    references : tuple of Reference
    assumptions : tuple of str
    exact : bool
        True where the value is computed from the exact distribution rather than bounded.
    size_parameters : tuple of str
        Names of parameters that count samples (or an expected count), such that
        the deviation is non-increasing as any one of them grows with the others
        fixed.  Generic tests check that property.  Default: none declared.
    """

    name: str
    title: str
    summary: str
    bounds: str
    parameters: tuple
    deviation_parameter: Parameter
    references: tuple = ()
    assumptions: tuple = ()
    exact: bool = False
    size_parameters: tuple = ()

    # ---- public API: validation, then the private hooks -------------------------
    def parameter(self, name: str) -> Parameter:
        """The declared parameter called ``name``.

        Parameters
        ----------
        name : str

        Returns
        -------
        Parameter

        Raises
        ------
        KeyError
            If the bound has no such parameter.
        """
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)

    def check_params(self, params: Mapping) -> dict:
        """Validate keyword parameters: all present, none unknown, each in its domain."""
        expected = [p.name for p in self.parameters]
        unknown = sorted(set(params) - set(expected))
        if unknown:
            raise InputError(unknown[0], params[unknown[0]],
                             f"one of the parameters of {self.name}: {', '.join(expected)}")
        out = {}
        for p in self.parameters:
            if p.name not in params:
                raise InputError(p.name, None, f"{p.domain.describe()} (required by {self.name})")
            out[p.name] = p.check(params[p.name])
        self._check_joint(out)
        return out

    def _check_joint(self, params: dict) -> None:
        """Hook for constraints that involve several parameters (e.g. sample <= population)."""

    def deviation(self, eps, **params):
        """Deviation that holds except with probability ``eps`` (float64, broadcasting)."""
        eps = EPS.check(eps)
        return self._deviation(eps, self.check_params(params))

    def failure_probability(self, deviation, **params):
        """Failure probability of the given deviation (float64, broadcasting)."""
        d = self.deviation_parameter.check(deviation)
        return self._failure_probability(d, self.check_params(params))

    def deviation_mp(self, eps, dps: int = 50, **params):
        """Deviation at ``dps`` decimal digits (mpmath); scalar inputs only."""
        eps = EPS.check(_scalar(eps, "eps"))
        return self._deviation_mp(eps, self._scalars(params), DPS.check_scalar("dps", dps))

    def failure_probability_mp(self, deviation, dps: int = 50, **params):
        """Failure probability at ``dps`` decimal digits (mpmath); scalar inputs only."""
        d = self.deviation_parameter.check(_scalar(deviation, self.deviation_parameter.name))
        return self._failure_probability_mp(d, self._scalars(params), DPS.check_scalar("dps", dps))

    def deviation_certified(self, eps, prec: int = 128, **params) -> Enclosure:
        """Enclosure guaranteed to contain the exact deviation."""
        eps = EPS.check(_scalar(eps, "eps"))
        return self._deviation_certified(eps, self._scalars(params), prec)

    def failure_probability_certified(self, deviation, prec: int = 128, **params) -> Enclosure:
        """Enclosure guaranteed to contain the exact failure probability."""
        d = self.deviation_parameter.check(_scalar(deviation, self.deviation_parameter.name))
        return self._failure_probability_certified(d, self._scalars(params), prec)

    def _scalars(self, params):
        checked = self.check_params(params)
        for k, v in checked.items():
            if isinstance(v, np.ndarray):
                raise InputError(k, v, "a scalar (array inputs are accepted by deviation() and failure_probability())")
        return checked

    @abc.abstractmethod
    def latex(self) -> dict:
        """LaTeX of the formulas, keyed ``"failure_probability"`` and ``"deviation"``."""

    def describe(self) -> dict:
        """Machine-readable description (used by ``finitekey bounds --json``)."""
        return {
            "name": self.name,
            "title": self.title,
            "summary": self.summary,
            "exact": self.exact,
            "bounds": self.bounds,
            "parameters": [
                {"name": p.name, "allowed": p.domain.describe(), "description": p.description}
                for p in (*self.parameters, self.deviation_parameter, EPS)
            ],
            "latex": self.latex(),
            "references": [str(r) for r in self.references],
            "assumptions": list(self.assumptions),
        }

    @abc.abstractmethod
    def _deviation(self, eps, params): ...

    @abc.abstractmethod
    def _failure_probability(self, deviation, params): ...

    @abc.abstractmethod
    def _deviation_mp(self, eps, params, dps): ...

    @abc.abstractmethod
    def _failure_probability_mp(self, deviation, params, dps): ...

    @abc.abstractmethod
    def _deviation_certified(self, eps, params, prec) -> Enclosure: ...

    @abc.abstractmethod
    def _failure_probability_certified(self, deviation, params, prec) -> Enclosure: ...

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.name!r}>"


def _scalar(x, name):
    if isinstance(x, np.ndarray) and x.ndim > 0:
        raise InputError(name, x, "a scalar")
    return x


def _symbol_for(p: Parameter) -> sp.Symbol:
    dom = p.domain
    if dom.lower > 0 or (dom.lower == 0 and dom.lower_open):
        return sp.Symbol(p.name, positive=True)
    if dom.lower == 0:
        return sp.Symbol(p.name, nonnegative=True)
    return sp.Symbol(p.name, real=True)


def _tidy_logs(expr: sp.Expr) -> sp.Expr:
    """Rewrite ``log(exp(z) * w)`` as ``z + log(w)``.

    sympy.solve can return forms such as ``log(exp(a**2/c)/sqrt(epsilon))``
    whose inner ``exp`` overflows in float64 although the value is moderate.
    Every symbol of a SymbolicBound is real, so ``log(exp(z)) = z`` is an
    identity for any ``z`` built from them without the imaginary unit.
    """
    expr = sp.expand_log(expr)

    def is_log_exp(e):
        return (isinstance(e, sp.log) and isinstance(e.args[0], sp.exp) and not e.args[0].args[0].has(sp.I)
                and all(sym.is_real for sym in e.args[0].args[0].free_symbols))

    return expr.replace(is_log_exp, lambda e: e.args[0].args[0])


class SymbolicBound(Bound):
    """A bound given by one sympy expression for its failure probability.

    Parameters
    ----------
    name, title, summary, bounds, references, assumptions
        See :class:`Bound`.
    parameters : sequence of Parameter
        Parameters other than ``eps`` and the deviation; their names must match
        the sympy symbols used in ``failure_probability``.
    deviation_parameter : Parameter
        The deviation; its name must match a symbol in ``failure_probability``.
    failure_probability : sympy.Expr
        ``eps`` as a function of the parameters and the deviation.  It must be
        strictly decreasing in the deviation on the deviation's domain.
    deviation_bracket : callable, optional
        ``f(params) -> (lo, hi)`` bracket for root finding when no closed form
        exists; defaults to the deviation domain clipped to finite values.
    size_parameters : sequence of str, optional
        See :class:`Bound`.

    Notes
    -----
    The closed-form inverse is found once, at construction, with
    :func:`sympy.solve`; the branch kept is the one that reproduces ``eps`` at
    the typical parameter values.  When sympy finds none, every evaluator falls
    back to bracketed root finding on the compiled failure probability (Brent's
    method in float64, Anderson/bisection in mpmath, ball bisection for the
    certified form), so there is still only one formula.
    """

    def __init__(self, *, name, title, summary, bounds, parameters, deviation_parameter,
                 failure_probability, references=(), assumptions=(), deviation_bracket=None,
                 size_parameters=()):
        self.name = name
        self.title = title
        self.summary = summary
        self.bounds = bounds
        self.parameters = tuple(parameters)
        self.deviation_parameter = deviation_parameter
        self.references = tuple(references)
        self.assumptions = tuple(assumptions)
        self._bracket = deviation_bracket
        self.size_parameters = tuple(size_parameters)
        unknown = set(self.size_parameters) - {p.name for p in self.parameters}
        if unknown:
            raise ValueError(f"{name}: size_parameters {sorted(unknown)} are not parameters")
        # Symbol assumptions follow the declared domain: a parameter that may be
        # negative must not be declared positive, or sympy may simplify with a
        # false assumption (e.g. sqrt(a**2) -> a).
        self.symbols = {p.name: _symbol_for(p) for p in (*self.parameters, deviation_parameter)}
        self.symbols["eps"] = sp.Symbol("epsilon", positive=True)
        free = {s.name for s in failure_probability.free_symbols}
        missing = free - set(self.symbols) - {"epsilon"}
        if missing:
            raise ValueError(f"{name}: expression uses undeclared symbols {sorted(missing)}")
        # Re-express with the canonical (positive) symbols.
        subs = {s: self.symbols[s.name] for s in failure_probability.free_symbols if s.name in self.symbols}
        self.failure_probability_expr = failure_probability.xreplace(subs)
        # Compilation and the symbolic inverse are derived on first use (cached per instance):
        # solving can take seconds, and a command line call needs only the bounds it uses.

    @functools.cached_property
    def _tail(self) -> CompiledExpression:
        args = [self.symbols[p.name] for p in self.parameters]
        return compile_expression(self.failure_probability_expr, (*args, self.symbols[self.deviation_parameter.name]))

    @functools.cached_property
    def deviation_expr(self):
        """Closed-form deviation as a sympy expression of the parameters and ``epsilon``, or None."""
        return self._solve_deviation()

    @functools.cached_property
    def _dev(self):
        if self.deviation_expr is None:
            return None
        args = [self.symbols[p.name] for p in self.parameters]
        return compile_expression(self.deviation_expr, (*args, self.symbols["eps"]))

    # ---- construction helpers ---------------------------------------------------
    def _typical_point(self) -> dict:
        pt = {}
        for p in self.parameters:
            lo, hi = p.typical
            v = math.sqrt(lo * hi) if lo > 0 and hi > 0 else 0.5 * (lo + hi)
            pt[p.name] = round(v) if p.domain.integer else v
        return pt

    def _solve_deviation(self):
        d = self.symbols[self.deviation_parameter.name]
        eps = self.symbols["eps"]
        try:
            sols = sp.solve(sp.Eq(self.failure_probability_expr, eps), d)
        except (NotImplementedError, ValueError):
            return None
        pt = self._typical_point()
        for target in (1e-3, 1e-10):
            good = []
            for s in sols:
                try:
                    val = complex(s.evalf(30, subs={**{self.symbols[k]: v for k, v in pt.items()}, eps: target}))
                except (TypeError, ValueError):
                    continue
                if (abs(val.imag) > 1e-12 * max(1.0, abs(val.real))
                        or not self.deviation_parameter.domain.contains(val.real)):
                    continue
                back = float(self._tail.mp(*pt.values(), val.real, dps=30))
                if abs(back - target) <= 1e-8 * target:
                    good.append(s)
            sols = good
        return _tidy_logs(sols[0]) if len(sols) == 1 else None

    def _args(self, params):
        return [params[p.name] for p in self.parameters]

    def _bracket_for(self, params):
        if self._bracket is not None:
            return self._bracket(params)
        dom = self.deviation_parameter.domain
        lo = dom.lower if math.isfinite(dom.lower) else -1e300
        hi = dom.upper if math.isfinite(dom.upper) else 1e300
        return lo, hi

    # ---- hooks ------------------------------------------------------------------
    def _failure_probability(self, deviation, params):
        out = self._tail.numpy(*self._args(params), deviation)
        return np.minimum(out, 1.0) if np.ndim(out) else min(float(out), 1.0)

    def _failure_probability_mp(self, deviation, params, dps):
        with mpmath.workdps(dps):
            return min(self._tail.mp(*self._args(params), deviation, dps=dps), mpmath.mpf(1))

    def _failure_probability_certified(self, deviation, params, prec):
        # Same cap at 1 as the float and mpmath evaluators, so all three agree.
        enc = Enclosure.from_arb(self._tail.certified(*self._args(params), deviation, prec=prec))
        return Enclosure(min(enc.lo, 1.0), min(enc.hi, 1.0))

    def _deviation(self, eps, params):
        if self._dev is not None:
            return self._dev.numpy(*self._args(params), eps)
        args = np.broadcast_arrays(*self._args(params), eps)
        shape = args[0].shape
        flat = [np.ravel(a) for a in args]
        out = np.empty(flat[0].size)
        for i in range(out.size):
            out[i] = self._root_float({p.name: flat[j][i].item() for j, p in enumerate(self.parameters)}, flat[-1][i])
        return out.reshape(shape) if shape else float(out[0])

    def _root_float(self, params, eps):
        lo, hi = self._bracket_for(params)
        args = self._args(params)
        log_eps = math.log(eps)

        def g(d):
            v = float(self._tail.numpy(*args, d))
            return (math.log(v) if v > 0 else -1e300) - log_eps

        if g(lo) < 0:
            return lo
        if g(hi) > 0:
            raise ComputationError(f"{self.name}: no deviation in [{lo}, {hi}] reaches eps = {eps}")
        from scipy import optimize  # here, not at module top: it adds about 0.2 s to every start-up

        return optimize.brentq(g, lo, hi, xtol=1e-300, rtol=4 * np.finfo(float).eps, maxiter=500)

    def _deviation_mp(self, eps, params, dps):
        args = self._args(params)
        if self._dev is not None:
            return self._dev.mp(*args, eps, dps=dps)
        with mpmath.workdps(dps + 10):
            guess = self._root_float(params, eps)
            lo, hi = self._bracket_for(params)
            f = lambda d: mpmath.log(self._tail.mp(*args, d, dps=dps + 10)) - mpmath.log(eps)
            a, b = mpmath.mpf(guess) * (1 - mpmath.mpf(10) ** -8), mpmath.mpf(guess) * (1 + mpmath.mpf(10) ** -8)
            if not (f(a) > 0 > f(b)):
                a, b = mpmath.mpf(lo), mpmath.mpf(hi)
            root = mpmath.findroot(f, (a, b), solver="anderson")
        with mpmath.workdps(dps):
            return +root

    def _deviation_certified(self, eps, params, prec):
        args = self._args(params)
        if self._dev is not None:
            return Enclosure.from_arb(self._dev.certified(*args, eps, prec=prec))
        # Ball bisection: keep [a, b] with tail(a) > eps certainly and tail(b) < eps certainly.
        guess = float(self._deviation_mp(eps, params, 30))
        e = to_arb(eps)
        with ctx.workprec(prec):
            width = abs(guess) * 1e-14 + 1e-300
            a, b = guess - width, guess + width
            for _ in range(60):
                ta = self._tail.certified(*args, a, prec=prec)
                tb = self._tail.certified(*args, b, prec=prec)
                if ta > e and tb < e:
                    return Enclosure(math.nextafter(a, -math.inf), math.nextafter(b, math.inf))
                width *= 4
                a, b = guess - width, guess + width
        raise ComputationError(f"{self.name}: could not certify the deviation for eps = {eps}")

    def latex(self) -> dict:
        """LaTeX of the formulas, keyed ``"failure_probability"`` and ``"deviation"``.

        Returns
        -------
        dict of str to str
        """
        sym = sp.latex(self.symbols[self.deviation_parameter.name])
        out = {"failure_probability": r"\varepsilon = " + sp.latex(self.failure_probability_expr)}
        if self.deviation_expr is not None:
            out["deviation"] = sym + " = " + sp.latex(self.deviation_expr)
        else:
            out["deviation"] = sym + r" \text{ solves the equation above (no closed form)}"
        return out
