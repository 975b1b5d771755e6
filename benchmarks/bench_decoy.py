"""Decoy-state BB84 benchmark: design speed vs differential evolution, sweep time, tightness and reach.

Run: ``python benchmarks/bench_decoy.py``.  Prints figures measured side by side in one run; not a test (the
machine is shared and noisy).  The optimiser's linear algebra is tiny, and on a shared 2-core machine
multi-threaded BLAS spin-waits made single L-BFGS-B steps take milliseconds: the protocol's ``design``,
``blocksize`` and ``reach`` therefore run with one BLAS thread (finitekey/_threads.py).  The module-level
functions timed below get the same limit from this script; the first lines compare the public call with the
module function left at the default BLAS threads.

Link ("tightness link"): 0.2 dB/km, detector efficiency 10%, dark-count probability 6e-7, misalignment
0.5%, no afterpulsing, f = 1.16, eps_sec = 1e-10, eps_cor = 1e-15, weakest intensity 2e-4 (common practice,
no source).
"""

import statistics
import time
import warnings

import numpy as np
from scipy import optimize
from threadpoolctl import threadpool_info

from finitekey import protocols
from finitekey._threads import one_blas_thread
from finitekey.protocols.decoy_bb84 import design as DD
from finitekey.protocols import decoy_bb84 as D


def scenario(L, N):
    s = D.default_scenario()
    s = D.with_field(s, "link.distance_km", L)
    return D.with_field(s, "block.pulses", N)


def km(distance):
    return "no key" if distance is None else f"{distance:.1f} km"


