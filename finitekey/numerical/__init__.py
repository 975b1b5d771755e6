"""Numerical key rates: a protocol given by its states, measurements, announcements and key map.

Layer: below ``protocols``; imports numpy, scipy, python-flint and lower layers only.  The conic solvers
(cvxpy, qics) are imported inside the functions that use them (their import costs seconds).

- :mod:`finitekey.numerical.model` -- the problem (:class:`KeyRateProblem`), result, construction helpers.
- :mod:`finitekey.numerical.solver` -- ``solve(problem, backend=...)``: primal point and certified lower bound.
- :mod:`finitekey.numerical.certificate` -- the certified bound (ball arithmetic); ``objective`` -- f and its
  gradient; ``reference`` -- test problems with closed-form answers.
"""

from .model import (Announcement, Constraint, KeyRateProblem, SolverResult, all_constraints, expected_statistics,
                    key_map_blocks, source_replacement, state_constraints, statistics_constraints)
from .solver import BACKENDS, solve

__all__ = ["Announcement", "Constraint", "KeyRateProblem", "SolverResult", "all_constraints", "expected_statistics",
           "key_map_blocks", "source_replacement", "state_constraints", "statistics_constraints", "solve", "BACKENDS"]
