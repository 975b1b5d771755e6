"""Design, block-size and reach calls run with one BLAS thread and restore the caller's setting afterwards.

Why: multi-threaded OpenBLAS made small design problems 4-8 times slower on 2 cores (our measurement,
benchmarks/bench_decoy.py).  The checks read the live settings with threadpoolctl.threadpool_info.
"""

import pytest
from threadpoolctl import threadpool_info, threadpool_limits

from finitekey import protocols
from finitekey.protocols.bb84 import design as bb84_design
from finitekey.protocols.decoy_bb84 import design as decoy_design
from finitekey.protocols._result import BlockTarget


def _blas_threads():
    return sorted(i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas")


pytestmark = pytest.mark.skipif(not _blas_threads(), reason="no BLAS library that threadpoolctl can control")


def _spy(record):
    def fake(*args, **kwargs):
        record.append(_blas_threads())
        return "result"

    return fake


@pytest.mark.parametrize("method, target_module, target_name", [
    ("design", decoy_design, "design"), ("blocksize", decoy_design, "blocksize"), ("reach", decoy_design, "reach"),
    ("design", bb84_design, "design"), ("blocksize", bb84_design, "blocksize"),
])
def test_entry_points_use_one_blas_thread_and_restore_it(method, target_module, target_name, monkeypatch):
    proto = protocols.get("decoy-bb84" if target_module is decoy_design else "bb84")
    record = []
    monkeypatch.setattr(target_module, target_name, _spy(record))
    args = (proto.default_scenario(),) + ((BlockTarget.parse("positive"),) if method == "blocksize" else ())
    with threadpool_limits(limits=2, user_api="blas"):
        before = _blas_threads()
        assert getattr(proto, method)(*args) == "result"
        after = _blas_threads()
    assert record == [[1] * len(before)]  # one thread in every BLAS library during the call
    assert after == before == [2] * len(before)  # and the caller's two threads afterwards


def test_real_design_call_restores_threads():
    proto = protocols.get("decoy-bb84")
    with threadpool_limits(limits=2, user_api="blas"):
        res = proto.design(proto.default_scenario(), "hoeffding")
        assert _blas_threads() == [2] * len(_blas_threads())
    assert res.expected.secret_key_length > 0


def test_restored_after_an_error():
    proto = protocols.get("decoy-bb84")
    with threadpool_limits(limits=2, user_api="blas"):
        with pytest.raises(Exception):
            proto.design(proto.default_scenario(), "no-such-statistics")
        assert _blas_threads() == [2] * len(_blas_threads())
