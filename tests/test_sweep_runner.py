"""The parallel runner over plain picklable functions: order, equality with a serial loop, progress, errors.

The reference for every parallel result is the plain serial list comprehension ``[f(x) for x in items]``.
"""

from __future__ import annotations

import io
import sys
import time

import pytest

from finitekey.errors import InputError
from finitekey.report.runner import Progress, default_jobs, run_map


def _slow_square(x):
    # early items sleep longest, so workers finish out of order
    time.sleep(0.02 * (5 - x % 5))
    return x * x


def _fails_on_three(x):
    if x == 3:
        raise InputError("x", x, "anything but 3")
    return x


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_parallel_equals_serial_in_input_order():
    items = list(range(12))
    want = [x * x for x in items]  # reference: serial evaluation
    assert run_map(_slow_square, items, jobs=1, progress=False) == want
    assert run_map(_slow_square, items, jobs=2, progress=False) == want


def test_default_jobs_is_at_most_two():
    assert 1 <= default_jobs() <= 2


@pytest.mark.parametrize("jobs", [0, -1, 1.5, True, "2"])
def test_bad_jobs(jobs):
    with pytest.raises(InputError) as info:
        run_map(abs, [1], jobs=jobs)
    assert "--jobs" in str(info.value)


def test_worker_error_reaches_the_caller():
    with pytest.raises(InputError) as info:
        run_map(_fails_on_three, range(6), jobs=2, progress=False)
    assert info.value.field == "x"


def test_progress_only_on_a_terminal():
    tty, pipe = _Tty(), io.StringIO()
    run_map(abs, [-1, -2, -3], jobs=1, stream=tty)
    run_map(abs, [-1, -2, -3], jobs=1, stream=pipe)
    assert "3/3 points" in tty.getvalue() and tty.getvalue().endswith("\n")
    assert pipe.getvalue() == ""
    forced = io.StringIO()
    bar = Progress(2, stream=forced, enabled=True)
    bar.step()
    bar.close()
    assert "1/2" in forced.getvalue()


def test_missing_dask_is_a_clear_input_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes 'import distributed' raise ImportError
    with pytest.raises(InputError) as info:
        run_map(abs, [1, 2], cluster="local")
    assert "finitekey[cluster]" in str(info.value)


def test_single_threaded_blas_restores_thread_counts():
    import numpy as np
    from finitekey.report.runner import _openblas_controls, single_threaded_blas
    controls = _openblas_controls()
    before = [g() for _, g in controls]
    a = np.random.default_rng(1).standard_normal((60, 60))
    with single_threaded_blas() as n:
        assert n == len(controls)
        assert all(g() == 1 for _, g in controls)
        inside = a @ a  # reference: the same product outside the block
    assert [g() for _, g in controls] == before
    assert np.array_equal(inside, a @ a)
