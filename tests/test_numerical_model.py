"""The numerical problem's input checks and construction helpers (finitekey.numerical.model)."""

import math

import numpy as np
import pytest

from finitekey.errors import InputError
from finitekey.numerical.model import (Announcement, Constraint, KeyRateProblem, key_map_blocks, kraus_g,
                                       source_replacement, statistics_constraints)

S = 1 / math.sqrt(2)
Z0, Z1 = np.diag([1.0, 0.0]), np.diag([0.0, 1.0])
XP, XM = np.array([[.5, .5], [.5, .5]]), np.array([[.5, -.5], [-.5, .5]])


def _bb84(**over):
    povm = (Z0 / 2, Z1 / 2, XP / 2, XM / 2)
    kw = dict(dim_a=2, dim_b=2, rho_a=np.eye(2) / 2, povm_a=povm, povm_b=povm,
              announcements=(Announcement((0, 1), (0, 1)),), key_map=(0, 1, -1, -1))
    kw.update(over)
    return KeyRateProblem(**kw)


def test_source_replacement_bb84_reduces_to_a_qubit():
    # Four BB84 states with equal probabilities: rho_A = Gram matrix / 4 has rank 2 (the states span a qubit),
    # and on its support rho_A = 1/2 (textbook: sum_x |phi_x><phi_x| / 4 = 1/2 for BB84).
    sr = source_replacement([[1, 0], [0, 1], [S, S], [S, -S]], [0.25] * 4)
    assert sr.dim_a == 2
    assert np.allclose(sr.rho_a, np.eye(2) / 2)
    assert np.allclose(sum(sr.povm_a), np.eye(2))
    full = source_replacement([[1, 0], [0, 1], [S, S], [S, -S]], [0.25] * 4, reduce=False)
    assert full.dim_a == 4 and np.linalg.matrix_rank(full.rho_a, tol=1e-12) == 2


def test_kraus_factor_reproduces_omega():
    # Facial reduction keeps F^dagger F = Omega (definition, model docstring); here Omega = (1/2 (x) 1/2) has
    # rank 4 and each key value's Omega_k = Z_k/2 (x) 1/2 has rank 2, so the pinched blocks shrink to 2x2.
    p = _bb84()
    (blk,) = key_map_blocks(p)
    assert blk.g.shape == (4, 4) and [z.shape for z in blk.z] == [(2, 4), (2, 4)]
    assert np.allclose(blk.g.conj().T @ blk.g, blk.omega, atol=1e-15)
    for z, ok in zip(blk.z, blk.omega_k):
        assert np.allclose(z.conj().T @ z, ok, atol=1e-15)
    # A Bob announcement of one outcome only makes Omega rank deficient: the factor drops the kernel.
    (blk,) = key_map_blocks(_bb84(announcements=(Announcement((0, 1), (0,)),)))
    assert blk.g.shape == (2, 4)


def test_bad_inputs_name_the_element():
    with pytest.raises(InputError, match=r"povm_b\[1\]"):
        _bb84(povm_b=(Z0 / 2, np.array([[0.5, 0], [0, -0.1]]), XP / 2, XM / 2))
    with pytest.raises(InputError, match="povm_b.*identity"):
        _bb84(povm_b=(Z0 / 2, Z1 / 2, XP / 2, XM / 3))
    with pytest.raises(InputError, match=r"povm_a\[0\].*2x2"):
        _bb84(povm_a=(np.eye(3), Z1 / 2, XP / 2, XM / 2))
    with pytest.raises(InputError, match="rho_a.*smallest eigenvalue"):
        _bb84(rho_a=np.array([[1.2, 0], [0, -0.2]]))
    with pytest.raises(InputError, match=r"key_map\[2\]"):
        _bb84(announcements=(Announcement((0, 2), (0, 1)),))
    with pytest.raises(InputError, match="disjoint"):
        _bb84(announcements=(Announcement((0, 1), (0, 1)), Announcement((1,), (1, 2))))
    with pytest.raises(InputError, match=r"constraint c\.operator.*4x4"):
        _bb84(constraints=(Constraint(np.eye(2), 0, 1, "c"),))
    with pytest.raises(InputError, match=r"states\[1\].*mixed"):
        source_replacement([[1, 0], np.eye(2) / 2], [0.5, 0.5])
    with pytest.raises(InputError, match="probabilities"):
        source_replacement([[1, 0], [0, 1]], [0.5, 0.6])
    with pytest.raises(InputError, match=r"states\[1\].*dimension"):
        source_replacement([[1, 0], [0, 1, 0]], [0.5, 0.5])


def test_statistics_constraints_shape_and_values():
    p = _bb84()
    table = np.full((4, 4), 1 / 16)
    cons = statistics_constraints(p.povm_a, p.povm_b, table, slack=0.01)
    assert len(cons) == 16 and cons[0].lower == pytest.approx(1 / 16 - 0.01)
    with pytest.raises(InputError, match="probabilities"):
        statistics_constraints(p.povm_a, p.povm_b, np.ones((3, 4)))
    assert len(kraus_g(p)) == 1
