"""Asymptotic key rate: minimise ``f(rho) = sum_a D(G_a(rho) || Z(G_a(rho)))`` and certify a lower bound.

Two back ends produce the primal point; one certificate (:mod:`finitekey.numerical.certificate`) turns any
point into a certified lower bound:

``"cvxpy"`` (default)
    Step 1 of Winick, Lütkenhaus, Coles, Quantum 2, 77 (2018): Frank-Wolfe.  At the iterate ``rho`` the
    gradient is taken at ``rho_eps = (1 - eps) rho + eps 1/d`` (positive definite), the linear SDP
    ``min Tr(sigma grad)`` over the feasible set is solved with Clarabel through cvxpy, and a bounded line
    search moves towards its solution.  Step 2: the linear SDP's dual multipliers ``y`` at the last iterate
    go into the certificate.  Because ``f`` is homogeneous of degree one, ``Tr(sigma grad f(rho))`` is itself a
    lower bound on ``f(sigma)`` (no ``f(rho) - Tr(rho grad)`` term, no feasibility of ``rho`` needed).
``"qics"`` (optional extra ``finitekey[numerical]``)
    The quantum key-rate cone of qics (interior point, primal and dual), one cone per announcement; its
    primal point is then certified the same way (multipliers from qics's own dual, and from the linear SDP
    at its point; the larger certified bound is reported).

The reported number is ``SolverResult.certified_lower``: a lower bound on the minimum in bits per round,
valid for the problem's floating-point data whatever the solvers did (see the certificate module).
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..errors import ComputationError, InputError
from .certificate import certify
from .model import KeyRateProblem, SolverResult, all_constraints, key_map_blocks
from .objective import LN2, Objective

__all__ = ["solve", "BACKENDS"]

BACKENDS = ("cvxpy", "qics")


def _psd_part(rho: np.ndarray) -> np.ndarray:
    w, u = np.linalg.eigh((rho + rho.conj().T) / 2)
    w = np.clip(w, 0, None)
    out = (u * w) @ u.conj().T
    return out / max(np.trace(out).real, 1e-300)


def _perturb(rho: np.ndarray, eps: float) -> np.ndarray:
    n = rho.shape[0]
    return (1 - eps) * _psd_part(rho) + eps * np.eye(n) / n


class _LinearSDP:
    """``min Tr(C sigma)`` over the feasible set (cvxpy, Clarabel), with the multipliers of every constraint."""

    def __init__(self, n: int, constraints, real: bool):
        import cvxpy as cp  # cvxpy costs about 2 s to import: only when a numerical problem is solved

        self.cp = cp
        self.x = cp.Variable((n, n), symmetric=True) if real else cp.Variable((n, n), hermitian=True)
        self.c = cp.Parameter((n, n)) if real else cp.Parameter((n, n), complex=True)
        cons = [self.x >> 0]
        self.handles = []
        for c in constraints:
            op = c.operator if not real else np.real(c.operator)
            expr = cp.trace(op @ self.x)
            expr = expr if real else cp.real(expr)
            if c.lower == c.upper:
                k = expr == c.lower
                cons.append(k)
                self.handles.append(("eq", k))
            else:
                lo, hi = expr >= c.lower, expr <= c.upper
                cons += [lo, hi]
                self.handles.append(("range", lo, hi))
        # Tr(C X) = sum_ij C_ji X_ij, written elementwise (a parameter times a variable stays DPP)
        obj = cp.sum(cp.multiply(self.c.T, self.x))
        self.problem = cp.Problem(cp.Minimize(obj if real else cp.real(obj)), cons)
        self.real = real

    def solve(self, grad: np.ndarray):
        g = (grad + grad.conj().T) / 2
        self.c.value = np.real(g) if self.real else g
        self.failed = False
        try:
            self.problem.solve(solver=self.cp.CLARABEL)
        except self.cp.error.SolverError:
            # Clarabel gives up on some feasible problems (e.g. redundant equalities that rounding made
            # very slightly inconsistent); SCS is less accurate, which only loosens the certified bound
            try:
                self.problem.solve(solver=self.cp.SCS, eps=1e-9, max_iters=100000)
            except self.cp.error.SolverError:
                self.failed = True
                return None, None
        if self.x.value is None:
            return None, None
        y = []
        for h in self.handles:
            if h[0] == "eq":
                y.append(-float(np.real(h[1].dual_value)))
            else:
                y.append(float(np.real(h[1].dual_value)) - float(np.real(h[2].dual_value)))
        return np.array(self.x.value), np.array(y)


class _ProximalSDP:
    """``argmin Tr(C sigma) + (L/2) ||sigma||_F^2`` over the feasible set: the projection of ``-C/L``."""

    def __init__(self, n: int, constraints, real: bool):
        import cvxpy as cp  # see _LinearSDP

        self.cp = cp
        self.x = cp.Variable((n, n), symmetric=True) if real else cp.Variable((n, n), hermitian=True)
        self.c = cp.Parameter((n, n)) if real else cp.Parameter((n, n), complex=True)
        self.lam = cp.Parameter(nonneg=True)
        cons = [self.x >> 0]
        for c in constraints:
            op = c.operator if not real else np.real(c.operator)
            expr = cp.trace(op @ self.x)
            expr = expr if real else cp.real(expr)
            cons += [expr == c.lower] if c.lower == c.upper else [expr >= c.lower, expr <= c.upper]
        lin = cp.sum(cp.multiply(self.c.T, self.x))
        lin = lin if real else cp.real(lin)
        self.problem = cp.Problem(cp.Minimize(lin + self.lam / 2 * cp.sum_squares(self.x)), cons)
        self.real = real

    def solve(self, c: np.ndarray, lam: float):
        c = (c + c.conj().T) / 2
        self.c.value = np.real(c) if self.real else c
        self.lam.value = lam
        try:
            self.problem.solve(solver=self.cp.CLARABEL)
        except self.cp.error.SolverError:
            return None
        return None if self.x.value is None else np.array(self.x.value)


def _frank_wolfe(problem, obj, constraints, *, tol, max_iter, eps):
    """Step 1: Frank-Wolfe steps, each followed by a projected-gradient step; the best lower bound is kept.

    Plain Frank-Wolfe converges slowly when the minimum lies on a face of the feasible set (interval
    constraints); the projected-gradient step (a quadratic SDP, step ``1/L`` adapted to the line search)
    fixes that.  Both directions are feasible, so every iterate stays feasible up to the SDP solver's
    tolerance; neither matters for the certificate, which holds for any linearisation point.
    """
    sdp = _LinearSDP(problem.dim, constraints, problem.is_real)
    prox = _ProximalSDP(problem.dim, constraints, problem.is_real)
    from scipy.optimize import minimize_scalar  # scipy.optimize costs 0.2 s at import: only here

    rho, _ = sdp.solve(np.zeros((problem.dim, problem.dim)))
    if rho is None and sdp.failed:
        raise ComputationError("the conic solvers (Clarabel, then SCS) failed on the linear SDP of this problem; "
                               "no bound was computed (try backend='qics')")
    if rho is None:
        raise InputError("constraints", "an empty feasible set", "statistics consistent with some quantum state")
    rho = _psd_part(rho)
    best = None
    it = 0
    lam = None

    def line(d):
        res = minimize_scalar(lambda t: obj.value(rho + t * d), bounds=(0.0, 1.0), method="bounded",
                              options={"xatol": 1e-10})
        return res.x, res.fun

    for it in range(1, max_iter + 1):
        rho_e = _perturb(rho, eps)
        grad = obj.gradient(rho_e)
        sigma, y = sdp.solve(grad)
        if sigma is None:
            break
        lower = float(np.real(np.trace(sigma @ grad)))
        value = obj.value(rho)
        if best is None or lower > best[0]:
            best = (lower, rho_e, y)
        if value - best[0] <= tol * LN2:
            break
        t, v_fw = line(_psd_part(sigma) - rho)
        cand = rho + t * (_psd_part(sigma) - rho)
        if lam is None:
            lam = max(float(np.linalg.norm(grad)), 1.0)
        target = prox.solve(grad - lam * rho, lam)
        if target is not None:
            tp, v_pg = line(target - rho)
            lam = lam / 2 if tp > 0.9 else (lam * 4 if tp < 0.1 else lam)
            if v_pg < v_fw:
                cand = rho + tp * (target - rho)
        rho = cand
    return rho, best, it, sdp


def _qics_solve(problem, constraints, *, tol):
    import qics  # optional extra; numba-compiled at first use
    import scipy.sparse as sp

    from .model import kraus_g

    n = problem.dim
    iscomplex = not problem.is_real
    kraus = kraus_g(problem)
    m = len(kraus)
    to_compact = qics.vectorize.get_full_to_compact_op(n, iscomplex)
    full_from_compact = sp.csr_matrix(to_compact).T          # full vec = P^T compact vec
    nc = to_compact.shape[0]
    nvar = m + nc
    c = np.zeros((nvar, 1))
    c[:m] = 1.0

    def vec(mat):
        mat = np.asarray(mat, dtype=complex if iscomplex else float)
        return qics.vectorize.mat_to_vec(mat if iscomplex else np.real(mat))

    eq_rows, eq_b, ineq_rows, ineq_h, idx = [], [], [], [], []
    for c_ in constraints:
        row = (to_compact @ vec(c_.operator)).ravel()
        if c_.lower == c_.upper:
            eq_rows.append(np.concatenate([np.zeros(m), row]))
            eq_b.append(c_.lower)
            idx.append(("eq", len(eq_rows) - 1))
        else:
            ineq_rows.append(np.concatenate([np.zeros(m), row]))          # h - G x >= 0 with G = row: u - row x
            ineq_h.append(c_.upper)
            ineq_rows.append(np.concatenate([np.zeros(m), -row]))         # row x - l >= 0
            ineq_h.append(-c_.lower)
            idx.append(("range", len(ineq_rows) - 2, len(ineq_rows) - 1))
    a_mat = np.array(eq_rows)
    b = np.array(eq_b).reshape(-1, 1)
    g_blocks, h_blocks, cones = [], [], []
    if ineq_rows:
        g_blocks.append(sp.csr_matrix(np.array(ineq_rows)))
        h_blocks.append(np.array(ineq_h).reshape(-1, 1))
        cones.append(qics.cones.NonNegOrthant(len(ineq_rows)))
    nfull = full_from_compact.shape[0]
    for a, k in enumerate(kraus):
        gt = sp.lil_matrix((1, nvar))
        gt[0, a] = -1.0
        gx = sp.hstack([sp.csr_matrix((nfull, m)), -full_from_compact])
        g_blocks += [gt.tocsr(), gx.tocsr()]
        h_blocks += [np.zeros((1, 1)), np.zeros((nfull, 1))]
        # only the key values this announcement can produce: a zero block of the key register (a key value
        # unused here) changes neither G nor Z(G), but qics's cone fails on it (reshape of an empty array)
        used = [k[i * n:(i + 1) * n] for i in range(problem.n_key) if np.any(k[i * n:(i + 1) * n])]
        k = np.vstack(used)
        k = k if iscomplex else np.ascontiguousarray(np.real(k))
        cones.append(qics.cones.QuantKeyDist([k], len(used), iscomplex=iscomplex))
    model = qics.Model(c=c, A=a_mat, b=b, G=sp.vstack(g_blocks).tocsr(), h=np.vstack(h_blocks), cones=cones)
    solver = qics.Solver(model, verbose=0, tol_gap=max(tol * 1e-2, 1e-9), tol_feas=1e-9)
    try:
        info = solver.solve()
    except (ValueError, TypeError, ArithmeticError, np.linalg.LinAlgError) as exc:
        # qics fails inside its cone on some complex problems (a complex128 -> float64 cast in the Hessian
        # product); one line instead of a traceback from a third-party solver
        raise ComputationError(f"the qics back end failed on this problem ({type(exc).__name__}: {exc}); "
                               "no bound was computed (try backend='cvxpy')") from None
    xc = np.asarray(info["x_opt"]).ravel()[m:]
    xfull = np.asarray(full_from_compact @ xc).reshape(-1, 1)
    rho = qics.vectorize.vec_to_mat(xfull, iscomplex=iscomplex)
    yq = np.asarray(info["y_opt"]).ravel()
    zq = np.asarray(info["z_opt"].vec).ravel() if ineq_rows else np.zeros(0)
    y = []
    for h in idx:
        if h[0] == "eq":
            y.append(-float(yq[h[1]]))
        else:
            y.append(-float(zq[h[1]]) + float(zq[h[2]]))
    return np.asarray(rho), np.array(y), info


def solve(problem: KeyRateProblem, *, backend: str = "cvxpy", tol: float = 1e-6, max_iter: int = 60,
          eps: float = 1e-9) -> SolverResult:
    """Minimum over attacks of ``sum_a p(a) H(Z|E, a)``: primal value and certified lower bound, in bits per round.

    Parameters
    ----------
    problem : KeyRateProblem
        The problem (validated on construction).
    backend : {"cvxpy", "qics"}
        Solver of the primal problem (see the module docstring); the certificate is the same for both.
    tol : float
        Target gap in bits between primal value and lower bound (Frank-Wolfe stops there; ``status`` says
        whether it was reached).
    max_iter : int
        Frank-Wolfe iterations at most (cvxpy back end).
    eps : float
        Weight of the maximally mixed state in the linearisation point (keeps the gradient finite).

    Returns
    -------
    SolverResult
        ``certified_lower`` is the number to use: a certified lower bound on the minimum of ``sum_a p(a)
        H(Z|E, a)`` over every state consistent with the constraints (bits per round, not per kept round;
        the error-correction leakage is not subtracted).

    Raises
    ------
    InputError
        Unknown back end, a parameter out of range, or constraints that no state satisfies.
    """
    if not isinstance(problem, KeyRateProblem):
        raise InputError("problem", type(problem).__name__, "a KeyRateProblem")
    if backend not in BACKENDS:
        raise InputError("backend", backend, "one of " + ", ".join(BACKENDS))
    for name, v, lo, hi in (("tol", tol, 1e-12, 1.0), ("eps", eps, 1e-15, 1e-3)):
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not lo <= v <= hi:
            raise InputError(name, v, f"a number in [{lo:g}, {hi:g}]")
    if isinstance(max_iter, bool) or not isinstance(max_iter, int) or not 1 <= max_iter <= 10000:
        raise InputError("max_iter", max_iter, "an integer in [1, 10000]")
    from .._threads import one_blas_thread

    start = time.perf_counter()
    with one_blas_thread():
        constraints = all_constraints(problem)
        blocks = key_map_blocks(problem)
        obj = Objective(blocks)
        details: dict = {}
        if backend == "cvxpy":
            rho, best, iters, sdp = _frank_wolfe(problem, obj, constraints, tol=tol, max_iter=max_iter, eps=eps)
            if best is None:
                raise InputError("constraints", "an empty feasible set",
                                 "statistics consistent with some quantum state")
            cert = certify(problem, blocks, best[1], best[2], constraints)
            name = "cvxpy-clarabel frank-wolfe"
        else:
            sdp = None
            rho, yq, info = _qics_solve(problem, constraints, tol=tol)
            iters = int(info.get("num_iter", 0))
            if "infeas" in str(info.get("sol_status", "")):
                raise InputError("constraints", "an empty feasible set",
                                 "statistics consistent with some quantum state")
            details.update(qics_status=str(info.get("sol_status")), qics_primal_bits=float(info["p_obj"]) / LN2,
                           qics_dual_bits=float(info["d_obj"]) / LN2)
            cert = certify(problem, blocks, _perturb(rho, eps), yq, constraints)
            details["certified_from_qics_dual_bits"] = cert.bound_bits
            name = "qics quantum key-rate cone"
        primal_raw = obj.value(_psd_part(rho)) / LN2
        if primal_raw - cert.bound_bits > tol:
            # Not converged to tol: try the certificate at other linearisation points (the bound holds at any
            # positive definite point; near a pure optimum a larger weight of the identity can give a better one).
            sdp = sdp or _LinearSDP(problem.dim, constraints, problem.is_real)
            tried = {}
            for e in sorted({eps, 1e-11, 1e-7, 1e-5}):
                rho_e = _perturb(rho, e)
                _, y2 = sdp.solve(obj.gradient(rho_e))
                if y2 is None:
                    continue
                c2 = certify(problem, blocks, rho_e, y2, constraints)
                tried[e] = c2.bound_bits
                if c2.bound_bits > cert.bound_bits:
                    cert = c2
            details["certified_by_eps_bits"] = tried
        # The primal point satisfies the constraints only to the conic solver's tolerance; report its violation,
        # and never a primal value below the certified bound (that would only reflect the violation).
        details["primal_constraint_violation"] = max(
            max(c.lower - float(np.real(np.trace(rho @ c.operator))), float(np.real(np.trace(rho @ c.operator)))
                - c.upper, 0.0) for c in constraints)
        details["primal_at_point_bits"] = primal_raw
        primal = max(primal_raw, cert.bound_bits)
        if problem.rho_a is not None:
            w = np.linalg.eigvalsh(problem.rho_a)
            details["rho_a_rank_deficient"] = bool(w[0] <= 1e-12 * w[-1])
    seconds = time.perf_counter() - start
    lower = cert.bound_bits
    if not math.isfinite(lower):
        lower = -math.inf
    details.update(float_bound_bits=cert.float_bound_bits, lambda_min=cert.lambda_min,
                   gradient_error=cert.gradient_error, factor_error=cert.factor_error,
                   exact_factors=cert.exact_factors)
    gap = primal - lower
    # "optimal": the certified gap is within tol and the primal point is not visibly below the bound (a point
    # below it violates the constraints in a way that matters, typically with no strictly feasible state:
    # reduce Alice's system to supp(rho_a) first, see source_replacement).
    converged = gap <= max(tol, 1e-9) * 1.0001 + 1e-9 and details["primal_at_point_bits"] >= lower - 1e-9
    if backend == "qics" and details.get("qics_status") != "optimal":
        converged = False
    status = "optimal" if converged else "inaccurate"
    return SolverResult(primal=float(primal), certified_lower=float(lower), gap=float(gap), iterations=int(iters),
                        solver=name, seconds=seconds, status=status, details=details)
