"""Shared test fixtures.

Random generators are created explicitly from a seed and passed to the tests
that need them (no global random state).
"""

import numpy as np
import pytest


@pytest.fixture
def make_rng():
    """Factory ``make_rng(seed) -> numpy.random.Generator`` (PCG64, reproducible)."""

    def factory(seed: int) -> np.random.Generator:
        return np.random.default_rng(seed)

    return factory
