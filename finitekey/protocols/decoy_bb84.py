"""Decoy-state BB84 with phase-randomised weak coherent pulses: finite-key length, design and reach.

Alice sends pulses of mean photon number ``mu_k`` (descending, chosen with probability ``p_k``) in basis X
(key) or Z (test), each side choosing X with probability ``q_X``.  From the detections and errors seen per
intensity in each basis, the analysis bounds

* ``s0``, ``s1``: the vacuum and single-photon detections in the key basis (lower bounds),
* ``v1``: the single-photon errors in the test basis (upper bound), and ``s1Z`` (lower),
* ``phi``: the phase-error rate of the single-photon key bits (upper bound, by random sampling),

and extracts

.. math:: \\ell = \\Big\\lfloor s_0 + s_1\\,(1 - h(\\phi)) - \\lambda_{EC} - 2\\log_2\\tfrac{2}{\\varepsilon_{ch}^2}
          - 2\\log_2\\tfrac{1}{2\\varepsilon_{PA}} - \\log_2\\tfrac{2}{\\varepsilon_{cor}}\\Big\\rfloor ,

with ``phi`` bounding the single-photon phase-error rate except with probability ``eps_1^2`` (``eps_1`` the
single-photon smoothing parameter).  With every epsilon equal to ``eps_sec/21`` (12 count intervals, 4 units
for the single-photon smoothing doubled by the chain rule, 2 + 2 for the chain rules, 1 for hashing) this is
the 2014 formula ``s0 + s1 (1 - h(phi)) - leak - 6 log2(21/eps_sec) - log2(2/eps_cor)``.

Statistics (``statistics=``):

* ``"exact"`` (default): exact binomial (Clopper-Pearson) intervals on the counts per intensity, valid for
  non-identical Bernoulli trials by Hoeffding's 1956 domination, and a Chernoff-Hoeffding bound on the
  phase errors that is monotone in the single-photon counts (so their bounds may be plugged in; the exact
  hypergeometric bound is not), with an optimisable epsilon split;
* ``"chernoff"``: multiplicative Chernoff intervals on the counts, the same phase-error bound;
* ``"hoeffding"``: the 2014 reference: Hoeffding intervals ``n_k -/+ sqrt(n/2 ln(21/eps_sec))``, every
  epsilon ``eps_sec/21``, and the phase-error term ``max(gamma_2014, mu)``: the 2014 sampling term
  ``gamma`` is not a valid bound on its own (it tends to 0 with the test error rate), so it is kept only
  where it exceeds the rigorous random-sampling (Serfling) deviation ``mu`` at the same epsilon.
* ``"kato"``: Kato's inequality over all ``pulses`` of the block (dependent rounds): intervals on sums of
  conditional probabilities, tilts from the pre-registered ``kato_expected`` (``a = 0``, Azuma-Hoeffding,
  without it), four more events converting the decoy bounds to actual counts; closed forms only, no design.

Analyses by intensity count: 3 intensities with ``mu1 > mu2 + mu3`` use the closed form of Lim et al.;
2 intensities the one-decoy closed form of Rusca et al. (vacuum bounded from error counts); any other count
(or 3 intensities violating the condition) the linear programme of :mod:`._decoy_lp`.

See proofs_notes/protocols/decoy_bb84.md for the derivation, the epsilon accounting and the assumptions.

References
----------
.. [1] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, "Concise security bounds for practical
   decoy-state quantum key distribution", Phys. Rev. A 89, 022307 (2014).
.. [2] D. Rusca, A. Boaron, F. Grünenfelder, A. Martin, H. Zbinden, "Finite-key analysis for the 1-decoy
   state QKD protocol", Appl. Phys. Lett. 112, 171104 (2018).
.. [3] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, "Practical decoy state for quantum key distribution",
   Phys. Rev. A 72, 012326 (2005).
.. [4] W. Hoeffding, "On the distribution of the number of successes in independent trials",
   Ann. Math. Statist. 27, 713-721 (1956).
.. [5] H.-K. Lo, X. Ma, K. Chen, "Decoy state quantum key distribution", Phys. Rev. Lett. 94, 230504 (2005).
.. [6] G. Kato, "Concentration inequality using unconfirmed knowledge", arXiv:2002.04357 (2020).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np
from flint import arb, ctx

from .._threads import with_one_blas_thread
from ..budget import Charge, Ledger, LedgerTerm, Role, TermSpec, allocate
from ..channel import FIELD_DOMAINS, Detector, Link, LinkModel, Source, check_intensity_list
from ..domains import COUNT, PROBABILITY, Domain
from ..errors import ComputationError, InputError
from . import _decoy_analysis as A
from ._batch import map_in_chunks
from ._block_rule import parse_closure
from ._fields import (SECURITY_SCHEMA_RULE, block_security_specs, one_of, read_label, security_fields_with,
                      security_targets)
from ._registry import register
from ._spec import DefaultWarning, FieldSpec, by_name, protocol_schema, sections_of, table_rows
from ._result import KEY, BlockTarget, DesignResult, KeyLengthResult, NoKeyReason, ReachResult, Status

__all__ = ["DecoyBlock", "DecoyScenario", "DecoyBB84", "DECOY_BB84", "PROTOCOL_NAME", "STATISTICS", "key_length_batch",
           "term_specs", "gllp_rate", "optimal_gllp_rate", "three_intensity_condition"]

PROTOCOL_NAME = "decoy-bb84"
STATISTICS = ("exact", "chernoff", "hoeffding", "kato")
#: Methods the float design objective supports (kato has no design continuation).
DESIGN_STATISTICS = ("exact", "chernoff", "hoeffding")
#: Extra one-sided events of the kato method: conditional sums -> actual counts for s0, s1, s1Z, v1.
KATO_CONVERSIONS = 4
DEFAULT_STATISTICS = "exact"
_PREC = 128
#: The 2014 reference spends eps_sec/21 on every event.
REFERENCE_UNITS = 21

FORMULA = (r"\ell = \Big\lfloor s_{X,0}^{L} + s_{X,1}^{L}\,\big(1 - h(\phi_X^{U})\big) - \lambda_{EC}"
           r" - 2\log_2\frac{2}{\varepsilon_{ch}^2} - 2\log_2\frac{1}{2\varepsilon_{PA}}"
           r" - \log_2\frac{2}{\varepsilon_{cor}}\Big\rfloor,\quad"
           r" \Pr[\phi_X > \phi_X^{U}] \le \varepsilon_{1}^2")

REFERENCES = (
    "C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, Phys. Rev. A 89, 022307 (2014)",
    "D. Rusca, A. Boaron, C. Gruenenfelder, A. Martin, H. Zbinden, Appl. Phys. Lett. 112, 171104 (2018)",
    "X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005)",
    "W. Hoeffding, Ann. Math. Statist. 27, 713-721 (1956)",
    "M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, Nat. Commun. 3, 634 (2012)",
)

#: The block rule (proofs_notes/protocols/decoy_bb84.md, "The block rule"); blocks closed by quotas are refused.
BLOCK_RULE_ASSUMPTION = (
    "block closed after a number of pulses fixed before it (closed_by = rounds), never when detection quotas "
    "fill; each pulse's intensity and both bases chosen independently with fixed probabilities and announced "
    "only after the block's last pulse is measured, so the attack cannot depend on them")

#: How the length is used (replaced by FIXED_LENGTH_ASSUMPTION for a block with an acceptance test).
VARIABLE_LENGTH_ASSUMPTION = (
    "variable-length use: the length is computed from this block's counts by a rule (statistics, epsilon split, "
    "leakage bound) fixed before the block; count-interval failures are charged once each and the phase-error "
    "bound is a smoothing term evaluated at its parameter squared (proof note finitekey/_notes/protocols/"
    "decoy_bb84.md, sections 7 and 8, which also list what is assumed about conditioning on key-basis data)")
ASSUMPTIONS = (
    "Alice's pulses are phase-randomised weak coherent states with Poissonian photon number; intensities and "
    "bases are chosen independently at random each round and the chosen intensity is not otherwise revealed",
    "Bob's detection probability and basis choice do not depend on the basis (no efficiency mismatch); "
    "threshold detectors with double clicks assigned a random bit",
    VARIABLE_LENGTH_ASSUMPTION,
    BLOCK_RULE_ASSUMPTION,
    "the single-photon key and test detections form a uniformly random split of all single-photon detections "
    "(basis chosen independently of the photon number and of the adversary)",
    "ec_leak_bits bounds what error correction can disclose: for interactive or rate-adaptive codes, the "
    "maximum over all runs, not the count of one run (proof note finitekey/_notes/reconciliation.md)",
)

#: Added to the references and assumptions of results computed with statistics="kato".
KATO_REFERENCE = "G. Kato, Concentration inequality using unconfirmed knowledge, arXiv:2002.04357 (2020)"
KATO_ASSUMPTION = ("statistics kato: for every pulse, given its photon number and everything before it, the "
                   "intensity label is independent of the detection and error outcome (labels announced after all "
                   "pulses); pulses and kato_expected were fixed before the run (Kato's statement from memory)")

_SHARE = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_POSITIVE = Domain(0.0, math.inf, lower_open=True)


def three_intensity_condition(mu) -> bool:
    """Whether intensities (descending) satisfy the closed form's ``mu1 > mu2 + mu3`` and ``mu2 > mu3 >= 0``.

    Parameters
    ----------
    mu : sequence of float

    Returns
    -------
    bool
    """
    return len(mu) == 3 and mu[0] > mu[1] + mu[2] and mu[1] > mu[2] >= 0


# ---------------------------------------------------------------------------------------------------------
# epsilon accounting
# ---------------------------------------------------------------------------------------------------------
SECRECY_TERMS = ("count_estimation", "single_photon_smoothing", "chain_rule", "privacy_amplification")
#: Secrecy term of the two-intensity analysis whose epsilon is eps_cor (not split; see term_specs).
EC_FAILURE_TERM = "undetected_correction_failure"


def count_events(n_intensities: int, analysis: str, statistics: str | None = None) -> int:
    """Number of one-sided count intervals the analysis uses (each charged its own epsilon).

    With ``statistics="kato"`` four more one-sided events (the conversions of the conditional sums of
    ``s0``, ``s1``, ``s1Z`` and ``v1`` into bounds on the actual counts, proof note section 2a).
    """
    if statistics == "kato":
        return count_events(n_intensities, analysis) + KATO_CONVERSIONS
    if analysis == "three-intensity":
        return 12   # key: n1+, n2-, n2+, n3-, n3+; test: the same 5; test errors: m2+, m3-
    if analysis == "two-intensity":
        return 10   # key: n1+, n2-, m2+ and vacuum sampling; test: n1+, n2-, m2+, vacuum sampling, m1+, m2-
    return 6 * n_intensities  # LP: both sides for every intensity: key detections, test detections, test errors


#: Appearances of the single-photon smoothing parameter in the final smoothing: the first chain rule
#: ``H^{a+2b+c}(AB|C) >= H^b(A|BC) + H^c(B|C) - log2(2/a^2)`` puts it in the doubled slot (proof note, section 7).
SINGLE_PHOTON_APPEARANCES = 2
#: Two chain rules (single photons | rest, then vacuum | multi-photon), each with its own smoothing parameter.
CHAIN_RULES = 2


def term_specs(n_count: int, analysis: str | None = None) -> tuple:
    """Ledger terms of the decoy analysis; ``n_count`` one-sided count intervals.

    ``single_photon_smoothing`` is the smoothing parameter of the single-photon min-entropy: the phase-error
    bound is evaluated at failure probability eps^2 and, doubled by the chain rule, it costs 4 eps.  With two
    intensities the vacuum bound of the key basis uses the key-basis error counts, known only after error
    correction; an undetected correction failure (probability <= eps_cor) then breaks that bound, so
    ``undetected_correction_failure`` charges eps_cor to the secrecy too.

    Default shares follow the 2014 per-unit split (one unit per event or appearance) over the split terms.

    Parameters
    ----------
    n_count : int
        Number of one-sided count intervals.
    analysis : str, optional
        ``"three-intensity"``, ``"two-intensity"`` or None (the linear program); ``"two-intensity"`` adds the
        ``undetected_correction_failure`` term.

    Returns
    -------
    tuple of TermSpec
    """
    units = n_count + 2 * SINGLE_PHOTON_APPEARANCES + 2 * CHAIN_RULES + 1
    specs = (
        TermSpec("count_estimation", Role.SECRECY, Charge.FAILURE, n_count,
                 f"{n_count} one-sided intervals on expected detection/error counts per intensity",
                 n_count / units),
        TermSpec("single_photon_smoothing", Role.SECRECY, Charge.SMOOTHING, SINGLE_PHOTON_APPEARANCES,
                 "smoothing of the single-photon min-entropy; the phase-error bound from the test-basis "
                 "sample is evaluated at failure probability eps^2; doubled by the chain rule",
                 2 * SINGLE_PHOTON_APPEARANCES / units),
        TermSpec("chain_rule", Role.SECRECY, Charge.SMOOTHING, CHAIN_RULES,
                 "smoothing parameters of the two chain-rule splits (single / vacuum / multi-photon)",
                 2 * CHAIN_RULES / units),
        TermSpec("privacy_amplification", Role.SECRECY, Charge.HASHING, 1,
                 "leftover hash lemma (two-universal hashing)", 1 / units),
    )
    if analysis == "two-intensity":
        specs += (TermSpec(EC_FAILURE_TERM, Role.SECRECY, Charge.FAILURE, 1,
                           "error correction fails undetected, so the key-basis error counts behind the "
                           "vacuum bound are wrong (probability at most eps_cor)", pinned="eps_cor"),)
    return specs + (TermSpec("correctness", Role.CORRECTNESS, Charge.FAILURE, 1,
                             "error-verification hash fails to detect a residual error"),)


def reference_ledger(eps_sec: float, eps_cor: float, n_count: int) -> Ledger:
    """The 2014 choice: every secrecy unit at eps_sec/21 (12 count intervals, 4 for the single-photon
    smoothing doubled by the chain rule, 2 + 2 for the chain rules, 1 for hashing)."""
    e = math.nextafter(eps_sec / REFERENCE_UNITS, 0.0)
    terms = []
    for s in term_specs(n_count):
        eps = eps_cor if s.role is Role.CORRECTNESS else e
        terms.append(LedgerTerm(s.name, eps, s.role, s.charge, s.multiplicity, s.description))
    led = Ledger(tuple(terms))
    units = sum(t.weight for t in terms if t.role is Role.SECRECY)
    if units != REFERENCE_UNITS or led.eps_sec > eps_sec:
        raise ComputationError(f"the 2014 accounting has {REFERENCE_UNITS} units; this analysis uses {units}")
    return led


# ---------------------------------------------------------------------------------------------------------
# the observed block
# ---------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DecoyBlock:
    """One observed block of decoy-state BB84 (validated by :meth:`DecoyBB84.parse_block`).

    ``pulses`` (total pulses sent) and ``kato_expected`` (pre-registered expected counts, tables like
    ``key_basis``/``test_basis``) are optional and used by ``statistics="kato"`` only.

    The analysis holds only for a block of a number of pulses fixed before it, each pulse's intensity and
    bases chosen independently with fixed probabilities and announced after the block (block field
    ``closed_by = "rounds"``, the default; ``"quota"``, a block closed when detection quotas fill, is refused
    by :func:`parse_block`; proofs_notes/protocols/decoy_bb84.md, "The block rule").
    """

    intensities: tuple
    intensity_probabilities: tuple
    key_detections: tuple
    key_errors: tuple
    test_detections: tuple
    test_errors: tuple
    ec_leak_bits: int
    eps_sec: float
    eps_cor: float
    epsilon_split: dict | None = None
    label: str | None = None
    pulses: int | None = None
    kato_expected: dict | None = None
    acceptance: "AcceptanceTest | None" = None

    def as_dict(self) -> dict:
        """JSON-ready mapping in the block-file layout (``parse_block`` reads it back).

        Returns
        -------
        dict
        """
        d = {"protocol": PROTOCOL_NAME, "intensities": list(self.intensities),
             "intensity_probabilities": list(self.intensity_probabilities),
             "key_basis": {"detections": list(self.key_detections), "errors": list(self.key_errors)},
             "test_basis": {"detections": list(self.test_detections), "errors": list(self.test_errors)},
             "ec_leak_bits": self.ec_leak_bits, "eps_sec": self.eps_sec, "eps_cor": self.eps_cor}
        if self.epsilon_split is not None:
            d["epsilon_split"] = dict(self.epsilon_split)
        if self.pulses is not None:
            d["pulses"] = self.pulses
        if self.kato_expected is not None:
            d["kato_expected"] = {b: {k: list(v) for k, v in t.items()} for b, t in self.kato_expected.items()}
        if self.acceptance is not None:
            d["acceptance"] = self.acceptance.as_dict()
        return d


#: Statistics a fixed-length acceptance test supports: their count intervals are monotone in the observed count
#: and (hoeffding) in the basis total, so the widest interval over the acceptance box is at its corners.
ACCEPTANCE_STATISTICS = ("chernoff", "hoeffding")


@dataclass(frozen=True)
class AcceptanceTest:
    """A fixed-length protocol's acceptance test, fixed before the block (proof note, section 7b).

    The block is accepted when every listed count lies in its closed range ``[a, b]`` and its
    ``ec_leak_bits`` does not exceed the test's; the key length is then the one certified for the whole box
    (every count interval widened to its range), the same for every accepted block, unless the block's own
    counts fail the consistency checks of the variable-length analysis (then no key, ``inconsistent_block``).

    Attributes
    ----------
    statistics : {"chernoff", "hoeffding"}
    ec_leak_bits : int
        Leakage bound of the error-correction code, fixed in advance (the formula uses it, not the block's).
    ranges : dict
        ``{"key_basis": {"detections": ((a, b), ...), "errors": ...}, "test_basis": {...}}``, one range per
        intensity; key-basis errors only with two intensities.
    """

    statistics: str
    ec_leak_bits: int
    ranges: dict

    def as_dict(self) -> dict:
        """JSON-ready mapping in the block-file layout.

        Returns
        -------
        dict
        """
        return {"statistics": self.statistics, "ec_leak_bits": self.ec_leak_bits,
                **{b: {k: [list(r) for r in v] for k, v in t.items()} for b, t in self.ranges.items()}}

    def violations(self, block) -> list:
        """The counts (and the leakage) of ``block`` outside the test, as field names with values."""
        bad = []
        for basis, table in self.ranges.items():
            for kind, rng in table.items():
                observed = getattr(block, f"{basis.split('_')[0]}_{kind}")
                for i, ((a, b), c) in enumerate(zip(rng, observed)):
                    if not a <= c <= b:
                        bad.append(f"{basis}.{kind}[{i}] = {c} outside [{a}, {b}]")
        if block.ec_leak_bits > self.ec_leak_bits:
            bad.append(f"ec_leak_bits = {block.ec_leak_bits} above the fixed {self.ec_leak_bits}")
        return bad


_COUNTS = {"type": "array", "items": {"type": "integer", "minimum": 0}, "minItems": 2}
_BASIS_SCHEMA = {"type": "object", "properties": {"detections": _COUNTS, "errors": _COUNTS},
                 "required": ["detections", "errors"], "additionalProperties": False}
_EXPECTED_LIST = {"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2}
_RANGES = {"type": "array", "items": {"type": "array", "items": {"type": "integer", "minimum": 0}, "minItems": 2,
                                      "maxItems": 2}, "minItems": 2, "maxItems": 3}
#: Every block field, declared once (``finitekey fields decoy-bb84``, ``finitekey schema decoy-bb84-block``).
#: Per-intensity lists and tables are checked inside by :func:`parse_block` (lengths, sums, errors <= detections).
BLOCK_SPECS = (
    FieldSpec("protocol", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,)),
    FieldSpec("intensities", "list", "mean photon numbers, strictly descending (at least two)", unit="photons",
              required="yes", schema={"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2}),
    FieldSpec("intensity_probabilities", "list", "probability of each intensity, summing to 1", required="yes",
              schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
                      "minItems": 2}),
    FieldSpec("key_basis", "table", "key-basis detections and errors, one per intensity", unit="detections",
              required="yes", schema=_BASIS_SCHEMA),
    FieldSpec("test_basis", "table", "test-basis detections and errors, one per intensity", unit="detections",
              required="yes", schema=_BASIS_SCHEMA),
    FieldSpec("ec_leak_bits", "number", "bits disclosed by error correction (at most the key-basis detections)",
              unit="bits", domain=COUNT, required="yes"),
    *block_security_specs(),
    FieldSpec("epsilon_split", "table", "shares of eps_sec for the secrecy terms, summing to 1",
              schema={"type": "object", "properties": {t: {"type": "number", "exclusiveMinimum": 0,
                                                           "exclusiveMaximum": 1} for t in SECRECY_TERMS},
                      "required": list(SECRECY_TERMS), "additionalProperties": False}),
    FieldSpec("label", "text", "free-text identifier carried into batch output",
              schema={"type": ["string", "integer"]}),
    FieldSpec("pulses", "number", "pulses sent (statistics kato; at least the detections of both bases)",
              unit="pulses", domain=COUNT, schema={"type": ["integer", "null"], "minimum": 0}),
    FieldSpec("kato_expected", "table", "pre-registered expected counts (statistics kato)", unit="detections",
              schema={"type": ["object", "null"], "properties": {b: {
                  "type": "object", "properties": {"detections": _EXPECTED_LIST, "errors": _EXPECTED_LIST},
                  "required": ["detections", "errors"], "additionalProperties": False}
                  for b in ("key_basis", "test_basis")}, "required": ["key_basis", "test_basis"],
                  "additionalProperties": False}),
    FieldSpec("closed_by", "choice", "how the block was closed (quota is refused)", choices=("rounds",),
              default="rounds", schema={"enum": ["rounds", None]}),
    FieldSpec("acceptance", "table", "fixed-length acceptance test, fixed before the block",
              schema={"type": ["object", "null"], "properties": {
                  "statistics": {"enum": list(ACCEPTANCE_STATISTICS)},
                  "ec_leak_bits": {"type": "integer", "minimum": 0},
                  "key_basis": {"type": "object", "properties": {"detections": _RANGES, "errors": _RANGES},
                                "required": ["detections"], "additionalProperties": False},
                  "test_basis": {"type": "object", "properties": {"detections": _RANGES, "errors": _RANGES},
                                 "required": ["detections", "errors"], "additionalProperties": False}},
                  "required": ["statistics", "ec_leak_bits", "key_basis", "test_basis"],
                  "additionalProperties": False}),
)
_BLOCK_SPEC = by_name(BLOCK_SPECS)
_BLOCK_FIELDS = tuple(_BLOCK_SPEC)
_BLOCK_REQUIRED = tuple(s.name for s in BLOCK_SPECS if s.required == "yes")
_BLOCK_SCHEMA_RULES = {"": SECURITY_SCHEMA_RULE}


def _probabilities(field_name: str, values, n: int) -> tuple:
    if not isinstance(values, (list, tuple)):
        raise InputError(field_name, values, f"a list of {n} probabilities in (0, 1) summing to 1")
    if len(values) != n:
        raise InputError(field_name, values, f"a list of {n} probabilities (one per intensity)")
    out = tuple(float(PROBABILITY.check_scalar(f"{field_name}[{i}]", v)) if n > 1 else
                float(Domain(0.0, 1.0, lower_open=True).check_scalar(f"{field_name}[{i}]", v))
                for i, v in enumerate(values))
    if abs(math.fsum(out) - 1.0) > 1e-9:
        raise InputError(field_name, list(values), f"probabilities summing to 1 (they sum to {math.fsum(out)!r})")
    return out


def _count_list(field_name: str, values, n: int) -> tuple:
    if not isinstance(values, (list, tuple)):
        raise InputError(field_name, values, f"a list of {n} non-negative integers (one per intensity)")
    if len(values) != n:
        raise InputError(field_name, values, f"a list of {n} non-negative integers (one per intensity)")
    return tuple(int(COUNT.check_scalar(f"{field_name}[{i}]", v)) for i, v in enumerate(values))


def _basis(data, name: str, n: int):
    if not isinstance(data, dict):
        raise InputError(name, data, 'a table {"detections": [...], "errors": [...]}')
    unknown = sorted(set(data) - {"detections", "errors"})
    if unknown:
        raise InputError(f"{name}.{unknown[0]}", data[unknown[0]], "only the fields detections, errors")
    for key in ("detections", "errors"):
        if key not in data:
            raise InputError(f"{name}.{key}", None, f"a list of {n} non-negative integers (required)")
    det = _count_list(f"{name}.detections", data["detections"], n)
    err = _count_list(f"{name}.errors", data["errors"], n)
    for i, (d, e) in enumerate(zip(det, err)):
        if e > d:
            raise InputError(f"{name}.errors[{i}]", e, f"an integer in [0, {d}] (errors cannot exceed the "
                             f"detections {name}.detections[{i}] = {d})")
    return det, err


def parse_block(data: dict) -> DecoyBlock:
    """Validate a block dictionary (JSON) and return a :class:`DecoyBlock`.

    The optional field ``closed_by`` says how the block was closed: ``"rounds"`` (the default: a number of
    pulses fixed before the block) is the only closure the analysis covers; ``"quota"`` is refused.

    Raises
    ------
    InputError
        Naming the field (``"key_basis.detections[1]"``, ``"intensities[2]"``, ...) for anything missing,
        unknown, of the wrong type or out of range, and for ``closed_by = "quota"``.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, "a JSON object with the decoy-bb84 block fields")
    unknown = sorted(set(data) - set(_BLOCK_FIELDS))
    if unknown:
        raise InputError(unknown[0], data[unknown[0]], "one of the block fields " + ", ".join(_BLOCK_FIELDS))
    if "protocol" in data and data["protocol"] != PROTOCOL_NAME:
        raise InputError("protocol", data["protocol"], f"'{PROTOCOL_NAME}'")
    parse_closure(data, "pulses")
    for key in _BLOCK_REQUIRED:
        if key not in data:
            raise InputError(key, None, "a value (required field)")
    mu = check_intensity_list("intensities", data["intensities"])
    if len(mu) < 2:
        raise InputError("intensities", data["intensities"], "at least two intensities (signal and decoy)")
    p = _probabilities("intensity_probabilities", data["intensity_probabilities"], len(mu))
    kd, ke = _basis(data["key_basis"], "key_basis", len(mu))
    td, te = _basis(data["test_basis"], "test_basis", len(mu))
    n_key = sum(kd)
    leak = int(Domain(0, n_key, integer=True).check_scalar("ec_leak_bits", data["ec_leak_bits"]))
    eps_sec, eps_cor = security_targets(data)
    split = data.get("epsilon_split")
    if split is not None:
        split = _check_split(split)
    label = read_label(data)
    pulses = None
    if data.get("pulses") is not None:
        pulses = int(_BLOCK_SPEC["pulses"].check(data["pulses"]))
        total = sum(kd) + sum(td)
        if pulses < max(total, 1):
            raise InputError("pulses", data["pulses"], f"an integer >= the detections of both bases ({total}): "
                             "the total number of pulses sent")
    expected = None
    if data.get("kato_expected") is not None:
        expected = _check_kato_expected(data["kato_expected"], len(mu), pulses)
    acceptance = None
    if data.get("acceptance") is not None:
        acceptance = _check_acceptance(data["acceptance"], len(mu))
    return DecoyBlock(mu, p, kd, ke, td, te, leak, eps_sec, eps_cor, split, label, pulses, expected, acceptance)


