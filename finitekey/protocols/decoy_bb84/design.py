"""Robust design of decoy-state BB84 parameters for a link: intensities, their probabilities, basis bias and
epsilon split (count estimation vs phase-error sampling; the chain-rule and hashing terms get a small fixed
share); block size for a target; reach.

Method
------
The free parameters are mapped to an unconstrained vector ``theta`` (``mu2 = mu3 + e^a``,
``mu1 = mu2 + mu3 + e^b`` so the closed form's ordering holds everywhere; softmax for the intensity
probabilities and the epsilon split; logistic for ``q_X``).  The objective is a *continuation* of the key
length per pulse at the expected counts: the same closed forms as the certified analysis evaluated in float64
(vectorised), without clipping the result at zero, with ``s1`` allowed to go negative and the entropy of a
phase-error bound beyond 1/2 continued linearly upwards.  It is therefore continuous, with a useful gradient,
also where no key exists -- there is no zero plateau for a starting point to sit on.  Several starts chosen
from the expected number of detections (few detections: more test basis and decoys) are refined by L-BFGS-B
with a batched forward-difference gradient, and the best point is then evaluated by the certified analysis
(:func:`finitekey.protocols.decoy_bb84.analysis.key_length`) at the rounded expected counts; only that certified
length is reported.  For the ``exact`` and ``chernoff`` statistics the float objective bounds the phase error
with the Chernoff-Hoeffding relative-entropy bound for sampling without replacement (the smooth float form
of the bound the final evaluation certifies, taking the test count's upper bound equal to its lower bound).

References
----------
.. [1] C. C. W. Lim et al., Phys. Rev. A 89, 022307 (2014) -- the parameters optimised.
.. [2] R. H. Byrd, P. Lu, J. Nocedal, C. Zhu, "A limited memory algorithm for bound constrained
   optimization", SIAM J. Sci. Comput. 16, 1190 (1995) (L-BFGS-B).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ...domains import Domain
from ...errors import ComputationError, InputError
from ...decoy import closed_forms as CF
from ...decoy import intervals as IV
from ...searching import farthest_passing, smallest_block
from .. import _phase_error as PE
from .._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, NoKeyReason, ReachResult,
                       Status, design_no_key)
from .analysis import (CHAIN_RULES, DEFAULT_STATISTICS, count_events, key_length, term_specs,
                       three_intensity_condition)
from .block import ACCEPTANCE_STATISTICS, PROTOCOL_NAME, SECRECY_TERMS, DecoyBlock, parse_block
from .scenario import BLOCK_UNITS, DecoyScenario, optimal_gllp_rate, parse_scenario

__all__ = ["DesignProblem", "design", "reach", "blocksize", "objective_problem"]

_LN2 = math.log(2.0)


def _softmax(z):
    z = z - z.max(axis=0, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=0, keepdims=True)


def _sigmoid(x):
    return 1.0 / (1.0 + np.exp(-x))


#: Most pulses a block may have (the block.pulses domain).
MAX_PULSES = 1e15


@dataclass(frozen=True)
class DesignProblem:
    """The float objective of one scenario and statistics method, over an unconstrained vector."""

    scenario: DecoyScenario
    statistics: str

    # ---- parameter layout -----------------------------------------------------------------------------
    @property
    def k(self) -> int:
        return self.scenario.intensity_count

    @property
    def free_split(self) -> bool:
        return self.statistics != "hoeffding"

    def sizes(self):
        """Numbers of free coordinates: ``(intensities, probabilities, basis bias, epsilon split)``.

        Returns
        -------
        tuple of int
            Zero for each group the scenario fixes.
        """
        sc = self.scenario
        n_mu = 0 if sc.intensities is not None else (2 if self.k in (2, 3) else 0)
        n_p = 0 if sc.intensity_probabilities is not None else self.k - 1
        n_q = 0 if sc.key_basis_probability is not None else 1
        n_e = 1 if self.free_split else 0
        return n_mu, n_p, n_q, n_e

    @property
    def dim(self) -> int:
        return sum(self.sizes())

    def decode(self, theta):
        """theta (dim, m) -> mu (k, m), p (k, m), qx (m,), split (4, m) or None."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float).T).T if np.ndim(theta) == 1 else np.asarray(theta)
        if theta.ndim == 1:
            theta = theta[:, None]
        m = theta.shape[1]
        sc = self.scenario
        n_mu, n_p, n_q, n_e = self.sizes()
        i = 0
        if n_mu:
            a, b = np.clip(theta[0], -30, 3), np.clip(theta[1], -30, 3)
            i = 2
            if self.k == 3:
                m3 = np.full(m, sc.weakest_intensity)
                m2 = m3 + np.exp(a)
                m1 = m2 + m3 + np.exp(b)
                mu = np.vstack([m1, m2, m3])
            else:
                m2 = np.exp(a)
                m1 = m2 + np.exp(b)
                mu = np.vstack([m1, m2])
        else:
            mu = np.repeat(np.asarray(sc.intensities, dtype=float)[:, None], m, axis=1)
        if n_p:
            z = np.vstack([theta[i:i + n_p], np.zeros((1, m))])
            p = _softmax(z)
            i += n_p
        else:
            p = np.repeat(np.asarray(sc.intensity_probabilities, dtype=float)[:, None], m, axis=1)
        if n_q:
            qx = _sigmoid(theta[i])
            i += 1
        else:
            qx = np.full(m, sc.key_basis_probability)
        split = None
        if n_e:
            # count share in (0, 1 - fixed - chain): the single-photon smoothing keeps at least the chain
            # rule's share (key_length refuses a split that gives the chain rule more; proof note, section 7)
            share = _sigmoid(theta[i]) * (1 - _FIXED_SHARE - _CHAIN_SHARE)
            split = np.vstack([share, (1 - _FIXED_SHARE) - share, np.full(m, _CHAIN_SHARE),
                               np.full(m, _FIXED_SHARE - _CHAIN_SHARE)])
        return mu, p, qx, split

    def encode(self, mu, p, qx, split=None):
        """Unconstrained coordinates of a design (the inverse of :meth:`decode`), e.g. for a warm start.

        Parameters
        ----------
        mu : sequence of float
            Intensities, descending.
        p : sequence of float
            Their probabilities.
        qx : float
            Key-basis probability.
        split : sequence of float, optional
            Epsilon split (default: the optimiser's starting share).

        Returns
        -------
        numpy.ndarray
        """
        n_mu, n_p, n_q, n_e = self.sizes()
        out = []
        if n_mu:
            if self.k == 3:
                out += [math.log(mu[1] - mu[2]), math.log(mu[0] - mu[1] - mu[2])]
            else:
                out += [math.log(mu[1]), math.log(mu[0] - mu[1])]
        if n_p:
            out += [math.log(p[j] / p[-1]) for j in range(self.k - 1)]
        if n_q:
            out.append(math.log(qx / (1 - qx)))
        if n_e:
            c = 0.8 if split is None else split[0] / (split[0] + split[1])
            c = min(c * (1 - _FIXED_SHARE) / (1 - _FIXED_SHARE - _CHAIN_SHARE), 1 - 1e-9)
            out.append(math.log(c / (1 - c)))
        return np.array(out)

    # ---- objective ------------------------------------------------------------------------------------
    def key_length_float(self, theta):
        """Continued key length (bits, float, may be negative) at the expected counts; vectorised (dim, m)."""
        return self._key_and_pulses(theta)[0]

    def pulses_float(self, theta):
        """Pulses per block at ``theta``: the scenario's, or (``key_detections`` given) the number whose
        expected key-basis detections equal the target, ``T / (q_X^2 live sum_k p_k D_k)``; vectorised."""
        return self._key_and_pulses(theta)[1]

    def objective(self, theta):
        """What the design maximises (vectorised): the continued key length per block when the scenario fixes
        the pulses; with ``key_detections``, the key per pulse sent, as bits per :meth:`reference_pulses`
        pulses where positive and the continued key length where not (continuous at 0, so there is still no
        zero plateau; sending more pulses cannot make a negative key look better), less a steep penalty where
        the block would need more than :data:`MAX_PULSES` pulses (which no block may have: without it, a search
        finding no key could drift to a vanishing key-basis probability)."""
        ell, N = self._key_and_pulses(theta)
        if self.scenario.pulses is not None:
            return ell
        over = np.log10(np.maximum(N / MAX_PULSES, 1.0))
        return np.where(ell > 0, ell * (self.reference_pulses() / N), ell) - 10.0 * self.scale() * over

    def reference_pulses(self) -> float:
        """The scenario's pulses; with ``key_detections``, a typical block for them (``mu = 0.5``, ``q_X^2 =
        0.5``), used only to scale the objective and pick starting points."""
        sc = self.scenario
        if sc.pulses is not None:
            return sc.pulses
        d = float(sc.model.click_probability(0.5))
        return sc.key_detections / (0.5 * d * float(sc.model.live_fraction(d)))

    def _key_and_pulses(self, theta):
        mu, p, qx, split = self.decode(theta)
        sc = self.scenario
        model = sc.model
        d = model.click_probability(mu)
        e = model.error_probability(mu)
        live = model.live_fraction((p * d).sum(axis=0))
        N = sc.pulses if sc.pulses is not None else sc.key_detections / ((p * d).sum(axis=0) * (qx * qx * live))
        wx = N * p * (qx * qx * live)
        wz = N * p * ((1 - qx) ** 2 * live)
        kd, ke, td, te = wx * d, wx * e, wz * d, wz * e
        analysis = "three-intensity" if self.k == 3 else "two-intensity"
        n_count = count_events(self.k, analysis)
        specs = term_specs(n_count, analysis)
        w = [s.weight for s in specs[:4]]
        # pinned terms (two intensities: eps_cor for an undetected correction failure) come off first
        budget = sc.eps_sec - sum(s.weight * sc.eps_cor for s in specs if s.pinned is not None)
        if split is None:
            # one unit per event or appearance, as the certified ledger (eps_sec/21 for three intensities)
            eps = np.full(qx.shape, budget / sum(w))
            eps_c = eps_s = eps_ch = eps_pa = eps
        else:
            eps_c, eps_s, eps_ch, eps_pa = (budget * split[j] / w[j] for j in range(4))
        eps_p = eps_s * eps_s    # the phase-error bound fails with probability at most the smoothing squared
        meth = self.statistics
        kdt, tdt, tet = kd.sum(axis=0), td.sum(axis=0), te.sum(axis=0)
        kl, kh = IV.count_interval_float(meth, kd, kdt, eps_c)
        tl, th = IV.count_interval_float(meth, td, tdt, eps_c)
        el, eh = IV.count_interval_float(meth, te, tet, eps_c)
        mu_l, p_l = list(mu), list(p)
        if self.k == 3:
            s0, s1 = CF.three_intensity(mu_l, p_l, list(kl), list(kh), np.exp)
            _, s1z = CF.three_intensity(mu_l, p_l, list(tl), list(th), np.exp)
            v1 = CF.three_intensity_errors(mu_l, p_l, list(el), list(eh), np.exp)
        else:
            kel, keh = IV.count_interval_float(meth, ke, ke.sum(axis=0), eps_c)
            vk = np.sqrt(kdt / 2 * np.log(1 / eps_c))
            vt = np.sqrt(tdt / 2 * np.log(1 / eps_c))
            s0u = CF.two_intensity_vacuum_upper(mu_l, p_l, keh[1], vk, np.exp)
            s0, s1 = CF.two_intensity(mu_l, p_l, list(kl), list(kh), s0u, np.exp)
            s0zu = CF.two_intensity_vacuum_upper(mu_l, p_l, eh[1], vt, np.exp)
            _, s1z = CF.two_intensity(mu_l, p_l, list(tl), list(th), s0zu, np.exp)
            v1 = CF.two_intensity_errors(mu_l, p_l, list(el), list(eh), np.exp)
        # True counts cannot exceed the detections, so these caps keep valid lower bounds valid and guard
        # the float path against rounding garbage.
        s0, s1 = np.minimum(s0, kdt), np.minimum(s1, kdt)
        s1z = np.minimum(s1z, tdt)
        v1 = np.minimum(v1, tet)   # single-photon test errors are a part of all test errors (as certified)
        s1z_safe = np.maximum(s1z, 1.0)
        s1_safe = np.maximum(s1, 1.0)
        lam = np.clip(v1 / s1z_safe, 1e-12, 0.5)
        if meth == "hoeffding":
            g2 = PE.sampling_gamma(eps_p, lam, s1z_safe, s1_safe, np.log)
            # as in the certified evaluation: max(gamma_2014, mu) with mu the random-sampling deviation
            # (finitekey.bounds.random_sampling), continued to real counts
            mu = PE.random_sampling_deviation_float(s1_safe, s1z_safe, eps_p)
            phi = lam + np.maximum(np.sqrt(np.maximum(g2, 0.0)), mu)
        else:
            # float form of the Chernoff-Hoeffding bound of the final evaluation (with K_U = k_L)
            phi = PE.sampling_kl_rate_float(lam, s1_safe, np.maximum(s1z, 1e-3), eps_p)
        h = PE.binary_entropy_float(np.minimum(phi, 0.5)) + 4.0 * np.maximum(phi - 0.5, 0.0)
        qber = np.clip(ke.sum(axis=0) / kdt, 1e-15, 0.5)
        leak = sc.ec_efficiency * kdt * PE.binary_entropy_float(qber)
        pen = (CHAIN_RULES * np.log(2 / (eps_ch * eps_ch)) + 2 * np.log(1 / (2 * eps_pa))
               + np.log(2 / sc.eps_cor)) / _LN2
        # s1 < 0 is charged directly (s1 (1 - h) would turn positive when both factors are negative)
        single = np.maximum(s1, 0.0) * (1 - h) + np.minimum(s1, 0.0)
        return s0 + single - leak - pen, N * np.ones_like(qx)

    def bounds(self) -> list:
        """Box for theta: intensities within physical ranges (mu2 - mu3 in [1e-4, 1], mu1 - mu2 - mu3 in
        [1e-3, 1.5], which also keeps the closed forms away from cancellation), probabilities >= ~3e-4."""
        n_mu, n_p, n_q, n_e = self.sizes()
        out = []
        if n_mu:
            out += [(math.log(1e-4), 0.0), (math.log(1e-3), math.log(1.5))]
        out += [(-8.0, 8.0)] * n_p + [(-8.0, 8.0)] * n_q + [(-10.0, 10.0)] * n_e
        return out

    def scale(self) -> float:
        """Typical size of the key length (bits) used to normalise the objective."""
        sc = self.scenario
        return max(self.reference_pulses() * sc.model.eta * 0.1, 1.0)

    def negative_with_gradient(self, x, step=1e-6):
        """(-objective, -gradient) with a batched forward-difference gradient; objective normalised."""
        pts = np.repeat(x[:, None], len(x) + 1, axis=1)
        pts[np.arange(len(x)), np.arange(1, len(x) + 1)] += step
        vals = self.objective(pts) / self.scale()
        g = (vals[1:] - vals[0]) / step
        return -float(vals[0]), -g

    def starts(self) -> list:
        """Physically sensible starting points, scaled with the expected number of detections."""
        sc = self.scenario
        detections = self.reference_pulses() * sc.model.eta * 0.5
        few = detections < 1e6
        out = []
        if self.k == 3:
            mus = [(0.5, 0.1), (0.4, 0.2), (0.7, 0.05)]
            ps = [(0.7, 0.2, 0.1), (0.5, 0.3, 0.2), (0.85, 0.1, 0.05)]
        else:
            mus = [(0.5, 0.15), (0.4, 0.25), (0.7, 0.1)]
            ps = [(0.7, 0.3), (0.5, 0.5), (0.85, 0.15)]
        qs = (0.6, 0.75, 0.85) if few else (0.85, 0.95, 0.75)
        w3 = sc.weakest_intensity
        import itertools
        for (m1, m2), p, q in itertools.product(mus, ps, qs):
            if self.k == 3:
                m2 = max(m2, w3 * 2 + 1e-3)
                m1 = max(m1, m2 + w3 + 1e-3)
                mu = (m1, m2, w3)
            else:
                mu = (m1, m2)
            mu = sc.intensities or mu
            p = sc.intensity_probabilities or p
            q = sc.key_basis_probability or q
            out.append(self.encode(mu, p, q))
        return out


