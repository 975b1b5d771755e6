"""Speed, memory and tightness of the numerical key-rate solver (a script, not a test): one table from one run.

* one qubit BB84 point (target <= 2 s), both back ends side by side, first call (imports, compilation)
  reported separately from a warm call;
* a four-state point with a 4x4 Bob space (qubit, vacuum, double-click flag);
* BB84 with interval constraints (the minimum on a face of the feasible set, as after finite-size relaxation);
* wall time: minimum of three solves; memory peak of one more solve (tracemalloc: Python allocations, numpy included; not the solvers' C heaps) and the
  process's maximum resident set size;
* certified bound per sifted bit against the closed form 1 - h(Q) (Shor and Preskill 2000), and the key rate
  certified - h(Q) against 1 - 2h(Q).

Run: python benchmarks/bench_numerical.py
"""

from __future__ import annotations

import dataclasses
import importlib.util
import math
import resource
import time
import tracemalloc

from finitekey.cautions import CAUTION
from finitekey.numerical import model
from finitekey.numerical.reference import bb84_depolarising, bb84_four_dim_bob
from finitekey.numerical.solver import solve


def h2(q: float) -> float:
    return -q * math.log2(q) - (1 - q) * math.log2(1 - q)


def timed(problem, backend, reps: int = 3):
    """Minimum wall time of ``reps`` solves (no tracing), then one traced solve for the Python memory peak."""
    best = math.inf
    for _ in range(reps):
        t = time.perf_counter()
        r = solve(problem, backend=backend)
        best = min(best, time.perf_counter() - t)
    tracemalloc.start()
    solve(problem, backend=backend)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return r, best, peak / 2**20


def main() -> None:
    backends = ["cvxpy"] + (["qics"] if importlib.util.find_spec("qics") else [])
    rows = []
    for backend in backends:
        p, pk = bb84_depolarising(0.05)
        r, s, mem = timed(p, backend, reps=1)
        rows.append((backend, "BB84 qubit Q=5%, first call", s, r, pk, 0.05, mem))
        for q in (0.01, 0.05, 0.10):
            p, pk = bb84_depolarising(q)
            r, s, mem = timed(p, backend)
            rows.append((backend, f"BB84 qubit Q={q:.0%}", s, r, pk, q, mem))
        p, pk = bb84_four_dim_bob(0.03)
        r, s, mem = timed(p, backend)
        rows.append((backend, "BB84 4x4 Bob (vac, double click) Q=3%", s, r, pk, 0.03, mem))
        p, pk = bb84_depolarising(0.05)
        wide = tuple(model.Constraint(c.operator, c.lower - 0.002, c.upper + 0.002, c.label) for c in p.constraints)
        r, s, mem = timed(dataclasses.replace(p, constraints=wide), backend)
        rows.append((backend, "BB84 qubit Q=5%, intervals +-0.002", s, r, pk, None, mem))
    print(f"{'back end':8} {'problem':40} {'time s':>7} {'iter':>4} {'certified/bit':>14} {'1-h(Q)':>10} "
          f"{'cert-(1-h)':>11} {'gap':>9} {'peak MiB':>8}")
    for backend, name, s, r, pk, q, mem in rows:
        ref = 1 - h2(q) if q is not None else float("nan")
        print(f"{backend:8} {name:40} {s:7.3f} {r.iterations:4d} {r.certified_lower / pk:14.10f} {ref:10.7f} "
              f"{r.certified_lower / pk - ref:11.2e} {r.gap / pk:9.1e} {mem:8.1f}")
    print(f"key rate per sifted bit, certified - h(Q) vs 1 - 2h(Q) (Shor-Preskill 2000):")
    for backend, name, s, r, pk, q, mem in rows:
        if q is not None and "first" not in name:
            print(f"  {backend:6} Q={q:.2f}: {r.certified_lower / pk - h2(q):.8f}  vs  {1 - 2 * h2(q):.8f}")
    print(f"max resident set size of the process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")
    print(CAUTION)


if __name__ == "__main__":
    main()
