"""The asymptotic numerical key rate against closed forms (finitekey.numerical.solver, .certificate).

Sources: Shor and Preskill, PRL 85, 441 (2000) for BB84 (H(Z|E) = 1 - h(Q) per sifted bit, rate 1 - 2h(Q));
Lo, QIC 1, 81 (2001) for the six-state one-way threshold near 12.6% (from memory); the six-state value
1 - H(lambda) + h(Q) for Bell-diagonal weights lambda = (1 - 3Q/2, Q/2, Q/2, Q/2) is the textbook formula for
a depolarised Bell state (from memory).
"""

import importlib.util
import math

import numpy as np
import pytest

from finitekey.errors import InputError
from finitekey.numerical import model
from finitekey.numerical.certificate import certify, lambda_min_lower, _acb_mat
from finitekey.numerical.objective import Objective
from finitekey.numerical.reference import bb84_depolarising, bb84_four_dim_bob, bb84_mismatch, six_state_depolarising
from finitekey.numerical.solver import solve

HAS_QICS = importlib.util.find_spec("qics") is not None
BACKENDS = ["cvxpy", pytest.param("qics", marks=pytest.mark.skipif(not HAS_QICS, reason="qics not installed "
                                                                    "(optional extra finitekey[numerical])"))]


def h2(q):
    return -q * math.log2(q) - (1 - q) * math.log2(1 - q)


def entropy(ps):
    return -sum(p * math.log2(p) for p in ps if p > 0)


@pytest.mark.parametrize("backend", BACKENDS)
@pytest.mark.parametrize("q", [0.01, 0.05, 0.11])
def test_bb84_matches_shor_preskill(backend, q):
    # Shor-Preskill 2000: H(Z|E) = 1 - h(Q) per sifted bit, so the key rate is 1 - 2h(Q).
    prob, p_kept = bb84_depolarising(q)
    r = solve(prob, backend=backend)
    exact = 1 - h2(q)
    assert r.certified_lower <= r.primal
    assert r.certified_lower / p_kept <= exact                   # never above the analytic value
    assert abs(r.primal / p_kept - exact) < 1e-4
    assert abs(r.certified_lower / p_kept - exact) < 1e-4
    assert r.certified_lower / p_kept - h2(q) == pytest.approx(1 - 2 * h2(q), abs=1e-4)
    assert r.gap < 1e-6 and r.status == "optimal"


def test_six_state_value_and_threshold():
    # Six-state, depolarising channel: H(Z|E) = 1 - H(lambda) + h(Q) (from memory); one-way rate 1 - H(lambda)
    # vanishes at Q near 12.6% (Lo 2001, value from memory).
    for q in (0.05, 0.10):
        prob, p_kept = six_state_depolarising(q)
        r = solve(prob)
        lam = (1 - 1.5 * q, q / 2, q / 2, q / 2)
        exact = 1 - entropy(lam) + h2(q)
        assert r.certified_lower / p_kept <= exact
        assert abs(r.certified_lower / p_kept - exact) < 1e-4
    rates = {}
    for q in (0.125, 0.128):
        prob, p_kept = six_state_depolarising(q)
        rates[q] = solve(prob).certified_lower / p_kept - h2(q)
    assert rates[0.125] > 0 > rates[0.128]
    # and six-state beats BB84 at the same error rate (BB84 threshold 11.0%)
    prob, p_kept = bb84_depolarising(0.125)
    assert solve(prob).primal / p_kept - h2(0.125) < 0 < rates[0.125]


def test_detector_mismatch_costs_key_and_more_with_more_mismatch():
    # Efficiency mismatch (detector 1 at eta, detector 0 at 1): less key per round than matched detectors
    # (eta = 1), and the loss grows as eta falls.  Rate per round = H(Z|E) - p_kept h(e_Z).
    q = 0.03
    rates = []
    for eta in (1.0, 0.9, 0.7, 0.5):
        prob, p_kept = bb84_mismatch(q, eta)
        r = solve(prob)
        stats = model.expected_statistics(prob, _honest_mismatch_state(q))
        e_z = (stats[0, 1] + stats[1, 0]) / stats[0:2, 0:2].sum()
        rates.append(r.certified_lower - p_kept * h2(e_z))
        # per kept round too: the mismatch lowers H(Z|E) below 1 - h(q)
        assert r.certified_lower / p_kept <= 1 - h2(q) + 1e-12
    assert all(a > b for a, b in zip(rates, rates[1:]))


def _honest_mismatch_state(q):
    from finitekey.numerical.reference import werner
    emb = np.zeros((3, 2))
    emb[0, 0] = emb[1, 1] = 1.0
    big = np.kron(np.eye(2), emb)
    return big @ werner(q) @ big.T


