"""BB84 with a qubit source (or entanglement-based), biased basis choice: finite-key length of a block.

Protocol (as analysed in proofs_notes/protocols/bb84.md).  Alice and Bob each
choose basis X with probability ``p_X`` and Z with ``p_Z = 1 - p_X``.  Rounds
where both chose X give the raw key (``n = key_bits``); rounds where both chose
Z are all announced and compared (``k = test_bits``, ``e = test_errors``);
rounds with different bases are discarded, so sifting keeps ``p_X^2 + p_Z^2``
of the detected rounds (common practice, no source).  Bob corrects his key
with ``leak_EC`` bits of one-way reconciliation, the parties compare a
two-universal hash of ``ceil(log2(1/eps_cor))`` bits (error verification),
and privacy amplification by two-universal hashing extracts

.. math:: \\ell = \\Big\\lfloor n\\big(\\log_2\\tfrac1c - h(\\phi^{\\rm up})\\big)
          - \\mathrm{leak}_{EC} - \\lceil\\log_2\\tfrac1{\\varepsilon_{cor}}\\rceil
          - 2\\log_2\\tfrac1{2\\varepsilon_{PA}} \\Big\\rfloor

secret bits, where ``c`` is the overlap of the two measurements (1/2 for ideal
BB84) and :math:`\\phi^{\\rm up}` an upper bound on the phase-error rate of the key
bits that fails with probability at most :math:`\\varepsilon_s^2`, obtained from
the test bits by the selected statistics method:

* ``"exact"`` (default): the exact hypergeometric (Neyman) bound on the number
  of key-bit phase errors, certified (finitekey.bounds.hypergeometric_exact);
* ``"serfling"``: :math:`\\phi^{\\rm up} = e/k + \\mu` with the random-sampling
  (Serfling-type) deviation :math:`\\mu` (finitekey.bounds.random_sampling).

The analysis needs the block to be a number of rounds fixed before it, each round's bases chosen
independently with fixed probabilities and announced only after the block (block field ``closed_by``,
default ``"rounds"``): then, given ``n`` and ``k``, the test positions are a uniformly random subset of the
sifted rounds.  A block closed when key and test quotas fill is refused (Pfister et al. 2016, [6]_).

The protocol is :math:`\\varepsilon_{cor}`-correct and
:math:`(2\\varepsilon_s + \\varepsilon_{PA})`-secret.  The formula is composed
symbolically once from :mod:`finitekey.entropy` and the bound's sympy
deviation, compiled, evaluated in ball arithmetic, and the lower end of the
ball is rounded down.

References
----------
.. [1] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, "Tight finite-key
   analysis for quantum cryptography", Nat. Commun. 3, 634 (2012).
.. [2] M. Tomamichel and R. Renner, "Uncertainty relation for smooth entropies",
   Phys. Rev. Lett. 106, 110506 (2011).
.. [3] M. Tomamichel, C. Schaffner, A. Smith, R. Renner, "Leftover hashing
   against quantum side information", IEEE Trans. Inf. Theory 57, 5524 (2011).
.. [4] P. W. Shor and J. Preskill, "Simple proof of security of the BB84 quantum
   key distribution protocol", Phys. Rev. Lett. 85, 441 (2000).
.. [5] H.-K. Lo, H. F. Chau, M. Ardehali, "Efficient quantum key distribution
   scheme and a proof of its unconditional security", J. Cryptology 18, 133 (2005)
   -- the biased basis choice.
.. [6] C. Pfister, N. Lütkenhaus, S. Wehner, P. J. Coles, "Sifting attacks in finite-size quantum key
   distribution", New J. Phys. 18, 053001 (2016) -- why quota-closed blocks are refused.
"""

from __future__ import annotations

import enum
import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np
import sympy as sp
from flint import arb, ctx

from .. import bounds as _bounds
from .._threads import with_one_blas_thread
from ..bounds.hypergeometric_exact import key_errors_upper, key_errors_upper_certified
from ..budget import Charge, Ledger, Role, TermSpec, allocate, squared_down
from ..compile import compile_expression
from ..domains import COUNT, DETECTION_PROBABILITY, POSITIVE_COUNT, PROBABILITY, RATE_HZ, Domain
from ..entropy import binary_entropy_expr, hash_penalty_expr, log2_expr
from ..errors import ComputationError, InputError
from ..searching import golden_max, maximize_box, smallest_passing
from ..reconciliation import (EFFICIENCY_DOMAIN, QBER_DOMAIN, DisclosedLeakage, FixedEfficiency, LeakageModel,
                              SecondOrderLeakage)
from ._batch import map_in_chunks
from ._block_rule import parse_closure
from ._fields import (SECURITY_SCHEMA_RULE, block_security_specs, read_label, security_fields_with,
                      security_targets)
from ._registry import register
from ._spec import FieldSpec, by_name, protocol_schema, sections_of, table_rows
from ._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, KeyLengthResult, NoKeyReason,
                      Status, design_no_key)

__all__ = ["Statistics", "BB84Block", "BB84", "BB84_PROTOCOL", "TERM_SPECS", "key_length_expr",
           "verification_tag_bits", "sifting_fraction", "OVERLAP_DOMAIN_BB84", "PROTOCOL_NAME"]

