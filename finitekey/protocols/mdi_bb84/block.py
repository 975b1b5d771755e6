"""The observed MDI-BB84 block: per-side intensities and the counts of every intensity pair and basis.

A block file (JSON) holds both senders' intensities and probabilities and, for the key basis (Z) and the
test basis (X), a table of detections and one of errors with one row per Alice intensity and one column per
Bob intensity (``key_basis.detections[i][j]``: Alice sent her ``i``-th, Bob his ``j``-th intensity, both
chose Z, and the relay announced a Bell result).  Only rounds where both chose the same basis are counted.
"""

from __future__ import annotations

from dataclasses import dataclass

from ...channel import check_intensity_list
from ...domains import COUNT, Domain
from ...errors import InputError
from .._block_rule import parse_closure
from .._fields import block_security_specs, check_split, read_label, security_targets
from .._spec import FieldSpec, by_name
from .scenario import PROTOCOL_NAME, SIDES, probabilities

__all__ = ["MdiBlock", "BLOCK_SPECS", "SECRECY_TERMS", "parse_block", "BASES", "KINDS"]

#: The secrecy terms an ``epsilon_split`` shares eps_sec between (``joint_estimation`` only with joint
#: constraints; see :func:`finitekey.protocols.mdi_bb84.analysis.term_specs`).
SECRECY_TERMS = ("count_estimation", "joint_estimation", "single_photon_smoothing", "chain_rule",
                 "privacy_amplification")
#: The two count tables of a block and their kinds.
BASES = ("key_basis", "test_basis")
KINDS = ("detections", "errors")

_TABLE = {"type": "array", "minItems": 2, "maxItems": 5,
          "items": {"type": "array", "items": {"type": "integer", "minimum": 0}, "minItems": 2, "maxItems": 5}}
_BASIS_SCHEMA = {"type": "object", "properties": {"detections": _TABLE, "errors": _TABLE},
                 "required": ["detections", "errors"], "additionalProperties": False}
_LIST = {"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2, "maxItems": 5}
_PLIST = {"type": "array", "items": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
          "minItems": 2, "maxItems": 5}
_SHARE = Domain(0.0, 1.0, lower_open=True, upper_open=True)
#: Most intensities per side a block may have.
MAX_INTENSITIES = 5

#: Every block field, declared once (``finitekey fields mdi-bb84``, ``finitekey schema mdi-bb84-block``).
BLOCK_SPECS = (
    FieldSpec("protocol", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,)),
    FieldSpec("alice_intensities", "list", "Alice's mean photon numbers, strictly descending (2 to 5)",
              unit="photons", required="yes", schema=_LIST),
    FieldSpec("alice_intensity_probabilities", "list", "probability of each of Alice's intensities, summing to 1",
              required="yes", schema=_PLIST),
    FieldSpec("bob_intensities", "list", "Bob's mean photon numbers, strictly descending (2 to 5)",
              unit="photons", required="yes", schema=_LIST),
    FieldSpec("bob_intensity_probabilities", "list", "probability of each of Bob's intensities, summing to 1",
              required="yes", schema=_PLIST),
    FieldSpec("key_basis", "table", "Z-basis detections and errors: one row per Alice intensity, one column per "
              "Bob intensity", unit="detections", required="yes", schema=_BASIS_SCHEMA),
    FieldSpec("test_basis", "table", "X-basis detections and errors, the same shape", unit="detections",
              required="yes", schema=_BASIS_SCHEMA),
    FieldSpec("ec_leak_bits", "number", "bits disclosed by error correction (at most the key-basis detections)",
              unit="bits", domain=COUNT, required="yes"),
    *block_security_specs(),
    FieldSpec("epsilon_split", "table", "shares of eps_sec for the secrecy terms, summing to 1",
              schema={"type": "object", "properties": {t: {"type": "number", "exclusiveMinimum": 0,
                                                           "exclusiveMaximum": 1} for t in SECRECY_TERMS},
                      "additionalProperties": False}),
    FieldSpec("joint_constraints", "bool", "add intervals on the counts of unions of pairs (all pairs with "
              "Alice's, or Bob's, weakest intensity), each charged as a failure event", default=False),
    FieldSpec("label", "text", "free-text identifier carried into batch output",
              schema={"type": ["string", "integer"]}),
    FieldSpec("pulses", "number", "pulse pairs sent (optional; at least the detections of both bases)",
              unit="pulses", domain=COUNT, schema={"type": ["integer", "null"], "minimum": 0}),
    FieldSpec("closed_by", "choice", "how the block was closed (quota is refused)", choices=("rounds",),
              default="rounds", schema={"enum": ["rounds", None]}),
)
_SPEC = by_name(BLOCK_SPECS)
BLOCK_FIELDS = tuple(_SPEC)
_BLOCK_FIELDS = BLOCK_FIELDS   # the name every protocol's block module gives its field list
_REQUIRED = tuple(s.name for s in BLOCK_SPECS if s.required == "yes")