#: Share of eps_sec given to the chain-rule and hashing terms together (2/3 and 1/3 of it) in a design: their
#: penalties grow only logarithmically, so the optimum gives them little; the count-estimation /
#: phase-error division of the rest is optimised.
_FIXED_SHARE = 1.5e-3
#: Of it, the chain rule's share (the rest goes to hashing).
_CHAIN_SHARE = _FIXED_SHARE * 2 / 3


def _default_split(k: int):
    specs = term_specs(count_events(k, "three-intensity" if k == 3 else "two-intensity"))
    return [s.default_fraction for s in specs[:4]]


def objective_problem(scenario: DecoyScenario, statistics: str = DEFAULT_STATISTICS) -> DesignProblem:
    """The design problem (float objective and parameter map) of a scenario; used by the benchmark.

    Parameters
    ----------
    scenario : DecoyScenario
    statistics : str

    Returns
    -------
    DesignProblem
    """
    if scenario.intensity_count not in (2, 3):
        raise InputError("protocol.intensity_count", scenario.intensity_count,
                         "2 or 3 for design (the closed forms); larger counts are analysed by key_length only")
    if scenario.intensities is not None and scenario.intensity_count == 3 and \
            not three_intensity_condition(scenario.intensities):
        raise InputError("protocol.intensities", list(scenario.intensities),
                         "three intensities with mu1 > mu2 + mu3 and mu2 > mu3 >= 0")
    return DesignProblem(scenario, statistics)


