"""MDI-BB84 benchmark: design time against decoy-BB84 on the same link, a 30-distance sweep, reach.

Run: ``python benchmarks/bench_mdi.py``.  Prints figures measured side by side in one run; not a test (the
machine is shared and noisy: read the ratios, not the seconds).

Benchmark link (common practice, no source): symmetric arms of 0.2 dB/km fibre to the relay, detector
efficiency 60% at the relay, dark-count probability 1e-7 per detector per pulse, misalignment 1%, polarisation
encoding, f = 1.16, eps_sec = 1e-10, eps_cor = 1e-15, weakest intensity 2e-4, statistics exact.  The decoy-BB84
comparison uses the same fibre over the whole Alice-Bob length with the same detector at Bob and the same
number of pulses.
"""

import statistics
import time

from finitekey import protocols
from finitekey.protocols import decoy_bb84 as DB
from finitekey.protocols.mdi_bb84 import scenario as S

MDI = protocols.get("mdi-bb84")
DECOY = protocols.get("decoy-bb84")


def mdi(total_km, pulses):
    return S.default_scenario().with_pulses(pulses).at_total_distance(total_km)


def decoy(total_km, pulses):
    s = DB.default_scenario()
    for field, value in (("link.distance_km", total_km), ("detector.efficiency", 0.6),
                         ("detector.dark_count_probability", 1e-7), ("detector.misalignment_error", 0.01),
                         ("block.pulses", pulses)):
        s = DB.with_field(s, field, value)
    return s


def timed(fn, repeat=3):
    times, out = [], None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def main():
    MDI.design(mdi(50.0, 1e12))        # warm-up: imports, compiled bounds
    DECOY.design(decoy(50.0, 1e12))
    print("design time per point, median of 3 (MDI / decoy-BB84 on the same Alice-Bob fibre and detector):")
    for total in (20.0, 80.0, 140.0):
        tm, rm = timed(lambda: MDI.design(mdi(total, 1e12)))
        td, rd = timed(lambda: DECOY.design(decoy(total, 1e12)))
        print(f"  {total:5.0f} km, 1e12 pulses: MDI {tm * 1e3:7.1f} ms, decoy {td * 1e3:6.1f} ms, ratio "
              f"{tm / td:5.1f}; key per pulse MDI {rm.secret_key_rate_per_signal:.3g}, decoy "
              f"{rd.secret_key_rate_per_signal:.3g}")
    t = time.perf_counter()
    keys = [MDI.design(mdi(L, 1e12)).secret_key_rate_per_signal for L in [5.0 * i for i in range(30)]]
    sweep = time.perf_counter() - t
    print(f"30-distance sweep (0 to 145 km, 1e12 pulses, one process): {sweep:.1f} s "
          f"({sum(k > 0 for k in keys)} points with a key)")
    for pulses in (1e10, 1e12, 1e14):
        t = time.perf_counter()
        r = MDI.reach(mdi(50.0, pulses))
        km = "no key" if r.reach_km is None else f"{r.reach_km:.1f} km"
        print(f"MDI reach (Alice-Bob, relay in the middle) at {pulses:.0e} pulse pairs: {km} "
              f"({time.perf_counter() - t:.1f} s)")


if __name__ == "__main__":
    main()
