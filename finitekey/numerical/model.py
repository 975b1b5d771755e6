"""The numerical key-rate problem: what is optimised, in the entanglement-based picture.

A prepare-and-measure protocol is described after *source replacement*: Alice's preparation of state
``|phi_x>`` with probability ``p_x`` is the same, for everything Bob and Eve see, as Alice holding the
system ``A`` of ``|psi> = sum_x sqrt(p_x) |x>_A |phi_x>_A'``, sending ``A'`` and measuring ``A`` with
the POVM ``{|x><x|}``.  The attack is then a state ``rho`` on ``A (x) B`` whose marginal on ``A`` is fixed
(Eve never touches ``A``), constrained by the observed statistics ``Tr(rho (M_x (x) N_y))``.

Key map (direct reconciliation).  An *announcement* is a pair of sets of POVM indices (Alice's, Bob's); a
round is kept under that announcement when Alice's outcome lies in the first and Bob's in the second set
(announcements are disjoint events).  Alice's outcome ``x`` of a kept round gives the key value
``key_map[x]``.  For announcement ``a`` and key value ``k`` let ``M_{a,k} = sum_{x in A_a, key(x)=k} M_x``
and ``N_a = sum_{y in B_a} N_y``.  The post-processing map ``G`` has, for announcement ``a``, the Kraus
operator ``K_a = sum_k |k>_R (x) sqrt(M_{a,k}) (x) sqrt(N_a)`` (key register ``R``; announcements are kept
in orthogonal blocks, i.e. the public register), and the key map ``Z`` pinches ``R``:
``Z(X) = sum_k (|k><k| (x) 1) X (|k><k| (x) 1)``.  Then (Coles 2012; Winick, Lütkenhaus, Coles,
Quantum 2, 77 (2018))

    f(rho) = sum_a D(G_a(rho) || Z(G_a(rho))) = sum_a p(a) H(Z | E, a)   (in nats here, bits in results)

which is the conditional entropy of the key given Eve *per round* (not per kept round): ``G`` is
trace-decreasing and the factor ``p(a)`` is the probability of keeping a round under announcement ``a``.

Only ``K_a^dagger K_a = Omega_a = sum_k M_{a,k} (x) N_a`` and ``Omega_{a,k} = M_{a,k} (x) N_a`` matter:
the non-zero eigenvalues of ``K rho K^dagger`` are those of ``sqrt(rho) Omega sqrt(rho)``, so

    f(rho) = sum_a [ -S(F_a rho F_a^dagger) + sum_k S(F_{a,k} rho F_{a,k}^dagger) ]

for any factors with ``F^dagger F = Omega``.  :func:`key_map_blocks` takes ``F = Lambda^(1/2) W^dagger``
from the eigen-decomposition restricted to the range of ``Omega`` (facial reduction: the reduced images are
positive definite whenever ``rho`` is), and records the residual ``||F^dagger F - Omega||`` so that the
certificate can charge it.

Everything here is numpy; nothing imports cvxpy or qics.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError

__all__ = ["Constraint", "Announcement", "KeyRateProblem", "SolverResult", "SourceReplacement",
           "KeyMapBlock", "source_replacement", "statistics_constraints", "state_constraints", "all_constraints",
           "key_map_blocks", "kraus_g", "pinching_projectors", "expected_statistics", "DEFAULT_TOL"]

#: Default tolerance of the input checks (Hermitian, positive semidefinite, unit trace, POVM completeness).
DEFAULT_TOL = 1e-10


def _matrix(field_name: str, value, dim: int | None = None) -> np.ndarray:
    """A finite complex square matrix (of dimension ``dim`` if given), or InputError naming the field."""
    try:
        arr = np.asarray(value, dtype=complex)
    except (TypeError, ValueError):
        raise InputError(field_name, value, "a square matrix of numbers") from None
    if arr.ndim != 2 or arr.shape[0] != arr.shape[1]:
        raise InputError(field_name, f"shape {arr.shape}", "a square matrix")
    if dim is not None and arr.shape[0] != dim:
        raise InputError(field_name, f"shape {arr.shape}", f"a {dim}x{dim} matrix (dimensions must agree)")
    if not np.all(np.isfinite(arr)):
        raise InputError(field_name, "a matrix with non-finite entries", "finite entries")
    return arr


def _check_hermitian(field_name: str, arr: np.ndarray, tol: float) -> None:
    dev = float(np.max(np.abs(arr - arr.conj().T))) if arr.size else 0.0
    if dev > tol:
        raise InputError(field_name, f"a matrix with |M - M^dagger| = {dev:.3g}",
                         f"a Hermitian matrix (tolerance {tol:g})")


def _check_psd(field_name: str, arr: np.ndarray, tol: float) -> None:
    lam = float(np.linalg.eigvalsh((arr + arr.conj().T) / 2)[0])
    if lam < -tol:
        raise InputError(field_name, f"a matrix with smallest eigenvalue {lam:.3g}",
                         f"a positive semidefinite matrix (tolerance {tol:g})")


def _frozen(arr: np.ndarray) -> np.ndarray:
    """A read-only copy, real if the imaginary part is exactly zero (the SDPs are then real)."""
    out = np.array(arr.real if not np.any(arr.imag) else arr)
    out.setflags(write=False)
    return out


@dataclass(frozen=True)
class Constraint:
    """``lower <= Tr(rho operator) <= upper`` on the joint state ``rho`` of ``A (x) B``.

    Parameters
    ----------
    operator : numpy.ndarray
        Hermitian matrix of dimension ``dim_a * dim_b`` (Alice's factor first).
    lower, upper : float
        Limits (finite, ``lower <= upper``); equal for an equality.
    label : str
        Name used in error messages and reports, e.g. ``"p(Z0,Z1)"``.
    """

    operator: np.ndarray
    lower: float
    upper: float
    label: str = ""

    def __post_init__(self):
        name = f"constraint {self.label or '?'}"
        op = _matrix(f"{name}.operator", self.operator)
        _check_hermitian(f"{name}.operator", op, DEFAULT_TOL)
        object.__setattr__(self, "operator", _frozen((op + op.conj().T) / 2))
        for end in ("lower", "upper"):
            v = getattr(self, end)
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)) \
                    or not math.isfinite(float(v)):
                raise InputError(f"{name}.{end}", v, "a finite real number")
            object.__setattr__(self, end, float(v))
        if self.lower > self.upper:
            raise InputError(f"{name}.lower", self.lower, f"a number <= upper = {self.upper!r}")


@dataclass(frozen=True)
class Announcement:
    """One public announcement under which a round is kept for the key.

    Parameters
    ----------
    alice, bob : tuple of int
        Indices of Alice's and Bob's POVM elements whose outcomes lead to this announcement
        (e.g. both chose the Z basis and Bob's detector clicked).
    """

    alice: tuple[int, ...]
    bob: tuple[int, ...]

    def __post_init__(self):
        for side in ("alice", "bob"):
            v = getattr(self, side)
            try:
                t = tuple(int(i) for i in v)
            except (TypeError, ValueError):
                raise InputError(f"announcement.{side}", v, "a list of POVM indices") from None
            if not t or len(set(t)) != len(t):
                raise InputError(f"announcement.{side}", v, "a non-empty list of distinct POVM indices")
            object.__setattr__(self, side, t)


@dataclass(frozen=True)
class KeyRateProblem:
    """A key-rate problem in the entanglement-based picture (asymptotic: the constraints are exact or intervals).

    Parameters
    ----------
    dim_a, dim_b : int
        Dimensions of Alice's (after source replacement) and Bob's systems.
    rho_a : numpy.ndarray or None
        Alice's reduced state, fixed by the source (``None``: not fixed, e.g. an untrusted source).
    povm_a, povm_b : tuple of numpy.ndarray
        Alice's and Bob's POVM elements (each set sums to the identity).
    announcements : tuple of Announcement
        The announcements under which rounds are kept for the key (disjoint events).
    key_map : tuple of int
        Key value of each of Alice's outcomes (``-1``: no key value; every outcome of a kept announcement
        needs one).  Key values are ``0, 1, ..., n_key - 1``.
    constraints : tuple of Constraint
        The statistics (and any other linear knowledge) constraining the attack.  The fixed marginal
        ``rho_a`` and ``Tr rho = 1`` are added by :func:`all_constraints`; do not repeat them.
    tol : float
        Tolerance of the input checks.
    """

    dim_a: int
    dim_b: int
    rho_a: np.ndarray | None
    povm_a: tuple
    povm_b: tuple
    announcements: tuple
    key_map: tuple
    constraints: tuple = ()
    tol: float = DEFAULT_TOL

    def __post_init__(self):
        tol = self.tol
        if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not (0 < tol < 1e-2):
            raise InputError("tol", tol, "a number in (0, 0.01)")
        for name in ("dim_a", "dim_b"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 1 <= v <= 64:
                raise InputError(name, v, "an integer in [1, 64]")
        da, db = int(self.dim_a), int(self.dim_b)
        if self.rho_a is not None:
            r = _matrix("rho_a", self.rho_a, da)
            _check_hermitian("rho_a", r, tol)
            _check_psd("rho_a", r, tol)
            if abs(np.trace(r).real - 1) > tol:
                raise InputError("rho_a", f"a matrix of trace {np.trace(r).real:.12g}", f"unit trace (tolerance {tol:g})")
            object.__setattr__(self, "rho_a", _frozen((r + r.conj().T) / 2))
        for side, dim in (("povm_a", da), ("povm_b", db)):
            elems = getattr(self, side)
            if isinstance(elems, np.ndarray) and elems.ndim == 3:
                elems = tuple(elems)
            if not isinstance(elems, (tuple, list)) or not elems:
                raise InputError(side, elems, "a non-empty list of POVM elements")
            checked = []
            for i, e in enumerate(elems):
                m = _matrix(f"{side}[{i}]", e, dim)
                _check_hermitian(f"{side}[{i}]", m, tol)
                _check_psd(f"{side}[{i}]", m, tol)
                checked.append(_frozen((m + m.conj().T) / 2))
            total = sum(checked)
            dev = float(np.max(np.abs(total - np.eye(dim))))
            if dev > tol:
                raise InputError(side, f"elements summing to the identity up to {dev:.3g}",
                                 f"POVM elements summing to the {dim}x{dim} identity (tolerance {tol:g})")
            object.__setattr__(self, side, tuple(checked))
        na, nb = len(self.povm_a), len(self.povm_b)
        km = self.key_map
        try:
            km = tuple(int(k) for k in km)
        except (TypeError, ValueError):
            raise InputError("key_map", self.key_map, "a list of integers (key value per Alice outcome, -1 none)") \
                from None
        if len(km) != na:
            raise InputError("key_map", self.key_map, f"one key value per Alice outcome ({na} values)")
        if any(k < -1 for k in km):
            raise InputError("key_map", self.key_map, "key values >= 0, or -1 for no key value")
        object.__setattr__(self, "key_map", km)
        anns = tuple(a if isinstance(a, Announcement) else Announcement(*a) for a in self.announcements)
        if not anns:
            raise InputError("announcements", self.announcements, "at least one announcement keeping rounds")
        seen: set = set()
        for j, a in enumerate(anns):
            for x in a.alice:
                if not 0 <= x < na:
                    raise InputError(f"announcements[{j}].alice", x, f"an index of povm_a in [0, {na - 1}]")
                if km[x] < 0:
                    raise InputError(f"key_map[{x}]", km[x], f"a key value >= 0 (outcome {x} is kept in "
                                     f"announcement {j})")
            for y in a.bob:
                if not 0 <= y < nb:
                    raise InputError(f"announcements[{j}].bob", y, f"an index of povm_b in [0, {nb - 1}]")
            pairs = {(x, y) for x in a.alice for y in a.bob}
            if pairs & seen:
                raise InputError(f"announcements[{j}]", (a.alice, a.bob),
                                 "announcements that are disjoint events (no pair of outcomes in two of them)")
            seen |= pairs
        object.__setattr__(self, "announcements", anns)
        cons = tuple(self.constraints)
        for i, c in enumerate(cons):
            if not isinstance(c, Constraint):
                raise InputError(f"constraints[{i}]", c, "a Constraint")
            if c.operator.shape != (da * db, da * db):
                raise InputError(f"constraint {c.label or i}.operator", f"shape {c.operator.shape}",
                                 f"a {da * db}x{da * db} matrix (dim_a * dim_b; dimensions must agree)")
        object.__setattr__(self, "constraints", cons)

    @property
    def dim(self) -> int:
        """Dimension of the joint system ``A (x) B``."""
        return self.dim_a * self.dim_b

    @property
    def n_key(self) -> int:
        """Size of the key alphabet."""
        return max(self.key_map) + 1

    @property
    def is_real(self) -> bool:
        """Whether every matrix is real (the optimisation then runs over real symmetric matrices)."""
        mats = list(self.povm_a) + list(self.povm_b) + [c.operator for c in self.constraints]
        if self.rho_a is not None:
            mats.append(self.rho_a)
        return all(not np.iscomplexobj(m) for m in mats)


@dataclass(frozen=True)
class SolverResult:
    """Outcome of :func:`finitekey.numerical.solver.solve`.

    All values are in bits per round (per use of the source, not per kept round): ``sum_a p(a) H(Z|E, a)``.

    Parameters
    ----------
    primal : float
        Objective at the solver's best feasible-looking point (an upper estimate of the minimum; not certified).
    certified_lower : float
        Certified lower bound on the minimum (lower end of an arb ball, rounded down to a float).
    gap : float
        ``primal - certified_lower``.
    iterations : int
        Outer iterations (Frank-Wolfe steps, or interior-point iterations of the conic solver).
    solver : str
        Back end that produced the primal point (``"cvxpy"`` or ``"qics"``) and the certificate method.
    seconds : float
        Wall time of the solve, certificate included.
    status : str
        ``"optimal"`` when the gap is within the requested tolerance, else ``"inaccurate"`` (the certified
        bound stays valid either way).
    details : dict
        Diagnostics: the error terms of the certificate, the conic solver's own primal and dual objectives.
    """

    primal: float
    certified_lower: float
    gap: float
    iterations: int
    solver: str
    seconds: float
    status: str
    details: dict = field(default_factory=dict, compare=False)


# --------------------------------------------------------------------------------------------------------------
# Construction helpers


@dataclass(frozen=True)
class SourceReplacement:
    """Alice's side after source replacement: dimension, fixed marginal and measurement.

    Parameters
    ----------
    dim_a : int
        Dimension of Alice's system (the span of the signal states' labels that the source reaches).
    rho_a : numpy.ndarray
        Alice's marginal ``rho_A``.
    povm_a : tuple of numpy.ndarray
        Alice's measurement; element ``x`` stands for "Alice sent signal ``x``".
    """

    dim_a: int
    rho_a: np.ndarray
    povm_a: tuple


def source_replacement(states, probabilities, *, tol: float = DEFAULT_TOL, reduce: bool = True) -> SourceReplacement:
    """Entanglement-based picture of a source of pure states.

    ``|psi> = sum_x sqrt(p_x) |x>_A |phi_x>`` gives ``rho_A = sum_{x,y} sqrt(p_x p_y) <phi_y|phi_x> |x><y|``
    and Alice's POVM ``{|x><x|}``.  When the states are linearly dependent (four BB84 states in a qubit),
    ``rho_A`` is rank deficient and every admissible ``rho`` lives on ``supp(rho_A) (x) B``; with
    ``reduce=True`` Alice's system is restricted to that support (facial reduction of the feasible set):
    ``rho_A`` becomes ``V^dagger rho_A V`` and the POVM ``{V^dagger |x><x| V}`` for an orthonormal basis ``V``
    of the support (exact up to floating-point rounding of ``V``).

    Parameters
    ----------
    states : sequence of array_like
        Signal states as vectors, or as rank-one density matrices (mixed states: describe an
        entanglement-based source directly with :class:`KeyRateProblem`).
    probabilities : sequence of float
        Probabilities of sending each state (sum to 1).
    tol : float
        Tolerance of the checks.
    reduce : bool
        Restrict Alice's system to the support of ``rho_A``.

    Returns
    -------
    SourceReplacement
    """
    try:
        p = np.asarray(probabilities, dtype=float)
    except (TypeError, ValueError):
        raise InputError("probabilities", probabilities, "a list of probabilities") from None
    if p.ndim != 1 or len(p) == 0 or not np.all(np.isfinite(p)) or np.any(p < 0) or abs(p.sum() - 1) > tol:
        raise InputError("probabilities", probabilities, f"non-negative numbers summing to 1 (tolerance {tol:g})")
    if len(states) != len(p):
        raise InputError("states", f"{len(states)} states", f"one state per probability ({len(p)})")
    vecs = []
    dim = None
    for i, s in enumerate(states):
        a = np.asarray(s, dtype=complex)
        if a.ndim == 1:
            v = a
        elif a.ndim == 2 and a.shape[0] == a.shape[1]:
            _check_hermitian(f"states[{i}]", a, tol)
            _check_psd(f"states[{i}]", a, tol)
            if abs(np.trace(a).real - 1) > tol:
                raise InputError(f"states[{i}]", f"a matrix of trace {np.trace(a).real:.12g}", "unit trace")
            w, u = np.linalg.eigh(a)
            if w[-2:-1].size and w[-2] > tol:
                raise InputError(f"states[{i}]", f"a mixed state (second eigenvalue {w[-2]:.3g})",
                                 "a pure state (rank one); describe a mixed source as an entangled state")
            v = u[:, -1] * math.sqrt(max(w[-1], 0.0))
        else:
            raise InputError(f"states[{i}]", f"shape {a.shape}", "a state vector or a density matrix")
        if not np.all(np.isfinite(v)):
            raise InputError(f"states[{i}]", "non-finite entries", "finite entries")
        if dim is None:
            dim = v.shape[0]
        elif v.shape[0] != dim:
            raise InputError(f"states[{i}]", f"dimension {v.shape[0]}", f"dimension {dim} like states[0]")
        nv = np.linalg.norm(v)
        if abs(nv - 1) > math.sqrt(tol):
            raise InputError(f"states[{i}]", f"a vector of norm {nv:.12g}", "a normalised state")
        vecs.append(v / nv)
    phi = np.array(vecs)                       # rows are the states
    sq = np.sqrt(p)
    gram = phi.conj() @ phi.T                   # gram[y, x] = <phi_y|phi_x>
    rho_a = (sq[:, None] * sq[None, :]) * gram.T   # rho_a[x, y] = sqrt(p_x p_y) <phi_y|phi_x>
    rho_a = (rho_a + rho_a.conj().T) / 2
    n = len(p)
    povm = [np.outer(np.eye(n)[x], np.eye(n)[x]).astype(complex) for x in range(n)]
    if reduce:
        w, u = np.linalg.eigh(rho_a)
        keep = w > max(tol, 1e-12) * max(1.0, w[-1])
        v = u[:, keep]
        if v.shape[1] < n:
            rho_a = v.conj().T @ rho_a @ v
            povm = [v.conj().T @ m @ v for m in povm]
            rho_a = (rho_a + rho_a.conj().T) / 2
            rho_a = rho_a / np.trace(rho_a).real
            povm = [(m + m.conj().T) / 2 for m in povm]
    d = rho_a.shape[0]
    return SourceReplacement(dim_a=d, rho_a=_frozen(rho_a), povm_a=tuple(_frozen(m) for m in povm))


def statistics_constraints(povm_a, povm_b, probabilities, *, slack=0.0, labels=None) -> tuple:
    """Constraints ``Tr(rho (M_x (x) N_y)) in [p_xy - slack_xy, p_xy + slack_xy]`` from a table of statistics.

    Parameters
    ----------
    povm_a, povm_b : sequence of numpy.ndarray
        Alice's and Bob's POVM elements.
    probabilities : array_like, shape (len(povm_a), len(povm_b))
        Joint probabilities (expected, for a design; the interval centres, for a finite block).  Entries that
        are NaN are not constrained (coarse-grained or unobserved statistics).
    slack : float or array_like
        Half-width of each interval (0: equality).
    labels : callable, optional
        ``labels(x, y) -> str`` for the constraint labels (default ``"p(x,y)"``).

    Returns
    -------
    tuple of Constraint
    """
    p = np.asarray(probabilities, dtype=float)
    if p.shape != (len(povm_a), len(povm_b)):
        raise InputError("probabilities", f"shape {p.shape}", f"a table of shape ({len(povm_a)}, {len(povm_b)})")
    s = np.broadcast_to(np.asarray(slack, dtype=float), p.shape)
    if np.any(~np.isfinite(s)) or np.any(s < 0):
        raise InputError("slack", slack, "non-negative finite half-widths")
    out = []
    for x, m in enumerate(povm_a):
        for y, nmat in enumerate(povm_b):
            if np.isnan(p[x, y]):
                continue
            if not 0 <= p[x, y] <= 1:
                raise InputError(f"probabilities[{x}][{y}]", float(p[x, y]), "a probability in [0, 1]")
            label = labels(x, y) if labels else f"p({x},{y})"
            out.append(Constraint(np.kron(np.asarray(m), np.asarray(nmat)), p[x, y] - s[x, y], p[x, y] + s[x, y],
                                  label))
    return tuple(out)


def _hermitian_basis(d: int, real: bool) -> list:
    """A basis of the d x d Hermitian (real: symmetric) matrices with entries 0, 1 (exact in floating point)."""
    basis = []
    for i in range(d):
        for j in range(i, d):
            m = np.zeros((d, d), dtype=complex)
            m[i, j] = m[j, i] = 1
            basis.append(m)
            if i != j and not real:
                m = np.zeros((d, d), dtype=complex)
                m[i, j], m[j, i] = 1j, -1j
                basis.append(m)
    return basis


def state_constraints(problem: KeyRateProblem) -> tuple:
    """``Tr rho = 1`` and, if ``rho_a`` is fixed, ``Tr(rho (T (x) 1)) = Tr(rho_a T)`` for a Hermitian basis ``T``.

    The basis matrices have entries 0, +-1, +-i, so the operators are exact in floating point; the right-hand
    sides are ``Tr(rho_a T)`` computed exactly from the stored ``rho_a`` (sums of two floats, rounded once:
    the certificate encloses them again in ball arithmetic).

    Returns
    -------
    tuple of Constraint
    """
    d = problem.dim
    out = [Constraint(np.eye(d), 1.0, 1.0, "trace")]
    if problem.rho_a is not None:
        real = problem.is_real
        for idx, t in enumerate(_hermitian_basis(problem.dim_a, real)):
            val = float(np.trace(problem.rho_a @ t).real)
            out.append(Constraint(np.kron(t, np.eye(problem.dim_b)), val, val, f"rho_a[{idx}]"))
    return tuple(out)


def all_constraints(problem: KeyRateProblem) -> tuple:
    """Every constraint of the optimisation: normalisation, fixed marginal, then the problem's own."""
    return state_constraints(problem) + tuple(problem.constraints)