def _check_acceptance(data, n: int) -> AcceptanceTest:
    """``acceptance``: a fixed-length acceptance test (``AcceptanceTest``), fixed before the block."""
    tables = {"key_basis": ("detections",) + (("errors",) if n == 2 else ()),
              "test_basis": ("detections", "errors")}
    shape = ('{"statistics": "chernoff" or "hoeffding", "ec_leak_bits": L, "key_basis": {"detections": [[a, b], ...]'
             + (', "errors": [...]' if n == 2 else "") + '}, "test_basis": {"detections": [...], "errors": [...]}} '
             f"with one range [a, b] of non-negative integers per intensity ({n})")
    if not isinstance(data, dict) or sorted(data) != sorted(("statistics", "ec_leak_bits") + tuple(tables)):
        raise InputError("acceptance", data, shape)
    stats = data["statistics"]
    if stats not in ACCEPTANCE_STATISTICS:
        raise InputError("acceptance.statistics", stats, "one of: " + ", ".join(ACCEPTANCE_STATISTICS)
                         + " (their intervals are monotone over the acceptance box)")
    leak = int(COUNT.check_scalar("acceptance.ec_leak_bits", data["ec_leak_bits"]))
    if n not in (2, 3):
        raise InputError("acceptance", "given", "a block of 2 or 3 intensities (the closed forms; the linear "
                         "programme has no acceptance-test mode)")
    ranges = {}
    for basis, kinds in tables.items():
        t = data[basis]
        if not isinstance(t, dict) or sorted(t) != sorted(kinds):
            raise InputError(f"acceptance.{basis}", t, shape)
        ranges[basis] = {}
        for kind in kinds:
            name = f"acceptance.{basis}.{kind}"
            v = t[kind]
            if not isinstance(v, (list, tuple)) or len(v) != n:
                raise InputError(name, v, f"a list of {n} ranges [a, b] (one per intensity)")
            out = []
            for i, r in enumerate(v):
                if not isinstance(r, (list, tuple)) or len(r) != 2:
                    raise InputError(f"{name}[{i}]", r, "a range [a, b] of two non-negative integers")
                a = int(COUNT.check_scalar(f"{name}[{i}][0]", r[0]))
                b = int(COUNT.check_scalar(f"{name}[{i}][1]", r[1]))
                if b < a:
                    raise InputError(f"{name}[{i}]", list(r), "a range [a, b] with a <= b")
                out.append((a, b))
            ranges[basis][kind] = tuple(out)
    return AcceptanceTest(stats, leak, ranges)