def optimise(problem: DesignProblem, starts=None, refine: int = 3, continuation: bool = True,
             alternatives: list | None = None, warm=None) -> tuple:
    """Best (theta, float key length): screen all starts in one vectorised call, refine the best of them with
    L-BFGS-B (batched forward-difference gradient); the next best ``refine - 1`` are refined too while no
    positive key has been found."""
    if problem.dim == 0:
        x = np.zeros(0)
        return x, float(problem.objective(x[:, None])[0])
    from scipy import optimize as _opt  # here, not at module top: it adds about 0.2 s to every start-up
    box = problem.bounds()
    lo, hi = np.array([b[0] for b in box]), np.array([b[1] for b in box])
    cand = np.clip(np.array(starts if starts is not None else problem.starts()), lo, hi)
    with np.errstate(all="ignore"):
        screen = problem.objective(cand.T)
    screen = np.where(np.isfinite(screen), screen, -np.inf)
    order = np.argsort(-screen)[:refine]
    best_x, best_v = cand[order[0]], float(screen[order[0]]) / problem.scale()
    for n, j in enumerate(order):
        if n > 0 and best_v > 0:
            break
        try:
            with np.errstate(all="ignore"):
                res = _opt.minimize(problem.negative_with_gradient, cand[j], jac=True, method="L-BFGS-B",
                                    bounds=box, options={"maxiter": 150, "ftol": 1e-9, "gtol": 1e-7})
        except (FloatingPointError, ValueError):
            continue
        if np.isfinite(res.fun) and -res.fun > best_v:
            best_x, best_v = res.x, -res.fun
    if warm is not None:
        # warm start from a neighbouring problem (nearby distance or block size): follow it locally
        x = _local(problem, np.clip(np.asarray(warm, dtype=float), lo, hi), box)
        v = float(problem.objective(x[:, None])[0]) / problem.scale()
        if alternatives is not None:
            alternatives.append(x)
        if v > best_v:
            best_x, best_v = x, v
    if best_v <= 0 and continuation and warm is None:
        best_x, best_v = _continue_in_block_size(problem, best_x, best_v, box, alternatives)
    return best_x, best_v * problem.scale()