def expected_statistics(problem_or_povms, rho: np.ndarray) -> np.ndarray:
    """Table ``Tr(rho (M_x (x) N_y))`` for a joint state ``rho`` (to build constraints from a channel model).

    Parameters
    ----------
    problem_or_povms : KeyRateProblem or (povm_a, povm_b)
    rho : numpy.ndarray
        Joint state on ``A (x) B``.

    Returns
    -------
    numpy.ndarray, shape (len(povm_a), len(povm_b))
    """
    if isinstance(problem_or_povms, KeyRateProblem):
        pa, pb = problem_or_povms.povm_a, problem_or_povms.povm_b
    else:
        pa, pb = problem_or_povms
    return np.array([[float(np.trace(rho @ np.kron(m, n)).real) for n in pb] for m in pa])


def _psd_sqrt(m: np.ndarray) -> np.ndarray:
    w, u = np.linalg.eigh((m + m.conj().T) / 2)
    return (u * np.sqrt(np.clip(w, 0, None))) @ u.conj().T


def kraus_g(problem: KeyRateProblem) -> tuple:
    """Kraus operators ``K_a = sum_k |k>_R (x) sqrt(M_{a,k}) (x) sqrt(N_a)`` of the post-processing map G.

    One operator per announcement, of shape ``(n_key * dim, dim)``; the announcements are orthogonal blocks
    (the public register), so ``G(rho) = (+)_a K_a rho K_a^dagger``.

    Returns
    -------
    tuple of numpy.ndarray
    """
    nk = problem.n_key
    out = []
    for a in problem.announcements:
        nb = _psd_sqrt(sum(problem.povm_b[y] for y in a.bob))
        k_op = np.zeros((nk * problem.dim, problem.dim), dtype=complex)
        for k in range(nk):
            xs = [x for x in a.alice if problem.key_map[x] == k]
            if not xs:
                continue
            ma = _psd_sqrt(sum(problem.povm_a[x] for x in xs))
            k_op[k * problem.dim:(k + 1) * problem.dim] = np.kron(ma, nb)
        out.append(k_op)
    return tuple(out)