_EXPECTED = Domain(0.0, math.inf)


def _check_kato_expected(data, n: int, pulses) -> dict:
    """``kato_expected``: pre-registered expected counts, the same tables as ``key_basis``/``test_basis``."""
    shape = ('{"key_basis": {"detections": [...], "errors": [...]}, "test_basis": {...}} with lists of '
             f"{n} non-negative numbers (one per intensity)")
    if not isinstance(data, dict) or sorted(data) != ["key_basis", "test_basis"]:
        raise InputError("kato_expected", data, shape)
    out = {}
    for b in ("key_basis", "test_basis"):
        t = data[b]
        if not isinstance(t, dict) or sorted(t) != ["detections", "errors"]:
            raise InputError(f"kato_expected.{b}", t, shape)
        out[b] = {}
        for k in ("detections", "errors"):
            name = f"kato_expected.{b}.{k}"
            v = t[k]
            if not isinstance(v, (list, tuple)) or len(v) != n:
                raise InputError(name, v, f"a list of {n} non-negative numbers (one per intensity)")
            vals = tuple(float(_EXPECTED.check_scalar(f"{name}[{i}]", x)) for i, x in enumerate(v))
            if pulses is not None:
                for i, x in enumerate(vals):
                    if x > pulses:
                        raise InputError(f"{name}[{i}]", x, f"a number in [0, pulses = {pulses}]")
            out[b][k] = vals
    return out


def _check_split(split) -> dict:
    if not isinstance(split, dict):
        raise InputError("epsilon_split", split, "a table of shares for " + ", ".join(SECRECY_TERMS))
    unknown = sorted(set(split) - set(SECRECY_TERMS))
    if unknown:
        raise InputError(f"epsilon_split.{unknown[0]}", split[unknown[0]], "one of " + ", ".join(SECRECY_TERMS))
    out = {}
    for n in SECRECY_TERMS:
        if n not in split:
            raise InputError(f"epsilon_split.{n}", None, "a share in (0, 1) for every secrecy term")
        out[n] = float(_SHARE.check_scalar(f"epsilon_split.{n}", split[n]))
    if abs(math.fsum(out.values()) - 1.0) > 1e-9:
        raise InputError("epsilon_split", split, "shares summing to 1")
    return out