def _local(problem, x, box):
    """Local L-BFGS-B refinement inside a trust box of +-1 around ``x`` (keeps the first quasi-Newton steps
    on the branch ``x`` is on)."""
    from scipy import optimize as _opt  # here, not at module top: it adds about 0.2 s to every start-up
    local = [(max(a, xi - 1.0), min(b, xi + 1.0)) for (a, b), xi in zip(box, x)]
    with np.errstate(all="ignore"):
        res = _opt.minimize(problem.negative_with_gradient, x, jac=True, method="L-BFGS-B", bounds=local,
                            options={"maxiter": 100, "ftol": 1e-9, "gtol": 1e-7})
    return res.x if np.isfinite(res.fun) else x


def _continue_in_block_size(problem, best_x, best_v, box, alternatives=None):
    """No key found: homotopy in the block size.

    Below the threshold the continued objective can favour sending almost nothing (all terms shrink towards
    the constant penalties).  The optimum of a much larger block lies well inside the key region; it is
    followed down to the block asked for in steps of about 3x, each a local refinement from the previous
    optimum, so the path stays on the key-giving branch as long as one exists.
    """
    sc = problem.scenario
    far = DesignProblem(_scaled(sc, 1e3), problem.statistics)
    x, v = optimise(far, refine=1, continuation=False)
    if v <= 0:          # not even a 1000 times larger block gives a key: none here
        return best_x, best_v
    for factor in (300.0, 100.0, 30.0, 10.0, 3.0, 1.7, 1.0):
        step = problem if factor == 1.0 else DesignProblem(_scaled(sc, factor), problem.statistics)
        x = _local(step, x, box)
    v = float(problem.objective(x[:, None])[0]) / problem.scale()
    if alternatives is not None:
        # the end of the key-giving branch: its certified length may be positive even where the (looser)
        # float objective is not, so the caller evaluates it too
        alternatives.append(x)
    if v > best_v:
        best_x, best_v = x, v
    return best_x, best_v


