"""The generic block-size search of :mod:`finitekey.searching`.

Source: the expected answers are worked out by hand from a step predicate with a known threshold (common
practice, no source).
"""

import math

from finitekey.searching import smallest_block


def _step(threshold, calls):
    def meets(N, warm=None):
        calls.append((N, warm))
        return N >= threshold, N, ("warm", N)
    return meets


def test_smallest_block_from_above_and_below_finds_the_threshold():
    for start in (2.0, 6.5):            # below the threshold (upwards bracketing), above it (downwards)
        calls = []
        lo, hi, N, res = smallest_block(_step(12345.6, calls), start, 9.0)
        assert N == res and 12345.6 <= N <= math.ceil(10 ** hi)   # a whole size meeting it, at the bracket end
        assert 10 ** lo < 12345.6 <= 10 ** hi and hi - lo <= 1e-3
        assert all(n <= 10 ** 9 for n, _ in calls)


def test_smallest_block_unreachable_gives_none_and_whole_number_failure_gives_no_size():
    assert smallest_block(_step(1e10, []), 3.0, 9.0) is None
    # a predicate met by the sizes of the bracket (floats) but by no whole number (ints)
    def meets(N, warm=None):
        return isinstance(N, float) and N >= 1e4, N, None
    lo, hi, N, res = smallest_block(meets, 4.5, 9.0)
    assert N is None and isinstance(res, int) and 10 ** lo < 1e4 <= 10 ** hi

def test_smallest_block_warm_starts_upwards_only_when_asked():
    for warm_upwards in (False, True):
        calls = []
        smallest_block(_step(1e6, calls), 3.0, 9.0, warm_upwards=warm_upwards)
        upward = calls[1:7]             # 10**3.5 ... 10**6: the upward bracketing
        assert [round(math.log10(n), 6) for n, _ in upward] == [3.5, 4.0, 4.5, 5.0, 5.5, 6.0]
        assert all((w is not None) == warm_upwards for _, w in upward)


def test_farthest_passing_brackets_by_doubling_and_bisects_to_the_tolerance():
    # A step function with its edge at 123.4 (common practice, no source: the bisection invariant keeps the
    # passing end below the edge and the failing end above it). Warm starts carry the last passing point.
    from finitekey.searching import farthest_passing
    calls = []

    def passes(x, warm):
        calls.append((x, warm))
        return x <= 123.4, x, ("r", x)
    reach, res, limit = farthest_passing(passes, 0.0, ("r", 0.0), 1000.0, 0.01)
    assert not limit and 123.4 - 0.01 <= reach <= 123.4 and res == ("r", reach)
    assert [x for x, _ in calls[:3]] == [50.0, 150.0, 100.0]   # 0 + 50, 50 + 100 fails, then bisection
    assert all(w <= x for x, w in calls)                        # warm start never from a failing point
    reach, res, limit = farthest_passing(lambda x, w: (True, x, x), 0.0, 0.0, 300.0, 0.01)
    assert reach is None and limit and res == 300.0