# ---------------------------------------------------------------------------------------------------------
# key length
# ---------------------------------------------------------------------------------------------------------
def analysis_kind(mu, analysis: str | None = None) -> str:
    """Which analysis a block uses: the closed forms where they apply, else the linear programme."""
    if analysis == "linear-programme":
        return analysis
    if len(mu) == 2:
        return "two-intensity"
    if three_intensity_condition(mu):
        return "three-intensity"
    return "linear-programme"


def block_ledger(block: DecoyBlock, statistics: str, analysis: str) -> Ledger:
    """The block's ledger: the 2014 reference (hoeffding, three intensities, no split given) or the split."""
    n_count = count_events(len(block.intensities), analysis, statistics)
    if statistics == "hoeffding" and block.epsilon_split is None and analysis == "three-intensity":
        return reference_ledger(block.eps_sec, block.eps_cor, n_count)
    led = allocate(block.eps_sec, block.eps_cor, term_specs(n_count, analysis), block.epsilon_split)
    led.failure_probability("single_photon_smoothing")   # its square must be a positive float
    # The chain rule doubles the smoothing of one slot; we put the single-photon term there (proof note,
    # section 7).  With eps_ch <= eps_1 the ledger also covers the other reading of the chain rule, so a
    # split giving the chain rule more than the single-photon smoothing is refused.
    if led.smoothing("chain_rule") > led.smoothing("single_photon_smoothing"):
        fr = led.fractions()
        raise InputError("epsilon_split.chain_rule", block.epsilon_split.get("chain_rule") if block.epsilon_split
                         else fr["chain_rule"], "a share at most the single_photon_smoothing share "
                         f"({fr['single_photon_smoothing']:.6g}): both have weight 4")
    return led


def _intervals(method, counts, eps, prec, kato=None):
    """Certified intervals per intensity; ``kato = (pulses, expected list or None)`` for statistics="kato"."""
    if method == "kato":
        n, expected = kato
        lo, hi = [], []
        for i, c in enumerate(counts):
            m = None if expected is None else expected[i]
            a_lo, a_hi = A.kato_tilt(n, m, eps, "lower"), A.kato_tilt(n, m, eps, "upper")
            a, b = A.kato_count_interval_certified(c, n, a_lo, a_hi, eps, prec)
            lo.append(a)
            hi.append(b)
        return lo, hi
    total = sum(counts)
    lo, hi = [], []
    for c in counts:
        a, b = A.count_interval_certified(method, c, total, eps, prec)
        lo.append(a)
        hi.append(b)
    return lo, hi


def _box_intervals(method: str, ranges, eps: float, prec: int):
    """Certified intervals valid for every observed count in the acceptance ranges ``[(a, b), ...]``.

    The lower end at ``a`` and the upper end at ``b``: the chernoff limits increase with the observed count
    and do not depend on the basis total; the hoeffding deviation ``sqrt(C/2 ln(1/eps))`` increases with the
    total ``C``, which is at most ``sum b`` on the box.  So on the box every interval of an accepted block
    lies inside these (proof note, section 7b).
    """
    lo, hi = [], []
    with ctx.workprec(prec):
        if method == "chernoff":
            for a, b in ranges:
                lo.append(A.count_interval_certified("chernoff", a, 0, eps, prec)[0])
                hi.append(A.count_interval_certified("chernoff", b, 0, eps, prec)[1])
        elif method == "hoeffding":
            d = (arb(sum(b for _, b in ranges)) / 2 * (1 / arb(eps)).log()).sqrt()
            for a, b in ranges:
                lo.append(arb(A.floor_arb(arb(a) - d)))
                hi.append(arb(A.ceil_arb(arb(b) + d)))
        else:
            raise ValueError(method)
    return lo, hi


def _estimates_certified(block: DecoyBlock, method: str, analysis: str, eps_c: float, prec: int,
                         box: dict | None = None) -> dict:
    """Certified (arb) s0, s1 (key basis), s1Z (test basis), v1 (test basis) for the closed forms.

    ``box``: an acceptance test's ranges; the intervals are then those valid on the whole box.
    """
    mu = [arb(m) for m in block.intensities]
    p = [arb(x) for x in block.intensity_probabilities]
    exp = A.arb_exp
    ex = block.kato_expected
    def kato(basis, kind):
        return None if method != "kato" else (block.pulses, None if ex is None else ex[basis][kind])

    def intervals(basis, kind):
        if box is not None:
            return _box_intervals(method, box[basis][kind], eps_c, prec)
        return _intervals(method, getattr(block, f"{basis.split('_')[0]}_{kind}"), eps_c, prec, kato(basis, kind))

    def detections_total(basis):   # at most this many trials in the vacuum-error deviation
        if box is not None:
            return sum(b for _, b in box[basis]["detections"])
        return sum(getattr(block, f"{basis.split('_')[0]}_detections"))

    with ctx.workprec(prec):
        kl, kh = intervals("key_basis", "detections")
        tl, th = intervals("test_basis", "detections")
        el, eh = intervals("test_basis", "errors")
        s0u = s0zu = None
        if analysis == "three-intensity":
            s0, s1 = A.three_intensity(mu, p, kl, kh, exp)
            s0z, s1z = A.three_intensity(mu, p, tl, th, exp)
            v1 = A.three_intensity_errors(mu, p, el, eh, exp)
        elif analysis == "two-intensity":
            kel, keh = intervals("key_basis", "errors")
            vac_key = _vacuum_deviation(method, detections_total("key_basis"), eps_c)
            vac_test = _vacuum_deviation(method, detections_total("test_basis"), eps_c)
            s0u = A.two_intensity_vacuum_upper(mu, p, keh[1], vac_key, exp)
            s0, s1 = A.two_intensity(mu, p, kl, kh, s0u, exp)
            s0zu = A.two_intensity_vacuum_upper(mu, p, eh[1], vac_test, exp)
            s0z, s1z = A.two_intensity(mu, p, tl, th, s0zu, exp)
            v1 = A.two_intensity_errors(mu, p, el, eh, exp)
        else:
            from . import _decoy_lp
            return _decoy_lp.estimates(block, method, eps_c)
        out = {"s0": A.lower_end(A.clip0(s0)), "s1": A.lower_end(s1), "s1z": A.lower_end(s1z),
               "v1": A.upper_end(v1), "s0z": A.lower_end(A.clip0(s0z))}
        if s0u is not None:
            out["s0_upper"] = A.upper_end(s0u)
            out["s0z_upper"] = A.upper_end(s0zu)
        if method == "kato":
            out = _kato_actual_counts(block, analysis, out, eps_c, prec)
        return out


def _kato_predicted(block: DecoyBlock, analysis: str) -> dict:
    """Conditional sums of s0, s1, s1Z, v1 predicted from ``kato_expected`` (design values only).

    The float closed forms at ``lo = hi = expected``; they only fix the tilts of the conversions, so any
    pre-registered value is valid (a poor one only loosens the bound).
    """
    ex = block.kato_expected
    if ex is None:
        return {"s0": None, "s1": None, "s1z": None, "v1": None}
    mu, p = list(block.intensities), list(block.intensity_probabilities)
    kd, td = list(ex["key_basis"]["detections"]), list(ex["test_basis"]["detections"])
    te, ke = list(ex["test_basis"]["errors"]), list(ex["key_basis"]["errors"])
    if analysis == "three-intensity":
        s0, s1 = A.three_intensity(mu, p, kd, kd, np.exp)
        _, s1z = A.three_intensity(mu, p, td, td, np.exp)
        v1 = A.three_intensity_errors(mu, p, te, te, np.exp)
    else:
        s0u = A.two_intensity_vacuum_upper(mu, p, ke[1], 0.0, np.exp)
        s0, s1 = A.two_intensity(mu, p, kd, kd, s0u, np.exp)
        s0zu = A.two_intensity_vacuum_upper(mu, p, te[1], 0.0, np.exp)
        _, s1z = A.two_intensity(mu, p, td, td, s0zu, np.exp)
        v1 = A.two_intensity_errors(mu, p, te, te, np.exp)
    return {"s0": float(s0), "s1": float(s1), "s1z": float(s1z), "v1": float(v1)}


def _kato_actual_counts(block: DecoyBlock, analysis: str, est: dict, eps_c: float, prec: int) -> dict:
    """Kato: the closed forms bound conditional sums over the pulses; convert s0, s1, s1Z (lower) and v1
    (upper) into bounds on the actual counts (4 more one-sided events, each at ``eps_c``)."""
    n = block.pulses
    pred = _kato_predicted(block, analysis)
    out = dict(est)
    for name in ("s0", "s1", "s1z"):
        a = A.kato_tilt(n, pred[name], eps_c, "upper")
        out[name] = A.kato_actual_lower(est[name], n, a, eps_c, prec)
    out["s0"] = A.lower_end(A.clip0(out["s0"]))
    a = A.kato_tilt(n, pred["v1"], eps_c, "lower")
    out["v1"] = A.kato_actual_upper(est["v1"], n, a, eps_c, prec)
    # s0Z (and the vacuum upper bounds) stay conditional sums: the test vacuum bound is not used for the
    # actual test count (k_upper = n_Z, see _physical_check) and the vacuum consistency test is skipped.
    out.pop("s0z_upper", None)
    out.pop("s0_upper", None)
    out["s0z_conditional"] = out.pop("s0z")
    return out


