"""Robustness of the numerical solver on problems that are the same physics written in another basis.

A unitary change of Bob's and Alice's bases does not change the key rate, but it makes every matrix
irrational in floating point, so the redundant equalities of a full statistics table (each row sums to
Alice's fixed marginal) become very slightly inconsistent after rounding.  Clarabel gave up on such
problems with a raw ``cvxpy.error.SolverError`` (a traceback through the CLI); the solver now falls back to
SCS, and the certified bound must still lie below the Shor-Preskill value.
"""

import math

import mpmath
import numpy as np

from finitekey.numerical import reference as R
from finitekey.numerical.model import KeyRateProblem, expected_statistics, statistics_constraints
from finitekey.numerical.solver import solve


def _unitary(rng):
    q, _ = np.linalg.qr(rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2)))
    return q


def rotated_bb84(q, seed):
    """Qubit BB84 over a depolarising channel, with Alice's and Bob's measurement bases rotated by random unitaries."""
    rng = np.random.default_rng(seed)
    u, v = _unitary(rng), _unitary(rng)
    base, _ = R.bb84_depolarising(q)
    pa = tuple(v @ m @ v.conj().T for m in base.povm_a)
    pb = tuple(u @ m @ u.conj().T for m in base.povm_b)
    w = np.kron(v, u)
    rho = w @ R.werner(q) @ w.conj().T
    stats = np.clip(expected_statistics((pa, pb), rho), 0, 1)
    prob = KeyRateProblem(dim_a=2, dim_b=2, rho_a=np.eye(2) / 2, povm_a=pa, povm_b=pb,
                          announcements=base.announcements, key_map=base.key_map,
                          constraints=statistics_constraints(pa, pb, stats))
    return prob, float(stats[0:2, 0:2].sum())


def _shor_preskill(q):
    """1 - h(q) bits per sifted bit (Shor and Preskill, PRL 85, 441 (2000)), with mpmath at 30 digits."""
    with mpmath.workdps(30):
        qq = mpmath.mpf(q)
        return float(1 + qq * mpmath.log(qq, 2) + (1 - qq) * mpmath.log(1 - qq, 2))


def test_rotated_bb84_is_solved_and_certified_below_shor_preskill():
    # seed 0 made Clarabel raise SolverError at every Q tried (0, 1e-8, 2 %, 11 %) before the fallback
    q = 0.02
    prob, p_kept = rotated_bb84(q, seed=0)
    res = solve(prob)
    truth = _shor_preskill(q)
    assert res.certified_lower / p_kept <= truth
    assert res.certified_lower / p_kept > truth - 1e-4
    assert math.isfinite(res.primal)


def test_qics_back_end_with_a_key_value_unused_by_an_announcement():
    # Key values 0 and 2 (1 unused): a relabelling of BB84, so the value is Shor-Preskill's. The qics cone
    # failed with a raw ValueError (reshape of an empty array) on the empty block of the key register.
    import pytest

    pytest.importorskip("qics")
    from dataclasses import replace

    q = 0.05
    prob, p_kept = R.bb84_depolarising(q)
    relabelled = replace(prob, key_map=tuple(2 * k if k >= 0 else k for k in prob.key_map))
    assert relabelled.n_key == 3
    res = solve(relabelled, backend="qics")
    truth = _shor_preskill(q)
    assert res.certified_lower / p_kept <= truth
    assert res.certified_lower / p_kept > truth - 1e-4


def test_qics_failure_is_one_computation_error():
    # A complex problem (random POVMs, seed 42 of the review's generator) on which qics's key-rate cone raises
    # a numpy casting error internally; the API must raise finitekey's ComputationError (one line), and the
    # default back end must still certify a bound below the honest state's value.
    import pytest

    pytest.importorskip("qics")
    from finitekey.errors import ComputationError
    from finitekey.numerical.model import Announcement
    from finitekey.numerical.objective import LN2, Objective
    from finitekey.numerical.model import key_map_blocks

    rng = np.random.default_rng(42)
    da, db = int(rng.integers(2, 4)), int(rng.integers(2, 4))
    cplx = bool(rng.integers(0, 2))

    def psd(d, rank):
        a = rng.normal(size=(d, rank)) + (1j * rng.normal(size=(d, rank)) if cplx else 0)
        return a @ a.conj().T

    def povm(d, n):
        ms = [psd(d, int(rng.integers(1, d + 1))) for _ in range(n)]
        w, u = np.linalg.eigh(sum(ms))
        si = (u * w ** -0.5) @ u.conj().T
        ms = [(si @ m @ si + (si @ m @ si).conj().T) / 2 for m in ms]
        ms[-1] = np.eye(d) - sum(ms[:-1])
        return [(m + m.conj().T) / 2 for m in ms]

    pa, pb = povm(da, int(rng.integers(2, 5))), povm(db, int(rng.integers(2, 5)))
    rho = psd(da * db, int(rng.integers(1, da * db + 1)))
    rho /= np.trace(rho).real
    rho_a = np.trace(rho.reshape(da, db, da, db), axis1=1, axis2=3)
    key = [int(rng.integers(-1, 3)) for _ in pa]
    kept = tuple(x for x in range(len(pa)) if key[x] >= 0)
    stats = expected_statistics((pa, pb), rho)
    slack = float(rng.choice([0, 0, 1e-3, 1e-2]))
    prob = KeyRateProblem(dim_a=da, dim_b=db, rho_a=rho_a, povm_a=tuple(pa), povm_b=tuple(pb),
                          announcements=(Announcement(kept, tuple(range(len(pb) - 1))),), key_map=tuple(key),
                          constraints=statistics_constraints(pa, pb, stats, slack=slack))
    assert not prob.is_real
    try:
        solve(prob, backend="qics")
    except ComputationError as exc:
        assert "\n" not in str(exc)
    res = solve(prob)
    honest = Objective(key_map_blocks(prob)).value(rho) / LN2
    assert res.certified_lower <= honest
