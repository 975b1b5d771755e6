"""Error-correction (information reconciliation) leakage models.

The key-length formula subtracts the number of bits of the raw key revealed on
the public channel while the two parties reconcile their strings.  For a
*measured* block this is simply the number of bits sent (``ec_leak_bits``) --
the only value that is rigorous for a given run.  For *design* (predicting the
key of a block not yet run) three models are offered:

* :class:`DisclosedLeakage` -- the bits actually disclosed;
* :class:`FixedEfficiency` -- :math:`f\\, n\\, h(q)` bits, the usual efficiency
  model (common practice, no source), with :math:`f \\ge 1`;
* :class:`SecondOrderLeakage` -- the finite-size estimate for one-way
  reconciliation of a binary symmetric channel of crossover probability ``q``
  with frame error rate :math:`\\varepsilon_{EC}` (Tomamichel, Martinez-Mateo,
  Pacher, Elkouss 2017), stated from memory:

  .. math:: \\mathrm{leak} \\approx n h(q) + \\sqrt{n\\, v(q)}\\, \\Phi^{-1}(1-\\varepsilon_{EC})
            - \\tfrac12 \\log_2 n,
     \\qquad v(q) = q(1-q) \\log_2^2\\tfrac{1-q}{q},

  optionally multiplied in its first-order term by an efficiency ``f`` to
  model codes that do not reach the fundamental limit.

Every model is a frozen dataclass with ``bits(n, q)`` (float, vectorised) and
``bits_upper(n, q)`` (an integer that is certainly >= the model's exact value,
computed with ball arithmetic).  The first-order term is written once as a
sympy expression and compiled.

References
----------
.. [1] M. Tomamichel, J. Martinez-Mateo, C. Pacher, D. Elkouss, "Fundamental
   finite key limits for one-way information reconciliation in quantum key
   distribution", Quantum Inf. Process. 16, 280 (2017).
.. [2] D. Slepian and J. K. Wolf, "Noiseless coding of correlated information
   sources", IEEE Trans. Inf. Theory 19, 471 (1973) -- the asymptotic limit n h(q).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import sympy as sp
from flint import arb, ctx

from .compile import compile_expression, to_arb
from .domains import COUNT, Domain
from .entropy import binary_entropy_expr, log2_expr
from .errors import InputError

__all__ = [
    "EFFICIENCY_DOMAIN",
    "MODEL_NAMES",
    "QBER_DOMAIN",
    "DisclosedLeakage",
    "FixedEfficiency",
    "LeakageModel",
    "SecondOrderLeakage",
    "leakage_model",
]

#: Quantum bit error rates for which reconciliation (and a key) is meaningful: [0, 1/2).
QBER_DOMAIN = Domain(0.0, 0.5, upper_open=True)
#: Reconciliation efficiency f >= 1 (f = 1 is the Slepian-Wolf limit).
EFFICIENCY_DOMAIN = Domain(1.0, 10.0)
FRAME_ERROR_DOMAIN = Domain(0.0, 0.5, lower_open=True, upper_open=True)

_n, _q, _f = sp.symbols("n q f", positive=True)
#: First-order leakage f n h(q), the one formula every model's first-order part derives from.
FIRST_ORDER_EXPR = _f * _n * binary_entropy_expr(_q)
#: Variance of the entropy density of a BSC, v(q) = q (1 - q) log2((1 - q)/q)^2.
DISPERSION_EXPR = _q * (1 - _q) * log2_expr((1 - _q) / _q) ** 2
_FIRST = compile_expression(FIRST_ORDER_EXPR, (_n, _q, _f))
_DISP = compile_expression(DISPERSION_EXPR, (_q,))


def _ceil_upper(ball: arb) -> int:
    """Smallest integer certainly >= every point of the ball."""
    if not ball.is_finite():
        raise InputError("ec leakage", str(ball), "a finite leakage")
    # Round in ball arithmetic: float(ball.upper()) rounds to nearest and may land below the ball's
    # upper end when the ball carries more than 53 bits.
    return int(ball.upper().ceil().unique_fmpz())


class LeakageModel:
    """Base class: ``name``, ``bits(n, q)`` and ``bits_upper(n, q)``."""

    name = "abstract"

    def bits(self, n, q):  # pragma: no cover - abstract
        """Leakage in bits as a float (vectorised), for choosing parameters.

        Parameters
        ----------
        n : float or array_like
            Number of key bits reconciled.
        q : float or array_like
            Their error rate.

        Returns
        -------
        float or numpy.ndarray
        """
        raise NotImplementedError

    def bits_upper(self, n: int, q: float) -> int:  # pragma: no cover - abstract
        """Leakage in whole bits, rounded up from a certified upper bound (what a key length subtracts).

        Parameters
        ----------
        n : int
            Number of key bits reconciled.
        q : float
            Their error rate.

        Returns
        -------
        int
        """
        raise NotImplementedError

    def describe(self) -> dict:
        """JSON-ready description of the model: its name and parameters.

        Returns
        -------
        dict
        """
        return {"model": self.name}


@dataclass(frozen=True)
class DisclosedLeakage(LeakageModel):
    """The number of bits actually disclosed during reconciliation (rigorous for a measured block)."""

    leak_bits: int
    name = "disclosed"

    def __post_init__(self):
        COUNT.check("ec_leak_bits", self.leak_bits)

    def bits(self, n, q=None):
        return np.zeros(np.shape(n)) + float(self.leak_bits)

    def bits_upper(self, n: int, q: float | None = None) -> int:
        return int(self.leak_bits)

    def describe(self) -> dict:
        return {"model": self.name, "ec_leak_bits": int(self.leak_bits)}


@dataclass(frozen=True)
class FixedEfficiency(LeakageModel):
    """``f n h(q)`` bits: reconciliation at efficiency ``f`` >= 1 relative to the Slepian-Wolf limit."""

    efficiency: float
    name = "efficiency"

    def __post_init__(self):
        EFFICIENCY_DOMAIN.check("ec_efficiency", self.efficiency)

    def bits(self, n, q):
        q = np.asarray(q, dtype=float)
        out = np.where(q > 0, _FIRST.numpy(n, np.where(q > 0, q, 0.25), self.efficiency), 0.0)
        return float(out) if out.ndim == 0 else out

    def bits_upper(self, n: int, q: float) -> int:
        q = QBER_DOMAIN.check("key_qber", q)
        if q == 0:
            return 0
        return _ceil_upper(_FIRST.certified(int(n), q, self.efficiency))

    def describe(self) -> dict:
        return {"model": self.name, "ec_efficiency": self.efficiency}


@dataclass(frozen=True)
class SecondOrderLeakage(LeakageModel):
    """Finite-size (second-order) estimate of the leakage of a good one-way code, from memory of [1].

    ``f n h(q) + sqrt(n v(q)) Phi^{-1}(1 - frame_error_rate) - log2(n)/2``, never below 0.
    The normal quantile is evaluated in float64 and rounded up by a relative 1e-12 before the
    ball evaluation: this is a design model, not a certified quantity.
    """

    frame_error_rate: float = 1e-2
    efficiency: float = 1.0
    name = "second_order"

    def __post_init__(self):
        FRAME_ERROR_DOMAIN.check("frame_error_rate", self.frame_error_rate)
        EFFICIENCY_DOMAIN.check("ec_efficiency", self.efficiency)

    def _quantile(self) -> float:
        from scipy.special import ndtri  # here, not at module top: scipy.special adds about 0.2 s to every start-up

        return float(ndtri(1.0 - self.frame_error_rate))

    def bits(self, n, q):
        q = np.asarray(q, dtype=float)
        n = np.asarray(n, dtype=float)
        qs = np.where(q > 0, q, 0.25)
        first = _FIRST.numpy(n, qs, self.efficiency)
        second = np.sqrt(n * _DISP.numpy(qs)) * self._quantile() - 0.5 * np.log2(n)
        out = np.where(q > 0, np.maximum(first + second, 0.0), 0.0)
        return float(out) if out.ndim == 0 else out

    def bits_upper(self, n: int, q: float) -> int:
        q = QBER_DOMAIN.check("key_qber", q)
        if q == 0:
            return 0
        z = self._quantile()
        z = z + abs(z) * 1e-12
        with ctx.workprec(128):
            n_b = arb(int(n))
            ball = (_FIRST.certified(int(n), q, self.efficiency) + (n_b * _DISP.certified(q)).sqrt() * to_arb(z)
                    - n_b.log() / arb(2).log() / 2)
        return max(0, _ceil_upper(ball))

    def describe(self) -> dict:
        return {"model": self.name, "frame_error_rate": self.frame_error_rate, "ec_efficiency": self.efficiency}


MODEL_NAMES = ("efficiency", "second_order")


def leakage_model(name: str, *, efficiency: float = 1.1, frame_error_rate: float = 1e-2,
                  field: str = "reconciliation.model") -> LeakageModel:
    """Build a design leakage model by name: ``"efficiency"`` or ``"second_order"``.

    Parameters
    ----------
    name : str
        ``"efficiency"`` (:class:`FixedEfficiency`) or ``"second_order"`` (:class:`SecondOrderLeakage`).
    efficiency : float
        Reconciliation efficiency ``f >= 1``.
    frame_error_rate : float
        Frame error rate of the second-order model.
    field : str
        Field named in error messages.

    Returns
    -------
    LeakageModel

    Raises
    ------
    InputError
        For an unknown name or a parameter outside its domain.
    """
    if name == "efficiency":
        return FixedEfficiency(efficiency)
    if name == "second_order":
        return SecondOrderLeakage(frame_error_rate, efficiency)
    raise InputError(field, name, "one of: " + ", ".join(MODEL_NAMES))
