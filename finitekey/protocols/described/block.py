"""An observed block of a described protocol: its fields, declared once, and the parser.

A block (JSON) names the description (a file, whose ``[description]``, ``[alice]``, ``[bob]`` and
``[sifting]`` tables are read, or the same tables inline), the number of rounds of the block, the counts of
the test rounds for every pair of settings, the leakage of error correction and the epsilons.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...budget import allocate
from ...domains import POSITIVE_COUNT, Domain
from ...errors import InputError
from ...reconciliation import EFFICIENCY_DOMAIN
from .._fields import SECURITY_SCHEMA_RULE, block_security_specs, read_label, security_targets
from .._spec import FieldSpec, by_name
from .description import DESCRIPTION_SECTIONS, Description, parse_description, parse_probabilities

__all__ = ["PROTOCOL_NAME", "DescribedBlock", "BLOCK_SPECS", "BLOCK_SCHEMA_RULES", "parse_block", "load_description",
           "ATTACKS", "parse_counts"]

PROTOCOL_NAME = "described"
#: Attacks the analysis covers (collective attacks only: the i.i.d. assumption of the finite-size step).
ATTACKS = ("collective",)

_COUNTS_SCHEMA = {"type": "array", "items": {
    "type": "object", "required": ["alice", "bob", "counts"], "additionalProperties": False,
    "properties": {"alice": {"type": "string"}, "bob": {"type": "string"},
                   "counts": {"type": "array", "items": {"type": "array", "items": {"type": "integer",
                                                                                     "minimum": 0}}}}}}
_DESCRIPTION_SCHEMA = {"type": ["string", "object"]}
_PROBS_SCHEMA = {"type": "array", "items": {"type": "number", "minimum": 0, "maximum": 1}}

#: Every block field, declared once (``finitekey fields described``, ``finitekey schema described-block``).
BLOCK_SPECS = (
    FieldSpec("protocol", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,)),
    FieldSpec("description", "table", "the protocol description: a TOML/JSON file (path relative to the current "
              "directory) or its tables inline", required="yes", schema=_DESCRIPTION_SCHEMA),
    FieldSpec("rounds", "number", "N: rounds of the block (fixed before it), test and key-generation rounds",
              unit="rounds", domain=POSITIVE_COUNT, required="yes"),
    FieldSpec("test_counts", "list", "counts of the test rounds: one {alice, bob, counts} per pair of settings, "
              "counts[state][outcome]", required="yes", schema=_COUNTS_SCHEMA),
    FieldSpec("ec_leak_bits", "number", "bits disclosed by error correction", unit="bits",
              domain=Domain(0, 2.0 ** 53, integer=True), required="or ec_efficiency"),
    FieldSpec("ec_efficiency", "number", "reconciliation efficiency f (leak f n H(K|B), H from the test counts)",
              domain=EFFICIENCY_DOMAIN, required="or ec_leak_bits"),
    *block_security_specs(),
    FieldSpec("epsilon_split", "table", "shares of eps_sec for the secrecy terms (default 1/3 each)",
              schema={"type": "object", "additionalProperties": {"type": "number", "exclusiveMinimum": 0,
                                                                 "exclusiveMaximum": 1}}),
    FieldSpec("alice_probabilities", "list", "setting probabilities used in the block (default: the "
              "description's)", schema=_PROBS_SCHEMA),
    FieldSpec("bob_probabilities", "list", "setting probabilities used in the block (default: the description's)",
              schema=_PROBS_SCHEMA),
    FieldSpec("attacks", "choice", "attacks the key length holds against", choices=ATTACKS, default="collective"),
    FieldSpec("statistics", "choice", "confidence intervals of the test statistics", choices=("exact",)),
    FieldSpec("label", "text", "free-text identifier carried into batch output", schema={"type": ["string", "integer"]}),
)
_SPEC = by_name(BLOCK_SPECS)
BLOCK_SCHEMA_RULES = {"": {"allOf": [
    {"oneOf": [{"required": ["ec_leak_bits"], "not": {"required": ["ec_efficiency"]}},
               {"required": ["ec_efficiency"], "not": {"required": ["ec_leak_bits"]}}]},
    SECURITY_SCHEMA_RULE]}}


@dataclass(frozen=True)
class DescribedBlock:
    """One observed block of a described protocol, validated.

    Attributes
    ----------
    description : Description
        With the setting probabilities of the block.
    rounds : int
        N, the rounds of the block.
    counts : numpy.ndarray
        Test-round counts ``counts[j, o]`` for signal ``j`` and Bob outcome ``o`` (the order of
        :func:`~.description.picture`); integers.
    ec_leak_bits : int or None
    ec_efficiency : float or None
    eps_sec, eps_cor : float
    epsilon_split : dict or None
    attacks : str
    label : str or None
    """

    description: Description
    rounds: int
    counts: np.ndarray
    ec_leak_bits: int | None
    ec_efficiency: float | None
    eps_sec: float
    eps_cor: float
    epsilon_split: dict | None = None
    attacks: str = "collective"
    label: str | None = None

    @property
    def test_rounds(self) -> int:
        """m, the number of test rounds (the sum of the counts)."""
        return int(self.counts.sum())

    @property
    def key_rounds(self) -> int:
        """n = N - m, the key-generation rounds."""
        return self.rounds - self.test_rounds


def load_description(value, field: str = "description") -> Description:
    """The description named by a block: a file path (TOML, or JSON by its suffix) or the tables inline.

    Raises
    ------
    InputError
        Naming ``field`` for an unreadable file, or the element of the description that is wrong.
    """
    if isinstance(value, str):
        from ...files import read_toml
        if value.endswith(".json"):
            import json
            try:
                with open(value, encoding="utf-8") as fh:
                    data = json.load(fh)
            except (OSError, ValueError) as exc:
                raise InputError(field, value, f"a readable JSON description file ({type(exc).__name__})") from None
        else:
            try:
                data = read_toml(value)
            except InputError as exc:  # an unreadable file: name the block's field, not a generic "file"
                if exc.field != "file":
                    raise
                raise InputError(field, value, exc.allowed) from None
        if not isinstance(data, dict):
            raise InputError(field, value, "a file holding the description tables")
        return parse_description({k: v for k, v in data.items() if k in DESCRIPTION_SECTIONS})
    if isinstance(value, dict):
        return parse_description(value)
    raise InputError(field, value, "a description file path or the description tables inline")


def parse_counts(value, desc: Description, field: str, *, integer: bool = True) -> np.ndarray:
    """A table ``[signal j, Bob outcome o]`` from a list of ``{alice, bob, counts|table}`` entries, one per
    pair of settings (every pair exactly once)."""
    key = "counts" if integer else "table"
    from .description import picture_index
    sig_index, out_index, n_sig, n_out = picture_index(desc)
    out = np.full((n_sig, n_out), np.nan)
    if not isinstance(value, list) or not value:
        raise InputError(field, value, "a list of {alice, bob, " + key + "} tables, one per pair of settings")
    seen = set()
    for i, entry in enumerate(value):
        where = f"{field}[{i}]"
        if not isinstance(entry, dict):
            raise InputError(where, entry, "a table with alice, bob and " + key)
        bad = [k for k in entry if k not in ("alice", "bob", key)]
        if bad:
            raise InputError(f"{where}.{bad[0]}", entry[bad[0]], "one of: alice, bob, " + key)
        x = desc.setting_index("alice", entry.get("alice"), f"{where}.alice")
        y = desc.setting_index("bob", entry.get("bob"), f"{where}.bob")
        if (x, y) in seen:
            raise InputError(where, [entry["alice"], entry["bob"]], "each pair of settings once")
        seen.add((x, y))
        rows = entry.get(key)
        ns, nb = len(desc.alice[x].elements), len(desc.bob[y].elements)
        shape = f"{ns} rows (states of {desc.alice[x].name!r}) of {nb} entries (outcomes of {desc.bob[y].name!r})"
        if not isinstance(rows, list) or len(rows) != ns:
            raise InputError(f"{where}.{key}", rows, shape)
        for k, row in enumerate(rows):
            if not isinstance(row, list) or len(row) != nb:
                raise InputError(f"{where}.{key}[{k}]", row, shape)
            for b, v in enumerate(row):
                f = f"{where}.{key}[{k}][{b}]"
                if integer:
                    c = Domain(0, 2.0 ** 50, integer=True).check_scalar(f, v)
                else:
                    c = Domain(0.0, 1.0).check_scalar(f, v)
                out[sig_index[(x, k)], out_index[(y, b)]] = float(c)
        if not integer:
            sums = [math.fsum(r) for r in rows]
            for k, s in enumerate(sums):
                if abs(s - 1.0) > max(desc.tolerance, 1e-9):
                    raise InputError(f"{where}.table[{k}]", rows[k], "conditional probabilities of Bob's outcomes "
                                     f"given the state, summing to 1 (they sum to {s:.12g})")
    missing = [(x, y) for x in range(len(desc.alice)) for y in range(len(desc.bob)) if (x, y) not in seen]
    if missing and integer:
        x, y = missing[0]
        raise InputError(field, f"no entry for alice {desc.alice[x].name!r}, bob {desc.bob[y].name!r}",
                         "one entry per pair of settings (every test round announces both settings)")
    return out


def parse_block(data) -> DescribedBlock:
    """Validate a block of a described protocol given as a mapping (from JSON).

    Required: ``description``, ``rounds``, ``test_counts``, ``eps_sec`` and ``eps_cor`` (or ``eps_total``), and
    ``ec_leak_bits`` or ``ec_efficiency``.  Optional: ``protocol``, ``epsilon_split``, ``alice_probabilities``,
    ``bob_probabilities`` (the setting probabilities used; default the description's), ``attacks``,
    ``statistics``, ``label``.

    Raises
    ------
    InputError
        Naming the field (or the element of the description) for every bad value.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, "a JSON object with the described-protocol block fields")
    unknown = [k for k in data if k not in _SPEC]
    if unknown:
        raise InputError(str(unknown[0]), data[unknown[0]], "one of the described block fields: " + ", ".join(_SPEC))
    if "protocol" in data and data["protocol"] != PROTOCOL_NAME:
        raise InputError("protocol", data["protocol"], f"'{PROTOCOL_NAME}' for this analysis")
    if "description" not in data:
        raise InputError("description", None, "a description file path or the description tables inline")
    desc = load_description(data["description"])
    for party in ("alice", "bob"):
        f = f"{party}_probabilities"
        if f in data:
            settings = desc.alice if party == "alice" else desc.bob
            probs = parse_probabilities(data[f], len(settings), f, max(desc.tolerance, 1e-12), positive=True)
            desc = desc.with_probabilities(**{party: probs})
    if "rounds" not in data:
        raise InputError("rounds", None, _SPEC["rounds"].allowed())
    rounds = int(_SPEC["rounds"].check(data["rounds"]))
    if "test_counts" not in data:
        raise InputError("test_counts", None, "the counts of the test rounds, one entry per pair of settings")
    counts = parse_counts(data["test_counts"], desc, "test_counts")
    m = int(counts.sum())
    if m < 1:
        raise InputError("test_counts", "no test rounds", "at least one test round")
    if m >= rounds:
        raise InputError("rounds", rounds, f"more rounds than the {m} test rounds counted (the rest make key)")
    leak = eff = None
    if "ec_leak_bits" in data:
        if "ec_efficiency" in data:
            raise InputError("ec_efficiency", data["ec_efficiency"], "absent when ec_leak_bits is given")
        leak = int(_SPEC["ec_leak_bits"].check(data["ec_leak_bits"]))
    elif "ec_efficiency" in data:
        eff = float(_SPEC["ec_efficiency"].check(data["ec_efficiency"]))
    else:
        raise InputError("ec_leak_bits", None, "the bits disclosed by error correction (or give ec_efficiency)")
    eps_sec, eps_cor = security_targets(data)
    split = data.get("epsilon_split")
    if split is not None:
        from .analysis import term_specs
        if not isinstance(split, dict):
            raise InputError("epsilon_split", split, "an object of shares for the secrecy terms")
        allocate(eps_sec, eps_cor, term_specs(1), split)
        split = dict(split)
    attacks = _SPEC["attacks"].check(data.get("attacks", "collective"))
    if "statistics" in data:
        _SPEC["statistics"].check(data["statistics"])
    return DescribedBlock(desc, rounds, counts, leak, eff, eps_sec, eps_cor, split, attacks, read_label(data))