def _scaled(sc: DecoyScenario, factor: float) -> DecoyScenario:
    """The scenario with its block size (pulses or key-basis detections) multiplied by ``factor``."""
    if sc.pulses is not None:
        return replace(sc, pulses=sc.pulses * factor)
    return replace(sc, key_detections=max(1, int(round(sc.key_detections * factor))))


def block_pulses(sc: DecoyScenario, mu, p, qx) -> float:
    """Pulses per block at these parameters: the scenario's, or with ``key_detections`` the integer nearest
    ``T / (expected key-basis detections per pulse)`` (so the expected key-basis detections are within half
    a pulse's worth of ``T``).  This number is fixed before the block; the block is closed after it.

    Raises
    ------
    InputError
        If that number exceeds :data:`MAX_PULSES`.
    """
    if sc.pulses is not None:
        return sc.pulses
    per_pulse = math.fsum(sc.model.expected_counts(1.0, mu, p, qx).key_detections)
    N = max(1.0, float(round(sc.key_detections / per_pulse)))
    if not N <= MAX_PULSES:
        raise InputError("block.key_detections", sc.key_detections,
                         f"a number of key-basis detections expected within {MAX_PULSES:g} pulses (here "
                         f"{per_pulse:.3g} per pulse)")
    return N


def _expected_block(problem: DesignProblem, theta) -> tuple:
    mu, p, qx, split = problem.decode(theta[:, None] if theta.ndim == 1 else theta)
    mu, p, qx = mu[:, 0], p[:, 0], float(qx[0])
    sc = problem.scenario
    N = block_pulses(sc, mu, p, qx)
    c = sc.model.expected_counts(N, mu, p, qx)
    kd = [int(round(x)) for x in c.key_detections]
    ke = [min(int(round(x)), d) for x, d in zip(c.key_errors, kd)]
    td = [int(round(x)) for x in c.test_detections]
    te = [min(int(round(x)), d) for x, d in zip(c.test_errors, td)]
    nX = sum(kd)
    q = sum(ke) / nX if nX else 0.0
    leak = int(math.ceil(sc.ec_efficiency * nX * float(PE.binary_entropy_float(q)))) if 0 < q else 0
    split_d = None if split is None else {n: float(split[j, 0]) for j, n in enumerate(SECRECY_TERMS)}
    if split_d is not None:
        tot = math.fsum(split_d.values())
        split_d = {k: v / tot for k, v in split_d.items()}
    block = DecoyBlock(tuple(float(x) for x in mu), tuple(float(x) for x in p), tuple(kd), tuple(ke), tuple(td),
                         tuple(te), leak, sc.eps_sec, sc.eps_cor, split_d)
    return block, c, qx, N


