"""Start-up benchmark: whole-process wall time of short commands, beside a bare interpreter.

Run: ``python benchmarks/bench_startup.py [REPEATS]``.  Each command runs REPEATS times (default 7) in a fresh
interpreter, interleaved so that load on the shared machine hits all of them alike; the minimum and the median
are printed, with their ratios to ``python -c pass``, and the CPU time (user + system) of the fastest run,
which load from other processes disturbs less than the wall time.  Not a test: the machine is shared and noisy.

Targets: ``--help`` under 0.3 s; ``keylength`` of one BB84 block under 1 s (whole process).
"""

import os
import resource
import statistics
import subprocess
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
BB84 = os.path.join(ROOT, "examples", "blocks", "bb84_block.json")
DECOY = os.path.join(ROOT, "examples", "blocks", "decoy_block.json")

COMMANDS = [
    ("python -c pass", ["-c", "pass"], None),
    ("import finitekey", ["-c", "import finitekey"], None),
    ("finitekey --help", ["-m", "finitekey", "--help"], 0.3),
    ("finitekey --version", ["-m", "finitekey", "--version"], 0.3),
    ("keylength BB84 block (exact)", ["-m", "finitekey", "keylength", BB84, "--json"], 1.0),
    ("keylength BB84 block (serfling)", ["-m", "finitekey", "keylength", BB84, "--json", "--statistics",
                                         "serfling"], None),
    ("keylength decoy block", ["-m", "finitekey", "keylength", DECOY, "--json"], None),
]


def run_once(args) -> tuple:
    """Wall time and CPU time (user + system, from the child's resource usage) of one run."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    subprocess.run([sys.executable] + args, cwd=ROOT, check=True, stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - t
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def main(repeats: int = 7):
    load_before = os.getloadavg()[0]
    times = {label: [] for label, _, _ in COMMANDS}
    cpu = {label: [] for label, _, _ in COMMANDS}
    for label, args, _ in COMMANDS:  # warm-up: file caches, .pyc files
        run_once(args)
    for _ in range(repeats):
        for label, args, _ in COMMANDS:
            wall, used = run_once(args)
            times[label].append(wall)
            cpu[label].append(used)
    base = min(times["python -c pass"])
    print(f"== start-up benchmark ({repeats} runs each, interleaved; {os.cpu_count()} CPUs) ==")
    print(f"1-minute load average: {load_before:.2f} before, {os.getloadavg()[0]:.2f} after")
    print(f"{'command':34s} {'min':>8s} {'median':>8s} {'min / bare':>11s} {'cpu':>8s}  target (wall)")
    for label, _, target in COMMANDS:
        t = times[label]
        verdict = "" if target is None else f"< {target:g} s: {'met' if min(t) < target else 'NOT met'} (min)"
        print(f"{label:34s} {min(t):7.3f}s {statistics.median(t):7.3f}s {min(t) / base:10.1f}x "
              f"{min(cpu[label]):7.3f}s  {verdict}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 7)
