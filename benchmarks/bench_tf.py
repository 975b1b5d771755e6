"""Twin-field (tf-sns) benchmark: design time against decoy-state BB84, a 30-distance sweep, reach, and where
the certified key beats the repeaterless bound.

Run: ``python benchmarks/bench_tf.py``.  Prints figures measured side by side in one run; not a test (the
machine is shared and noisy).

Benchmark link: ``examples/coastal_relay_tf.toml`` (fictional): 0.165 dB/km, relay at 52% of the length,
1 dB extra loss per arm, detector efficiency 60%, dark counts 1e-8 per detector per window, misalignment 3%,
residual phase drift 0.12 rad, accepted slices of pi/8, f = 1.10, eps_sec = 1e-10, eps_cor = 1e-15.
The decoy-bb84 reference point is its built-in scenario (50 km, 1e10 pulses).
"""

import pathlib
import statistics
import time
import tomllib

from finitekey import protocols
from finitekey.protocols.tf_sns import scenario as S

ROOT = pathlib.Path(__file__).resolve().parents[1]


def timed(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def beats_from(tf, sc, lo=100.0, step=25.0, tol=1.0):
    """Smallest distance (to ``tol``) from which the certified design rate exceeds -log2(1 - eta) of the whole
    fibre: a scan in ``step`` km up to the reach, then bisection below the first distance above the bound."""
    def above(L):
        d = tf.design(sc.at_distance(L))
        return d.status.key and d.secret_key_rate_per_signal > S.repeaterless_bound_total(sc.link.at_distance(L))
    r = tf.reach(sc)
    top = r.reach_km if r.reach_km is not None else 1000.0
    prev, L = None, lo
    while L <= top:
        if above(L):
            break
        prev, L = L, L + step
    else:
        return None
    if prev is None:
        return L
    while L - prev > tol:
        mid = 0.5 * (prev + L)
        if above(mid):
            L = mid
        else:
            prev = mid
    return L


def main():
    tf = protocols.get("tf-sns")
    decoy = protocols.get("decoy-bb84")
    data = tomllib.loads((ROOT / "examples" / "coastal_relay_tf.toml").read_text())
    sc = tf.parse_scenario(data)
    dsc = decoy.default_scenario()
    decoy.design(dsc)
    tf.design(sc)   # warm-up (imports, compiled bounds)
    t_decoy, _ = timed(lambda: decoy.design(dsc), 5)
    t_tf, d = timed(lambda: tf.design(sc), 5)
    print(f"design per point: decoy-bb84 {t_decoy * 1e3:.0f} ms, tf-sns {t_tf * 1e3:.0f} ms "
          f"(ratio {t_tf / t_decoy:.1f}x); tf-sns key at 400 km, 1e13 windows: "
          f"{d.expected.secret_key_length} bits ({d.secret_key_rate_per_signal:.3g} bit/window)")
    distances = [50.0 + i * 550.0 / 29 for i in range(30)]
    t0, c0 = time.perf_counter(), time.process_time()
    rows = [tf.design(sc.at_distance(L).with_windows(1e14)) for L in distances]
    t_sweep, c_sweep = time.perf_counter() - t0, time.process_time() - c0
    print(f"30-distance sweep (50-600 km, 1e14 windows, one process): {t_sweep:.1f} s wall, {c_sweep:.1f} s CPU; "
          f"{sum(r.status.key for r in rows)} of 30 points with a key")
    import subprocess
    import sys
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "finitekey.cli", "table", str(ROOT / "examples" / "coastal_relay_tf.toml"),
                    "--vary", "link.distance_km=30:610:20", "--vary", "block.windows=1e14", "--jobs", "2", "--quiet",
                    "--format", "csv"], check=True, capture_output=True, cwd=ROOT)
    print(f"the same sweep as 'finitekey table --jobs 2' (2 worker processes, start-up included): "
          f"{time.perf_counter() - t0:.1f} s wall")
    for n in (1e12, 1e14):
        t0 = time.perf_counter()
        r = tf.reach(sc.with_windows(n))
        km = "none" if r.reach_km is None else f"{r.reach_km:.0f} km"
        print(f"reach at {n:.0e} windows: {km} (search {time.perf_counter() - t0:.1f} s)")
    for n in (1e12, 1e14):
        x = beats_from(tf, sc.with_windows(n))
        print(f"certified key above the repeaterless bound -log2(1 - eta) from {x:.0f} km at {n:.0e} windows"
              if x is not None else f"never above the repeaterless bound at {n:.0e} windows")
    asym = [(L, S.optimal_asymptotic_rate(sc.link.at_distance(L), sc.ec_efficiency)[0]) for L in (200, 400, 600)]
    print("asymptotic rate / repeaterless bound: " + ", ".join(
        f"{L} km {a / S.repeaterless_bound_total(sc.link.at_distance(L)):.3g}" for L, a in asym))


if __name__ == "__main__":
    main()