def _physical_check(block: DecoyBlock, est: dict, key_errors: bool = True) -> tuple:
    """Clamp upper bounds to their physical maxima and test the lower bounds against the observed totals.

    Under the good events every bound holds for the true counts, and the true counts obey
    ``s0 + s1 <= n_X`` (key-basis detections summed over intensities), ``s0Z + s1Z <= n_Z``,
    ``0 <= v1 <= m_Z`` (test-basis errors summed), vacuum errors about half the vacuum detections, and,
    with two intensities, ``s0 <= s0_upper``.  Bounds
    that violate one of these show that the block cannot come from the decoy model (or a good event
    failed): no key may be extracted.  Upper bounds are clamped to the physical maximum (``v1 <= m_Z``),
    which keeps them valid; lower bounds are never raised.

    ``key_errors=False`` skips the one check that reads the key-basis error counts (the fixed-length mode
    with three intensities, whose acceptance must not depend on a key-basis outcome; proof note, section 7b).

    Returns
    -------
    (est, violations) : the estimates with ``v1`` clamped, and the list of violated constraints (names).
    """
    n_x, n_z, m_z = sum(block.key_detections), sum(block.test_detections), sum(block.test_errors)
    def pos(x):  # a lower bound on a non-negative count, as a float
        return max(A.floor_arb(x), 0.0)

    bad = []
    if pos(est["s0"]) + pos(est["s1"]) > n_x:
        bad.append("vacuum_key_detections_lower + single_photon_key_detections_lower > key-basis detections")
    if "s0z" in est and pos(est["s0z"]) + pos(est["s1z"]) > n_z or pos(est["s1z"]) > n_z:
        bad.append("vacuum_test_detections_lower + single_photon_test_detections_lower > test-basis detections")
    if A.ceil_arb(est["v1"]) < 0:
        bad.append("single_photon_test_errors_upper < 0")
    # A vacuum detection is an error with probability 1/2 whatever the adversary does, so far fewer errors
    # than half the vacuum lower bound cannot come from the model.  This only rejects (key 0), which is
    # always safe; the threshold uses Hoeffding's deviation at eps_sec over at most n detections.
    slack = math.log(1.0 / block.eps_sec) / 2.0
    m_x = sum(block.key_errors)
    if key_errors and pos(est["s0"]) / 2.0 - math.sqrt(n_x * slack) > m_x:
        bad.append("key-basis errors fewer than half the vacuum lower bound allows")
    if "s0z" in est and pos(est["s0z"]) / 2.0 - math.sqrt(n_z * slack) > m_z:
        bad.append("test-basis errors fewer than half the vacuum lower bound allows")
    if "s0_upper" in est and (A.floor_arb(est["s0"]) > A.ceil_arb(est["s0_upper"])
                              or A.floor_arb(est["s0z"]) > A.ceil_arb(est["s0z_upper"])):
        bad.append("vacuum lower bound above the vacuum upper bound")
    est = dict(est)
    # the single-photon test detections are at most n_Z minus the vacuum test detections
    # (both integers, so K <= n_Z - ceil(s0Z_L))
    est["k_upper"] = n_z - int(math.ceil(pos(est["s0z"]))) if "s0z" in est else n_z
    est["v1_formula"] = est["v1"]
    if A.ceil_arb(est["v1"]) > m_z:
        est["v1"] = arb(m_z)
    return est, bad


def _vacuum_deviation(method: str, n_detections: int, eps: float) -> arb:
    """Deviation of the vacuum error count below half the vacuum detections (at most n_detections trials).

    Hoeffding's ``sqrt(n/2 ln(1/eps))`` for every method (the trials are fair coins; common practice as in
    Rusca et al. 2018, from memory).
    """
    return (arb(n_detections) / 2 * (1 / arb(eps)).log()).sqrt()


def _phase_error_hoeffding(s1: arb, s1z: arb, v1: arb, eps_p: float, prec: int):
    """Phase-error rate for ``statistics="hoeffding"``: ``lambda + max(gamma_2014, mu_rigorous)``.

    ``eps_p`` is the failure probability of the bound: the square of the single-photon smoothing parameter.

    ``gamma_2014`` is the 2014 sampling term (kept so the reference is reproduced where it is at least as
    conservative); it is not a valid bound on its own (it tends to 0 with the test error rate).
    ``mu_rigorous`` is the random-sampling (Serfling) deviation of ``finitekey.bounds.random_sampling`` at
    the same epsilon, evaluated at ``n = ceil(s1_L)`` key and ``k = ceil(s1z_L)`` test bits; it decreases
    in both, so plugging in lower bounds keeps it valid (proof note, section 6).
    """
    from ..bounds import get as _get_bound  # bounds sit below protocols
    with ctx.workprec(prec):
        lam = arb(max(A.ceil_arb(v1 / s1z), 0.0))      # upper end of v1_U / s1z_L
        if lam >= arb(0.5):
            return arb(0.5), {"single_photon_error_rate_test_upper": 0.5}
        g2 = A.sampling_gamma(arb(eps_p), lam if lam > 0 else arb(1e-300), s1z, s1, lambda x: x.log())
        g2u = A.ceil_arb(g2)                          # upper end: gamma is an upper-bound quantity
        gamma = arb(A.ceil_arb(arb(g2u).sqrt())) if g2u > 0 else arb(0)
        n = int(math.ceil(A.floor_arb(s1)))
        k = int(math.ceil(A.floor_arb(s1z)))
        mu = _get_bound("random_sampling").deviation_certified(eps_p, prec, key_bits=n, test_bits=k).hi
        phi = lam + (gamma if gamma >= arb(mu) else arb(mu))
    phi_u = A.ceil_arb(phi)
    return arb(min(phi_u, 0.5)), {"single_photon_error_rate_test_upper": A.ceil_arb(lam),
                                  "sampling_term_2014_gamma": A.ceil_arb(gamma),
                                  "sampling_term_rigorous_mu": float(mu)}


def _phase_error(method: str, est: dict, eps_p: float, prec: int):
    """Upper bound on the single-photon phase-error rate of the key, as an exact arb ball (or 1/2 cap).

    ``eps_p``: failure probability of the bound, the square of the single-photon smoothing parameter.
    """
    s1, s1z, v1 = est["s1"], est["s1z"], est["v1"]
    if not (s1 > 0 and s1z > 0):
        return arb(0.5), {}
    if method == "hoeffding":
        return _phase_error_hoeffding(s1, s1z, v1, eps_p, prec)
    # Lower bounds on integer counts: the count is at least the ceiling; upper bounds: at most the floor.
    n = int(math.ceil(A.floor_arb(s1)))
    k = int(math.ceil(A.floor_arb(s1z)))
    e = max(int(math.floor(A.ceil_arb(v1))), 0)
    k_hi = est.get("k_upper")
    k_hi = k if k_hi is None else max(int(k_hi), k)
    if n < 1 or k < 1:
        return arb(0.5), {}
    # The exact hypergeometric bound x(N)/N is not monotone in N (x steps by 1), so it cannot take the
    # lower bound s1_L in place of the unknown N; the Chernoff-Hoeffding form is monotone (proof note, sec. 6).
    phi, p1, _ = A.kl_key_rate_upper(n, k, k_hi, e, eps_p, prec)
    extra = {"single_photon_key_count": float(n), "single_photon_test_count": float(k),
             "single_photon_test_count_upper": float(k_hi), "single_photon_test_errors_upper": float(e),
             "single_photon_population_rate_upper": p1}
    return (arb(0.5) if phi >= 0.5 else arb(phi)), extra


def key_length(block: DecoyBlock, statistics: str | None = None, prec: int = _PREC,
               analysis: str | None = None, check_worse_data: bool = True) -> KeyLengthResult:
    """Certified secret key length of an observed decoy-state block.

    Parameters
    ----------
    block : DecoyBlock
    statistics : {"exact", "chernoff", "hoeffding", "kato"}, optional
        Default ``"exact"``.  ``"kato"`` needs the block field ``pulses``.
    prec : int
        Bits of ball arithmetic.
    analysis : {None, "linear-programme"}
        Force the linear programme (otherwise the closed form is used where it applies).
    check_worse_data : bool
        Re-evaluate a block with a key at three worse variants of its weakest-intensity data and flag it when
        one gives a longer key (proof note, section 7a); the reported length never changes.  Design searches
        switch it off (it costs about three more evaluations).

    Returns
    -------
    KeyLengthResult
        ``secret_key_length`` rounded down from the lower end of a ball containing the key-length formula
        evaluated at conservative (outward-rounded) estimates; 0 when negative.

    References
    ----------
    .. [1] C. C. W. Lim et al., Phys. Rev. A 89, 022307 (2014).
    .. [2] D. Rusca et al., Appl. Phys. Lett. 112, 171104 (2018).
    """
    result = _key_length(block, statistics, prec, analysis)
    if check_worse_data and result.secret_key_length > 0:
        result = _flag_worse_data(block, statistics, prec, analysis, result)
    return result


#: Perturbations that make a block's data worse (proof note, section 7a): (basis table, kind, change).
_WORSE = (("test", "errors", +1), ("test", "detections", -1), ("key", "detections", -1))


def _flag_worse_data(block, statistics, prec, analysis, result):
    """Flag a block whose key grows when its weakest-intensity data get worse (one more test error, one
    test or key detection fewer).  Each bound stays valid, so this is not a leak; it is reported because a
    counting error upstream would inflate such a key (proof note, section 7a)."""
    w = len(block.intensities) - 1
    longer = []
    for basis, kind, delta in _WORSE:
        counts = list(getattr(block, f"{basis}_{kind}"))
        errors = list(getattr(block, f"{basis}_errors"))
        new = counts[w] + delta
        detections = getattr(block, f"{basis}_detections")[w]
        if new < 0 or (kind == "detections" and new < errors[w]) or (kind == "errors" and new > detections):
            continue
        counts[w] = new
        changed = {f"{basis}_{kind}": tuple(counts)}
        if basis == "key" and kind == "detections" and block.ec_leak_bits > sum(counts):
            continue
        try:
            other = _key_length(replace(block, **changed), statistics, prec, analysis)
        except ComputationError:    # a perturbed block the solver cannot certify: no comparison
            continue
        if other.secret_key_length > result.secret_key_length:
            longer.append((other.secret_key_length - result.secret_key_length,
                           f"{basis}_basis.{kind}[{w}] {'+' if delta > 0 else '-'}1 gives "
                           f"{other.secret_key_length} bits"))
    if not longer:
        return result
    gain = max(g for g, _ in longer)
    longer = [t for _, t in longer]
    note = ("flag: worse data at the weakest intensity give a longer key (" + "; ".join(longer) + "); each bound "
            "is valid, but check the counts: a counting error upstream would inflate this key")
    return replace(result, assumptions=result.assumptions + (note,),
                   estimates={**result.estimates, "note_longer_key_with_worse_data": 1.0,
                              "worse_data_key_gain_bits": float(gain)})


def _key_length(block: DecoyBlock, statistics, prec, analysis) -> KeyLengthResult:
    if block.acceptance is not None:
        return _fixed_length(block, statistics, prec, analysis)
    method = _check_statistics(statistics)
    if method == "exact":
        _check_exact_range(block)
    analysis = analysis_kind(block.intensities, analysis)
    if method == "kato":
        _check_kato(block, analysis)
    ledger = block_ledger(block, method, analysis)
    eps_c = ledger.failure_probability("count_estimation")
    est = _estimates_certified(block, method, analysis, eps_c, prec)
    est, violations = _physical_check(block, est)
    if violations:
        return _inconsistent_result(block, method, analysis, ledger, est, violations)
    return _finish(block, method, analysis, ledger, est, prec, block.ec_leak_bits)


FIXED_LENGTH_ASSUMPTION = (
    "fixed-length protocol: the key length and the acceptance test (count ranges, statistics, leakage bound) "
    "were fixed before the block; an accepted block gets the length certified for the whole acceptance box, a "
    "rejected one aborts (proof note, section 7b)")