def test_four_dim_bob_is_facially_reduced_and_matches():
    # Bob's vacuum and double-click flag make G(rho) rank deficient: the factors drop them (facial reduction),
    # and the kept rounds see a depolarised qubit, so H(Z|E) = 1 - h(q) per kept round (Shor-Preskill 2000).
    prob, p_kept = bb84_four_dim_bob(0.03)
    (blk,) = model.key_map_blocks(prob)
    assert blk.g.shape == (4, prob.dim)          # rank 4 of 8
    r = solve(prob)
    assert r.certified_lower / p_kept <= 1 - h2(0.03)
    assert abs(r.certified_lower / p_kept - (1 - h2(0.03))) < 1e-4


def test_interval_constraints_converge():
    # Intervals (as after finite-size relaxation) put the minimum on a face; the certified gap stays small and
    # the value lies below the equality-constrained one (a larger feasible set).
    import dataclasses
    prob, p_kept = bb84_depolarising(0.05)
    wide = tuple(model.Constraint(c.operator, c.lower - 0.002, c.upper + 0.002, c.label) for c in prob.constraints)
    r = solve(dataclasses.replace(prob, constraints=wide))
    assert r.gap < 1e-6
    assert r.certified_lower / p_kept < 1 - h2(0.05) - 1e-3


def test_certificate_holds_for_any_multipliers():
    # The bound needs no dual feasibility: y = 0 gives lambda_min(grad), a weak but valid bound below the optimum.
    prob, p_kept = bb84_depolarising(0.05)
    cons = model.all_constraints(prob)
    blocks = model.key_map_blocks(prob)
    rho = np.eye(prob.dim) / prob.dim
    weak = certify(prob, blocks, rho, np.zeros(len(cons)), cons)
    assert weak.bound_bits < 1 - h2(0.05)
    # ... and for the honest state with the solver's multipliers it is within 1e-4 of the optimum
    r = solve(prob)
    assert weak.bound_bits < r.certified_lower


def test_lambda_min_lower_against_mpmath():
    # Certified smallest eigenvalue vs mpmath at 50 digits (outside reference): below it and within 1e-12.
    import mpmath
    rng = np.random.default_rng(7)
    for n in (3, 8):
        a = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
        a = (a + a.conj().T) / 2
        lo = float(lambda_min_lower(_acb_mat(a), a))
        with mpmath.workdps(50):
            ev = mpmath.eighe(mpmath.matrix(a.tolist()), eigvals_only=True)
            ref = min(float(mpmath.re(e)) for e in ev)
        assert lo <= ref and ref - lo < 1e-12


def test_objective_gradient_is_the_derivative():
    # Finite differences of f along a random Hermitian direction equal Tr(grad f . direction).
    prob, _ = bb84_four_dim_bob(0.05)
    obj = Objective(model.key_map_blocks(prob))
    rng = np.random.default_rng(3)
    a = rng.normal(size=(prob.dim, prob.dim))
    rho = a @ a.T + np.eye(prob.dim)
    rho /= np.trace(rho)
    d = rng.normal(size=(prob.dim, prob.dim))
    d = (d + d.T) / 2
    step = 1e-6
    fd = (obj.value(rho + step * d) - obj.value(rho - step * d)) / (2 * step)
    assert fd == pytest.approx(float(np.trace(obj.gradient(rho) @ d)), rel=1e-6, abs=1e-9)
    assert float(np.trace(rho @ obj.gradient(rho))) == pytest.approx(obj.value(rho), abs=1e-12)  # homogeneity


def test_solver_input_errors():
    prob, _ = bb84_depolarising(0.05)
    with pytest.raises(InputError, match="backend"):
        solve(prob, backend="mosek")
    with pytest.raises(InputError, match="tol"):
        solve(prob, tol=-1)
    with pytest.raises(InputError, match="problem"):
        solve("bb84")
    # statistics no quantum state has: p(Z0, Z0) = 0.9 while rho_A = 1/2 allows at most p_z^2/2 = 1/8
    import dataclasses
    bad = dataclasses.replace(prob, constraints=(model.Constraint(prob.constraints[0].operator, 0.9, 0.9, "p(0,0)"),))
    with pytest.raises(InputError, match="feasible"):
        solve(bad)


@pytest.mark.parametrize("backend", BACKENDS)
def test_noiseless_bb84_pure_optimum(backend):
    # Q = 0: the only feasible state is the Bell state; H(Z|E) = 1 per kept round (Shor-Preskill 2000 at Q = 0).
    # The optimum is a pure state (gradient singular there): the certificate tries other linearisation points.
    prob, p_kept = bb84_depolarising(0.0)
    r = solve(prob, backend=backend)
    assert r.certified_lower <= r.primal
    assert 1 - 1e-6 < r.certified_lower / p_kept <= 1


