"""Speed and tightness of the described (numerical) protocol (a script, not a test): one table from one run.

* time of one certified key length of a qubit BB84 block (target 2 s or less), and of a BB84 block with
  detector-efficiency mismatch (Bob's space with the vacuum: 3 dimensions, 6 outcomes);
* time of a design of the qubit BB84 example and the number of solver calls;
* peak memory of the process (resource.getrusage);
* side by side, the certified numerical key length (collective attacks) and the closed-form BB84 analysis of
  the same data (coherent attacks), as a ratio.

Run: python benchmarks/bench_described.py
"""

from __future__ import annotations

import resource
import time

from finitekey import protocols
from finitekey.protocols.described.analysis import key_length
from finitekey.protocols.described.description import picture_index
from finitekey.protocols.described.design import design, expected_block

EX = "examples/described/"


def timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def main() -> None:
    bb = protocols.load_scenario(EX + "bb84_qubit.toml")
    mm = protocols.load_scenario(EX + "bb84_mismatch.toml")
    rows = []
    key_length(expected_block(bb, 10**8, 0.9, 0.01))          # first call: imports and compiled forms
    for label, sc in (("qubit BB84 (A 2, B 2, 4x4 statistics)", bb), ("mismatch BB84 (A 2, B 3, 4x6)", mm)):
        blk = expected_block(sc, 10**9, 0.9, 0.01)
        res, dt = timed(lambda: key_length(blk))
        rows.append((f"key length, {label}", f"{dt:.2f} s", f"{res.secret_key_length} bits, gap "
                     f"{res.terms['solver_gap']:.2e} bit/round, {res.estimates['solver_iterations']} iterations"))
    d, dt = timed(lambda: design(bb))
    rows.append(("design, qubit BB84 example (1e10 rounds)", f"{dt:.1f} s",
                 f"{d.diagnostics.get('float_evaluations')} float evaluations, rate {d.secret_key_rate_per_signal:.4f}"))
    # side by side with the closed-form BB84 analysis of the same data
    for q, N in ((0.01, 10**8), (0.03, 10**9), (0.05, 10**10)):
        from finitekey.protocols.described.scenario import with_field
        sc = with_field(bb, "statistics.depolarising", 2 * q)
        blk = expected_block(sc, N, 0.9, 0.01)
        num = key_length(blk)
        sig, out, _, _ = picture_index(blk.description)
        xx = [[blk.counts[sig[(1, k)], out[(1, b)]] for b in range(2)] for k in range(2)]
        p = protocols.get("bb84")
        closed = p.key_length(p.parse_block({
            "key_bits": int(blk.key_rounds * 0.81), "test_bits": int(sum(map(sum, xx))),
            "test_errors": int(xx[0][1] + xx[1][0]), "ec_leak_bits": int(blk.ec_leak_bits),
            "eps_sec": blk.eps_sec, "eps_cor": blk.eps_cor}))
        rows.append((f"numerical / closed form, Q = {q}, N = {N:.0e}",
                     f"{num.secret_key_length / max(closed.secret_key_length, 1):.4f}",
                     f"{num.secret_key_length} vs {closed.secret_key_length} bits"))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    rows.append(("peak memory (whole process)", f"{peak:.0f} MB", ""))
    w = max(len(r[0]) for r in rows)
    for r in rows:
        print(f"{r[0]:<{w}}  {r[1]:>10}  {r[2]}")


if __name__ == "__main__":
    main()
