"""Certified lower bound on ``min f`` from a linearisation point and dual multipliers (ball arithmetic).

The statement (see ``proofs_notes/numerical/solver.md``, section 4).  For every positive definite ``rho``, every real
vector ``y`` and every feasible ``sigma`` (``sigma >= 0``, ``Tr sigma = 1``, ``l_i <= Tr(sigma Gamma_i) <= u_i``):

    f(sigma) >= Tr(sigma grad f(rho))                                      (convexity + homogeneity)
             =  sum_i y_i Tr(sigma Gamma_i) + Tr(sigma (grad f(rho) - sum_i y_i Gamma_i))
             >= sum_i min(y_i l_i, y_i u_i) + lambda_min(grad f(rho) - sum_i y_i Gamma_i).

No feasibility of ``rho`` or ``y`` is needed: a poor ``y`` gives a poor but valid bound.  What floating point
leaves open is accounted for here:

1. ``grad f(rho)`` is built from float logarithms ``H ~ log(X)``.  For each factor ``F`` with ``X = F rho F^dagger``
   (enclosed exactly in balls), ``exp(H)`` is enclosed in ball arithmetic and
   ``||log X - H|| <= ||X - exp(H)|| / min(lambda_min X, lambda_min exp(H))`` (integral representation of the
   logarithm); the gradient error is at most ``sum_F ||F||^2 ||log X - H||`` and costs that much (``Tr sigma = 1``).
2. ``lambda_min`` of the ball matrix ``S = M - sum y_i Gamma_i``: with a float eigen-decomposition ``S ~ Q D Q^dagger``,
   ``R = Q^dagger S Q - D`` and ``N = Q^dagger Q - 1`` are enclosed in balls; Weyl's inequality gives
   ``lambda_min(Q^dagger S Q) >= min D - ||R||_F`` and Ostrowski's theorem ``lambda_min(S) = lambda_min(Q^dagger S Q)
   / theta`` with ``theta in [1 - ||N||_F, 1 + ||N||_F]``.
3. The factors.  ``Omega = (sum M_x) (x) (sum N_y)`` is exact in rationals (floats are dyadic rationals); an exact
   ``L D L^dagger`` decomposition (Gaussian rationals, no pivoting: a zero pivot of a PSD matrix has a zero
   column) gives ``F = D^(1/2) L^dagger`` with ``F^dagger F = Omega`` exactly, enclosed in balls (only the square
   roots round).  So the convexity argument applies to the true ``f``.  If ``Omega`` is not exactly PSD (POVM
   elements are accepted within a tolerance), the float factor is used instead, ``T = ||F^dagger F - Omega||_F`` is
   enclosed and each entropy term is charged ``2 (T log d + eta(T)) + T`` (Fannes' eigenvalue argument,
   ``eta(t) = -t log t``, valid for ``T <= 1/e``); ``Certificate.exact_factors`` is then False.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from flint import acb, acb_mat, arb, ctx

__all__ = ["Certificate", "certify", "lambda_min_lower"]


def _acb_mat(a: np.ndarray) -> acb_mat:
    a = np.asarray(a)
    if np.iscomplexobj(a):
        return acb_mat([[acb(float(v.real), float(v.imag)) for v in row] for row in a])
    return acb_mat([[acb(float(v)) for v in row] for row in a])


def _dag(m: acb_mat) -> acb_mat:
    return m.conjugate().transpose()


def _frob_upper(m: acb_mat) -> arb:
    """An upper bound on the Frobenius norm (hence the operator norm) of a ball matrix."""
    total = arb(0)
    for row in m.tolist():
        for e in row:
            a = abs(e)
            total += (a * a).upper()
    return total.sqrt().upper()


def _upper_float(x: arb) -> float:
    up = float(x.upper())
    return 0.0 if up == 0 else math.nextafter(up, math.inf)


def _lower_float(x: arb) -> float:
    return math.nextafter(float(x.lower()), -math.inf)


def lambda_min_lower(s: acb_mat, mid: np.ndarray) -> arb:
    """Certified lower bound on the smallest eigenvalue of a Hermitian ball matrix.

    Parameters
    ----------
    s : flint.acb_mat
        The matrix (balls containing a Hermitian matrix).
    mid : numpy.ndarray
        A float approximation of ``s`` (used only to choose the eigenvector basis).

    Returns
    -------
    flint.arb
        A number at most the smallest eigenvalue of every Hermitian matrix in ``s`` (the bound holds for the
        Hermitian matrix the balls contain).
    """
    if not np.all(np.isfinite(mid)):
        return arb(-math.inf)
    w, q = np.linalg.eigh((mid + mid.conj().T) / 2)
    qa = _acb_mat(q)
    n = len(w)
    r = _dag(qa) * s * qa - _acb_mat(np.diag(w))
    nq = _dag(qa) * qa - _acb_mat(np.eye(n))
    rn = _frob_upper(r)
    qn = _frob_upper(nq)
    if not qn < 1:
        return arb(-math.inf)
    m = arb(float(w[0])) - rn
    if m >= 0:
        return (m / (1 + qn)).lower()
    return (m / (1 - qn)).lower()


@dataclass(frozen=True)
class Certificate:
    """A certified lower bound on ``min f`` (nats and bits) and its error terms.

    Parameters
    ----------
    bound_bits : float
        Lower bound in bits (the lower end of the arb ball, rounded down).
    float_bound_bits : float
        The same bound evaluated in floating point without error terms (for comparison).
    lambda_min : float
        Certified lower bound on ``lambda_min(grad - sum y Gamma)`` (nats).
    gradient_error : float
        Upper bound charged for the float logarithms (nats).
    factor_error : float
        Upper bound charged for the rounding of the Kraus factors (nats); 0 with exact factors.
    exact_factors : bool
        Whether every factor was computed exactly (``F^dagger F = Omega`` in exact arithmetic, ``F`` enclosed in
        balls); otherwise the float factors and the Fannes charge of item 3 were used.
    """

    bound_bits: float
    float_bound_bits: float
    lambda_min: float
    gradient_error: float
    factor_error: float
    exact_factors: bool = True


def _log_error(x_ball: acb_mat, h: np.ndarray) -> arb:
    """Upper bound on ``||log X - h||`` for the positive definite matrix ``X`` in ``x_ball``."""
    if not np.all(np.isfinite(h)):
        return arb(math.inf)
    e = _acb_mat(h).exp()
    d = _frob_upper(x_ball - e)
    lam_h = lambda_min_lower(_acb_mat(h), h)
    if not lam_h.is_finite():
        return arb(math.inf)
    lam_e = lam_h.exp().lower()       # lambda_min(exp h) = exp(lambda_min h)
    m = (lam_e - d).lower()
    if not m > 0:
        return arb(math.inf)
    return (d / m).upper()


def certify(problem, blocks, rho: np.ndarray, y, constraints, *, prec: int = 106) -> Certificate:
    """Certified lower bound on ``min f`` over the feasible set, from ``rho`` and multipliers ``y``.

    Parameters
    ----------
    problem : KeyRateProblem
        The problem (its POVMs give the exact ``Omega`` operators).
    blocks : tuple of KeyMapBlock
        Facially reduced factors of the objective.
    rho : numpy.ndarray
        Positive definite linearisation point (need not be feasible).
    y : sequence of float
        One multiplier per constraint (any values give a valid bound).
    constraints : sequence of Constraint
        Every constraint of the feasible set, ``Tr rho = 1`` included.
    prec : int
        Working precision of the ball arithmetic in bits.

    Returns
    -------
    Certificate
    """
    from .objective import LN2, _logm_h

    y = [float(v) for v in y]
    with ctx.workprec(prec):
        rho_b = _acb_mat(rho)
        grad_mid = np.zeros(rho.shape, dtype=complex)
        grad_ball = _acb_mat(np.zeros(rho.shape))
        grad_err = arb(0)
        factor_err = arb(0)
        d = rho.shape[0]
        exact = True
        for blk in blocks:
            every = tuple(x for xs in blk.alice_sets for x in xs)
            terms = [(1, blk.g, every)] + [(-1, z, xs) for z, xs in zip(blk.z, blk.alice_sets)]
            for sign, f, alice in terms:
                fb = _exact_factor(problem, alice, blk.bob)
                if fb is not None:
                    f_exact = _mid(fb)
                    w = np.linalg.eigvalsh(f_exact @ rho @ f_exact.conj().T)
                    if not (np.all(np.isfinite(w)) and w[0] > 1e-13 * max(w[-1], 1e-300)):
                        # Omega has eigenvalues that are rounding noise (e.g. 1/sqrt(2)^2 - 1/2): its exact rank
                        # exceeds the numerical one and the image is too ill-conditioned for a useful log.
                        fb = None
                if fb is None:              # Omega not exactly PSD (inputs PSD only within tolerance)
                    exact = False
                    fb = _acb_mat(f)
                    t = _frob_upper(_dag(fb) * fb - _omega_ball(problem, alice, blk.bob))
                    if not t < arb(1) / 3:
                        factor_err = arb(math.inf)
                    elif t > 0:
                        factor_err += (2 * (t * arb(d).log() - t * t.log()) + t).upper()
                else:
                    f = f_exact
                x = fb * rho_b * _dag(fb)
                h = _logm_h(f @ rho @ f.conj().T)
                h = (h + h.conj().T) / 2
                term = _dag(fb) * _acb_mat(h) * fb
                grad_ball = grad_ball + term if sign > 0 else grad_ball - term
                grad_mid += sign * (f.conj().T @ h @ f)
                grad_err += (_frob_upper(fb) ** 2 * _log_error(x, h)).upper()
        s_ball = grad_ball
        s_mid = grad_mid.copy()
        const = arb(0)
        const_f = 0.0
        for yi, c in zip(y, constraints):
            if yi == 0:
                continue
            s_ball = s_ball - arb(yi) * _acb_mat(c.operator)
            s_mid = s_mid - yi * c.operator
            const += arb(yi) * arb(c.lower) if yi > 0 else arb(yi) * arb(c.upper)
            const_f += min(yi * c.lower, yi * c.upper)
        lam = lambda_min_lower(s_ball, s_mid)
        total = (const + lam - grad_err - factor_err) / arb(2).log()
        bound = _lower_float(total) if total.is_finite() else -math.inf
        lam_f = float(np.linalg.eigvalsh((s_mid + s_mid.conj().T) / 2)[0])
    return Certificate(bound_bits=bound, float_bound_bits=(const_f + lam_f) / LN2,
                       lambda_min=_lower_float(lam) if lam.is_finite() else -math.inf,
                       gradient_error=_upper_float(grad_err) if grad_err.is_finite() else math.inf,
                       factor_error=_upper_float(factor_err) if factor_err.is_finite() else math.inf,
                       exact_factors=exact)


def _mid(m: acb_mat) -> np.ndarray:
    """Float midpoints of a ball matrix."""
    return np.array([[complex(float(e.real.mid()), float(e.imag.mid())) for e in row] for row in m.tolist()])


def _gauss_matrix(m: np.ndarray):
    """Exact (real part, imaginary part) Fraction matrices of a float matrix."""
    from fractions import Fraction

    m = np.asarray(m, dtype=complex)
    return ([[Fraction(float(v.real)) for v in row] for row in m], [[Fraction(float(v.imag)) for v in row] for row in m])


def _exact_omega(problem, alice, bob):
    """``(sum_{x in alice} M_x) (x) (sum_{y in bob} N_y)`` in exact Gaussian rationals (re, im)."""
    def total(mats):
        re, im = _gauss_matrix(mats[0])
        for m in mats[1:]:
            r2, i2 = _gauss_matrix(m)
            re = [[a + b for a, b in zip(r, s)] for r, s in zip(re, r2)]
            im = [[a + b for a, b in zip(r, s)] for r, s in zip(im, i2)]
        return re, im

    ar, ai = total([problem.povm_a[x] for x in alice])
    br, bi = total([problem.povm_b[y] for y in bob])
    na, nb = len(ar), len(br)
    n = na * nb
    re = [[None] * n for _ in range(n)]
    im = [[None] * n for _ in range(n)]
    for i in range(n):
        for j in range(n):
            a_r, a_i = ar[i // nb][j // nb], ai[i // nb][j // nb]
            b_r, b_i = br[i % nb][j % nb], bi[i % nb][j % nb]
            re[i][j] = a_r * b_r - a_i * b_i
            im[i][j] = a_r * b_i + a_i * b_r
    return re, im


def _exact_factor(problem, alice, bob):
    """Ball matrix ``F`` (full row rank) with ``F^dagger F = Omega`` exactly, or None if ``Omega`` is not PSD.

    ``Omega = sum_j d_j l_j l_j^dagger`` by an exact ``L D L^dagger`` elimination; row ``j`` of ``F`` is
    ``sqrt(d_j) l_j^dagger``.
    """
    re, im = _exact_omega(problem, alice, bob)
    n = len(re)
    rows = []
    for j in range(n):
        d = re[j][j]
        if im[j][j] != 0:
            return None
        if d < 0:
            return None
        if d == 0:
            if any(re[i][j] != 0 or im[i][j] != 0 for i in range(j + 1, n)):
                return None            # a zero pivot with a non-zero column: not PSD
            continue
        lr = [re[i][j] / d if i >= j else 0 for i in range(n)]
        li = [im[i][j] / d if i >= j else 0 for i in range(n)]
        for i in range(j + 1, n):
            if re[i][j] == 0 and im[i][j] == 0:
                continue
            for k in range(j + 1, n):
                # A[i][k] -= A[i][j] conj(A[k][j]) / d
                pr, pi = re[i][j], im[i][j]
                qr, qi = re[k][j], -im[k][j]
                re[i][k] -= (pr * qr - pi * qi) / d
                im[i][k] -= (pr * qi + pi * qr) / d
        rows.append((d, lr, li))
    if not rows:
        return None
    out = []
    for d, lr, li in rows:
        sq = arb(d.numerator).sqrt() / arb(d.denominator).sqrt()
        # row = sqrt(d) * conj(l)^T
        out.append([sq * acb(arb(a.numerator) / arb(a.denominator), -(arb(b.numerator) / arb(b.denominator)))
                    for a, b in zip(lr, li)])
    return acb_mat(out)


def _omega_ball(problem, alice, bob) -> acb_mat:
    """``Omega = (sum_{x in alice} M_x) (x) (sum_{y in bob} N_y)`` in balls, from the POVM elements."""
    ma = _acb_mat(problem.povm_a[alice[0]])
    for x in alice[1:]:
        ma = ma + _acb_mat(problem.povm_a[x])
    mb = _acb_mat(problem.povm_b[bob[0]])
    for y in bob[1:]:
        mb = mb + _acb_mat(problem.povm_b[y])
    return _kron(ma, mb)


def _kron(a: acb_mat, b: acb_mat) -> acb_mat:
    ra, ca, rb, cb = a.nrows(), a.ncols(), b.nrows(), b.ncols()
    al, bl = a.tolist(), b.tolist()
    return acb_mat([[al[i // rb][j // cb] * bl[i % rb][j % cb] for j in range(ca * cb)] for i in range(ra * rb)])