def _fixed_length(block: DecoyBlock, statistics, prec, analysis) -> KeyLengthResult:
    """Fixed-length mode: the length certified on the whole acceptance box; 0 (abort) outside it, or when the
    block's own counts fail the variable-length consistency checks."""
    acc = block.acceptance
    if statistics is not None and statistics != acc.statistics:
        raise InputError("statistics", statistics, f"'{acc.statistics}' or none: a block with an acceptance test "
                         "is analysed with the test's own statistics")
    analysis = analysis_kind(block.intensities, analysis)
    if analysis == "linear-programme":
        raise InputError("acceptance", "given", "a block of 2 intensities, or 3 with mu1 > mu2 + mu3 (the closed "
                         "forms; the linear programme has no acceptance-test mode)")
    method = acc.statistics
    ledger = block_ledger(block, method, analysis)
    eps_c = ledger.failure_probability("count_estimation")
    est = _estimates_certified(block, method, analysis, eps_c, prec, box=acc.ranges)
    pos = lambda x: max(A.floor_arb(x), 0.0)  # noqa: E731
    est = dict(est)
    # on an accepted block the test detections and errors are at most the sums of the range tops
    n_z = sum(b for _, b in acc.ranges["test_basis"]["detections"])
    m_z = sum(b for _, b in acc.ranges["test_basis"]["errors"])
    n_x_min = sum(a for a, _ in acc.ranges["key_basis"]["detections"])
    if pos(est["s0"]) + pos(est["s1"]) > n_x_min:
        raise InputError("acceptance", "given", "ranges consistent with the decoy model: the certified vacuum and "
                         f"single-photon key detections ({pos(est['s0']) + pos(est['s1']):.6g}) exceed the fewest "
                         f"key-basis detections the test accepts ({n_x_min})")
    est["k_upper"] = n_z - int(math.ceil(pos(est["s0z"])))
    est["v1_formula"] = est["v1"]
    if A.ceil_arb(est["v1"]) > m_z:
        est["v1"] = arb(m_z)
    fixed = _finish(block, method, analysis, ledger, est, prec, acc.ec_leak_bits)
    settings = {**fixed.settings, "mode": "fixed-length"}
    assumptions = tuple(FIXED_LENGTH_ASSUMPTION if a == VARIABLE_LENGTH_ASSUMPTION else a
                        for a in fixed.assumptions)
    bad = acc.violations(block)
    if not bad:
        # An accepted block must also pass the variable-length consistency checks on its own counts (the
        # box bounds are weaker, so they cannot detect it): the fixed length never exceeds the variable one.
        # With three intensities the check on the key-basis errors is left out: acceptance must not depend
        # on a key-basis outcome (proof note, section 7b).
        own = _estimates_certified(block, method, analysis, eps_c, prec)
        _, violations = _physical_check(block, own, key_errors=analysis == "two-intensity")
        if violations:
            return replace(fixed, secret_key_length=0, assumptions=assumptions, settings=settings,
                           status=Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, "; ".join(violations)))
        return replace(fixed, assumptions=assumptions, settings=settings)
    return replace(fixed, secret_key_length=0, assumptions=assumptions, settings=settings,
                   status=Status.no_key(NoKeyReason.ACCEPTANCE_FAILED, "; ".join(bad)))


def _finish(block, method, analysis, ledger, est, prec, leak_bits) -> KeyLengthResult:
    """Phase-error bound and the key-length formula from certified estimates (one place for both modes)."""
    eps_p = ledger.failure_probability("single_photon_smoothing")    # eps^2: the smoothing's event
    eps_ch = ledger.smoothing("chain_rule")
    eps_pa = ledger.hashing("privacy_amplification")
    phi, extra = _phase_error(method, est, eps_p, prec)
    with ctx.workprec(prec):
        s0 = est["s0"]
        s1 = A.clip0(est["s1"])
        h = A.binary_entropy_arb_upper(phi)
        ln2 = arb(2).log()
        # each chain rule costs log2(2/eps_ch^2) bits; the leftover hash lemma 2 log2(1/(2 eps_PA))
        chain = CHAIN_RULES * (2 / (arb(eps_ch) * arb(eps_ch))).log() / ln2
        pa = 2 * (1 / (2 * arb(eps_pa))).log() / ln2
        tag = (2 / arb(block.eps_cor)).log() / ln2
        leak = arb(leak_bits)
        single = s1 * (1 - h)
        total = s0 + single - leak - chain - pa - tag
    # A float certainly below the ball (float(total.lower()) would round to nearest whenever the caller's
    # flint precision exceeds 53 bits, and could land on the integer just above the lower end).
    lower = A.floor_arb(total) if total.is_finite() else -math.inf
    length = max(0, int(math.floor(lower))) if math.isfinite(lower) else 0
    terms = {"vacuum_bits": A.floor_arb(s0), "single_photon_bits": A.floor_arb(single),
             "ec_leakage": float(leak_bits), "chain_rule_penalty": A.ceil_arb(chain),
             "hash_penalty": A.ceil_arb(pa), "verification_tag": A.ceil_arb(tag),
             "key_length_lower_bound": A.floor_arb(total)}
    estimates = {"vacuum_key_detections_lower": A.floor_arb(est["s0"]),
                 "single_photon_key_detections_lower": A.floor_arb(est["s1"]),
                 "single_photon_test_detections_lower": A.floor_arb(est["s1z"]),
                 "single_photon_test_errors_upper": A.ceil_arb(est["v1"]),
                 "single_photon_test_errors_upper_before_clipping": A.ceil_arb(est["v1_formula"]),
                 "phase_error_rate_upper": A.ceil_arb(phi), **extra}
    return KeyLengthResult(
        protocol=PROTOCOL_NAME, secret_key_length=length, ledger=ledger, statistics=method,
        assumptions=ASSUMPTIONS + _kato_extra(method, KATO_ASSUMPTION), terms=terms,
        estimates=estimates, formula=FORMULA, references=REFERENCES + _kato_extra(method, KATO_REFERENCE),
        status=_key_status(length, terms, estimates), settings={"analysis": analysis})


def _key_status(length: int, terms: dict, estimates: dict) -> Status:
    """Key, or which part of the formula left none: no single photons, the phase-error bound at 1/2, or the
    leakage and penalties exceeding the vacuum and single-photon bits."""
    if length > 0:
        return KEY
    s1, s1z = estimates["single_photon_key_detections_lower"], estimates["single_photon_test_detections_lower"]
    if not (s1 >= 1 and s1z >= 1):
        return Status.no_key(NoKeyReason.NO_SINGLE_PHOTON_BOUND, f"single-photon lower bounds: key basis "
                                                                 f"{s1:.6g}, test basis {s1z:.6g}")
    if estimates["phase_error_rate_upper"] >= 0.5:
        return Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, f"single-photon phase-error upper bound "
                                                            f"{estimates['phase_error_rate_upper']:.4g} >= 1/2")
    gain = terms["vacuum_bits"] + terms["single_photon_bits"]
    cost = terms["ec_leakage"] + terms["chain_rule_penalty"] + terms["hash_penalty"] + terms["verification_tag"]
    detail = (f"vacuum {terms['vacuum_bits']:.6g} + single-photon {terms['single_photon_bits']:.6g} bits "
              f"against leakage {terms['ec_leakage']:.6g} + chain rule {terms['chain_rule_penalty']:.4g} + hash "
              f"{terms['hash_penalty']:.4g} + verification {terms['verification_tag']:.4g} bits")
    reason = NoKeyReason.PENALTIES_EXCEED_ENTROPY if gain - cost < 1 else NoKeyReason.BELOW_ONE_BIT
    return Status.no_key(reason, detail)


def key_length_batch(blocks, statistics: str | None = None, *, prec: int = _PREC, jobs: int = 1) -> list:
    """Key lengths of many blocks, in order; each result identical to :func:`key_length` of that block.

    The same shape as BB84's ``key_length_batch``.  Every block is computed on its own (the decoy analysis has
    no cache shared between blocks); ``jobs > 1`` splits a batch of at least ``_PARALLEL_MIN`` blocks into
    contiguous chunks computed in worker processes and joined in order (:func:`._batch.map_in_chunks`).

    Parameters
    ----------
    blocks : sequence of DecoyBlock
    statistics : {"exact", "chernoff", "hoeffding", "kato"}, optional
    prec : int
        Bits of ball arithmetic.
    jobs : int
        Worker processes.

    Returns
    -------
    list of KeyLengthResult
    """
    _check_statistics(statistics)  # fail before any block is computed
    return map_in_chunks(_batch_chunk, blocks, jobs, _PARALLEL_MIN, (statistics, prec))


#: Smallest batch worth splitting over processes (a decoy block costs milliseconds; start-up about a second).
_PARALLEL_MIN = 200


def _batch_chunk(blocks, statistics, prec) -> list:
    return [key_length(b, statistics, prec) for b in blocks]


def _kato_extra(method: str, text: str) -> tuple:
    return (text,) if method == "kato" else ()


def _inconsistent_result(block, method, analysis, ledger, est, violations) -> KeyLengthResult:
    """Zero key for a block whose decoy bounds contradict its own totals (see :func:`_physical_check`)."""
    estimates = {"vacuum_key_detections_lower": A.floor_arb(est["s0"]),
                 "single_photon_key_detections_lower": A.floor_arb(est["s1"]),
                 "single_photon_test_detections_lower": A.floor_arb(est["s1z"]),
                 "single_photon_test_errors_upper": A.ceil_arb(est["v1"]),
                 "phase_error_rate_upper": 0.5, "note_block_inconsistent_with_decoy_model": 1.0}
    return KeyLengthResult(
        protocol=PROTOCOL_NAME, secret_key_length=0, ledger=ledger, statistics=method,
        assumptions=ASSUMPTIONS + _kato_extra(method, KATO_ASSUMPTION),
        terms={"key_length_lower_bound": 0.0}, estimates=estimates, formula=FORMULA,
        references=REFERENCES + _kato_extra(method, KATO_REFERENCE),
        status=Status.no_key(NoKeyReason.INCONSISTENT_BLOCK, "; ".join(violations)), settings={"analysis": analysis})


#: The exact binomial tails accept at most this many trials (finitekey.bounds.binomial_exact).
MAX_EXACT_TRIALS = 2**50


def _check_exact_range(block: DecoyBlock) -> None:
    """The exact intervals treat a basis's total detections as the number of trials: at most 2**50."""
    for name, det in (("key_basis", block.key_detections), ("test_basis", block.test_detections)):
        allowed = (f"counts whose sum over intensities is at most 2**50 = {MAX_EXACT_TRIALS} for "
                   f"statistics='exact' (use 'chernoff' or 'hoeffding' for larger blocks)")
        for i, d in enumerate(det):
            if d > MAX_EXACT_TRIALS:
                raise InputError(f"{name}.detections[{i}]", d, allowed)
        if sum(det) > MAX_EXACT_TRIALS:
            raise InputError(f"{name}.detections", list(det), allowed)


def _check_kato(block: DecoyBlock, analysis: str) -> None:
    if block.pulses is None:
        raise InputError("pulses", None, "the total number of pulses sent in the block (required for "
                         "statistics='kato': Kato's inequality runs over all pulses)")
    if analysis == "linear-programme":
        raise InputError("statistics", "kato", "exact, chernoff or hoeffding for this block: kato supports the "
                         "closed forms only (2 intensities, or 3 with mu1 > mu2 + mu3)")