def pinching_projectors(problem: KeyRateProblem) -> tuple:
    """Projectors ``|k><k|_R (x) 1`` of the key map Z on the output of one block of G."""
    nk = problem.n_key
    return tuple(np.kron(np.diag(np.eye(nk)[k]), np.eye(problem.dim)) for k in range(nk))


@dataclass(frozen=True)
class KeyMapBlock:
    """One announcement's part of the objective, after facial reduction.

    ``f_a(rho) = -S(g rho g^dagger) + sum_k S(z_k rho z_k^dagger)`` with ``S(X) = -Tr X log X``.

    Parameters
    ----------
    g : numpy.ndarray
        Factor of ``Omega_a`` of full row rank ``r`` (shape ``(r, dim)``).
    z : tuple of numpy.ndarray
        Factors of ``Omega_{a,k}`` (one per key value with a non-zero operator).
    omega : numpy.ndarray
        ``Omega_a`` itself.
    omega_k : tuple of numpy.ndarray
        ``Omega_{a,k}``, in the order of ``z``.
    alice_sets : tuple of tuple of int
        Alice's outcomes of each key value, in the order of ``z``.
    bob : tuple of int
        Bob's outcomes of the announcement.
    """

    g: np.ndarray
    z: tuple
    omega: np.ndarray
    omega_k: tuple
    alice_sets: tuple = ()
    bob: tuple = ()


