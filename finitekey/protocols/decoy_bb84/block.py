"""Decoy-state BB84 blocks: the observed block (:class:`DecoyBlock`), a fixed-length acceptance test
(:class:`AcceptanceTest`), the block fields declared once (:data:`BLOCK_SPECS`) and :func:`parse_block`.

The lowest module of the package: it imports none of its siblings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ...channel import check_intensity_list
from ...domains import COUNT, PROBABILITY, Domain
from ...errors import InputError
from .._block_rule import parse_closure
from .._fields import SECURITY_SCHEMA_RULE, block_security_specs, check_split, read_label, security_targets
from .._spec import FieldSpec, by_name

__all__ = ["PROTOCOL_NAME", "SECRECY_TERMS", "DecoyBlock", "ACCEPTANCE_STATISTICS", "AcceptanceTest", "BLOCK_SPECS",
           "parse_block"]

PROTOCOL_NAME = "decoy-bb84"
#: The secrecy terms of the ledger that a block's ``epsilon_split`` shares eps_sec among (declared with their
#: charges by :func:`.analysis.term_specs`).
SECRECY_TERMS = ("count_estimation", "single_photon_smoothing", "chain_rule", "privacy_amplification")
_SHARE = Domain(0.0, 1.0, lower_open=True, upper_open=True)


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
        split = check_split(split, SECRECY_TERMS, _SHARE)
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