def _check_design_statistics(statistics):
    method = _check_statistics(statistics)
    if method not in DESIGN_STATISTICS:
        raise InputError("statistics", method, "design supports " + ", ".join(DESIGN_STATISTICS))
    return method


def _check_statistics(statistics):
    if statistics is None:
        return DEFAULT_STATISTICS
    if statistics not in STATISTICS:
        raise InputError("statistics", statistics, "one of: " + ", ".join(STATISTICS))
    return statistics


# ---------------------------------------------------------------------------------------------------------
# asymptotic rates
# ---------------------------------------------------------------------------------------------------------
def gllp_rate(model: LinkModel, mu, ec_efficiency: float, sifting: float = 0.5):
    """Asymptotic rate per pulse with infinitely many decoys (exact single-photon yield and error).

    ``R = sifting * [Q1 (1 - h(e1)) - f Q_mu h(E_mu)]`` with ``Q1 = Y1 mu e^{-mu}`` (GLLP with the decoy
    method, Lo-Ma-Chen 2005, Ma-Qi-Zhao-Lo 2005), clipped at 0.  Vectorised in ``mu``.

    Parameters
    ----------
    model : LinkModel
    mu : float or array_like
        Signal intensity.
    ec_efficiency : float
    sifting : float

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005).
    """
    mu = np.asarray(mu, dtype=float)
    q = model.click_probability(mu)
    eq = model.error_probability(mu) / q
    y1 = float(model.photon_yield(1))
    e1 = float(model.photon_error_yield(1)) / y1
    q1 = y1 * mu * np.exp(-mu)
    r = sifting * (q1 * (1 - A.binary_entropy_float(e1)) - ec_efficiency * q * A.binary_entropy_float(eq))
    return np.maximum(r, 0.0)


def optimal_gllp_rate(model: LinkModel, ec_efficiency: float, sifting: float = 0.5) -> tuple:
    """``(rate, mu)`` maximising :func:`gllp_rate` over the signal intensity in (0, 2).

    Parameters
    ----------
    model : LinkModel
    ec_efficiency : float
    sifting : float

    Returns
    -------
    tuple of float
        ``(rate, mu)``; ``(0.0, mu)`` when no intensity gives a positive rate.
    """
    grid = np.linspace(0.01, 2.0, 200)
    vals = gllp_rate(model, grid, ec_efficiency, sifting)
    i = int(np.argmax(vals))
    if vals[i] <= 0:
        return 0.0, float(grid[i])
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    from scipy import optimize as _opt  # here, not at module top: it adds about 0.2 s to every start-up

    res = _opt.minimize_scalar(lambda m: -float(gllp_rate(model, m, ec_efficiency, sifting)), bounds=(lo, hi),
                               method="bounded", options={"xatol": 1e-7})
    return float(-res.fun), float(res.x)


# ---------------------------------------------------------------------------------------------------------
# scenario
# ---------------------------------------------------------------------------------------------------------
_EC_EFF = Domain(1.0, 10.0)
_PULSES = Domain(1, 1e15, integer=True)   # a count; must stay below 2**50 for the exact tails
#: Key-basis detections per block (a design target; the block is still closed after a number of pulses).
_KEY_DETECTIONS = Domain(1, 1e15, integer=True)
#: The units a decoy block size is given in (scenario field names; ``size_kind`` of a block-size result).
BLOCK_UNITS = ("pulses", "key_detections")
_COUNT_K = Domain(2, 8, integer=True)


def _device(name: str, description: str, unit: str = "", default=None, required: str = "no") -> FieldSpec:
    """A device field, with the domain :class:`~finitekey.channel.Link`/``Detector``/``Source`` check it by."""
    return FieldSpec(name, "number", description, unit=unit, domain=FIELD_DOMAINS[name], default=default,
                     required=required)


#: Every scenario field, declared once: the parser validates with these, ``finitekey fields decoy-bb84`` lists
#: them and ``finitekey schema decoy-bb84-scenario`` is generated from them.
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), required="yes"),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs",
              schema={"type": ["string", "integer"]}),
    FieldSpec("protocol.intensity_count", "number", "number of intensities (signal and decoys)", domain=_COUNT_K,
              default=3),
    FieldSpec("protocol.intensities", "list", "fixed mean photon numbers, strictly descending (default: optimised)",
              unit="photons", schema={"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2,
                                      "maxItems": 8}),
    FieldSpec("protocol.intensity_probabilities", "list", "fixed probability of each intensity, summing to 1 "
              "(default: optimised)", schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0,
                                                                          "exclusiveMaximum": 1},
                                              "minItems": 2, "maxItems": 8}),
    FieldSpec("protocol.key_basis_probability", "number", "fixed key-basis probability q_X (default: optimised)",
              domain=PROBABILITY),
    FieldSpec("protocol.weakest_intensity", "number", "mean photon number of the weakest (fixed) intensity",
              unit="photons", domain=Domain(0.0, 1.0), default=2e-4),
    _device("link.distance_km", "fibre length", "km", required="yes"),
    _device("link.fiber_loss_db_per_km", "fibre attenuation", "dB/km", required="yes"),
    _device("link.extra_loss_db", "loss independent of length (connectors, receiver optics)", "dB", 0.0),
    _device("detector.efficiency", "detection efficiency, including Bob's optics", required="yes"),
    _device("detector.dark_count_probability", "dark count probability per detector per gate", "per gate",
            required="yes"),
    _device("detector.afterpulse_probability", "probability that a click is followed by an afterpulse", "per click",
            0.0),
    _device("detector.misalignment_error", "probability that a photon reaches the wrong detector", "", 0.0),
    _device("detector.dead_time_s", "dead time after each click", "s", 0.0),
    _device("source.repetition_rate_hz", "pulses sent per second (for rates per second)", "Hz"),
    FieldSpec("block.pulses", "number", "pulses sent per block", unit="pulses", domain=_PULSES,
              required="one of pulses, key_detections"),
    FieldSpec("block.key_detections", "number", "expected key-basis detections per block", unit="detections",
              domain=_KEY_DETECTIONS, required="one of pulses, key_detections"),
    *block_security_specs("security."),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n_X h(E_X))",
              domain=_EC_EFF, required="yes"),
)
_SCENARIO_SPEC = by_name(SCENARIO_SPECS)
_SCENARIO_SECTIONS = sections_of(SCENARIO_SPECS)
#: Sections a scenario must have, with their required fields (alternatives are checked by one_of and
#: security_targets).
_REQUIRED = {sec: tuple(k for k in keys if _SCENARIO_SPEC[f"{sec}.{k}"].required == "yes")
             for sec, keys in _SCENARIO_SECTIONS.items() if sec != "source"}
_SCENARIO_SCHEMA_RULES = {
    "": {"required": list(_REQUIRED)},
    "block": {"oneOf": [{"required": ["pulses"], "not": {"required": ["key_detections"]}},
                        {"required": ["key_detections"], "not": {"required": ["pulses"]}}]},
    "security": SECURITY_SCHEMA_RULE,
}
#: Fields whose default leaves out an effect a detector probably has at a high detection rate.  The rate at
#: which 1 MHz becomes noticeable is common practice, no source: gated InGaAs detectors have dead times of
#: about 10 ns to 10 us and afterpulse probabilities of about 1e-3 to 1e-1 (from memory), so that above about a
#: million clicks per second both change the counts.
DEFAULT_WARNINGS = (
    DefaultWarning("detector.dead_time_s", 0.0, "detection_rate_hz", 1e6, "detections per second",
                   "a dead time of 10 ns to 10 us, usual for gated detectors, would remove a noticeable share "
                   "of these clicks; give detector.dead_time_s"),
    DefaultWarning("detector.afterpulse_probability", 0.0, "detection_rate_hz", 1e6, "detections per second",
                   "afterpulses, usual for gated detectors at this rate, would add errors; give "
                   "detector.afterpulse_probability"),
)


def default_warnings(scenario: "DecoyScenario", design) -> tuple:
    """The :data:`DEFAULT_WARNINGS` that fire for ``scenario`` at ``design`` (a DesignResult).

    Returns
    -------
    tuple of str
        One text per rule that fires, naming the field and why.
    """
    counts = design.expected_counts
    fill = design.block_fill_time_s
    figures = {}
    if fill and fill > 0 and "key_basis.detections" in counts:
        total = math.fsum(counts["key_basis.detections"]) + math.fsum(counts.get("test_basis.detections", ()))
        figures["detection_rate_hz"] = total / fill
    det = scenario.model.detector
    values = {"detector.dead_time_s": det.dead_time_s, "detector.afterpulse_probability": det.afterpulse_probability}
    out = (rule.check(values[rule.field], figures) for rule in DEFAULT_WARNINGS)
    return tuple(w for w in out if w)


@dataclass(frozen=True)
class DecoyScenario:
    """A decoy-state link scenario: device model, block size, security targets and optional fixed choices.

    Attributes
    ----------
    model : LinkModel
    pulses : float or None
        Pulses sent per block ``N``; None when the scenario gives ``key_detections`` instead.
    eps_sec, eps_cor : float
    ec_efficiency : float
        Reconciliation efficiency ``f >= 1``: leakage ``f n_X h(E_X)``.
    intensity_count : int
    intensities, intensity_probabilities : tuple or None
        Fixed values (not optimised) when given.
    key_basis_probability : float or None
        Fixed ``q_X`` when given.
    weakest_intensity : float
        Value of the weakest intensity (fixed; e.g. a near-vacuum decoy), default 2e-4.
    label : str or None
        Free-text name of the scenario (``[protocol] label``), carried into outputs.
    security : tuple of (str, float) or None
        The ``[security]`` section as given (eps_sec and eps_cor, or eps_total with eps_cor_share), so that
        a copy with one field changed keeps the form the user chose.
    key_detections : int or None
        Expected key-basis detections per block (the post-processing frame) instead of ``pulses``.  The block
        is still closed after a number of pulses fixed before it (the block rule); the design chooses that
        number together with the free parameters so that about this many key-basis detections are expected.
    """

    model: LinkModel
    pulses: float | None
    eps_sec: float
    eps_cor: float
    ec_efficiency: float
    intensity_count: int = 3
    intensities: tuple | None = None
    intensity_probabilities: tuple | None = None
    key_basis_probability: float | None = None
    weakest_intensity: float = 2e-4
    label: str | None = None
    security: tuple | None = None
    key_detections: int | None = None

    def __post_init__(self):
        if (self.pulses is None) == (self.key_detections is None):
            raise ValueError("DecoyScenario: give exactly one of pulses and key_detections")

    @property
    def size_kind(self) -> str:
        """The unit the scenario gives its block size in: ``"pulses"`` or ``"key_detections"``."""
        return "pulses" if self.pulses is not None else "key_detections"

    def with_pulses(self, pulses: float) -> "DecoyScenario":
        """Copy with a block of ``pulses`` pulses (and no key-detection target)."""
        return replace(self, pulses=float(pulses), key_detections=None)

    def as_dict(self) -> dict:
        """JSON-ready mapping in the scenario-file layout (``parse_scenario`` reads it back).

        Returns
        -------
        dict
        """
        proto = {"name": PROTOCOL_NAME, "intensity_count": self.intensity_count,
                 "weakest_intensity": self.weakest_intensity}
        if self.label is not None:
            proto["label"] = self.label
        if self.intensities is not None:
            proto["intensities"] = list(self.intensities)
        if self.intensity_probabilities is not None:
            proto["intensity_probabilities"] = list(self.intensity_probabilities)
        if self.key_basis_probability is not None:
            proto["key_basis_probability"] = self.key_basis_probability
        src = {} if self.model.source.repetition_rate_hz is None else {
            "repetition_rate_hz": self.model.source.repetition_rate_hz}
        out = {"protocol": proto, "link": asdict(self.model.link), "detector": asdict(self.model.detector),
               "block": ({"pulses": self.pulses} if self.pulses is not None
                         else {"key_detections": int(self.key_detections)}),
               "security": dict(self.security) if self.security else {"eps_sec": self.eps_sec, "eps_cor": self.eps_cor},
               "reconciliation": {"efficiency": self.ec_efficiency}}
        if src:
            out["source"] = src
        return out


