"""Sweep timings: a 30 x 3 grid (distance x block size) on 2 local processes vs 1, and the Dask overhead.

Run from the repository root::

    python benchmarks/bench_sweep.py            # decoy-bb84, 30 distances x 3 block sizes
    python benchmarks/bench_sweep.py --quick    # 10 x 3, for a smoke run

Figures are measured side by side in one run and printed as ratios; the machines are shared, so each
configuration runs ``--repeat`` times and the fastest run is reported, with the CPU time spent (this process
plus its worker processes): equal CPU with a longer wall time means the workers waited for a core.  The Dask
line uses a LocalCluster on 127.0.0.1 with 2 workers; its overhead is its time minus the 2-process time
(cluster start and shutdown included), and is skipped when dask is not installed.
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
from pathlib import Path

SCENARIO = """
[protocol]
name = "decoy-bb84"
[link]
distance_km = 50.0
fiber_loss_db_per_km = 0.2
[detector]
efficiency = 0.2
dark_count_probability = 1e-7
misalignment_error = 0.01
[source]
repetition_rate_hz = 1e9
[block]
pulses = 1e10
[security]
eps_sec = 1e-10
eps_cor = 1e-15
[reconciliation]
efficiency = 1.16
"""


def _cpu() -> float:
    """CPU seconds of this process plus its finished children (pool and cluster workers)."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10 x 3 grid instead of 30 x 3")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each configuration; the fastest is reported")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    from finitekey.report.sweep import load_scenario, run_sweep

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.toml"
        path.write_text(SCENARIO)
        loaded = load_scenario(path)
        n = 10 if args.quick else 30
        step = 150 // n if args.quick else 5
        vary = [f"link.distance_km=0:{step * (n - 1)}:{step}", "block.pulses=1e9,1e10,1e11"]
        points = n * 3
        print(f"grid: {n} distances x 3 block sizes = {points} design points (decoy-bb84)")

        def timed(label, **kw):
            times, cpus = [], []
            for _ in range(max(1, args.repeat)):
                c0 = _cpu()
                t0 = time.perf_counter()
                table = run_sweep(loaded, vary, progress=False, **kw)
                times.append(time.perf_counter() - t0)
                cpus.append(_cpu() - c0)
            dt = min(times)
            print(f"{label:<30} wall {dt:7.2f} s  {dt / points * 1e3:7.1f} ms/point  CPU {min(cpus):7.2f} s  "
                  f"(fastest of {len(times)}; slowest {max(times):.2f} s)")
            return dt, table

        t1, ref = timed("1 process", jobs=1)
        t2, two = timed("2 local processes", jobs=2)
        assert two.rows == ref.rows, "2-process sweep differs from the serial sweep"
        print(f"speed-up 2 processes / 1 process:  {t1 / t2:.2f}x")
        try:
            import distributed  # noqa: F401
        except ImportError:
            print("dask.distributed not installed: Dask overhead not measured (pip install 'finitekey[cluster]')")
            return 0
        td, dask = timed("Dask LocalCluster, 2 workers", jobs=2, cluster="local")
        assert dask.rows == ref.rows, "Dask sweep differs from the serial sweep"
        print(f"Dask overhead vs 2 local processes: {td - t2:+.2f} s ({td / t2:.2f}x)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