def _unreduced_bb84(q):
    # Four BB84 states without reducing Alice's system: rho_A (4x4) has rank 2, no strictly feasible state.
    s = 1 / math.sqrt(2)
    states = [[1, 0], [0, 1], [s, s], [s, -s]]
    sr = model.source_replacement(states, [0.25] * 4, reduce=False)
    psi = sum(0.5 * np.kron(np.eye(4)[x], st) for x, st in enumerate(states))
    pure = np.outer(psi, psi)
    rho_a = np.trace(pure.reshape(4, 2, 4, 2), axis1=1, axis2=3)
    rho = (1 - 2 * q) * pure + 2 * q * np.kron(rho_a, np.eye(2) / 2)       # depolarising channel on Bob's side
    povm_b = (np.diag([.5, 0]), np.diag([0, .5]), np.full((2, 2), .25), np.array([[.25, -.25], [-.25, .25]]))
    stats = model.expected_statistics((sr.povm_a, povm_b), rho)
    prob = model.KeyRateProblem(4, 2, sr.rho_a, sr.povm_a, povm_b, (model.Announcement((0, 1), (0, 1)),),
                                (0, 1, -1, -1), model.statistics_constraints(sr.povm_a, povm_b, stats))
    return prob, float(stats[:2, :2].sum())


def test_rank_deficient_marginal_stays_sound_and_says_so():
    # Without the reduction of A the primal point violates the fixed marginal where it matters (the solver's
    # f falls below the certificate): the status says "inaccurate", the bound stays below Shor-Preskill's
    # 1 - h(Q) (soundness) and within 1e-5 of it; the reduced problem is "optimal".
    prob, p_kept = _unreduced_bb84(0.05)
    r = solve(prob)
    assert r.details["rho_a_rank_deficient"] and r.status == "inaccurate"
    assert r.certified_lower <= r.primal
    assert 1 - h2(0.05) - 1e-5 < r.certified_lower / p_kept <= 1 - h2(0.05)
    reduced, p_kept = bb84_depolarising(0.05)
    assert solve(reduced).status == "optimal"


@pytest.mark.skipif(not HAS_QICS, reason="qics not installed (optional extra finitekey[numerical])")
def test_qics_infeasible_statistics_are_an_input_error():
    import dataclasses
    prob, _ = bb84_depolarising(0.05)
    bad = dataclasses.replace(prob, constraints=(model.Constraint(prob.constraints[0].operator, 0.9, 0.9, "p(0,0)"),))
    with pytest.raises(InputError, match="feasible"):
        solve(bad, backend="qics")


def test_exact_factors_reproduce_omega_and_fallback_is_flagged():
    # The certificate factors Omega exactly (L D L^dagger in rationals): the ball product F^dagger F contains
    # Omega.  POVM elements that are PSD only within the tolerance (eigenvalue -1e-13) make Omega not exactly
    # PSD: the float factor and its Fannes charge are used, and the result says so.
    import dataclasses
    from finitekey.numerical.certificate import _acb_mat, _dag, _exact_factor
    prob, p_kept = bb84_four_dim_bob(0.03)
    (blk,) = model.key_map_blocks(prob)
    f = _exact_factor(prob, blk.alice_sets[0] + blk.alice_sets[1], blk.bob)
    assert f.nrows() == 4
    assert (_dag(f) * f).contains(_acb_mat(blk.omega))
    assert solve(prob).details["exact_factors"]
    base, _ = bb84_depolarising(0.05)
    base = dataclasses.replace(base, announcements=(model.Announcement((0, 1), (0,)),))   # keep Bob's Z0 only
    tweak = np.diag([0.0, 1e-13])
    bent = dataclasses.replace(base, povm_b=(base.povm_b[0] - tweak, base.povm_b[1] + tweak) + base.povm_b[2:])
    r, r0 = solve(bent), solve(base)
    assert r0.details["exact_factors"]
    assert not r.details["exact_factors"] and r.details["factor_error"] > 0
    assert r.certified_lower <= r.primal and abs(r.certified_lower - r0.certified_lower) < 1e-6


def test_rounding_noise_rank_falls_back_to_float_factors():
    # A rank-one POVM element built in floats (outer(u, u), u = (cos 0.3, sin 0.3)) has exact rank 2 with an
    # eigenvalue of rounding size (det about 1e-17): the exact factor then has a row of size 1e-9 and the image
    # is too ill-conditioned for its logarithm.  The certificate must fall back to the float factor (it crashed
    # with "Eigenvalues did not converge" before), flag it, and stay below the primal value.
    import dataclasses
    from finitekey.numerical.reference import werner
    u = np.array([math.cos(0.3), math.sin(0.3)])
    n0 = np.outer(u, u) / 2
    base, _ = bb84_depolarising(0.05)
    povm_b = (n0, np.eye(2) / 2 - n0) + base.povm_b[2:]
    stats = model.expected_statistics((base.povm_a, povm_b), werner(0.05))
    prob = dataclasses.replace(base, povm_b=povm_b, announcements=(model.Announcement((0, 1), (0,)),),
                               constraints=model.statistics_constraints(base.povm_a, povm_b, stats))
    r = solve(prob)
    assert not r.details["exact_factors"]
    assert r.certified_lower <= r.primal and r.gap < 1e-6