def parse_scenario(data: dict) -> DecoyScenario:
    """Validate a scenario dictionary (from TOML) and return a :class:`DecoyScenario`.

    Raises
    ------
    InputError
        Naming ``section`` or ``section.field`` for unknown or missing sections/fields and bad values.
    """
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a table of sections " + ", ".join(_SCENARIO_SECTIONS))
    for sec in data:
        if sec not in _SCENARIO_SECTIONS:
            raise InputError(sec, data[sec], "one of the sections " + ", ".join(_SCENARIO_SECTIONS))
        if not isinstance(data[sec], dict):
            raise InputError(sec, data[sec], "a table of fields")
        for key in data[sec]:
            if key not in _SCENARIO_SECTIONS[sec]:
                raise InputError(f"{sec}.{key}", data[sec][key], "one of the fields "
                                 + ", ".join(f"{sec}.{k}" for k in _SCENARIO_SECTIONS[sec]))
    for sec, keys in _REQUIRED.items():
        if sec not in data:
            raise InputError(sec, None, f"a [{sec}] section" + (" with " + ", ".join(keys) if keys else ""))
        for key in keys:
            if key not in data[sec]:
                raise InputError(f"{sec}.{key}", None, "a value (required field)")
    pr = data["protocol"]
    if not isinstance(pr["name"], str) or pr["name"] != PROTOCOL_NAME:
        raise InputError("protocol.name", pr["name"], f"'{PROTOCOL_NAME}'")
    label = read_label(pr, "protocol.label")
    spec = _SCENARIO_SPEC
    count = spec["protocol.intensity_count"]
    k = int(count.check(pr.get("intensity_count", count.default)))
    mu = None
    if "intensities" in pr:
        mu = check_intensity_list("protocol.intensities", pr["intensities"])
        if len(mu) != k:
            raise InputError("protocol.intensities", pr["intensities"], f"a list of {k} intensities "
                             "(protocol.intensity_count)")
    probs = None
    if "intensity_probabilities" in pr:
        probs = _probabilities("protocol.intensity_probabilities", pr["intensity_probabilities"], k)
    qx = None
    if "key_basis_probability" in pr:
        qx = float(spec["protocol.key_basis_probability"].check(pr["key_basis_probability"]))
    weakest = float(spec["protocol.weakest_intensity"].check(pr.get("weakest_intensity",
                                                                    spec["protocol.weakest_intensity"].default)))
    if mu is not None:
        weakest = mu[-1]
    ln = data["link"]
    link = Link(ln["distance_km"], ln["fiber_loss_db_per_km"],
                ln.get("extra_loss_db", spec["link.extra_loss_db"].default))
    dt = data["detector"]
    det = Detector(dt["efficiency"], dt["dark_count_probability"],
                   *(dt.get(k, spec[f"detector.{k}"].default)
                     for k in ("afterpulse_probability", "misalignment_error", "dead_time_s")))
    src = Source(data.get("source", {}).get("repetition_rate_hz"))
    bl = data["block"]
    pulses = key_detections = None
    if one_of(bl, BLOCK_UNITS, "block.", "pulses sent per block, " + _PULSES.describe()) == "pulses":
        pulses = float(spec["block.pulses"].check(bl["pulses"]))
    else:
        key_detections = int(spec["block.key_detections"].check(bl["key_detections"]))
    eps_sec, eps_cor = security_targets(data["security"], "security.")
    f = float(spec["reconciliation.efficiency"].check(data["reconciliation"]["efficiency"]))
    return DecoyScenario(LinkModel(link, det, src), pulses, eps_sec, eps_cor, f, k, mu, probs, qx, weakest, label,
                         tuple(data["security"].items()), key_detections)


def default_scenario() -> DecoyScenario:
    """Built-in scenario: 50 km of 0.2 dB/km fibre, 10% detector, 1e10 pulses (common practice, no source)."""
    return parse_scenario({
        "protocol": {"name": PROTOCOL_NAME, "intensity_count": 3, "weakest_intensity": 2e-4},
        "link": {"distance_km": 50.0, "fiber_loss_db_per_km": 0.2, "extra_loss_db": 0.0},
        "detector": {"efficiency": 0.1, "dark_count_probability": 6e-7, "afterpulse_probability": 0.0,
                     "misalignment_error": 0.005, "dead_time_s": 0.0},
        "source": {"repetition_rate_hz": 1e9},
        "block": {"pulses": 1e10},
        "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
        "reconciliation": {"efficiency": 1.16},
    })


def scenario_fields() -> list:
    return [f"{s}.{k}" for s, keys in _SCENARIO_SECTIONS.items() for k in keys if (s, k) != ("protocol", "name")]


def with_field(scenario: DecoyScenario, dotted_name: str, value) -> DecoyScenario:
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of " + ", ".join(scenario_fields()))
    sec, key = dotted_name.split(".", 1)
    d = scenario.as_dict()
    if sec == "security":  # the same rules as BB84 (security_fields_with)
        d["security"] = security_fields_with(d["security"], scenario.eps_sec, scenario.eps_cor, key, value)
    else:
        d.setdefault(sec, {})[key] = value
    if sec == "block":   # pulses and key_detections are alternatives: setting one drops the other
        d["block"] = {key: value}
    if sec == "protocol" and key == "weakest_intensity":
        d["protocol"].pop("intensities", None)
    return parse_scenario(d)


# ---------------------------------------------------------------------------------------------------------
# the protocol object
# ---------------------------------------------------------------------------------------------------------
class DecoyBB84:
    """The registered ``decoy-bb84`` protocol object (see the module docstring)."""

    name = PROTOCOL_NAME
    statistics_methods = STATISTICS
    design_statistics = DESIGN_STATISTICS
    default_statistics = DEFAULT_STATISTICS

    def parse_block(self, data: dict) -> DecoyBlock:
        """:func:`parse_block`: validate one observed block mapping (errors name the field)."""
        return parse_block(data)

    def key_length(self, block: DecoyBlock, statistics: str | None = None) -> KeyLengthResult:
        """:func:`key_length`: certified secret key length of one block (see there for the parameters)."""
        return key_length(block, statistics)

    def key_length_batch(self, blocks, statistics: str | None = None, jobs: int = 1) -> list:
        """:func:`key_length_batch`: key lengths of many blocks, identical to :meth:`key_length` block by block."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    def parse_scenario(self, data: dict) -> DecoyScenario:
        """:func:`parse_scenario`: validate a scenario mapping (the parsed TOML)."""
        return parse_scenario(data)

    def default_scenario(self) -> DecoyScenario:
        """:func:`default_scenario`: the built-in fictional metro link."""
        return default_scenario()

    # The entry points for callers run with one BLAS thread (restored afterwards); see finitekey/_threads.py.
    @with_one_blas_thread
    def design(self, scenario: DecoyScenario, statistics: str | None = None) -> DesignResult:
        """Choose intensities, their probabilities, the basis bias and the epsilon split for ``scenario``.

        Parameters
        ----------
        scenario : DecoyScenario
        statistics : str, optional
            Statistics method (default: the scenario's, else the protocol's).

        Returns
        -------
        DesignResult
            See :func:`finitekey.optimize.decoy_design.design`; runs with one BLAS thread.
        """
        from ..optimize import decoy_design  # optimisation sits above protocols; imported on use
        result = decoy_design.design(scenario, _check_design_statistics(statistics))
        warnings = default_warnings(scenario, result) if isinstance(result, DesignResult) else ()
        return replace(result, warnings=warnings) if warnings else result

    @with_one_blas_thread
    def blocksize(self, scenario: DecoyScenario, target: BlockTarget, statistics: str | None = None,
                  unit: str | None = None):
        """Smallest block whose design reaches ``target``.

        Parameters
        ----------
        scenario : DecoyScenario
        target : BlockTarget
        statistics : str, optional
        unit : str, optional
            ``"pulses"`` or ``"key_detections"`` (``"key-detections"``); default: the scenario's unit.

        Returns
        -------
        BlockSizeResult
            See :func:`finitekey.optimize.decoy_design.blocksize`; runs with one BLAS thread.
        """
        from ..optimize import decoy_design
        return decoy_design.blocksize(scenario, target, _check_design_statistics(statistics), unit=unit)

    @with_one_blas_thread
    def reach(self, scenario: DecoyScenario, statistics: str | None = None) -> ReachResult:
        """Largest fibre length with a positive certified key for ``scenario``'s block size.

        Parameters
        ----------
        scenario : DecoyScenario
        statistics : str, optional

        Returns
        -------
        ReachResult
            See :func:`finitekey.optimize.decoy_design.reach`; runs with one BLAS thread.
        """
        from ..optimize import decoy_design
        return decoy_design.reach(scenario, _check_design_statistics(statistics))

    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    def fields_table(self) -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}`` (see :func:`._spec.table_rows`).

        Returns
        -------
        dict
        """
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    def json_schema(self, kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``, from the field declarations.

        Returns
        -------
        dict
        """
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, _BLOCK_SCHEMA_RULES,
                               _SCENARIO_SCHEMA_RULES)

    def scenario_fields(self) -> list:
        """:func:`scenario_fields`: the dotted scenario fields a sweep may vary."""
        return scenario_fields()

    def with_field(self, scenario: DecoyScenario, dotted_name: str, value) -> DecoyScenario:
        """:func:`with_field`: a copy of ``scenario`` with one dotted field changed (validated)."""
        return with_field(scenario, dotted_name, value)


DECOY_BB84 = register(DecoyBB84())