def _factor(omega: np.ndarray, rel_tol: float = 1e-12) -> np.ndarray:
    """``F`` with ``F^dagger F = omega`` and full row rank: ``Lambda^(1/2) W^dagger`` on the range of ``omega``."""
    w, u = np.linalg.eigh((omega + omega.conj().T) / 2)
    keep = w > rel_tol * max(1.0, float(w[-1]))
    f = np.sqrt(w[keep])[:, None] * u[:, keep].conj().T
    return f.real.copy() if not np.iscomplexobj(omega) or not np.any(f.imag) else f


def key_map_blocks(problem: KeyRateProblem) -> tuple:
    """The objective's blocks (one per announcement), facially reduced.

    Returns
    -------
    tuple of KeyMapBlock
    """
    blocks = []
    for a in problem.announcements:
        nb = sum(problem.povm_b[y] for y in a.bob)
        zs, oks, sets = [], [], []
        for k in range(problem.n_key):
            xs = tuple(x for x in a.alice if problem.key_map[x] == k)
            if not xs:
                continue
            ok = np.kron(sum(problem.povm_a[x] for x in xs), nb)
            f = _factor(ok)
            if f.shape[0]:
                zs.append(f)
                oks.append(ok)
                sets.append(xs)
        every = tuple(x for xs in sets for x in xs)
        omega = np.kron(sum(problem.povm_a[x] for x in every), nb) if every else np.zeros((problem.dim,) * 2)
        blocks.append(KeyMapBlock(g=_factor(omega), z=tuple(zs), omega=omega, omega_k=tuple(oks),
                                  alice_sets=tuple(sets), bob=a.bob))
    return tuple(blocks)
