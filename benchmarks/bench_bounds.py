"""Benchmark of the bound machinery (a plain script, not a test): prints figures from one run.

* time to invert the exact hypergeometric tail (``key_errors_upper``, float and certified) at
  populations 1e6, 1e9 and 1e12 (target: <= 10 ms at 1e9), next to the plain scan without the predictor;
* certified inversions per second over 500 different blocks, predictor against plain scan;
* evaluations per second of the compiled Hoeffding deviation on 1e6 points, against a plain-Python
  loop over the same formula with ``math`` (targets: >= 1e6 evaluations/s and >= 50x the loop).

Run: ``python benchmarks/bench_bounds.py``.
"""

from __future__ import annotations

import math
import time

import numpy as np

from finitekey import bounds
from finitekey.bounds import hypergeometric_exact as hx
from finitekey.bounds.hypergeometric_exact import key_errors_upper, key_errors_upper_certified


def _best(fn, repeat):
    """Best wall time of ``repeat`` calls, in seconds, and the last result."""
    best, out = math.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def _plain_certified(n, k, e, eps):
    """The inversion without the predictor: bracketed secant scan, then the certificate from scratch."""
    tail = hx._SamplingTail(n, k, e)
    return hx._certified_upper_T(tail, eps, hx._search(tail, eps), 128) - e


def bench_inversion():
    print("exact hypergeometric inversion (test fraction 10%, test error rate 2%, eps = 1e-10)")
    print(f"{'population':>12} {'key errors':>14} {'float ms':>10} {'certified ms':>13} {'plain scan ms':>14}")
    for population, repeat in ((10**6, 20), (10**9, 10), (10**12, 3)):
        k = population // 10
        n = population - k
        e = k // 50
        t_f, m_f = _best(lambda: key_errors_upper(n, k, e, 1e-10), repeat)
        t_c, m_c = _best(lambda: key_errors_upper_certified(n, k, e, 1e-10), repeat)
        t_p, m_p = _best(lambda: _plain_certified(n, k, e, 1e-10), repeat)  # noqa: B023  (called at once)
        assert m_c >= m_f and m_p == m_c
        print(f"{population:>12.0e} {m_f:>14d} {t_f * 1e3:>10.2f} {t_c * 1e3:>13.2f} {t_p * 1e3:>14.2f}")


def bench_inversion_stream(blocks=500):
    """Certified inversions per second over blocks that all differ (n from 1e5 to 1e8, k = n/20, 2% errors)."""
    rng = np.random.default_rng(1)
    cases = [(int(n), int(n) // 20, int(int(n) // 20 * 0.02), 1e-21) for n in rng.integers(10**5, 10**8, size=blocks)]
    t_new, out_new = _best(lambda: [key_errors_upper_certified(*c) for c in cases], 3)
    t_old, out_old = _best(lambda: [_plain_certified(*c) for c in cases], 3)
    assert out_new == out_old
    print(f"certified inversions, {blocks} different blocks: {blocks / t_new:.4g}/s "
          f"(plain scan {blocks / t_old:.4g}/s, {t_old / t_new:.1f}x)")


def bench_hoeffding(points=10**6):
    dev = bounds.get("hoeffding").deviation
    rng = np.random.default_rng(0)
    n = rng.integers(10, 10**10, size=points)
    eps = 10.0 ** rng.uniform(-30, -2, size=points)
    dev(eps[:10], n=n[:10])  # warm up (compilation is cached)
    t_vec, out = _best(lambda: dev(eps, n=n), 3)
    n_list, eps_list = n.tolist(), eps.tolist()

    def loop():
        return [math.sqrt(math.log(1.0 / e) / (2.0 * m)) for e, m in zip(eps_list, n_list)]

    t_loop, ref = _best(loop, 1)
    assert np.allclose(out, ref, rtol=1e-12)
    rate = points / t_vec
    print(f"hoeffding deviation on {points:.0e} points: public call (validation included) {t_vec * 1e3:.1f} ms "
          f"({rate:.3g} evals/s), plain-Python loop {t_loop * 1e3:.1f} ms, ratio {t_loop / t_vec:.1f}x")
    bound = bounds.get("hoeffding")
    kernel = getattr(bound, "_dev", None)
    if kernel is not None:  # the compiled numpy kernel alone, without input validation
        n_f = n.astype(float)
        t_k, _ = _best(lambda: kernel.numpy(n_f, eps), 3)
        print(f"  compiled kernel alone {t_k * 1e3:.1f} ms ({points / t_k:.3g} evals/s), ratio {t_loop / t_k:.1f}x")


def bench_random_sampling(points=10**6):
    """The 2012 sampling bound: a closed form with more arithmetic than Hoeffding's."""
    dev = bounds.get("random_sampling").deviation
    rng = np.random.default_rng(1)
    n = rng.integers(10, 10**10, size=points)
    k = rng.integers(10, 10**9, size=points)
    eps = 10.0 ** rng.uniform(-30, -2, size=points)
    dev(eps[:10], key_bits=n[:10], test_bits=k[:10])
    t_vec, out = _best(lambda: dev(eps, key_bits=n, test_bits=k), 3)
    n_l, k_l, e_l = n.tolist(), k.tolist(), eps.tolist()

    def loop():
        return [math.sqrt((a + b) / (a * b) * (b + 1) / b * math.log(1.0 / e) / 2.0) for a, b, e in zip(n_l, k_l, e_l)]

    t_loop, ref = _best(loop, 1)
    assert np.allclose(out, ref, rtol=1e-10)
    print(f"random_sampling deviation on {points:.0e} points: public call {t_vec * 1e3:.1f} ms "
          f"({points / t_vec:.3g} evals/s), plain-Python loop {t_loop * 1e3:.1f} ms, ratio {t_loop / t_vec:.1f}x")


if __name__ == "__main__":
    bench_inversion()
    bench_inversion_stream()
    bench_hoeffding()
    bench_random_sampling()