PROTOCOL_NAME = "bb84"


class Statistics(enum.Enum):
    """How the phase-error rate of the key bits is bounded from the test bits."""

    EXACT = "exact"
    SERFLING = "serfling"

    @classmethod
    def parse(cls, value, field_name: str = "statistics") -> "Statistics":
        """The method named by ``value`` (a name or a member; None gives the default, ``exact``).

        Parameters
        ----------
        value : str, Statistics or None
        field_name : str
            Field named in the error message.

        Returns
        -------
        Statistics

        Raises
        ------
        InputError
            For an unknown name, listing the valid ones.
        """
        if value is None:
            return cls.EXACT
        if isinstance(value, cls):
            return value
        for m in cls:
            if value == m.value:
                return m
        raise InputError(field_name, value, "one of: " + ", ".join(m.value for m in cls))


#: Overlap of the two measurements: 1/2 for ideal conjugate qubit bases, up to (not including) 1.
OVERLAP_DOMAIN_BB84 = Domain(0.5, 1.0, upper_open=True)

#: The ledger of the analysis (proof note, section "Epsilon ledger").  ``smoothing`` is the smoothing parameter of
#: the min-entropy: the phase-error bound it guards is evaluated at failure probability smoothing^2, and it costs
#: 2 smoothing of secrecy; privacy amplification is the leftover-hash term.
TERM_SPECS = (
    TermSpec("error_verification", Role.CORRECTNESS, Charge.FAILURE, 1,
             "two-universal hash of ceil(log2(1/eps)) bits fails to reveal a wrong key"),
    TermSpec("smoothing", Role.SECRECY, Charge.SMOOTHING, 1,
             "smoothing of the min-entropy; the phase-error bound is evaluated at failure probability "
             "smoothing^2", 0.5),
    TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
             "two-universal hashing is this far from an ideal key (leftover hash lemma)", 0.5),
)

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
    """The key-length formula (before rounding) as a sympy expression; see the module docstring.

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
# Blocks
# ---------------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BB84Block:
    """One observed BB84 block, validated.

    Attributes
    ----------
    key_bits, test_bits, test_errors : int
        n sifted key-basis bits, k test-basis bits compared, e errors among them.
    leakage : LeakageModel
        Disclosed bits, or an efficiency model with ``key_qber``.
    eps_sec, eps_cor : float
        Secrecy and correctness targets.
    overlap : float
        Maximal overlap c of the two measurements.
    epsilon_split : dict or None
        Shares of eps_sec for the secrecy terms (default: 1/2 each).
    key_qber : float or None
        QBER of the key bits (only with an efficiency model).
    statistics : Statistics or None
        Method requested in the block itself (the caller's choice wins).
    label : str or None
        Free-text identifier carried into batch output.
    rounds : int or None
        Number of rounds of the block, if declared (echoed in the result's assumptions).

    Notes
    -----
    The analysis holds only for a block closed after a number of rounds fixed before it, with each round's
    bases chosen independently with fixed probabilities and announced after the block (block field
    ``closed_by = "rounds"``, the default).  A block closed when key and test quotas fill
    (``closed_by = "quota"``) is refused by :func:`parse_block`: its test bits are not a uniformly random
    sample of the sifted bits (proofs_notes/protocols/bb84.md, "The block rule").
    """

    key_bits: int
    test_bits: int
    test_errors: int
    leakage: LeakageModel
    eps_sec: float
    eps_cor: float
    overlap: float = 0.5
    epsilon_split: dict | None = None
    key_qber: float | None = None
    statistics: Statistics | None = None
    label: str | None = None
    rounds: int | None = None

    def leak_bits(self) -> int:
        """Integer number of leaked bits, certainly >= the model's value."""
        return self.leakage.bits_upper(self.key_bits, self.key_qber)


#: Every block field, declared once (``finitekey fields bb84``, ``finitekey schema bb84-block``).  Limits that
#: depend on other fields (test_errors <= test_bits, ec_leak_bits <= key_bits, rounds >= key_bits + test_bits)
#: are checked by :func:`parse_block` and named in the description.
BLOCK_SPECS = (
    FieldSpec("protocol", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,)),
    FieldSpec("key_bits", "number", "n: sifted key-basis bits", unit="bits", domain=POSITIVE_COUNT, required="yes"),
    FieldSpec("test_bits", "number", "k: test-basis bits compared", unit="bits", domain=POSITIVE_COUNT,
              required="yes"),
    FieldSpec("test_errors", "number", "e: errors among the test bits (at most test_bits)", unit="bits",
              domain=COUNT, required="yes"),
    FieldSpec("ec_leak_bits", "number", "bits disclosed by error correction (at most key_bits)", unit="bits",
              domain=COUNT, required="or ec_efficiency and key_qber"),
    FieldSpec("ec_efficiency", "number", "reconciliation efficiency f (leak f n h(key_qber))",
              domain=EFFICIENCY_DOMAIN, required="with key_qber, or ec_leak_bits"),
    FieldSpec("key_qber", "number", "QBER of the key bits (with ec_efficiency)", domain=QBER_DOMAIN,
              required="with ec_efficiency"),
    *block_security_specs(),
    FieldSpec("epsilon_split", "table", "shares of eps_sec for the secrecy terms (default 1/2 each)",
              schema={"type": "object", "additionalProperties": {"type": "number", "exclusiveMinimum": 0,
                                                                 "exclusiveMaximum": 1}}),
    FieldSpec("overlap", "number", "maximal overlap c of the two measurements", domain=OVERLAP_DOMAIN_BB84,
              default=0.5),
    FieldSpec("statistics", "choice", "tail bound of the phase-error estimate (the caller's choice wins)",
              choices=tuple(m.value for m in Statistics)),
    FieldSpec("label", "text", "free-text identifier carried into batch output",
              schema={"type": ["string", "integer"]}),
    FieldSpec("closed_by", "choice", "how the block was closed (quota is refused)", choices=("rounds",),
              default="rounds", schema={"enum": ["rounds", None]}),
    FieldSpec("rounds", "number", "rounds of the block (at least key_bits + test_bits)", unit="rounds",
              domain=POSITIVE_COUNT),
)
_BLOCK_SPEC = by_name(BLOCK_SPECS)
_BLOCK_FIELDS = tuple(_BLOCK_SPEC)
_BLOCK_SCHEMA_RULES = {"": {"allOf": [
    {"oneOf": [{"required": ["ec_leak_bits"], "not": {"anyOf": [{"required": ["ec_efficiency"]},
                                                                {"required": ["key_qber"]}]}},
               {"required": ["ec_efficiency", "key_qber"], "not": {"required": ["ec_leak_bits"]}}]},
    SECURITY_SCHEMA_RULE,
]}}


def _require(data, name, what):
    if name not in data:
        raise InputError(name, None, f"{what} (missing field)")
    return data[name]


def parse_block(data) -> BB84Block:
    """Validate a BB84 block given as a mapping (from JSON, JSON Lines or CSV).

    Required: ``key_bits``, ``test_bits``, ``test_errors``, ``eps_sec`` and ``eps_cor`` (or ``eps_total`` with
    optional ``eps_cor_share``, default 0.1), and either ``ec_leak_bits`` or ``ec_efficiency`` with ``key_qber``.
    Optional: ``protocol`` (must be ``"bb84"``), ``overlap``, ``epsilon_split``, ``statistics``, ``label``,
    ``closed_by`` (how the block was closed: ``"rounds"``, the default, a number of rounds fixed before the
    block; ``"quota"`` is refused, see :class:`BB84Block`) and ``rounds`` (the number of rounds, at least
    ``key_bits + test_bits``; echoed in the result's assumptions).

    Raises
    ------
    InputError
        Naming the field for every missing, unknown, mistyped or out-of-range value.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, "a JSON object with the BB84 block fields")
    unknown = [k for k in data if k not in _BLOCK_FIELDS]
    if unknown:
        raise InputError(str(unknown[0]), data[unknown[0]], "one of the BB84 block fields: " + ", ".join(_BLOCK_FIELDS))
    if "protocol" in data and data["protocol"] != PROTOCOL_NAME:
        raise InputError("protocol", data["protocol"], f"'{PROTOCOL_NAME}' for this analysis")
    parse_closure(data)
    spec = _BLOCK_SPEC
    n = spec["key_bits"].check(_require(data, "key_bits", spec["key_bits"].allowed()))
    k = spec["test_bits"].check(_require(data, "test_bits", spec["test_bits"].allowed()))
    e = Domain(0, k, integer=True).check_scalar("test_errors", _require(data, "test_errors", f"an integer in [0, {k}]"))
    key_qber = None
    if "ec_leak_bits" in data:
        for other in ("ec_efficiency", "key_qber"):
            if other in data:
                raise InputError(other, data[other], "absent when ec_leak_bits is given (give one leakage form)")
        leak = Domain(0, n, integer=True).check_scalar("ec_leak_bits", data["ec_leak_bits"])
        leakage: LeakageModel = DisclosedLeakage(leak)
    elif "ec_efficiency" in data or "key_qber" in data:
        f = spec["ec_efficiency"].check(_require(data, "ec_efficiency", spec["ec_efficiency"].allowed()))
        key_qber = spec["key_qber"].check(_require(data, "key_qber", spec["key_qber"].allowed()))
        leakage = FixedEfficiency(f)
        if leakage.bits_upper(n, key_qber) > n:
            raise InputError("ec_efficiency", f, f"a leakage f n h(key_qber) <= key_bits = {n}")
    else:
        raise InputError("ec_leak_bits", None, "the number of bits disclosed by error correction (missing field; "
                                               "or give ec_efficiency and key_qber)")
    eps_sec, eps_cor = security_targets(data)
    overlap = spec["overlap"].check(data.get("overlap", spec["overlap"].default))
    split = data.get("epsilon_split")
    if split is not None:
        if not isinstance(split, dict):
            raise InputError("epsilon_split", split, "an object of shares, e.g. {\"smoothing\": 0.5, "
                                                     "\"privacy_amplification\": 0.5}")
        allocate(eps_sec, eps_cor, TERM_SPECS, split)  # validates names and shares
        split = dict(split)
    stats = Statistics.parse(data["statistics"]) if "statistics" in data else None
    label = read_label(data)
    rounds = None
    if "rounds" in data:
        allowed = (f"an integer >= key_bits + test_bits = {n + k}: the number of rounds of the block (each "
                   "gives at most one sifted bit)")
        try:
            rounds = int(Domain(n + k, math.inf, integer=True).check_scalar("rounds", data["rounds"]))
        except InputError:
            raise InputError("rounds", data["rounds"], allowed) from None
    return BB84Block(n, k, e, leakage, eps_sec, eps_cor, overlap, split, key_qber, stats, label, rounds)


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


# ---------------------------------------------------------------------------------------------------------------
# Scenarios, design and block size
# ---------------------------------------------------------------------------------------------------------------
_P_X_DOMAIN = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_SHARE_DOMAIN = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_FRAME_DOMAIN = Domain(0.0, 0.5, lower_open=True, upper_open=True)

#: Every scenario field, declared once: the parser validates with these, ``finitekey fields bb84`` lists them and
#: ``finitekey schema bb84-scenario`` is generated from them.
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), default=PROTOCOL_NAME),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs"),
    FieldSpec("channel.qber", "number", "expected quantum bit error rate", domain=QBER_DOMAIN, required="yes"),
    FieldSpec("budget.detections", "number", "detections per block, both bases, before sifting", unit="detections",
              domain=POSITIVE_COUNT, required="one of detections, signals"),
    FieldSpec("budget.signals", "number", "signals sent per block", unit="signals", domain=POSITIVE_COUNT,
              required="one of detections, signals"),
    FieldSpec("budget.detection_probability", "number", "probability that a signal is detected",
              domain=DETECTION_PROBABILITY, required="with signals"),
    FieldSpec("budget.signal_rate_hz", "number", "signals sent per second", unit="Hz", domain=RATE_HZ),
    *block_security_specs("security."),
    FieldSpec("reconciliation.model", "choice", "leakage model of error correction",
              choices=("efficiency", "second_order"), default="efficiency"),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n h(Q))",
              domain=EFFICIENCY_DOMAIN, default=1.1),
    FieldSpec("reconciliation.frame_error_rate", "number", "frame error rate of the second-order model",
              domain=_FRAME_DOMAIN, default=0.01),
    FieldSpec("analysis.statistics", "choice", "tail bound of the phase-error estimate",
              choices=tuple(m.value for m in Statistics), default="exact"),
    FieldSpec("analysis.overlap", "number", "maximal overlap c of the two measurements", domain=OVERLAP_DOMAIN_BB84,
              default=0.5),
    FieldSpec("design.p_x", "number", "fixed key-basis probability (default: optimised)", domain=_P_X_DOMAIN),
    FieldSpec("design.optimise_split", "bool", "optimise the epsilon split", default=True),
    FieldSpec("design.smoothing_share", "number", "share of eps_sec for smoothing when the split is not optimised",
              domain=_SHARE_DOMAIN, default=0.5),
)
#: section -> field -> its declaration (the order of the sections and fields above).
SCENARIO_SCHEMA = {sec: {k: by_name(SCENARIO_SPECS)[f"{sec}.{k}"] for k in keys}
                   for sec, keys in sections_of(SCENARIO_SPECS).items()}
#: Rules across scenario fields, for the JSON Schema (the parser checks them in code below).
_SCENARIO_SCHEMA_RULES = {
    "": {"required": ["channel", "budget", "security"]},
    "budget": {"oneOf": [{"required": ["detections"], "not": {"required": ["signals"]}},
                         {"required": ["signals", "detection_probability"], "not": {"required": ["detections"]}}]},
    "security": SECURITY_SCHEMA_RULE,
}


@dataclass(frozen=True)
class BB84Scenario:
    """A validated BB84 design scenario; ``data`` is the normalised nested mapping (defaults filled in)."""

    data: dict
    qber: float
    detections: int | None
    signals: int | None
    detection_probability: float | None
    signal_rate_hz: float | None
    eps_sec: float
    eps_cor: float
    leakage: LeakageModel
    statistics: Statistics
    overlap: float
    p_x: float | None
    optimise_split: bool
    smoothing_share: float

    @property
    def detection_count(self) -> float:
        """Detections per block (float; signals x detection probability for a signal budget)."""
        if self.detections is not None:
            return float(self.detections)
        return float(self.signals) * float(self.detection_probability)

    @property
    def size_kind(self) -> str:
        return "detections" if self.detections is not None else "signals"


def parse_scenario(data) -> BB84Scenario:
    """Validate a BB84 scenario mapping (from TOML); errors name ``section.field``.

    Sections: ``[protocol]`` (name, label), ``[channel]`` (qber), ``[budget]`` (detections, or signals with
    detection_probability; optional signal_rate_hz; detections are all detections of the block, both bases,
    before sifting, read as the expected detections of a block closed after a fixed number of signals),
    ``[security]`` (eps_sec and eps_cor, or eps_total with optional eps_cor_share), ``[reconciliation]``
    (model, efficiency, frame_error_rate), ``[analysis]`` (statistics, overlap), ``[design]`` (p_x to fix the
    bias, optimise_split, smoothing_share).
    """
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a table of sections: " + ", ".join(SCENARIO_SCHEMA))
    unknown = [s for s in data if s not in SCENARIO_SCHEMA]
    if unknown:
        raise InputError(str(unknown[0]), data[unknown[0]], "one of the sections: " + ", ".join(SCENARIO_SCHEMA))
    norm: dict = {}
    for section, fields in SCENARIO_SCHEMA.items():
        given = data.get(section, {})
        if not isinstance(given, dict):
            raise InputError(section, given, "a TOML table [" + section + "]")
        bad = [f for f in given if f not in fields]
        if bad:
            raise InputError(f"{section}.{bad[0]}", given[bad[0]], "one of: " + ", ".join(fields))
        sec = {}
        for name, spec in fields.items():
            if name in given:
                sec[name] = spec.check(given[name])
            elif spec.default is not None:
                sec[name] = spec.default
        norm[section] = sec
    if "qber" not in norm["channel"]:
        raise InputError("channel.qber", None, f"the expected QBER, {QBER_DOMAIN.describe()} (missing field)")
    b = norm["budget"]
    if ("detections" in b) == ("signals" in b):
        raise InputError("budget.detections", b.get("detections"),
                         "exactly one of budget.detections or budget.signals (with budget.detection_probability)")
    if "signals" in b and "detection_probability" not in b:
        raise InputError("budget.detection_probability", None, f"{PROBABILITY.describe()} (required with "
                                                               "budget.signals)")
    if "detections" in b and "signal_rate_hz" in b and "detection_probability" not in b:
        raise InputError("budget.signal_rate_hz", b["signal_rate_hz"],
                         "absent with budget.detections unless budget.detection_probability is also given "
                         "(signals per block = detections / detection_probability; without it there is no "
                         "rate per second, fill time or rate per signal)")
    eps_sec, eps_cor = security_targets(norm["security"], "security.")
    r = norm["reconciliation"]
    leakage = (FixedEfficiency(r["efficiency"]) if r["model"] == "efficiency"
               else SecondOrderLeakage(r["frame_error_rate"], r["efficiency"]))
    a = norm["analysis"]
    d = norm["design"]
    return BB84Scenario(norm, norm["channel"]["qber"], b.get("detections"), b.get("signals"),
                        b.get("detection_probability"), b.get("signal_rate_hz"), eps_sec, eps_cor, leakage,
                        Statistics.parse(a["statistics"], "analysis.statistics"), a["overlap"], d.get("p_x"),
                        d["optimise_split"], d["smoothing_share"])


#: Built-in scenario: a fictional metropolitan fibre link of our own ("demo link"), not any real system.
DEFAULT_SCENARIO = {
    "protocol": {"name": PROTOCOL_NAME, "label": "demo link (fictional): 1 GHz qubit source, 2% QBER"},
    "channel": {"qber": 0.02},
    "budget": {"signals": 10_000_000_000, "detection_probability": 1e-3, "signal_rate_hz": 1e9},
    "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
    "reconciliation": {"model": "efficiency", "efficiency": 1.1},
    "analysis": {"statistics": "exact", "overlap": 0.5},
}


def scenario_fields() -> list:
    """Dotted names of every scenario field."""
    return [f"{s}.{f}" for s, fields in SCENARIO_SCHEMA.items() for f in fields]


def with_field(scenario: BB84Scenario, dotted_name: str, value) -> BB84Scenario:
    """Copy of ``scenario`` with one field replaced and the whole scenario re-validated."""
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of: " + ", ".join(scenario_fields()))
    section, name = dotted_name.split(".", 1)
    data = {s: dict(v) for s, v in scenario.data.items()}
    if section == "security":
        data["security"] = security_fields_with(data["security"], scenario.eps_sec, scenario.eps_cor, name, value)
    else:
        data[section][name] = value
    if section == "budget" and name in ("detections", "signals"):
        data["budget"].pop("signals" if name == "detections" else "detections", None)
    return parse_scenario(data)


def asymptotic_rate(scenario: BB84Scenario) -> float:
    """Key per detection for an infinite block: log2(1/c) - h(Q) - f h(Q) (p_X -> 1).

    References
    ----------
    .. [1] P. W. Shor and J. Preskill, Phys. Rev. Lett. 85, 441 (2000) (f = 1, c = 1/2: 1 - 2 h(Q)).
    """
    from ..entropy import binary_entropy
    q = scenario.qber
    f = scenario.leakage.efficiency
    return math.log2(1 / scenario.overlap) - (1 + f) * float(binary_entropy(q))


def _expected_counts(N: float, p_x: float, q: float):
    n = int(math.floor(N * p_x * p_x))
    k = int(math.floor(N * (1 - p_x) ** 2))
    qk = q * k
    e = min(k, int(math.ceil(qk - 1e-9 * max(1.0, qk))))
    return n, k, max(e, 0)


class _Objective:
    """Float key length as a function of (log10 p_Z, smoothing share) for a fixed detection count."""

    def __init__(self, sc: BB84Scenario, N: float, stats: Statistics):
        self.sc, self.N, self.stats = sc, N, stats
        self.tag = verification_tag_bits(sc.eps_cor)
        self.comp = _compiled()

    def _eps(self, share):
        eps_s = share * self.sc.eps_sec / 2
        eps_pa = (1 - share) * self.sc.eps_sec
        return eps_s, eps_pa

    def surrogate(self, log_pz, share):
        """Vectorised: Serfling exactly, or a normal approximation of the exact hypergeometric bound."""
        sc = self.sc
        pz = 10.0 ** np.asarray(log_pz, dtype=float)
        n = self.N * (1 - pz) ** 2
        k = self.N * pz ** 2
        eps_s, eps_pa = self._eps(np.asarray(share, dtype=float))
        leak = sc.leakage.bits(n, sc.qber)
        q = sc.qber
        if self.stats is Statistics.SERFLING:
            val = self.comp["serfling"].numpy(n, k, q * k, sc.overlap, leak, self.tag, eps_s, eps_pa)
            phi = q + self.comp["mu"].numpy(n, k, eps_s)
        else:
            from scipy.special import ndtri
            z = -ndtri(np.minimum(eps_s ** 2, 0.5))
            qs = np.maximum(q, 1.0 / np.maximum(k, 1.0))
            phi = q + z * np.sqrt(qs * (1 - qs) * (n + k) / (n * k)) + 1.0 / np.maximum(k, 1.0)
            val = self.comp["exact"].numpy(n, phi * n, sc.overlap, leak, self.tag, eps_pa)
        val = np.where((phi < 0.5) & (k >= 1) & (n >= 1), val, -np.abs(n) - 1.0)
        return val

    def exact_float(self, log_pz, share) -> float:
        """Scalar float key length with the exact hypergeometric bound (not certified; for choosing only)."""
        sc = self.sc
        p_x = 1 - 10.0 ** log_pz
        n, k, e = _expected_counts(self.N, p_x, sc.qber)
        if n < 1 or k < 1:
            return -1.0 - n
        eps_s, eps_pa = self._eps(share)
        E = key_errors_upper(n, k, e, squared_down(eps_s))
        if 2 * E >= n:
            return -1.0 - n
        leak = float(sc.leakage.bits(n, sc.qber))
        if E == 0:
            return float(self.comp["exact0"].numpy(n, sc.overlap, leak, self.tag, eps_pa))
        return float(self.comp["exact"].numpy(n, E, sc.overlap, leak, self.tag, eps_pa))


def _choose(sc: BB84Scenario, N: float, stats: Statistics, refine: bool = True, warm: tuple | None = None):
    """Float search for (p_x, smoothing share); returns (p_x, share, float key length).

    ``warm = (p_x, share)`` from a design at a nearby size: only a narrow golden-section search around it.
    """
    obj = _Objective(sc, N, stats)
    if warm is not None:
        return _choose_warm(sc, obj, stats, *warm)
    lo_pz = math.log10(min(0.5, max(1.5 / math.sqrt(max(N, 1.0)), 1e-9)))
    hi_pz = math.log10(0.5)
    share_lo, share_hi = 0.02, 0.98
    if sc.p_x is not None:
        fixed_lpz = math.log10(1 - sc.p_x)
        lo_pz = hi_pz = fixed_lpz
    if not sc.optimise_split:
        share_lo = share_hi = sc.smoothing_share
    bounds = [(lo_pz, hi_pz), (share_lo, share_hi)]
    grid = [1 if lo_pz == hi_pz else 40, 1 if share_lo == share_hi else 9]
    x, val = maximize_box(obj.surrogate, bounds, grid)
    lpz, share = float(x[0]), float(x[1])
    if stats is Statistics.EXACT and refine and lo_pz != hi_pz:
        a, b = max(lo_pz, lpz - 0.25), min(hi_pz, lpz + 0.25)
        lpz, val = golden_max(lambda t: obj.exact_float(t, share), a, b, iters=14)
        if share_lo != share_hi:
            share, val = golden_max(lambda s_: obj.exact_float(lpz, s_), max(share_lo, share - 0.2),
                                    min(share_hi, share + 0.2), iters=10)
    elif stats is Statistics.EXACT and refine:
        if share_lo != share_hi:
            share, val = golden_max(lambda s_: obj.exact_float(lpz, s_), share_lo, share_hi, iters=14)
        else:
            val = obj.exact_float(lpz, share)
    p_x = sc.p_x if sc.p_x is not None else 1 - 10.0 ** lpz
    return p_x, share, float(val)


def _choose_warm(sc: BB84Scenario, obj: _Objective, stats: Statistics, p_x: float, share: float):
    f = obj.exact_float if stats is Statistics.EXACT else (lambda t, s_: float(obj.surrogate(t, s_)))
    lpz = math.log10(1 - p_x)
    top = math.log10(0.5)
    val = f(lpz, share)
    for width, it_p, it_s in ((0.08, 10, 8), (0.02, 6, 0)):
        if sc.p_x is None:
            lpz, val = golden_max(lambda t: f(t, share), lpz - width, min(top, lpz + width), iters=it_p)
        if sc.optimise_split and it_s:
            share, val = golden_max(lambda s_: f(lpz, s_), max(0.02, share - 0.1), min(0.98, share + 0.1),
                                    iters=it_s)
    return (sc.p_x if sc.p_x is not None else 1 - 10.0 ** lpz), share, val


def design(scenario: BB84Scenario, statistics=None, *, detections: float | None = None,
           warm: tuple | None = None) -> DesignResult:
    """Choose the basis bias (hence test fraction) and the epsilon split maximising the key of one block.

    For a fixed detection (or signal) budget, maximising the key length and maximising the key rate are the
    same objective.  Parameters are chosen on float objectives; the reported key length is certified.

    References
    ----------
    .. [1] H.-K. Lo, H. F. Chau, M. Ardehali, J. Cryptology 18, 133 (2005) -- biased basis choice.
    """
    sc = scenario
    stats = Statistics.parse(statistics) if statistics is not None else sc.statistics
    N = detections if detections is not None else sc.detection_count
    p_x, share, _ = _choose(sc, N, stats, warm=warm)
    return _design_at(sc, N, stats, p_x, share)


def _design_at(sc: BB84Scenario, N: float, stats: Statistics, p_x: float, share: float) -> DesignResult:
    n, k, e = _expected_counts(N, p_x, sc.qber)
    split = {"smoothing": share, "privacy_amplification": 1.0 - share}
    if n >= 1 and k >= 1:
        block = BB84Block(n, k, e, sc.leakage, sc.eps_sec, sc.eps_cor, sc.overlap, split, sc.qber, stats)
        if sc.leakage.bits_upper(n, sc.qber) > n:
            block = replace(block, leakage=DisclosedLeakage(n))
        res = key_length(block, stats)
    else:
        led = block_ledger(sc.eps_sec, sc.eps_cor, split)
        res = KeyLengthResult(PROTOCOL_NAME, 0, led, stats.value, ASSUMPTIONS, {}, {"note_block_too_small": 1.0},
                              FORMULA_LATEX, REFERENCES,
                              status=Status.no_key(NoKeyReason.BLOCK_TOO_SMALL,
                                                   f"{N:.6g} detections give {n} key bits and {k} test bits"))
    ell = res.secret_key_length
    p_det = sc.detection_probability
    signals = N / p_det if p_det else None
    per_det = ell / N if N > 0 else 0.0
    # per signal, per second and the fill time need the number of signals (a detection budget alone has none)
    per_signal = ell / signals if signals else None
    bps = per_signal * sc.signal_rate_hz if (sc.signal_rate_hz and signals) else None
    fill = signals / sc.signal_rate_hz if (sc.signal_rate_hz and signals) else None
    params = {"p_x": p_x, "p_z": 1.0 - p_x, "sifting_fraction": sifting_fraction(p_x),
              "test_fraction": k / (n + k) if n + k else 0.0, "epsilon_split": split,
              "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor, "statistics": stats.value}
    counts = {"detections": N, "key_bits": n, "test_bits": k, "test_errors": e, "key_qber": sc.qber}
    if signals:
        counts["signals"] = signals
    r_inf = asymptotic_rate(sc)
    status = KEY if ell > 0 else design_no_key(
        res.status, NoKeyReason.THRESHOLD_EXCEEDED if r_inf <= 0 else
        (NoKeyReason.BLOCK_TOO_SMALL if res.status.reason is NoKeyReason.BLOCK_TOO_SMALL
         else NoKeyReason.NO_POSITIVE_DESIGN))
    return DesignResult(PROTOCOL_NAME, params, res, per_signal, bps, counts, fill, _echo(sc, N),
                        secret_key_rate_per_detection=per_det, asymptotic_rate_per_detection=r_inf, status=status)


def _echo(sc: BB84Scenario, N: float) -> dict:
    """The scenario as validated, with the block size the design was made for (a block-size search designs at
    sizes other than the scenario's own budget)."""
    data = {s_: dict(v) if isinstance(v, dict) else v for s_, v in sc.data.items()}
    if sc.detections is not None:
        size = N
    else:
        size = N / float(sc.detection_probability)
        size = round(size) if abs(size - round(size)) <= 1e-6 * max(1.0, size) else size
    key = "detections" if sc.detections is not None else "signals"
    if float(size) != float(data["budget"][key]):
        data["budget"][key] = int(size) if float(size).is_integer() else size
    return data


def _meets(target: BlockTarget, ell: float, N: float, r_inf: float) -> bool:
    if target.kind is BlockTargetKind.POSITIVE_KEY:
        return ell >= 1
    if target.kind is BlockTargetKind.KEY_BITS:
        return ell >= target.value
    return ell >= target.value * r_inf * N


def blocksize(scenario: BB84Scenario, target: BlockTarget, statistics=None, *, limit: float = 1e15,
              unit: str | None = None) -> BlockSizeResult:
    """Smallest block (detections, or signals for a signal budget) whose designed key reaches ``target``.

    A float search over sizes (with the design re-optimised at each size) brackets the answer; a bisection on
    certified designs (warm-started from the design at the float answer) then fixes it to a relative
    resolution of 1e-3.  The size reported always passes with the design reported.  ``unit`` may only repeat
    the unit of the scenario's budget (``"detections"`` or ``"signals"``): the size is given in it.

    Raises
    ------
    InputError
        If the QBER is at or above the threshold where the asymptotic rate vanishes, or ``unit`` is not the
        budget's unit.
    ComputationError
        If the target is not reached below ``limit``.
    """
    sc = scenario
    if unit is not None and unit != sc.size_kind:
        raise InputError("unit", unit, f"'{sc.size_kind}' for this BB84 scenario (a BB84 block size is given in "
                                       "the unit of its [budget]: detections or signals)")
    stats = Statistics.parse(statistics) if statistics is not None else sc.statistics
    r_inf = asymptotic_rate(sc)
    if r_inf <= 0:
        raise InputError("channel.qber", sc.qber, "a QBER below the threshold where log2(1/c) - h(Q) - f h(Q) > 0 "
                                                  "(no key for any block size)")
    scale = 1.0 if sc.detections is not None else float(sc.detection_probability)  # detections per size unit
    lim = int(limit)

    def float_pass(m: int) -> bool:
        N = m * scale
        if N < 4:
            return False
        _, _, val = _choose(sc, N, stats, refine=False)
        return _meets(target, math.floor(val), N, r_inf)

    m_float = smallest_passing(float_pass, max(int(64 / scale), 1), limit=lim, rel_resolution=1e-3)
    if m_float is None:
        raise ComputationError(f"target {target} not reached below {limit:.3g} {sc.size_kind}")
    # Certified stage: designs near the float answer, warm-started from the design there.
    first = design(sc, stats, detections=m_float * scale)
    warm = (first.parameters["p_x"], first.parameters["epsilon_split"]["smoothing"])
    cache: dict = {m_float: first}

    def cert(m: int) -> DesignResult:
        if m not in cache:
            cache[m] = design(sc, stats, detections=m * scale, warm=warm)
        return cache[m]

    def cert_pass(m: int) -> bool:
        return _meets(target, cert(m).expected.secret_key_length, m * scale, r_inf)

    hi = m_float
    while not cert_pass(hi):
        hi = int(math.ceil(hi * 1.05)) + 1
        if hi > lim:
            raise ComputationError(f"target {target} not reached below {limit:.3g} {sc.size_kind}")
    lo = max(1, int(hi * 0.95))
    while lo > 1 and cert_pass(lo):
        hi, lo = lo, max(1, int(lo * 0.9))
    while hi - lo > max(1, int(1e-3 * hi)):
        mid = (lo + hi) // 2
        if cert_pass(mid):
            hi = mid
        else:
            lo = mid
    return BlockSizeResult(target, hi, sc.size_kind, cert(hi), resolution=max(1, int(1e-3 * hi)))


class BB84:
    """The registered BB84 protocol object (see the protocol interface)."""

    name = PROTOCOL_NAME
    statistics_methods = tuple(m.value for m in Statistics)
    default_statistics = Statistics.EXACT.value

    parse_block = staticmethod(parse_block)
    parse_scenario = staticmethod(parse_scenario)
    scenario_fields = staticmethod(scenario_fields)
    with_field = staticmethod(with_field)
    asymptotic_rate = staticmethod(asymptotic_rate)

    # The entry points for callers run with one BLAS thread (restored afterwards); see finitekey/_threads.py.
    @staticmethod
    @with_one_blas_thread
    def design(scenario, statistics=None, **options):
        """:func:`finitekey.protocols.bb84.design` with one BLAS thread (see there for the parameters)."""
        return design(scenario, statistics, **options)

    @staticmethod
    @with_one_blas_thread
    def blocksize(scenario, target, statistics=None, **options):
        """:func:`finitekey.protocols.bb84.blocksize` with one BLAS thread (see there for the parameters)."""
        return blocksize(scenario, target, statistics, **options)

    @staticmethod
    def key_length(block, statistics=None):
        """:func:`finitekey.protocols.bb84.key_length` (see there for the parameters)."""
        return key_length(block, statistics)

    @staticmethod
    def key_length_batch(blocks, statistics=None, jobs: int = 1):
        """:func:`finitekey.protocols.bb84.key_length_batch` (see there for the parameters)."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    @staticmethod
    def fields_table() -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}`` (see :func:`._spec.table_rows`).

        Returns
        -------
        dict
        """
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    @staticmethod
    def json_schema(kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``, from the field declarations.

        Returns
        -------
        dict
        """
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, _BLOCK_SCHEMA_RULES,
                               _SCENARIO_SCHEMA_RULES)

    @staticmethod
    def default_scenario():
        """The built-in BB84 scenario (a fictional lab link of our own).

        Returns
        -------
        BB84Scenario
        """
        return parse_scenario(DEFAULT_SCENARIO)


BB84_PROTOCOL = register(BB84())
