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
