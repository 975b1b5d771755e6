"""Design of MDI-BB84 parameters for a link: per-side intensities and probabilities, the basis bias and the
count / smoothing division of eps_sec; block size for a target; reach.

Method
------
Three intensities per side ``mu > nu > omega`` (``omega`` the scenario's weakest intensity, fixed).  The free
parameters map to an unconstrained vector (``nu = omega + e^a``, ``mu = nu + e^b``; softmax for the
probabilities, logistic for ``q`` and the split).  Symmetric arms (same loss) tie Bob's choices to Alice's.
The objective is a continuation of the key length at the expected counts: the closed forms of
:mod:`.analysis` in float64 (vectorised), count intervals by the float twin of the statistics, the phase
error by the float Chernoff-Hoeffding sampling bound, ``s11 < 0`` and a phase-error bound above 1/2 continued
linearly, so that the search has a slope where there is no key.  Starting points are screened in one call and
the best refined by L-BFGS-B with a batched forward-difference gradient; the certified analysis
(:func:`.analysis.key_length`) at the rounded expected counts gives the only length reported.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from ...errors import ComputationError, InputError
from ...searching import farthest_passing, smallest_block
from .._phase_error import binary_entropy_float, sampling_kl_rate_float
from .._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, NoKeyReason, ReachResult,
                       Status, design_no_key)
from . import analysis as A
from .block import MdiBlock
from .scenario import PROTOCOL_NAME, MdiScenario, optimal_asymptotic_rate

__all__ = ["DesignProblem", "design", "blocksize", "reach", "float_interval", "MAX_PULSES"]

_LN2 = math.log(2.0)
#: Most pulse pairs a block may have (the block.pulses domain).
MAX_PULSES = 1e15
#: Share of eps_sec given to the chain rule and hashing together in a design (2/3 and 1/3 of it).
_FIXED_SHARE = 1.5e-3
_CHAIN_SHARE = _FIXED_SHARE * 2 / 3


def _softmax(z):
    z = z - z.max(axis=0, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=0, keepdims=True)


def _sigmoid(x):
    return 1.0 / (1.0 + np.exp(-x))


@dataclass(frozen=True)
class DesignProblem:
    """The float objective of one scenario and statistics method, over an unconstrained vector."""

    scenario: MdiScenario
    statistics: str

    @property
    def tied(self) -> bool:
        """Whether Bob's free choices are tied to Alice's (arms of equal loss)."""
        m = self.scenario.model
        sc = self.scenario
        fixed_apart = any(x is not None and x[0] != x[1] for x in (sc.intensities, sc.intensity_probabilities))
        return m.alice.loss_db == m.bob.loss_db and not fixed_apart

    def sizes(self) -> tuple:
        """Free coordinates: ``(intensities, probabilities, basis bias, epsilon split)``."""
        sc = self.scenario
        sides = 1 if self.tied else 2
        return (0 if sc.intensities is not None else 2 * sides,
                0 if sc.intensity_probabilities is not None else 2 * sides,
                0 if sc.key_basis_probability is not None else 1, 1)

    @property
    def dim(self) -> int:
        """Number of free coordinates."""
        return sum(self.sizes())

    def decode(self, theta):
        """theta (dim, m) -> mu_a, mu_b (lists of 3 arrays), p_a, p_b (same), q (m,), count share (m,)."""
        theta = np.asarray(theta, dtype=float)
        if theta.ndim == 1:
            theta = theta[:, None]
        m = theta.shape[1]
        sc = self.scenario
        n_mu, n_p, n_q, _ = self.sizes()
        i = 0
        if n_mu:
            w = np.full(m, sc.weakest_intensity)
            mus = []
            for s in range(n_mu // 2):
                a, b = np.clip(theta[i], -30, 3), np.clip(theta[i + 1], -30, 3)
                nu = w + np.exp(a)
                mus.append([nu + np.exp(b), nu, w])
                i += 2
            mu_a, mu_b = mus[0], mus[-1]
        else:
            mu_a, mu_b = ([np.full(m, x) for x in side] for side in sc.intensities)
        if n_p:
            ps = []
            for s in range(n_p // 2):
                z = np.vstack([theta[i:i + 2], np.zeros((1, m))])
                ps.append(list(_softmax(z)))
                i += 2
            p_a, p_b = ps[0], ps[-1]
        else:
            p_a, p_b = ([np.full(m, x) for x in side] for side in sc.intensity_probabilities)
        if n_q:
            q = _sigmoid(theta[i])
            i += 1
        else:
            q = np.full(m, sc.key_basis_probability)
        share = _sigmoid(theta[i]) * (1 - _FIXED_SHARE - 2 * _CHAIN_SHARE)   # smoothing eps >= chain eps
        return mu_a, mu_b, p_a, p_b, q, share

    def encode(self, mu_a, p_a, q, share=0.6, mu_b=None, p_b=None):
        """Unconstrained coordinates of a design (inverse of :meth:`decode`)."""
        n_mu, n_p, n_q, _ = self.sizes()
        out = []
        sides = [(mu_a, p_a)] + ([] if self.tied else [(mu_b or mu_a, p_b or p_a)])
        if n_mu:
            for mu, _ in sides:
                out += [math.log(mu[1] - mu[2]), math.log(mu[0] - mu[1])]
        if n_p:
            for _, p in sides:
                out += [math.log(p[0] / p[2]), math.log(p[1] / p[2])]
        if n_q:
            out.append(math.log(q / (1 - q)))
        c = min(share / (1 - _FIXED_SHARE - 2 * _CHAIN_SHARE), 1 - 1e-9)
        out.append(math.log(c / (1 - c)))
        return np.array(out)

    def bounds(self) -> list:
        """Box for theta: ``nu - omega`` in [1e-3, 0.8], ``mu - nu`` in [1e-2, 1.5], logits within +-8 (+-6 for q).

        Returns
        -------
        list of (float, float)
        """
        n_mu, n_p, n_q, _ = self.sizes()
        box = []
        for _ in range(n_mu // 2):
            box += [(math.log(1e-3), math.log(0.8)), (math.log(1e-2), math.log(1.5))]
        return box + [(-8.0, 8.0)] * n_p + [(-6.0, 6.0)] * n_q + [(-8.0, 8.0)]

    def scale(self) -> float:
        """Typical size of the key length (bits), used to normalise the objective."""
        m = self.scenario.model
        return max(self.scenario.pulses * m.eta_a * m.eta_b * 0.05, 1.0)

    def key_length_float(self, theta):
        """Continued key length (bits, float, may be negative) at the expected counts; vectorised."""
        mu_a, mu_b, p_a, p_b, q, share = self.decode(theta)
        sc = self.scenario
        model = sc.model
        N = sc.pulses
        ka = np.stack(mu_a)[:, None, :]
        kb = np.stack(mu_b)[None, :, :]
        w = N * np.stack(p_a)[:, None, :] * np.stack(p_b)[None, :, :]
        qz, ez = model.gains(ka, kb, "Z")
        qx, ex = model.gains(ka, kb, "X")
        zd, ze = w * q * q * qz, w * q * q * ez
        xd, xe = w * (1 - q) ** 2 * qx, w * (1 - q) ** 2 * ex
        eps_c = sc.eps_sec * share / A.CLOSED_FORM_EVENTS
        eps_s = sc.eps_sec * (1 - _FIXED_SHARE - share) / (2 * A.SINGLE_PHOTON_APPEARANCES)
        eps_ch = sc.eps_sec * _CHAIN_SHARE / (2 * A.CHAIN_RULES)
        eps_pa = sc.eps_sec * (_FIXED_SHARE - _CHAIN_SHARE)
        meth = self.statistics

        def iv(t):
            lo, hi = float_interval(meth, t, t.sum(axis=(0, 1)), eps_c)
            return [list(r) for r in lo], [list(r) for r in hi]

        zl, zh = iv(zd)
        xl, xh = iv(xd)
        el, eh = iv(xe)
        s11 = A.s11_lower(mu_a, mu_b, p_a, p_b, zl, zh, np.exp)
        k11 = A.s11_lower(mu_a, mu_b, p_a, p_b, xl, xh, np.exp)
        v11 = A.v11_upper(mu_a, mu_b, p_a, p_b, el, eh, np.exp)
        nz = zd.sum(axis=(0, 1))
        s11 = np.minimum(s11, nz)
        k11 = np.minimum(k11, xd.sum(axis=(0, 1)))
        v11 = np.minimum(v11, xe.sum(axis=(0, 1)))
        lam = np.clip(v11 / np.maximum(k11, 1.0), 1e-12, 0.5)
        phi = sampling_kl_rate_float(lam, np.maximum(s11, 1.0), np.maximum(k11, 1e-3), eps_s * eps_s)
        h = binary_entropy_float(np.minimum(phi, 0.5)) + 4.0 * np.maximum(phi - 0.5, 0.0)
        qber = np.clip(ze.sum(axis=(0, 1)) / np.maximum(nz, 1e-300), 1e-15, 0.5)
        leak = sc.ec_efficiency * nz * binary_entropy_float(qber)
        pen = (A.CHAIN_RULES * np.log(2 / (eps_ch * eps_ch)) + 2 * np.log(1 / (2 * eps_pa))
               + np.log(2 / sc.eps_cor)) / _LN2
        single = np.maximum(s11, 0.0) * (1 - h) + np.minimum(s11, 0.0)
        return single - leak - pen

    def negative_with_gradient(self, x, step=1e-6):
        """(-objective, -gradient), normalised, with a batched forward-difference gradient."""
        pts = np.repeat(x[:, None], len(x) + 1, axis=1)
        pts[np.arange(len(x)), np.arange(1, len(x) + 1)] += step
        with np.errstate(all="ignore"):
            vals = self.key_length_float(pts) / self.scale()
        vals = np.where(np.isfinite(vals), vals, -1e30)
        return -float(vals[0]), -(vals[1:] - vals[0]) / step

    def starts(self) -> list:
        """Starting points: a few intensity, probability and basis-bias choices (more test basis for few counts)."""
        sc = self.scenario
        w = sc.weakest_intensity
        few = sc.pulses * sc.model.eta_a * sc.model.eta_b < 1e6
        out = []
        for (m1, m2), p, q in itertools.product(((0.4, 0.1), (0.25, 0.05), (0.6, 0.2)),
                                                ((0.5, 0.3, 0.2), (0.3, 0.4, 0.3), (0.7, 0.2, 0.1)),
                                                (0.5, 0.7) if few else (0.7, 0.9)):
            mu = sc.intensities[0] if sc.intensities else (max(m1, m2 + w + 1e-3), max(m2, w + 1e-3), w)
            pp = sc.intensity_probabilities[0] if sc.intensity_probabilities else p
            qq = sc.key_basis_probability or q
            mub = sc.intensities[1] if sc.intensities else None
            pb = sc.intensity_probabilities[1] if sc.intensity_probabilities else None
            out.append(self.encode(mu, pp, qq, 0.6, mub, pb))
        return out


def float_interval(method: str, counts, total, eps):
    """Fast float stand-in for the count intervals of the design objective (never certified).

    Hoeffding: ``c -/+ sqrt(total/2 ln(1/eps))``, as certified.  Exact and Chernoff: the roots of
    ``(mu - c)^2 = 2 L mu (1 - mu/T)`` with ``L = ln(1/eps)`` and ``T`` the basis total (the Gaussian-tail form
    with the binomial variance), close to the Clopper-Pearson limits for the counts of a design and about 50
    times faster than the scipy inversion; the certified evaluation of the chosen point uses the method asked
    for.

    Returns
    -------
    (lo, hi) : numpy.ndarray
    """
    c = np.maximum(np.asarray(counts, dtype=float), 0.0)
    L = np.log(1.0 / np.asarray(eps, dtype=float))
    if method == "hoeffding":
        d = np.sqrt(np.asarray(total, dtype=float) / 2.0 * L)
        return np.maximum(c - d, 0.0), c + d
    # with the binomial variance mu (1 - mu/T) (Wilson's score form), so that a count near the total is
    # not treated as Poissonian
    T = np.maximum(np.asarray(total, dtype=float), 1e-300)
    a = 1.0 + 2.0 * L / T
    root = np.sqrt(np.maximum((c + L) ** 2 - a * c * c, 0.0))
    return np.maximum((c + L - root) / a, 0.0), np.minimum((c + L + root) / a, T)


def objective_problem(scenario: MdiScenario, statistics: str = A.DEFAULT_STATISTICS) -> DesignProblem:
    """The design problem of a scenario (three intensities per side).

    Raises
    ------
    InputError
        For an intensity count other than 3 (the design uses the closed form) or fixed intensities whose
        weakest differs between the sides.
    """
    if scenario.intensity_count != 3:
        raise InputError("protocol.intensity_count", scenario.intensity_count,
                         "3 for design (the closed form); other counts are analysed by keylength only")
    return DesignProblem(scenario, statistics)


def optimise(problem: DesignProblem, warm=None, continuation: bool = True) -> tuple:
    """Best (theta, float key length): screen the starts, refine the best by L-BFGS-B; a warm start (from a
    neighbouring distance or block size) is refined locally too."""
    from scipy import optimize as _opt  # scipy.optimize costs about 0.2 s at start-up; imported on use

    box = problem.bounds()
    lo, hi = np.array([b[0] for b in box]), np.array([b[1] for b in box])
    cand = np.clip(np.array(problem.starts()), lo, hi)
    if warm is not None:
        cand = np.vstack([np.clip(np.asarray(warm, float), lo, hi), cand])
    with np.errstate(all="ignore"):
        screen = problem.key_length_float(cand.T)
    screen = np.where(np.isfinite(screen), screen, -np.inf)
    order = np.argsort(-screen)[:2]
    best_x, best_v = cand[order[0]], float(screen[order[0]]) / problem.scale()
    for j in order:
        with np.errstate(all="ignore"):
            res = _opt.minimize(problem.negative_with_gradient, cand[j], jac=True, method="L-BFGS-B", bounds=box,
                                options={"maxiter": 200, "ftol": 1e-10, "gtol": 1e-8})
        if np.isfinite(res.fun) and -res.fun > best_v:
            best_x, best_v = res.x, -res.fun
        if best_v > 0:
            break
    if best_v <= 0 and continuation:
        best_x, best_v = _continue_in_block_size(problem, best_x, best_v, box)
    return best_x, best_v * problem.scale()


def _local(problem: DesignProblem, x, box):
    """L-BFGS-B inside a trust box of +-1 around ``x`` (stays on the branch ``x`` is on)."""
    from scipy import optimize as _opt
    local = [(max(a, xi - 1.0), min(b, xi + 1.0)) for (a, b), xi in zip(box, x)]
    with np.errstate(all="ignore"):
        res = _opt.minimize(problem.negative_with_gradient, x, jac=True, method="L-BFGS-B", bounds=local,
                            options={"maxiter": 100, "ftol": 1e-10, "gtol": 1e-8})
    return res.x if np.isfinite(res.fun) else x


def _continue_in_block_size(problem: DesignProblem, best_x, best_v, box):
    """No key found: optimise a 1000 times larger block (well inside the key region when there is one) and follow
    its optimum down to the block asked for in steps of about 3x, each a local refinement (the homotopy of the
    decoy-bb84 design)."""
    sc = problem.scenario
    far = DesignProblem(sc.with_pulses(sc.pulses * 1e3), problem.statistics)
    x, v = optimise(far, continuation=False)
    if v <= 0:
        return best_x, best_v
    for factor in (300.0, 100.0, 30.0, 10.0, 3.0, 1.0):
        x = _local(DesignProblem(sc.with_pulses(sc.pulses * factor), problem.statistics), x, box)
    with np.errstate(all="ignore"):
        v = float(problem.key_length_float(x[:, None])[0]) / problem.scale()
    return (x, v) if v > best_v else (best_x, best_v)


def _expected_block(problem: DesignProblem, theta) -> tuple:
    mu_a, mu_b, p_a, p_b, q, share = problem.decode(theta)
    first = lambda xs: tuple(float(x[0]) for x in xs)  # noqa: E731
    mu_a, mu_b, p_a, p_b = first(mu_a), first(mu_b), first(p_a), first(p_b)
    q, share = float(q[0]), float(share[0])
    sc = problem.scenario
    c = sc.model.expected_counts(sc.pulses, mu_a, p_a, mu_b, p_b, q)
    rnd = lambda t: tuple(tuple(int(round(x)) for x in row) for row in t)  # noqa: E731
    kd, td = rnd(c.key_detections), rnd(c.test_detections)
    ke = tuple(tuple(min(e, d) for e, d in zip(re, rd)) for re, rd in zip(rnd(c.key_errors), kd))
    te = tuple(tuple(min(e, d) for e, d in zip(re, rd)) for re, rd in zip(rnd(c.test_errors), td))
    nz = sum(map(sum, kd))
    qber = sum(map(sum, ke)) / nz if nz else 0.0
    leak = int(math.ceil(sc.ec_efficiency * nz * float(binary_entropy_float(qber)))) if qber > 0 else 0
    rest = 1.0 - share - _FIXED_SHARE
    split = {"count_estimation": share, "single_photon_smoothing": rest, "chain_rule": _CHAIN_SHARE,
             "privacy_amplification": _FIXED_SHARE - _CHAIN_SHARE}
    block = MdiBlock((mu_a, mu_b), (p_a, p_b), kd, ke, td, te, leak, sc.eps_sec, sc.eps_cor, split)
    return block, c, q


def _result(problem: DesignProblem, theta, fval) -> DesignResult:
    sc = problem.scenario
    block, counts, q = _expected_block(problem, theta)
    kl = A.key_length(block, problem.statistics)
    N = sc.pulses
    rate = kl.secret_key_length / N
    f = sc.model.repetition_rate_hz
    params = {"intensities": [list(block.intensities[0]), list(block.intensities[1])],
              "intensity_probabilities": [list(block.intensity_probabilities[0]),
                                          list(block.intensity_probabilities[1])],
              "key_basis_probability": q, "epsilon_split": dict(block.epsilon_split)}
    expected = {**counts.as_dict(), "ec_leak_bits": block.ec_leak_bits, "pulses": N,
                "expected_key_detections": float(counts.key_detections.sum())}
    status = KEY if kl.secret_key_length > 0 else _no_key(sc, kl)
    return DesignResult(protocol=PROTOCOL_NAME, parameters=params, expected=kl, secret_key_rate_per_signal=rate,
                        secret_key_rate_bps=None if f is None else rate * f, expected_counts=expected,
                        block_fill_time_s=sc.model.block_fill_time_s(N), scenario=sc.as_dict(),
                        diagnostics={"float_objective_bits": float(fval)}, status=status)


def _no_key(sc: MdiScenario, kl) -> Status:
    asym, _, _ = optimal_asymptotic_rate(sc.model, sc.ec_efficiency)
    reason = NoKeyReason.THRESHOLD_EXCEEDED if asym <= 0 else NoKeyReason.NO_POSITIVE_DESIGN
    return design_no_key(kl.status, reason)


def _design(scenario: MdiScenario, statistics: str, warm=None) -> tuple:
    problem = objective_problem(scenario, statistics)
    theta, fval = optimise(problem, warm)
    return _result(problem, theta, fval), theta


def design(scenario: MdiScenario, statistics: str = A.DEFAULT_STATISTICS) -> DesignResult:
    """Optimise the free parameters of ``scenario`` for the largest expected key per block.

    Returns
    -------
    DesignResult
        With the certified key length at the rounded expected counts, the rates per pulse pair and per
        second, the chosen parameters (both sides) and the expected counts.
    """
    return _design(scenario, statistics)[0]


def reach(scenario: MdiScenario, statistics: str = A.DEFAULT_STATISTICS, tolerance_km: float = 0.1,
          max_km: float = 1000.0) -> ReachResult:
    """Largest Alice-Bob fibre length (both arms together, the relay at the scenario's fraction of the way)
    with a positive certified key; bisection on the total length, warm-started along the way.

    Returns
    -------
    ReachResult
        ``reach_km`` is the total length Alice-relay-Bob.

    Raises
    ------
    InputError
        If the fibre loss is 0 dB/km (the loss then does not grow with distance).
    """
    if not scenario.model.alice.fiber_loss_db_per_km > 0:
        raise InputError("link.fiber_loss_db_per_km", scenario.model.alice.fiber_loss_db_per_km,
                         "a positive fibre loss for a reach (with 0 dB/km every distance gives the same key)")

    def positive(L, warm):
        res, th = _design(scenario.at_total_distance(L), statistics, warm)
        return res.expected.secret_key_length > 0, th, res

    ok, warm, best = positive(0.0, None)
    if not ok:
        return ReachResult(None, statistics, tolerance_km, max_km,
                           Status.no_key(best.status.reason, "at 0 km: " + best.status.detail))
    reach, res, limit_reached = farthest_passing(positive, warm, best, max_km, tolerance_km)
    if limit_reached:
        return ReachResult(None, statistics, tolerance_km, max_km,
                           Status(None, f"key at every distance tried up to the search limit {max_km:g} km"),
                           limit_reached=True, at_reach=res)
    return ReachResult(reach, statistics, tolerance_km, max_km, KEY, at_reach=res)


def blocksize(scenario: MdiScenario, target: BlockTarget, statistics: str = A.DEFAULT_STATISTICS,
              max_pulses: float = MAX_PULSES, unit: str | None = None) -> BlockSizeResult:
    """Smallest number of pulse pairs whose optimised design reaches ``target`` (bisection on log N).

    ``fraction=F`` is a fraction of the infinite-decoy asymptotic rate with no sifting loss
    (:func:`.scenario.optimal_asymptotic_rate`).

    Raises
    ------
    InputError
        For a unit other than pulses, a fraction target on a link without asymptotic key, or a target no
        block of at most ``max_pulses`` reaches.
    """
    if unit not in (None, "pulses"):
        raise InputError("unit", unit, "pulses (an MDI block is given in pulse pairs)")
    asym = None
    if target.kind is BlockTargetKind.RATE_FRACTION:
        asym, _, _ = optimal_asymptotic_rate(scenario.model, scenario.ec_efficiency)
        if asym <= 0:
            raise InputError("target", str(target), "a link with a positive asymptotic rate")

    def meets(N, warm=None):
        res, th = _design(scenario.with_pulses(N), statistics, warm)
        ell = res.expected.secret_key_length
        if target.kind is BlockTargetKind.POSITIVE_KEY:
            ok = ell > 0
        elif target.kind is BlockTargetKind.KEY_BITS:
            ok = ell >= target.value
        else:
            ok = ell / N >= target.value * asym
        return ok, res, th

    top = math.log10(max_pulses)
    x = min(math.log10(scenario.pulses), top)
    found = smallest_block(meets, x, top, warm_upwards=True)
    if found is None:
        raise InputError("target", str(target), f"a target reachable with at most {max_pulses:g} pulse pairs")
    lo, hi, N, res = found
    if N is None:
        raise ComputationError(f"target {target} met at {10 ** hi:.6g} pulse pairs but not just above it")
    shrink = 1.0 - 10 ** (lo - hi) if lo < hi else 1.0
    return BlockSizeResult(target=target, size=N, size_kind="pulses", design=res,
                           resolution=max(1, int(math.ceil(N * shrink))))

