"""Entropy building blocks shared by the protocol analyses.

Everything here is symbolic first: the protocols compose these sympy pieces
into one key-length expression, which :func:`finitekey.compile.compile_expression`
turns into float, mpmath and certified code.  Numeric helpers are derived from
the same expressions.

* :func:`binary_entropy_expr` -- :math:`h(x) = -x\\log_2 x - (1-x)\\log_2(1-x)`,
  written with ``log1p`` for accuracy near 0.
* :func:`uncertainty_min_entropy_expr` -- the entropic uncertainty relation with
  side information: :math:`H^{\\bar\\varepsilon}_{\\min}(X|E) \\ge n\\,(\\log_2(1/c) - h(e_{ph}))`,
  where :math:`c` is the maximal overlap of the two measurements
  (:math:`c = 1/2` for ideal conjugate qubit bases) and :math:`e_{ph}` an upper
  bound on the phase-error rate that holds except with the estimation failure
  probability.
* :func:`hash_penalty_expr` -- the bits given up by the leftover hash lemma so
  that two-universal hashing is ``eps_pa``-close to ideal:
  :math:`2\\log_2(1/(2\\varepsilon_{PA}))`.

References
----------
.. [1] M. Tomamichel and R. Renner, "Uncertainty relation for smooth entropies",
   Phys. Rev. Lett. 106, 110506 (2011).
.. [2] M. Tomamichel, C. Schaffner, A. Smith, R. Renner, "Leftover hashing against
   quantum side information", IEEE Trans. Inf. Theory 57, 5524 (2011).
.. [3] M. Berta, M. Christandl, R. Colbeck, J. M. Renes, R. Renner, "The uncertainty
   principle in the presence of quantum memory", Nat. Phys. 6, 659 (2010).
"""

from __future__ import annotations

import numpy as np
import sympy as sp
from sympy.codegen.cfunctions import log1p

from .compile import compile_expression
from .domains import Domain

__all__ = ["binary_entropy_expr", "binary_entropy", "binary_entropy_certified", "uncertainty_min_entropy_expr",
           "hash_penalty_expr", "log2_expr", "OVERLAP_DOMAIN", "IDEAL_OVERLAP"]

_x = sp.Symbol("x", positive=True)

#: Allowed values of the maximal overlap c between the two measurements: [1/2 for qubits ... 1).
OVERLAP_DOMAIN = Domain(0.0, 1.0, lower_open=True, upper_open=True)
IDEAL_OVERLAP = sp.Rational(1, 2)


def log2_expr(x):
    """Base-2 logarithm as a sympy expression (``log(x)/log(2)``).

    Parameters
    ----------
    x : sympy.Expr or number

    Returns
    -------
    sympy.Expr
    """
    return sp.log(x) / sp.log(2)


def binary_entropy_expr(x):
    """Binary entropy h(x) in bits as a sympy expression of ``x`` (valid on (0, 1)).

    Parameters
    ----------
    x : sympy.Expr

    Returns
    -------
    sympy.Expr
    """
    return -(x * sp.log(x) + (1 - x) * log1p(-x)) / sp.log(2)


_H = compile_expression(binary_entropy_expr(_x), (_x,))


def binary_entropy(x):
    """Binary entropy in bits, vectorised; h(0) = h(1) = 0.

    Parameters
    ----------
    x : float or array_like
        Probabilities in [0, 1].

    Returns
    -------
    float or numpy.ndarray

    Raises
    ------
    InputError
        For values outside [0, 1], NaN or infinities.
    """
    x = Domain(0.0, 1.0).check("x", x)
    arr = np.asarray(x, dtype=float)
    inner = np.clip(arr, np.finfo(float).tiny, 1 - np.finfo(float).epsneg)
    out = np.where((arr == 0) | (arr == 1), 0.0, _H.numpy(inner))
    return float(out) if np.ndim(out) == 0 else out


def binary_entropy_certified(x, prec: int = 128):
    """Ball enclosure (arb) of h(x) for x in (0, 1).

    Parameters
    ----------
    x : int, float, mpf or arb
        Converted exactly (:func:`finitekey.compile.to_arb`).
    prec : int
        Working precision in bits.

    Returns
    -------
    flint.arb
        A ball containing the exact value.
    """
    return _H.certified(x, prec=prec)


def uncertainty_min_entropy_expr(n, phase_error_rate, overlap=IDEAL_OVERLAP):
    """Lower bound on the smooth min-entropy of n key bits, in bits (sympy).

    ``n * (log2(1/overlap) - h(phase_error_rate))``; valid while the phase-error
    bound holds and ``phase_error_rate <= 1/2``.

    Parameters
    ----------
    n, phase_error_rate, overlap : sympy.Expr or number

    Returns
    -------
    sympy.Expr
    """
    return n * (log2_expr(1 / overlap) - binary_entropy_expr(phase_error_rate))


def hash_penalty_expr(eps_pa):
    """Bits removed by privacy amplification for an ``eps_pa``-close key: 2 log2(1/(2 eps_pa)).

    Parameters
    ----------
    eps_pa : sympy.Expr or number

    Returns
    -------
    sympy.Expr
    """
    return 2 * log2_expr(1 / (2 * eps_pa))