@dataclass(frozen=True)
class MdiBlock:
    """One observed MDI-BB84 block (validated by :func:`parse_block`).

    Count tables are tuples of rows: ``key_detections[i][j]`` for Alice's intensity ``i`` and Bob's ``j``.
    The analysis holds only for a block of a number of pulse pairs fixed before it, each pair's intensities
    and bases chosen independently and announced after the block (``closed_by = "rounds"``).
    """

    intensities: tuple            # (alice, bob), each descending
    intensity_probabilities: tuple
    key_detections: tuple
    key_errors: tuple
    test_detections: tuple
    test_errors: tuple
    ec_leak_bits: int
    eps_sec: float
    eps_cor: float
    epsilon_split: dict | None = None
    joint_constraints: bool = False
    label: str | None = None
    pulses: int | None = None

    @property
    def shape(self) -> tuple:
        """``(Alice's intensities, Bob's intensities)``."""
        return len(self.intensities[0]), len(self.intensities[1])

    def table(self, basis: str, kind: str) -> tuple:
        """The count table ``basis`` (``key_basis``/``test_basis``), ``kind`` (``detections``/``errors``)."""
        return getattr(self, f"{basis.split('_')[0]}_{kind}")

    def flat(self, basis: str, kind: str) -> list:
        """A table in setting order (Alice's index slowest), as the decoy engine takes it."""
        return [c for row in self.table(basis, kind) for c in row]

    def as_dict(self) -> dict:
        """JSON-ready mapping in the block-file layout (``parse_block`` reads it back).

        Returns
        -------
        dict
        """
        d = {"protocol": PROTOCOL_NAME}
        for s, mu, p in zip(SIDES, self.intensities, self.intensity_probabilities):
            d[f"{s}_intensities"] = list(mu)
            d[f"{s}_intensity_probabilities"] = list(p)
        for b in BASES:
            d[b] = {k: [list(r) for r in self.table(b, k)] for k in KINDS}
        d.update({"ec_leak_bits": self.ec_leak_bits, "eps_sec": self.eps_sec, "eps_cor": self.eps_cor})
        if self.epsilon_split is not None:
            d["epsilon_split"] = dict(self.epsilon_split)
        if self.joint_constraints:
            d["joint_constraints"] = True
        if self.label is not None:
            d["label"] = self.label
        if self.pulses is not None:
            d["pulses"] = self.pulses
        return d


def _table(name: str, data, ka: int, kb: int) -> tuple:
    shape = (f"a table of {ka} rows (one per Alice intensity) of {kb} non-negative integers (one per Bob "
             "intensity)")
    if not isinstance(data, (list, tuple)):
        raise InputError(name, data, shape)
    if len(data) != ka:
        what = "a row is missing" if len(data) < ka else "rows for intensities that do not exist"
        raise InputError(name, f"{len(data)} rows", f"{shape}: {what} (alice_intensities has {ka})")
    rows = []
    for i, row in enumerate(data):
        if not isinstance(row, (list, tuple)):
            raise InputError(f"{name}[{i}]", row, f"a list of {kb} non-negative integers (one per Bob intensity)")
        if len(row) != kb:
            what = "an intensity pair is missing" if len(row) < kb else "counts for pairs that do not exist"
            raise InputError(f"{name}[{i}]", list(row), f"a list of {kb} non-negative integers, one per Bob "
                             f"intensity: {what} (bob_intensities has {kb})")
        rows.append(tuple(int(COUNT.check_scalar(f"{name}[{i}][{j}]", c)) for j, c in enumerate(row)))
    return tuple(rows)