def design(scenario: DecoyScenario, statistics: str = DEFAULT_STATISTICS, starts=None,
           continuation: bool = True) -> DesignResult:
    """Optimise the free parameters of ``scenario`` for the largest expected key.

    With ``scenario.pulses`` the block is that many pulses and the key per block is maximised.  With
    ``scenario.key_detections`` the key per pulse sent (per second at a fixed repetition rate) is maximised
    over blocks of ``N`` pulses, ``N`` chosen with the parameters so that the expected key-basis detections
    equal the target (:func:`block_pulses`); the block is still closed after those ``N`` pulses, fixed before
    it starts, never when a detection count is reached (the block rule).  ``N`` is reported as the parameter
    ``block_pulses`` and in the expected counts, with the expected key-basis detections.

    Returns
    -------
    DesignResult
        With the certified key length at the rounded expected counts (``expected``), the rates per pulse and
        per second, the chosen parameters and the expected counts.
    """
    problem = objective_problem(scenario, statistics)
    alt = []
    theta, fval = optimise(problem, starts, continuation=continuation, alternatives=alt)
    return _best_certified(problem, theta, fval, alt)[0]


def _best_certified(problem, theta, fval, alternatives) -> tuple:
    """(result, theta) at ``theta``; where it has no key, the alternatives are certified too, best kept."""
    res = _result(problem, theta, fval)
    if res.expected.secret_key_length > 0:
        return res, theta
    for x in alternatives:
        try:
            other = _result(problem, x, float(problem.key_length_float(x[:, None])[0]))
        except InputError:   # an alternative whose block would exceed MAX_PULSES pulses (key_detections)
            continue
        # per pulse: the same order as the key length for a fixed number of pulses, and the design's aim
        # when the number of pulses depends on the parameters (key_detections)
        if other.secret_key_rate_per_signal > res.secret_key_rate_per_signal:
            res, theta = other, x
    return res, theta


def _split_shares(ledger) -> dict:
    """Shares of the split secrecy terms (pinned terms left out), in the form a block's epsilon_split takes."""
    c = {n: ledger[n].contribution for n in SECRECY_TERMS}
    tot = math.fsum(c.values())
    return {n: v / tot for n, v in c.items()}


def _result(problem, theta, fval) -> DesignResult:
    sc = problem.scenario
    block, counts, qx, N = _expected_block(problem, theta)
    kl = key_length(block, problem.statistics, check_worse_data=False)
    rate = kl.secret_key_length / N
    f = sc.model.source.repetition_rate_hz
    params = {"intensities": list(block.intensities), "intensity_probabilities": list(block.intensity_probabilities),
              "key_basis_probability": qx,
              "epsilon_split": _split_shares(kl.ledger)}
    expected = {**counts.as_dict(), "ec_leak_bits": block.ec_leak_bits, "pulses": N,
                "expected_key_detections": math.fsum(counts.key_detections)}
    notes = ()
    if sc.key_detections is not None:
        params["block_pulses"] = int(N)
        expected["key_detections_target"] = sc.key_detections
        notes = (key_detections_note(N, sc.key_detections, expected["expected_key_detections"]),)
        fval = float(problem.key_length_float(theta[:, None])[0])   # the optimiser's value is per pulse
    return DesignResult(protocol=PROTOCOL_NAME, parameters=params, expected=kl, secret_key_rate_per_signal=rate,
                        secret_key_rate_bps=None if f is None else rate * f, expected_counts=expected,
                        block_fill_time_s=sc.model.block_fill_time_s(N), scenario=sc.as_dict(),
                        diagnostics={"float_objective_bits": float(fval)}, status=_design_status(sc, kl), notes=notes)


def acceptance_ranges(key_detections, test_detections, test_errors, key_errors=None, sigmas: float = 6.0) -> dict:
    """The count tables of an acceptance test: ``expected -/+ (sigmas sqrt(expected) + 1)`` per count, rounded
    outwards and clipped at 0 (key-basis errors only when given, i.e. with two intensities).

    Returns
    -------
    dict
        ``{"key_basis": {"detections": [[a, b], ...], ...}, "test_basis": {"detections": ..., "errors": ...}}``
    """
    def box(values):
        return [[max(int(math.floor(x - sigmas * math.sqrt(x) - 1)), 0),
                 int(math.ceil(x + sigmas * math.sqrt(x) + 1))] for x in values]

    out = {"key_basis": {"detections": box(key_detections)},
           "test_basis": {"detections": box(test_detections), "errors": box(test_errors)}}
    if key_errors is not None:
        out["key_basis"]["errors"] = box(key_errors)
    return out


