"""The compiler's float64 rewrites against mpmath (50 digits) on the original expression."""

import mpmath
import numpy as np
import pytest
import sympy as sp

from finitekey import bounds
from finitekey.compile import _merge_square_roots, compile_expression


def test_merged_square_roots_are_the_same_function():
    # sqrt(a) sqrt(b) / sqrt(c) -> sqrt(a b / c) is exact for positive bases; check at random points.
    # Plain symbols, as in the float64 form: with positive ones sympy splits the merged root again.
    a, b, c, d = sp.symbols("a b c d")
    expr = sp.sqrt(a + b) * sp.sqrt(c + 1) / (2 * sp.sqrt(a) * d) + sp.log(1 + sp.sqrt(a) * sp.sqrt(b))
    merged = _merge_square_roots(expr)
    def roots(x):
        return sum(1 for p in sp.preorder_traversal(x) if isinstance(p, sp.Pow) and abs(p.exp) == sp.S.Half)

    assert (roots(expr), roots(merged)) == (5, 2)
    rng = np.random.default_rng(3)
    for point in rng.uniform(1e-3, 1e6, size=(50, 4)):
        subs = dict(zip((a, b, c, d), (sp.Float(x, 30) for x in point)))
        ref, got = expr.evalf(30, subs=subs), merged.evalf(30, subs=subs)
        assert abs(got - ref) <= 1e-25 * abs(ref)


def test_integer_arrays_do_not_overflow():
    # (n + k)(k + 1) exceeds int64 at n = 1e10, k = 1e9: the float64 code must convert counts first.
    # Reference: the 2012 random-sampling deviation at 50 digits with mpmath.
    rs = bounds.get("random_sampling")
    n = np.array([10**10, 3 * 10**10], dtype=np.int64)
    k = np.array([10**9, 2 * 10**9], dtype=np.int64)
    got = rs.deviation(1e-20, key_bits=n, test_bits=k)
    for i in range(2):
        ref = rs.deviation_mp(1e-20, dps=50, key_bits=int(n[i]), test_bits=int(k[i]))
        assert float(got[i]) == pytest.approx(float(ref), rel=1e-12)
    x = sp.Symbol("x", positive=True)
    f = compile_expression(x * x, (x,))
    assert f.numpy(np.array([2**40], dtype=np.int64))[0] == 2.0**80
    assert float(f.mp(2**40)) == float(mpmath.mpf(2) ** 80)
