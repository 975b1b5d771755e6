"""BB84 analysis: the key-length formula (written once in sympy, compiled), the block's ledger and the
certified key length of a block (:func:`key_length`, :func:`key_length_batch`).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from fractions import Fraction

import numpy as np
import sympy as sp
from flint import arb, ctx

from ... import bounds as _bounds
from ...bounds.hypergeometric_exact import key_errors_upper_certified
from ...budget import Ledger, allocate
from ...compile import compile_expression
from ...domains import PROBABILITY
from ...entropy import binary_entropy_expr, hash_penalty_expr, log2_expr
from ...errors import ComputationError, InputError
from ...reconciliation import DisclosedLeakage
from .._batch import map_in_chunks
from .._result import KEY, KeyLengthResult, NoKeyReason, Status
from .block import PROTOCOL_NAME, TERM_SPECS, BB84Block, Statistics

__all__ = ["BLOCK_RULE_ASSUMPTION", "ASSUMPTIONS", "MODELLED_LEAKAGE_ASSUMPTION", "REFERENCES", "FORMULA_LATEX",
           "min_entropy_expr", "key_length_expr", "verification_tag_bits", "sifting_fraction", "block_ledger",
           "phase_errors_upper_exact", "key_length", "key_length_batch"]

#: The block rule (proofs_notes/protocols/bb84.md, "The block rule"); blocks closed by quotas are refused.
BLOCK_RULE_ASSUMPTION = (
    "block closed after a number of rounds fixed before it (closed_by = rounds), never when key and test quotas "
    "fill; each round's bases chosen independently with fixed probabilities and announced only after the "
    "block's last round is measured, so the attack cannot depend on them")

ASSUMPTIONS = (
    "qubit source or entanglement-based source; the two measurements have maximal overlap c (1/2 for ideal BB84)",
    BLOCK_RULE_ASSUMPTION,
    "detection is basis independent, so given n and k the test positions are a uniformly random k-subset of the "
    "n + k sifted rounds (exchangeability of i.i.d. basis labels), as the phase-error bound needs",
    "coherent (general) attacks; the eavesdropper may hold quantum side information",
    "the classical channel is authenticated; leak_EC counts every bit disclosed during reconciliation",
    "error verification with a two-universal hash of ceil(log2(1/eps_cor)) bits, counted as leakage",
    "privacy amplification with two-universal hashing",
)
#: Added to the assumptions when a block gives ec_efficiency and key_qber instead of the disclosed bit count.
MODELLED_LEAKAGE_ASSUMPTION = (
    "leakage is MODELLED as ceil(ec_efficiency * n * h(key_qber)), not measured: the length is secure only if "
    "reconciliation disclosed at most that many bits (give ec_leak_bits at run time)")


def _assumptions(block) -> tuple:
    out = ASSUMPTIONS
    if block.rounds is not None:
        out = out + (f"the block has rounds = {block.rounds} (as declared), a number fixed before it",)
    return out if isinstance(block.leakage, DisclosedLeakage) else out + (MODELLED_LEAKAGE_ASSUMPTION,)


REFERENCES = (
    "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012) doi:10.1038/ncomms1631",
    "M. Tomamichel and R. Renner, Phys. Rev. Lett. 106, 110506 (2011) doi:10.1103/PhysRevLett.106.110506",
    "M. Tomamichel, C. Schaffner, A. Smith, R. Renner, IEEE Trans. Inf. Theory 57, 5524 (2011)",
)


# ---------------------------------------------------------------------------------------------------------------
# The key-length formula, written once
# ---------------------------------------------------------------------------------------------------------------
S_n, S_k, S_e, S_E = sp.symbols("n k e E_ph", positive=True)
S_c, S_leak, S_tag, S_eps_s, S_eps_pa, S_phi = sp.symbols("c leak_EC t_ver epsilon_s epsilon_PA phi", positive=True)


def min_entropy_expr(n, phi, overlap, entropy=binary_entropy_expr):
    """n (log2(1/c) - h(phi)) as sympy (uncertainty relation); ``phi = 0`` gives n log2(1/c)."""
    if phi == 0:
        return n * log2_expr(1 / overlap)
    return n * (log2_expr(1 / overlap) - entropy(phi))


def key_length_expr(n, phi, overlap, leak, tag, eps_pa, entropy=binary_entropy_expr):
    """The key-length formula (before rounding) as a sympy expression; see the package docstring.

    Parameters
    ----------
    n, phi, overlap, leak, tag, eps_pa : sympy.Expr or number
        Key bits, phase-error rate bound, measurement overlap, reconciliation leakage, verification tag bits,
        privacy-amplification epsilon.
    entropy : callable
        Defaults to the binary entropy; an undefined function ``h`` is passed only for display.

    Returns
    -------
    sympy.Expr
    """
    return min_entropy_expr(n, phi, overlap, entropy) - leak - tag - hash_penalty_expr(eps_pa)


def _serfling_mu_expr():
    rs = _bounds.get("random_sampling")
    sym = rs.symbols
    return rs.deviation_expr.xreplace({sym["key_bits"]: S_n, sym["test_bits"]: S_k, sym["eps"]: S_eps_s ** 2})


def _phi_serfling():
    return S_e / S_k + _serfling_mu_expr()


#: How each compiled form is built.  Each is built on first use only: the Serfling forms need ``sympy.solve``
#: (about 0.5 s), which a key length with the exact statistics never uses.
_BUILDERS = {
    "serfling": lambda: compile_expression(key_length_expr(S_n, _phi_serfling(), S_c, S_leak, S_tag, S_eps_pa),
                                           (S_n, S_k, S_e, S_c, S_leak, S_tag, S_eps_s, S_eps_pa)),
    "serfling_phi": lambda: compile_expression(_phi_serfling(), (S_n, S_k, S_e, S_eps_s)),
    "exact": lambda: compile_expression(key_length_expr(S_n, S_E / S_n, S_c, S_leak, S_tag, S_eps_pa),
                                        (S_n, S_E, S_c, S_leak, S_tag, S_eps_pa)),
    "exact0": lambda: compile_expression(key_length_expr(S_n, 0, S_c, S_leak, S_tag, S_eps_pa),
                                         (S_n, S_c, S_leak, S_tag, S_eps_pa)),
    "hmin": lambda: compile_expression(min_entropy_expr(S_n, S_phi, S_c), (S_n, S_phi, S_c)),
    "hash": lambda: compile_expression(hash_penalty_expr(S_eps_pa), (S_eps_pa,)),
    "mu": lambda: compile_expression(_serfling_mu_expr(), (S_n, S_k, S_eps_s)),
}


@functools.lru_cache(maxsize=None)
def _compiled_form(name: str):
    return _BUILDERS[name]()


class _CompiledForms(Mapping):
    """Read-only mapping name -> compiled form of the formula; each form is compiled once, on first access."""

    def __getitem__(self, name):
        if name not in _BUILDERS:
            raise KeyError(name)
        return _compiled_form(name)

    def __iter__(self):
        return iter(_BUILDERS)

    def __len__(self):
        return len(_BUILDERS)


@functools.lru_cache(maxsize=None)
def _compiled():
    """The compiled forms of the formula for both statistics methods (each compiled on first use; immutable)."""
    return _CompiledForms()


FORMULA_LATEX = (r"\ell = \left\lfloor " + sp.latex(key_length_expr(
                     S_n, S_phi, S_c, S_leak, S_tag, S_eps_pa, entropy=sp.Function("h")))
                 + r" \right\rfloor,\quad t_{ver} = \lceil \log_2(1/\varepsilon_{cor}) \rceil,"
                 r"\ \Pr[\phi_{key} > \phi] \le \varepsilon_s^2")


def verification_tag_bits(eps_cor: float) -> int:
    """Length ``ceil(log2(1/eps_cor))`` of the verification hash, computed exactly from the float's value.

    Parameters
    ----------
    eps_cor : float
        Correctness parameter in (0, 1).

    Returns
    -------
    int
    """
    eps_cor = PROBABILITY.check("eps_cor", eps_cor)
    x = Fraction(eps_cor)
    t = max(0, math.ceil(-math.log2(eps_cor)) - 2)
    while Fraction(1, 2 ** t) > x:  # smallest t with 2^-t <= eps_cor
        t += 1
    return t


def sifting_fraction(p_x):
    """Fraction of detected rounds kept by sifting: p_X^2 + p_Z^2 (common practice, no source).

    Parameters
    ----------
    p_x : float or array_like
        Probability of basis X.

    Returns
    -------
    float or numpy.ndarray
    """
    p_x = np.asarray(p_x, dtype=float)
    out = p_x ** 2 + (1 - p_x) ** 2
    return float(out) if out.ndim == 0 else out



# ---------------------------------------------------------------------------------------------------------------
# Key length
# ---------------------------------------------------------------------------------------------------------------
def block_ledger(eps_sec: float, eps_cor: float, split: dict | None = None) -> Ledger:
    """Allocate the budget over :data:`TERM_SPECS` (the smoothing term also guards the phase-error bound)."""
    led = allocate(eps_sec, eps_cor, TERM_SPECS, split)
    led.failure_probability("smoothing")   # the square must be a positive float (clear error otherwise)
    return led


def phase_errors_upper_exact(n: int, k: int, e: int, eps_pe: float, cache: dict | None = None) -> int:
    """Certified integer upper bound on the phase errors among the n key bits (exact hypergeometric).

    ``cache`` (a caller-owned dict) memoises results within a batch.
    """
    key = (n, k, e, eps_pe)
    if cache is not None and key in cache:
        return cache[key]
    try:
        out = int(key_errors_upper_certified(n, k, e, eps_pe))
    except InputError as exc:  # name the block's fields, not the bound's parameters
        name = {"n": "key_bits", "k": "test_bits", "e": "test_errors"}.get(exc.field, exc.field)
        raise InputError(name, exc.value, exc.allowed + " (limit of the exact statistics; "
                                                        "--statistics serfling has none)") from None
    if cache is not None:
        cache[key] = out
    return out


def _floor_lower(ball: arb) -> int:
    """Largest integer certainly <= every point of the ball, clipped at 0."""
    if not ball.is_finite():
        raise ComputationError(f"certified key-length evaluation did not give a finite ball: {ball}")
    lo = ball.lower()
    if lo <= 0:
        return 0
    z = lo.floor().unique_fmpz()
    fl = int(z) if z is not None else int(math.floor(float(lo))) - 1
    return max(0, fl)


def key_length(block: BB84Block, statistics=None, *, prec: int = 128, _cache: dict | None = None
               ) -> KeyLengthResult:
    """Secret key length of one BB84 block; never exceeds the exact value of the key-length formula.

    Parameters
    ----------
    block : BB84Block
        A validated block (see :func:`parse_block`).
    statistics : {"exact", "serfling"} or Statistics, optional
        Phase-error estimation method; default: the block's own choice, else ``"exact"``.
    prec : int
        Working precision of the ball arithmetic, in bits.

    Returns
    -------
    KeyLengthResult

    References
    ----------
    .. [1] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012).
    """
    stats = Statistics.parse(statistics) if statistics is not None else (block.statistics or Statistics.EXACT)
    cache = _cache if _cache is not None else {}
    split_key = None if block.epsilon_split is None else tuple(sorted(block.epsilon_split.items()))
    lkey = (block.eps_sec, block.eps_cor, split_key)
    ledger = cache.get(lkey)
    if ledger is None:
        ledger = cache[lkey] = block_ledger(block.eps_sec, block.eps_cor, block.epsilon_split)
    eps_s = ledger.smoothing("smoothing")
    eps_pa = ledger.hashing("privacy_amplification")
    eps_pe = ledger.failure_probability("smoothing")
    tag = verification_tag_bits(block.eps_cor)
    leak = block.leak_bits()
    n, k, e, c = block.key_bits, block.test_bits, block.test_errors, block.overlap
    comp = _compiled()
    estimates = {"test_qber": e / k, "parameter_estimation_failure": eps_pe}
    with ctx.workprec(prec):
        if stats is Statistics.SERFLING:
            phi_ball = comp["serfling_phi"].certified(n, k, e, eps_s, prec=prec)
            estimates["mu"] = float(comp["mu"].numpy(n, k, eps_s))
            phi_up = float(phi_ball.upper())
            usable = bool(phi_ball < arb(1) / 2)
            ball = comp["serfling"].certified(n, k, e, c, leak, tag, eps_s, eps_pa, prec=prec) if usable else None
        else:
            E = phase_errors_upper_exact(n, k, e, eps_pe, cache)
            estimates["phase_error_count_upper"] = E
            phi_up = E / n
            usable = 2 * E < n
            if usable:
                ball = (comp["exact"].certified(n, E, c, leak, tag, eps_pa, prec=prec) if E > 0
                        else comp["exact0"].certified(n, c, leak, tag, eps_pa, prec=prec))
            else:
                ball = None
    estimates["phase_error_rate_upper"] = phi_up
    length = _floor_lower(ball) if ball is not None else 0
    phi_f = min(phi_up, 0.5)
    hmin = float(comp["hmin"].numpy(n, phi_f, c)) if phi_f > 0 else n * math.log2(1 / c)
    terms = {"min_entropy": hmin, "ec_leakage": float(leak), "verification_tag": float(tag),
             "hash_penalty": float(comp["hash"].numpy(eps_pa))}
    if ball is not None:
        terms["key_length_lower_bound"] = float(ball.lower())
    if not usable:
        estimates["note_phase_error_at_least_half"] = 1.0
    return KeyLengthResult(PROTOCOL_NAME, length, ledger, stats.value, _assumptions(block), terms,
                           estimates, FORMULA_LATEX, REFERENCES,
                           status=_key_status(length, usable, phi_up, e / k, terms))


def _key_status(length: int, usable: bool, phi_up: float, test_qber: float, terms: dict) -> Status:
    """Key, or which part of the formula left none: the phase-error bound, or leakage and penalties."""
    if length > 0:
        return KEY
    if not usable:
        return Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, f"phase-error upper bound {phi_up:.4g} >= 1/2 "
                                                            f"(test QBER {test_qber:.4g})")
    cost = terms["ec_leakage"] + terms["verification_tag"] + terms["hash_penalty"]
    detail = (f"min-entropy {terms['min_entropy']:.6g} bits against leakage {terms['ec_leakage']:.6g} + "
              f"verification tag {terms['verification_tag']:.6g} + hash penalty {terms['hash_penalty']:.4g} bits")
    reason = (NoKeyReason.PENALTIES_EXCEED_ENTROPY if terms["min_entropy"] - cost < 1
              else NoKeyReason.BELOW_ONE_BIT)
    return Status.no_key(reason, detail)


def key_length_batch(blocks, statistics=None, *, prec: int = 128, jobs: int = 1) -> list:
    """Key lengths of many blocks (results identical to :func:`key_length`, block by block).

    The blocks share one ledger cache and one cache of certified phase-error bounds keyed by
    ``(n, k, e, eps)``: in a post-processing stream the block sizes repeat and the test errors take few
    values, so most blocks cost one ball evaluation of the compiled formula.  Every length is certified.

    Parameters
    ----------
    blocks : sequence of BB84Block
    statistics : {"exact", "serfling"}, optional
    prec : int
        Working precision of the ball arithmetic, in bits.
    jobs : int
        Worker processes.  With ``jobs > 1`` and at least ``_PARALLEL_MIN`` blocks, contiguous chunks are
        computed in separate processes (each with its own caches) and joined in order, so the results are
        the same as with ``jobs = 1``.
    """
    return map_in_chunks(_batch_chunk, blocks, jobs, _PARALLEL_MIN, (statistics, prec))


#: Smallest batch worth splitting over processes (below it, process start-up costs more than it saves).
_PARALLEL_MIN = 2000


def _batch_chunk(blocks, statistics, prec) -> list:
    cache: dict = {}
    return [key_length(b, statistics, prec=prec, _cache=cache) for b in blocks]