def acceptance_test(result: DesignResult, sigmas: float = 6.0, statistics: str = "chernoff",
                    leak_margin: float = 0.0) -> tuple:
    """A fixed-length acceptance test from a design's expected counts, and the length it certifies.

    Every count the analysis uses gets the range ``expected -/+ (sigmas sqrt(expected) + 1)`` (rounded
    outwards, clipped at 0); the leakage bound is the design's ``ec_leak_bits`` times ``1 + leak_margin``.
    Fix the returned test before the run and give it as the block field ``acceptance``: every accepted block
    then gets the returned fixed length, and any other block aborts (proof note of decoy-bb84, section 7b).

    Parameters
    ----------
    result : DesignResult
        A decoy-bb84 design with a key.
    sigmas : float
        Half-width of each range in standard deviations of a Poisson count (6: two-sided Poisson tail about
        2e-9 per count for large expected counts, up to about 1e-7 at 3 and 1e-6 at 0.5, scipy.stats.poisson).
    statistics : {"chernoff", "hoeffding"}
    leak_margin : float
        Relative headroom of the leakage bound over the design's expected leakage.

    Returns
    -------
    (dict, KeyLengthResult)
        The ``acceptance`` block field and the fixed-length result at the design's expected counts.

    Raises
    ------
    InputError
        For a design without a key, or a bad ``sigmas``, ``statistics`` or ``leak_margin``.
    """
    if not result.status.key:
        raise InputError("design", "no key", "a design with a key (an acceptance test needs expected counts)")
    sigmas = float(Domain(0.0, 100.0, lower_open=True).check_scalar("sigmas", sigmas))
    leak_margin = float(Domain(0.0, 10.0).check_scalar("leak_margin", leak_margin))
    if statistics not in ACCEPTANCE_STATISTICS:
        raise InputError("statistics", statistics, "one of: " + ", ".join(ACCEPTANCE_STATISTICS))
    c = result.expected_counts
    sc = parse_scenario(result.scenario)
    mu = result.parameters["intensities"]
    acc = {"statistics": statistics,
           "ec_leak_bits": int(math.ceil(c["ec_leak_bits"] * (1 + leak_margin))),
           **acceptance_ranges(c["key_basis.detections"], c["test_basis.detections"], c["test_basis.errors"],
                               c["key_basis.errors"] if len(mu) == 2 else None, sigmas)}
    rnd = lambda xs: [int(round(x)) for x in xs]  # noqa: E731
    kd, td = rnd(c["key_basis.detections"]), rnd(c["test_basis.detections"])
    data = {"protocol": PROTOCOL_NAME, "intensities": mu,
            "intensity_probabilities": result.parameters["intensity_probabilities"],
            "key_basis": {"detections": kd, "errors": [min(e, d) for e, d in zip(rnd(c["key_basis.errors"]), kd)]},
            "test_basis": {"detections": td,
                           "errors": [min(e, d) for e, d in zip(rnd(c["test_basis.errors"]), td)]},
            "ec_leak_bits": int(c["ec_leak_bits"]), "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor,
            "epsilon_split": result.parameters["epsilon_split"], "acceptance": acc}
    return acc, key_length(parse_block(data))


def key_detections_note(pulses: float, target: float | None, expected: float) -> str:
    """The statement every design or block size given in key-basis detections carries: how the block closes."""
    aim = "" if target is None else f" (target {int(target)})"
    return (f"The block is closed after N = {int(pulses)} pulses, a number fixed before the block starts and "
            f"chosen with the design so that about {expected:.1f} key-basis detections are expected{aim}; it is "
            "not closed when a number of detections is reached (blocks closed by detection quotas are not "
            "covered by the analysis). The key length is certified at the rounded expected counts of those N "
            "pulses; the detections of an actual block vary around them.")


def _design_status(sc: DecoyScenario, kl) -> Status:
    """Key; or no key beyond the threshold (zero asymptotic rate with infinitely many decoys and no sifting loss,
    at the expected counts of this device model), or no positive design found within the search box."""
    if kl.secret_key_length > 0:
        return KEY
    asym, _ = optimal_gllp_rate(sc.model, sc.ec_efficiency, sifting=1.0)
    reason = NoKeyReason.THRESHOLD_EXCEEDED if asym <= 0 else NoKeyReason.NO_POSITIVE_DESIGN
    return design_no_key(kl.status, reason)


def _at_distance(scenario, L):
    return replace(scenario, model=scenario.model.at_distance(L))


def reach(scenario: DecoyScenario, statistics: str = DEFAULT_STATISTICS, tolerance_km: float = 0.1,
          max_km: float = 1000.0) -> ReachResult:
    """Largest distance with a positive certified key (bisection on distance of the optimised key).

    Returns
    -------
    ReachResult
        ``reach_km`` to within ``tolerance_km`` with the design there; no distance (``reach_km`` None) and
        ``limit_reached`` when there is a key even at ``max_km``; a no-key status (reason from the design at
        0 km) when there is no key even at 0 km.

    Raises
    ------
    InputError
        If the link's loss does not grow with distance (``link.fiber_loss_db_per_km`` is 0): every distance
        then has the same key and a reach is not defined.
    """
    if not scenario.model.link.fiber_loss_db_per_km > 0:
        raise InputError("link.fiber_loss_db_per_km", scenario.model.link.fiber_loss_db_per_km,
                         "a positive fibre loss for a reach: with 0 dB/km the loss does not grow with distance, "
                         "so every distance gives the same key (vary link.extra_loss_db instead)")

    def positive(L, warm):
        sc = _at_distance(scenario, L)
        prob = objective_problem(sc, statistics)
        # the warm start from the nearest distance with a key is a continuation path in distance (followed
        # locally); without one, the block-size homotopy runs when no key is found
        alt = []
        theta, fval = optimise(prob, alternatives=alt, warm=warm)
        res, th = _best_certified(prob, theta, fval, alt)
        return res.expected.secret_key_length > 0, th, res

    ok, warm, best = positive(0.0, None)
    if not ok:
        return ReachResult(None, statistics, tolerance_km, max_km,
                           Status.no_key(best.status.reason, "at 0 km: " + best.status.detail))
    reach, res, limit_reached = farthest_passing(positive, warm, best, max_km, tolerance_km)
    if limit_reached:
        return ReachResult(None, statistics, tolerance_km, max_km,
                           Status(None, f"key at every distance tried up to the search limit {max_km:g} km; "
                                            "the reach lies beyond it"),
                           limit_reached=True, at_reach=res)
    return ReachResult(reach, statistics, tolerance_km, max_km, KEY, at_reach=res)


