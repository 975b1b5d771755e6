"""Random-sampling bound on the error rate of unchecked bits (a Serfling corollary).

Of ``n + k`` bits, ``k`` test bits are chosen uniformly at random and their
error rate :math:`\\lambda_k` is revealed; the other ``n`` (key) bits have error
rate :math:`\\lambda_n`.  Then

.. math:: \\Pr[\\lambda_n \\ge \\lambda_k + \\mu]
          \\le \\exp\\!\\left(-\\frac{2 \\mu^2 n k^2}{(n+k)(k+1)}\\right).

The expression is *derived* from :func:`finitekey.bounds.serfling.serfling_tail`:
the key bits are themselves a sample of size ``n`` without replacement from the
population of ``n + k`` bits, and
:math:`\\lambda_n - \\lambda_k = \\tfrac{n+k}{k}(\\lambda_n - \\lambda_{n+k})`, so the event is
Serfling's with deviation :math:`k\\mu/(n+k)`.  See proofs_notes/bounds/random_sampling.md.

Checked against a stored copy of [1] (arXiv:1103.4130, Supplementary Note 2, Lemma 3, Eqs.
(S14)-(S15)): the paper's deviation
:math:`\\mu(\\varepsilon) = \\sqrt{\\tfrac{n+k}{nk}\\tfrac{k+1}{k}\\ln(1/\\varepsilon)}` fails
with probability at most :math:`\\varepsilon^2`, i.e. it is this bound's deviation at failure
probability :math:`\\varepsilon^2` (the square because :math:`\\varepsilon` is used as a
purified-distance smoothing parameter).

References
----------
.. [1] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, "Tight finite-key
   analysis for quantum cryptography", Nat. Commun. 3 (2012) 634, arXiv:1103.4130,
   Supplementary Note 2.
.. [2] R. J. Serfling, Ann. Statist. 2 (1974) 39-48.
"""

import sympy as sp

from ..domains import Domain, Parameter
from ._base import Reference, SymbolicBound
from ._registry import register
from .serfling import serfling_tail

__all__ = ["RANDOM_SAMPLING"]

_n, _k, _mu = sp.symbols("key_bits test_bits mu", positive=True)

#: Serfling with the key bits as the sample (size n) from the population of n + k bits.
_TAIL = serfling_tail(_n, _n + _k, _k * _mu / (_n + _k))

RANDOM_SAMPLING = register(SymbolicBound(
    name="random_sampling",
    title="Random-sampling bound on the key-bit error rate (Serfling corollary)",
    summary=("Amount by which the error rate of n unchecked (key) bits can exceed the error rate of k test bits "
             "chosen uniformly at random from the n + k bits."),
    bounds="hypergeometric_sampling_difference",
    parameters=[
        Parameter("key_bits", "n", Domain(1, float("inf"), integer=True), "number of unchecked (key) bits", (10, 1e10)),
        Parameter("test_bits", "k", Domain(1, float("inf"), integer=True), "number of test bits revealed",
                  (10, 1e10)),
    ],
    deviation_parameter=Parameter("mu", r"\mu", Domain(0, float("inf"), lower_open=True),
                                  "excess of the key-bit error rate over the test-bit error rate (a fraction)"),
    failure_probability=_TAIL,
    references=[
        Reference("tomamichel2012", "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012)",
                  "10.1038/ncomms1631"),
        Reference("serfling1974", "R. J. Serfling, Ann. Statist. 2, 39-48 (1974)", "10.1214/aos/1176342611"),
    ],
    assumptions=["the k test bits are a uniformly random subset of the n + k bits, chosen independently of the bit "
                 "values (which may be fixed adversarially beforehand)",
                 "the error indicators are 0/1 values"],
    size_parameters=("key_bits", "test_bits"),
))
