"""Hoeffding's inequality for the mean of independent bounded variables.

For independent :math:`X_1, \\dots, X_n \\in [0, 1]` with mean
:math:`\\mu = E[\\bar X]`, each one-sided deviation obeys

.. math:: \\Pr[\\bar X - \\mu \\ge \\delta] \\le e^{-2 n \\delta^2},

and the same for :math:`\\mu - \\bar X`.  The closed-form inverse
:math:`\\delta = \\sqrt{\\ln(1/\\varepsilon) / (2n)}` is derived by sympy.

References
----------
.. [1] W. Hoeffding, "Probability inequalities for sums of bounded random
   variables", J. Amer. Statist. Assoc. 58 (1963) 13-30, Theorem 2 (theorem
   number and form as stated by secondary sources; the paper itself was not
   available, see proofs_notes/bounds/hoeffding.md).
"""

import sympy as sp

from ..domains import Domain, Parameter
from ._base import Reference, SymbolicBound
from ._registry import register

n, delta = sp.symbols("n delta", positive=True)

HOEFFDING = register(SymbolicBound(
    name="hoeffding",
    title="Hoeffding inequality (independent bounded variables)",
    summary="One-sided deviation of the empirical mean of n independent variables in [0, 1] from their mean.",
    bounds="binomial_mean",
    size_parameters=("n",),
    parameters=[Parameter("n", "n", Domain(1, float("inf"), integer=True), "number of independent variables",
                          (10, 1e10))],
    deviation_parameter=Parameter("delta", r"\delta", Domain(0, float("inf"), lower_open=True),
                                  "deviation of the empirical mean (a fraction)"),
    failure_probability=sp.exp(-2 * n * delta**2),
    references=[Reference("hoeffding1963", "W. Hoeffding, J. Amer. Statist. Assoc. 58, 13-30 (1963)",
                          "10.1080/01621459.1963.10500830")],
    assumptions=["the n variables are independent (not necessarily identically distributed)",
                 "each variable takes values in [0, 1]"],
))
