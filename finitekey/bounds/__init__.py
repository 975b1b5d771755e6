"""Registry of finite-size bounds.

Each bound lives in one module of this package and registers itself with
:func:`register`.  The modules are imported here, explicitly, so that importing
``finitekey.bounds`` registers every bound; a test checks that no module of the
package is left out.
"""

from __future__ import annotations

from ._base import EPS, Bound, Reference, SymbolicBound

__all__ = ["Bound", "SymbolicBound", "Reference", "EPS", "register", "get", "names", "all_bounds"]

from ._registry import all_bounds, get, names, register

from . import hoeffding  # noqa: E402,F401  (each import registers its bounds)
from . import serfling, random_sampling, chernoff, kato  # noqa: E402,F401  (symbolic concentration bounds)
from . import binomial_exact, hypergeometric_exact  # noqa: E402,F401  (exact computed tails)