def _basis(data, name: str, ka: int, kb: int):
    if not isinstance(data, dict):
        raise InputError(name, data, 'a table {"detections": [[...], ...], "errors": [[...], ...]}')
    unknown = sorted(set(data) - set(KINDS))
    if unknown:
        raise InputError(f"{name}.{unknown[0]}", data[unknown[0]], "only the fields detections, errors")
    for key in KINDS:
        if key not in data:
            raise InputError(f"{name}.{key}", None, f"a table of {ka} x {kb} counts (required)")
    det = _table(f"{name}.detections", data["detections"], ka, kb)
    err = _table(f"{name}.errors", data["errors"], ka, kb)
    for i in range(ka):
        for j in range(kb):
            if err[i][j] > det[i][j]:
                raise InputError(f"{name}.errors[{i}][{j}]", err[i][j], f"an integer in [0, {det[i][j]}] (errors "
                                 f"cannot exceed the detections {name}.detections[{i}][{j}])")
    return det, err


def _split(split, joint: bool) -> dict:
    names = tuple(t for t in SECRECY_TERMS if joint or t != "joint_estimation")
    return check_split(split, names, _SHARE, list_missing=True,
                       unknown_note="" if joint else " (joint_estimation only with joint_constraints = true)")


def parse_block(data: dict) -> MdiBlock:
    """Validate a block mapping (JSON) and return an :class:`MdiBlock`.

    Raises
    ------
    InputError
        Naming the field (``"test_basis.errors[1][2]"``, ``"bob_intensities"``, ...) for anything missing,
        unknown, of the wrong shape (an intensity pair missing, counts for a pair that does not exist) or
        out of range, and for ``closed_by = "quota"``.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, f"a JSON object with the {PROTOCOL_NAME} block fields")
    unknown = sorted(set(data) - set(BLOCK_FIELDS))
    if unknown:
        raise InputError(unknown[0], data[unknown[0]], "one of the block fields " + ", ".join(BLOCK_FIELDS))
    if "protocol" in data and data["protocol"] != PROTOCOL_NAME:
        raise InputError("protocol", data["protocol"], f"'{PROTOCOL_NAME}'")
    parse_closure(data, "pulse pairs")
    for s in SIDES:
        if f"{s}_intensities" not in data:
            raise InputError(f"{s}_intensities", None, f"{s.capitalize()}'s list of intensities (each side gives "
                             "its own; required)")
    for key in _REQUIRED:
        if key not in data:
            raise InputError(key, None, "a value (required field)")
    mu, p = [], []
    for s in SIDES:
        m = check_intensity_list(f"{s}_intensities", data[f"{s}_intensities"])
        if not 2 <= len(m) <= MAX_INTENSITIES:
            raise InputError(f"{s}_intensities", data[f"{s}_intensities"],
                             f"2 to {MAX_INTENSITIES} intensities (signal and decoys)")
        mu.append(m)
        p.append(probabilities(f"{s}_intensity_probabilities", data[f"{s}_intensity_probabilities"], len(m)))
    ka, kb = len(mu[0]), len(mu[1])
    kd, ke = _basis(data["key_basis"], "key_basis", ka, kb)
    td, te = _basis(data["test_basis"], "test_basis", ka, kb)
    n_key = sum(map(sum, kd))
    leak = int(Domain(0, n_key, integer=True).check_scalar("ec_leak_bits", data["ec_leak_bits"]))
    eps_sec, eps_cor = security_targets(data)
    joint = data.get("joint_constraints", False)
    joint = _SPEC["joint_constraints"].check(joint if joint is not None else False)
    split = None if data.get("epsilon_split") is None else _split(data["epsilon_split"], joint)
    label = read_label(data)
    pulses = None
    if data.get("pulses") is not None:
        pulses = int(_SPEC["pulses"].check(data["pulses"]))
        total = n_key + sum(map(sum, td))
        if pulses < max(total, 1):
            raise InputError("pulses", data["pulses"], f"an integer >= the detections of both bases ({total})")
    return MdiBlock(tuple(mu), tuple(p), kd, ke, td, te, leak, eps_sec, eps_cor, split, joint, label, pulses)