def timed(fn, repeat):
    times, out = [], None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def api_versus_default_threads(sc):
    """The public call (one BLAS thread inside) against the module function at the default BLAS threads."""
    proto = protocols.get(D.PROTOCOL_NAME)
    threads = sorted({i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas"})
    for stat in ("hoeffding", "exact"):
        t_api, _ = timed(lambda: proto.design(sc, stat), 7)
        t_free, _ = timed(lambda: DD.design(sc, stat), 7)
        print(f"[{stat}] design from Python: protocols.get(...).design {t_api * 1e3:.1f} ms; the same search at the "
              f"default BLAS threads {threads}: {t_free * 1e3:.1f} ms; ratio {t_free / t_api:.1f}x")


def engine_lp_one_versus_two_senders():
    """The decoy engine's certified LP (finitekey.decoy.bound, method="lp"): one sender (three intensities,
    31 photon numbers) against two senders (three intensities each, 21 x 21 photon-number tags), same kind of
    data (expected counts of a simple yield model, intervals +-0.1%), median of 7 after a warm-up."""
    from finitekey import decoy

    def data(senders, yield_of):
        import itertools
        import math
        lo, hi = [], []
        for k in decoy.settings(senders):
            e = 0.0
            for n in itertools.product(range(25), repeat=len(senders)):
                w = 1e10
                for s, ks, ns in zip(senders, k, n):
                    m = s.intensities[ks]
                    w *= s.probabilities[ks] * math.exp(-m) * m ** ns / math.factorial(ns)
                e += w * yield_of(n)
            lo.append(e * 0.999)
            hi.append(e * 1.001)
        return lo, hi

    one = [decoy.Sender((0.5, 0.1, 2e-4), (0.7, 0.2, 0.1))]
    two = [decoy.Sender((0.0, 0.1, 0.4), (0.2, 0.3, 0.5))] * 2
    lo1, hi1 = data(one, lambda n: 1 - 0.99999 * 0.95 ** n[0])
    lo2, hi2 = data(two, lambda n: (1 - 0.95 ** n[0]) * (1 - 0.95 ** n[1]) + 1e-6)
    decoy.bound(one, lo1, hi1, (1,), "lower", method="lp")   # warm-up: cvxpy import, cached structure
    decoy.bound(two, lo2, hi2, (1, 1), "lower", method="lp")
    t1, _ = timed(lambda: decoy.bound(one, lo1, hi1, (1,), "lower", method="lp"), 7)
    t2, _ = timed(lambda: decoy.bound(two, lo2, hi2, (1, 1), "lower", method="lp"), 7)
    f1, _ = timed(lambda: decoy.bound_float(one, lo1, hi1, (1,), "lower", method="lp"), 7)
    f2, _ = timed(lambda: decoy.bound_float(two, lo2, hi2, (1, 1), "lower", method="lp"), 7)
    print(f"decoy engine LP, certified: one sender {t1 * 1e3:.1f} ms, two senders {t2 * 1e3:.1f} ms "
          f"(ratio {t2 / t1:.1f}x); float twin: {f1 * 1e3:.1f} ms, {f2 * 1e3:.1f} ms (ratio {f2 / f1:.1f}x)")


def main():
    warnings.simplefilter("ignore", UserWarning)  # DE notes that vectorized=True implies deferred updating
    print("== decoy-state BB84 benchmark (one run) ==")
    engine_lp_one_versus_two_senders()
    sc = scenario(100.0, 1e10)
    DD.design(sc)  # warm-up (imports, caches)
    api_versus_default_threads(sc)
    with one_blas_thread():
        module_level_figures(sc)


def module_level_figures(sc):
    """Speed against differential evolution, sweep time, tightness and reach (run with one BLAS thread)."""
    for stat in ("exact", "hoeffding"):
        prob = DD.objective_problem(sc, stat)
        t_opt, res = timed(lambda: DD.design(sc, stat), 7)
        theta, val = DD.optimise(prob)

        def de():
            return optimize.differential_evolution(lambda x: -prob.key_length_float(x) / prob.scale(),
                                                   prob.bounds(), vectorized=True, seed=1, tol=1e-10,
                                                   maxiter=2000, popsize=20, polish=False)

        t_de, r_de = timed(de, 1)
        de_val = -r_de.fun * prob.scale()
        print(f"[{stat}] design, {prob.dim} free parameters: median {t_opt * 1e3:.1f} ms "
              f"(target <= 100 ms); certified key {res.expected.secret_key_length} bits")
        print(f"[{stat}] differential_evolution on the same objective: {t_de * 1e3:.0f} ms, "
              f"{r_de.nfev} evaluations; speed ratio {t_de / t_opt:.0f}x (target >= 50x); "
              f"objective ours - DE = {val - de_val:+.1f} bits of {de_val:.0f} (>= 0: equal or better)")

    dists = np.linspace(0.0, 150.0, 30)
    t0 = time.perf_counter()
    rates = [DD.design(scenario(L, 1e10)).secret_key_rate_per_signal for L in dists]
    t_sweep = time.perf_counter() - t0
    print(f"30-distance sweep (0-150 km, 1e10 pulses, exact): {t_sweep:.2f} s (target <= 5 s); "
          f"rate at 0 km {rates[0]:.3e}, at 150 km {rates[-1]:.3e} per pulse")

    for L, N in ((100.0, 1e10), (50.0, 1e8)):
        a = DD.design(scenario(L, N), "exact").secret_key_rate_per_signal
        b = DD.design(scenario(L, N), "hoeffding").secret_key_rate_per_signal
        ratio = a / b if b > 0 else float("inf")
        print(f"tightness at {L:g} km, {N:.0e} pulses: exact {a:.4e}, hoeffding {b:.4e}, ratio {ratio:.3f} "
              "(target >= 1.5)")

    for N in (1e6, 1e8, 1e10):
        t = time.perf_counter()
        ra = DD.reach(scenario(0.0, N), "exact").reach_km
        rb = DD.reach(scenario(0.0, N), "hoeffding").reach_km
        print(f"reach at {N:.0e} pulses: exact {km(ra)}, hoeffding {km(rb)} "
              f"({time.perf_counter() - t:.1f} s for both)")


if __name__ == "__main__":
    main()