def block_unit(unit, scenario: DecoyScenario) -> str:
    """The unit of a block size: ``unit`` (``"pulses"`` or ``"key_detections"``; ``"key-detections"`` is taken
    as the latter), or the unit the scenario gives its block in when None.

    Raises
    ------
    InputError
        For any other unit.
    """
    if unit is None:
        return scenario.size_kind
    name = unit.replace("-", "_") if isinstance(unit, str) else unit
    if name not in BLOCK_UNITS:
        raise InputError("unit", unit, "pulses or key-detections (default: the unit of the scenario's [block])")
    return name


def blocksize(scenario: DecoyScenario, target: BlockTarget, statistics: str = DEFAULT_STATISTICS,
              max_pulses: float = MAX_PULSES, unit: str | None = None) -> BlockSizeResult:
    """Smallest number of pulses whose optimised design reaches ``target`` (bisection on log N).

    The search is always over the number of pulses ``N`` after which a block is closed (the block rule), with
    the design re-optimised at each ``N``.  ``unit`` (default: the unit of the scenario's ``[block]``) says how
    the answer is given: ``"pulses"``, that ``N``; ``"key_detections"``, the expected key-basis detections of
    the design at that ``N`` (rounded up), i.e. the frame size of the smallest block reaching the target.  The
    resolution is given in the same unit.  ``fraction=F`` is a fraction of the infinite-decoy asymptotic rate
    with no sifting loss (:func:`finitekey.protocols.decoy_bb84.scenario.optimal_gllp_rate` with ``sifting=1``).

    Parameters
    ----------
    scenario : DecoyScenario
    target : BlockTarget
    statistics : str
    max_pulses : float
        Largest block tried.
    unit : str or None
        ``"pulses"`` or ``"key_detections"`` (``"key-detections"``); None: the scenario's unit.

    Returns
    -------
    BlockSizeResult
    """
    unit = block_unit(unit, scenario)
    if target.kind is BlockTargetKind.RATE_FRACTION:
        asym, _ = optimal_gllp_rate(scenario.model, scenario.ec_efficiency, sifting=1.0)
        if asym <= 0:
            raise InputError("target", str(target), "a link with a positive asymptotic rate")

    def meets(N, warm=None):
        sc = scenario.with_pulses(N)
        prob = objective_problem(sc, statistics)
        alt = []
        theta, fval = optimise(prob, alternatives=alt, warm=warm)
        res, theta = _best_certified(prob, theta, fval, alt)
        ell = res.expected.secret_key_length
        if target.kind is BlockTargetKind.POSITIVE_KEY:
            ok = ell > 0
        elif target.kind is BlockTargetKind.KEY_BITS:
            ok = ell >= target.value
        else:
            ok = ell / N >= target.value * asym
        return ok, res, theta

    # bracket in half-decade steps from the scenario's own block size: downwards warm-started from the last
    # block that met the target (a continuation path in the block size), or upwards until one does
    top = math.log10(max_pulses)
    x = min(math.log10(objective_problem(scenario, statistics).reference_pulses()), top)
    found = smallest_block(meets, x, top)
    if found is None:
        raise InputError("target", str(target), f"a target reachable with at most {max_pulses:g} pulses")
    # the size reported is a whole number of pulses, and the design shown (and its echo) is the one at it
    lo, hi, N, res = found
    if N is None:
        raise ComputationError(f"target {target} met at {10 ** hi:.6g} pulses but not at the whole numbers of "
                               "pulses just above it")
    # sizes between the last failing block (10**lo pulses) and the answer were not tried; lo == hi when the
    # search stopped at its lower end with a pass (nothing smaller tried)
    shrink = 1.0 - 10 ** (lo - hi) if lo < hi else 1.0
    if unit == "pulses":
        return BlockSizeResult(target=target, size=N, size_kind="pulses", design=res,
                               resolution=max(1, int(math.ceil(N * shrink))))
    detections = res.expected_counts["expected_key_detections"]
    size = int(math.ceil(detections))
    design = replace(res, notes=res.notes + (key_detections_note(res.expected_counts["pulses"], None, detections),))
    return BlockSizeResult(target=target, size=size, size_kind="key_detections", design=design,
                           resolution=max(1, int(math.ceil(size * shrink))))
