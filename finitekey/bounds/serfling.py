"""Serfling's inequality for the mean of a sample drawn without replacement.

A sample of ``n`` items is drawn uniformly at random, without replacement, from
a population of ``N`` values in :math:`[0, 1]` with mean :math:`\\mu_N`.  Its
mean :math:`\\bar X_n` obeys

.. math:: \\Pr[\\bar X_n - \\mu_N \\ge \\delta]
          \\le \\exp\\!\\left(-\\frac{2 n \\delta^2}{1 - (n-1)/N}\\right),

and the same for :math:`\\mu_N - \\bar X_n` (apply it to the values
:math:`1 - x`).  The closed-form inverse is derived by sympy.

References
----------
.. [1] R. J. Serfling, "Probability inequalities for the sum in sampling
   without replacement", Ann. Statist. 2 (1974) 39-48, Corollary 1.1 (the form
   matches secondary statements and its use in Tomamichel et al. 2012; the
   corollary number is from memory, see proofs_notes/bounds/serfling.md).
"""

import numpy as np
import sympy as sp

from ..domains import Domain, Parameter
from ..errors import InputError
from ._base import Reference, SymbolicBound
from ._registry import register

__all__ = ["SERFLING", "serfling_tail"]

_SAMPLE = Parameter("n", "n", Domain(1, float("inf"), integer=True), "number of items drawn without replacement",
                    (10, 1e10))
_POPULATION = Parameter("N", "N", Domain(1, float("inf"), integer=True), "size of the population drawn from",
                        (10, 1e10))
_DELTA = Parameter("delta", r"\delta", Domain(0, float("inf"), lower_open=True),
                   "deviation of the sample mean from the population mean (a fraction)")


def serfling_tail(n, N, delta):
    """Serfling's failure probability as a sympy expression (the one place the formula is written).

    Parameters
    ----------
    n, N, delta : sympy.Expr
        Sample size, population size, deviation of the mean.

    Returns
    -------
    sympy.Expr

    References
    ----------
    .. [1] R. J. Serfling, Ann. Statist. 2 (1974) 39-48.
    """
    # 1 - (n-1)/N written as (N - n + 1)/N: the same number, without cancellation when n is close to N.
    return sp.exp(-2 * n * N * delta**2 / (N - n + 1))


class _SerflingBound(SymbolicBound):
    def _check_joint(self, params):
        n, N = np.broadcast_arrays(np.asarray(params["n"]), np.asarray(params["N"]))
        bad = n > N
        if np.any(bad):
            i = np.argmax(bad.ravel())
            raise InputError("n", n.ravel()[i].item(),
                             f"a sample size no larger than the population size N = {N.ravel()[i].item()}")


_n, _N, _delta = sp.symbols("n N delta", positive=True)

SERFLING = register(_SerflingBound(
    name="serfling",
    title="Serfling inequality (sampling without replacement)",
    summary=("One-sided deviation of the mean of n items drawn without replacement from a population of N values "
             "in [0, 1] from the population mean."),
    bounds="hypergeometric_sampling_mean",
    parameters=[_SAMPLE, _POPULATION],
    deviation_parameter=_DELTA,
    failure_probability=serfling_tail(_n, _N, _delta),
    references=[Reference("serfling1974", "R. J. Serfling, Ann. Statist. 2, 39-48 (1974)", "10.1214/aos/1176342611")],
    assumptions=["the n items are a uniformly random subset of the population (drawn without replacement)",
                 "every population value lies in [0, 1]",
                 "n <= N"],
    size_parameters=("n",),
))
