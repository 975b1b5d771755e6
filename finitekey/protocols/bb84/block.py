"""BB84 blocks: the observed block (:class:`BB84Block`), its fields declared once (:data:`BLOCK_SPECS`) and
:func:`parse_block`.

Also the names a block refers to: the protocol name, the statistics methods (:class:`Statistics`), the
measurement overlap's domain and the ledger's terms (:data:`TERM_SPECS`, which a block's ``epsilon_split``
shares eps_sec among; :mod:`.analysis` allocates the ledger from them).  The lowest module of the package: it
imports none of its siblings.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass

from ...budget import Charge, Role, TermSpec, allocate
from ...domains import COUNT, POSITIVE_COUNT, Domain
from ...errors import InputError
from ...reconciliation import EFFICIENCY_DOMAIN, QBER_DOMAIN, DisclosedLeakage, FixedEfficiency, LeakageModel
from .._block_rule import parse_closure
from .._fields import SECURITY_SCHEMA_RULE, block_security_specs, read_label, security_targets
from .._spec import FieldSpec, by_name

__all__ = ["PROTOCOL_NAME", "Statistics", "OVERLAP_DOMAIN_BB84", "TERM_SPECS", "BB84Block", "BLOCK_SPECS",
           "parse_block"]

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

