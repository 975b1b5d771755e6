"""Speed figures of the BB84 analysis (a script, not a test): prints one table from one run.

* per-block keylength time with exact statistics at n = 1e4, 1e6, 1e9 (target <= 5 ms), first call excluded;
* batch throughput in blocks/s (target >= 1e4/s) for a realistic post-processing stream (fixed n and k, test
  errors varying binomially) and for blocks that are all different;
* design and blocksize times for the built-in scenario (target <= 0.5 s).

Run: python benchmarks/bench_bb84.py
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from finitekey.protocols import BlockTarget, bb84


def _block(n, k, e, leak):
    return bb84.parse_block({"protocol": "bb84", "key_bits": n, "test_bits": k, "test_errors": e,
                             "ec_leak_bits": leak, "eps_sec": 1e-10, "eps_cor": 1e-15})


def per_block(n: int, reps: int = 30) -> float:
    k = max(n // 20, 500)
    times = []
    for i in range(reps):
        b = _block(n, k, int(0.02 * k) + i, int(0.16 * n))  # a new e each time: no cache hit
        t = time.perf_counter()
        bb84.key_length(b, "exact")
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def batch(blocks, jobs: int = 1) -> float:
    t = time.perf_counter()
    bb84.key_length_batch(blocks, "exact", jobs=jobs)
    return len(blocks) / (time.perf_counter() - t)


def main() -> None:
    rng = np.random.default_rng(1)
    bb84.key_length(_block(10**6, 10**5, 2000, 160000))  # warm-up: compile the formula once
    rows = []
    for n in (10**4, 10**6, 10**9):
        rows.append((f"keylength exact, n = {n:.0e}", per_block(n) * 1e3, "ms", "<= 5 ms"))
    n, k = 10**6, 5 * 10**4
    stream = [_block(n, k, int(e), 160000) for e in rng.binomial(k, 0.02, size=20000)]
    rows.append(("batch, stream (fixed n, k; e ~ Binomial)", batch(stream), "blocks/s", ">= 1e4/s"))
    distinct = [_block(int(n_), int(n_) // 20, int(int(n_) // 20 * 0.02), int(0.16 * n_))
                for n_ in rng.integers(10**5, 10**8, size=500)]
    rows.append(("batch, all blocks different", batch(distinct), "blocks/s", ">= 1e4/s"))
    many = [_block(int(n_), int(n_) // 20, int(int(n_) // 20 * 0.02), int(0.16 * n_))
            for n_ in rng.integers(10**5, 10**8, size=8000)]
    one, two = batch(many), batch(many, jobs=2)
    rows.append(("batch, 8000 different, 1 process", one, "blocks/s", ">= 1e4/s"))
    rows.append(("batch, 8000 different, 2 processes", two, "blocks/s", f"ratio {two / one:.2f}x"))
    sc = bb84.BB84_PROTOCOL.default_scenario()
    t = time.perf_counter()
    bb84.design.design(sc)
    rows.append(("design (built-in scenario, exact)", time.perf_counter() - t, "s", "<= 0.5 s"))
    for target in ("positive", "bits=1000000", "fraction=0.5"):
        t = time.perf_counter()
        bb84.design.blocksize(sc, BlockTarget.parse(target))
        rows.append((f"blocksize --target {target}", time.perf_counter() - t, "s", "<= 0.5 s"))
    width = max(len(r[0]) for r in rows)
    for name, value, unit, target in rows:
        print(f"{name:<{width}}  {value:>12.4g} {unit:<9} (target {target})")


if __name__ == "__main__":
    main()
