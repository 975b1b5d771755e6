"""Reference problems with known answers (tests, benchmarks, examples): qubit BB84, six-state, detector mismatch.

Each builder returns a :class:`~finitekey.numerical.model.KeyRateProblem` whose constraints are the full
table of expected statistics of an honest implementation over a depolarising channel, and the probability
that a round is kept, so that ``SolverResult.certified_lower / p_kept`` is in bits per kept round.
"""

from __future__ import annotations

import math

import numpy as np

from .model import Announcement, KeyRateProblem, expected_statistics, statistics_constraints

__all__ = ["bb84_depolarising", "six_state_depolarising", "bb84_mismatch", "bb84_four_dim_bob", "werner"]

_S = 1 / math.sqrt(2)
_Z = (np.diag([1.0, 0.0]), np.diag([0.0, 1.0]))
_X = (np.array([[.5, .5], [.5, .5]]), np.array([[.5, -.5], [-.5, .5]]))
_Y = (np.array([[.5, -.5j], [.5j, .5]]), np.array([[.5, .5j], [-.5j, .5]]))


def werner(q: float) -> np.ndarray:
    """Two-qubit state ``(1 - 2q) |Phi+><Phi+| + 2q 1/4``: error rate ``q`` in every basis (depolarising)."""
    phi = np.array([1.0, 0, 0, 1.0]) * _S
    return (1 - 2 * q) * np.outer(phi, phi) + 2 * q * np.eye(4) / 4


def _problem(bases_a, bases_b, pa, pb, rho, key_bases, dim_b=2):
    povm_a = tuple(p * m for p, b in zip(pa, bases_a) for m in b)
    povm_b = tuple(p * m for p, b in zip(pb, bases_b) for m in b)
    stats = expected_statistics((povm_a, povm_b), rho)
    anns = []
    key = [-1] * len(povm_a)
    for i in key_bases:
        alice = (2 * i, 2 * i + 1)
        key[2 * i], key[2 * i + 1] = 0, 1
        anns.append(Announcement(alice, (2 * i, 2 * i + 1)))
    cons = statistics_constraints(povm_a, povm_b, stats)
    p_kept = sum(stats[2 * i:2 * i + 2, 2 * i:2 * i + 2].sum() for i in key_bases)
    prob = KeyRateProblem(dim_a=2, dim_b=dim_b, rho_a=np.eye(2) / 2, povm_a=povm_a, povm_b=povm_b,
                          announcements=tuple(anns), key_map=tuple(key), constraints=cons)
    return prob, float(p_kept)


def bb84_depolarising(q: float, p_z: float = 0.5):
    """Qubit BB84 (entanglement-based), key from Z, statistics of a depolarising channel with error rate ``q``.

    Returns
    -------
    (KeyRateProblem, float)
        The problem and the probability that a round is kept.  The expected answer per kept round is
        ``H(Z|E) = 1 - h(q)`` (Shor and Preskill 2000), so the rate after error correction is ``1 - 2 h(q)``.
    """
    return _problem((_Z, _X), (_Z, _X), (p_z, 1 - p_z), (p_z, 1 - p_z), werner(q), key_bases=(0,))


def six_state_depolarising(q: float):
    """Six-state protocol (three bases, key from Z), depolarising channel with error rate ``q`` in every basis.

    Returns
    -------
    (KeyRateProblem, float)
        Expected ``H(Z|E) = 1 - H(lambda) + h(q)`` per kept round for the Bell-diagonal weights
        ``lambda = (1 - 3q/2, q/2, q/2, q/2)``, i.e. the one-way rate ``1 - H(lambda)`` after error correction.
    """
    third = 1 / 3
    return _problem((_Z, _X, _Y), (_Z, _X, _Y), (third,) * 3, (third,) * 3, werner(q), key_bases=(0,))


def bb84_mismatch(q: float, eta1: float, p_z: float = 0.5):
    """BB84 with detector-efficiency mismatch: Bob's detector "1" has efficiency ``eta1``, detector "0" has 1.

    Bob's system is a qubit plus a vacuum/no-click flag (dimension 3); the honest state is the depolarised
    Bell state, and Bob's POVM has a no-click element.  Key from Z, kept when Bob's Z measurement clicks.

    Returns
    -------
    (KeyRateProblem, float)
    """
    pz, px = p_z, 1 - p_z
    e = (1.0, float(eta1))
    emb = np.zeros((3, 2))
    emb[0, 0] = emb[1, 1] = 1.0

    def up(m):
        return emb @ m @ emb.T

    povm_b = [pz * e[0] * up(_Z[0]), pz * e[1] * up(_Z[1]), px * e[0] * up(_X[0]), px * e[1] * up(_X[1])]
    povm_b.append(np.eye(3) - sum(povm_b))
    povm_a = (pz * _Z[0], pz * _Z[1], px * _X[0], px * _X[1])
    rho2 = werner(q)
    big = np.kron(np.eye(2), emb)
    rho = big @ rho2 @ big.T
    stats = expected_statistics((povm_a, tuple(povm_b)), rho)
    cons = statistics_constraints(povm_a, povm_b, stats)
    prob = KeyRateProblem(dim_a=2, dim_b=3, rho_a=np.eye(2) / 2, povm_a=povm_a, povm_b=tuple(povm_b),
                          announcements=(Announcement((0, 1), (0, 1)),), key_map=(0, 1, -1, -1),
                          constraints=cons)
    return prob, float(stats[0:2, 0:2].sum())


def bb84_four_dim_bob(q: float, p_z: float = 0.5, double_click: float = 0.01):
    """Four-state BB84 with a 4x4 Bob space: qubit, vacuum (no click) and a double-click flag.

    The honest state sends the depolarised qubit with probability ``1 - double_click`` and the double-click
    flag otherwise; Bob's double clicks are an outcome of their own (not kept).

    Returns
    -------
    (KeyRateProblem, float)
    """
    pz, px = p_z, 1 - p_z
    emb = np.zeros((4, 2))
    emb[0, 0] = emb[1, 1] = 1.0

    def up(m):
        return emb @ m @ emb.T

    flag = np.diag([0, 0, 0, 1.0])
    vac = np.diag([0, 0, 1.0, 0])
    povm_b = (pz * up(_Z[0]), pz * up(_Z[1]), px * up(_X[0]), px * up(_X[1]), vac, flag)
    povm_a = (pz * _Z[0], pz * _Z[1], px * _X[0], px * _X[1])
    big = np.kron(np.eye(2), emb)
    rho = (1 - double_click) * big @ werner(q) @ big.T + double_click * np.kron(np.eye(2) / 2, flag)
    stats = expected_statistics((povm_a, povm_b), rho)
    cons = statistics_constraints(povm_a, povm_b, stats)
    prob = KeyRateProblem(dim_a=2, dim_b=4, rho_a=np.eye(2) / 2, povm_a=povm_a, povm_b=povm_b,
                          announcements=(Announcement((0, 1), (0, 1)),), key_map=(0, 1, -1, -1),
                          constraints=cons)
    return prob, float(stats[0:2, 0:2].sum())
