"""Design scenarios of a described protocol: fields, parser, the expected statistics and the asymptotic rate.

A scenario is a TOML file holding the description tables (``[description]``, ``[[alice.settings]]``,
``[[bob.settings]]``, ``[sifting]``) and the design's own sections: ``[statistics]`` (a channel model or
tables of expected conditional probabilities), ``[budget]``, ``[security]``, ``[reconciliation]``,
``[analysis]`` and ``[design]``.  The same file serves as the description a block names.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...domains import POSITIVE_COUNT, RATE_HZ, Domain
from ...errors import InputError
from ...reconciliation import EFFICIENCY_DOMAIN
from .._fields import block_security_specs, read_schema_sections, security_fields_with, security_targets
from .._spec import FieldSpec, by_name, sections_of
from .block import ATTACKS, PROTOCOL_NAME, parse_counts
from .description import DEFAULT_TOLERANCE, TOLERANCE_DOMAIN, Description, parse_description, picture_index

__all__ = ["SCENARIO_SPECS", "SCENARIO_SCHEMA_RULES", "DescribedScenario", "parse_scenario", "scenario_fields",
           "with_field", "default_scenario", "conditional_table", "joint_expected", "biased"]

_OPEN_UNIT = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_SETTINGS_SCHEMA = {"type": "array", "minItems": 1, "items": {"type": "object"}}
_EXPECTED_SCHEMA = {"type": "array", "items": {
    "type": "object", "required": ["alice", "bob", "table"], "additionalProperties": False,
    "properties": {"alice": {"type": "string"}, "bob": {"type": "string"},
                   "table": {"type": "array", "items": {"type": "array", "items": {"type": "number", "minimum": 0,
                                                                                   "maximum": 1}}}}}}

#: Every scenario field, declared once (``finitekey fields described``, ``finitekey schema described-scenario``).
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), default=PROTOCOL_NAME),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs"),
    FieldSpec("description.label", "text", "free-text name of the protocol described"),
    FieldSpec("description.tolerance", "number", "tolerance of the matrix checks (Hermitian, PSD, trace, POVM sum)",
              domain=TOLERANCE_DOMAIN, default=DEFAULT_TOLERANCE),
    FieldSpec("alice.settings", "list", "Alice's settings: name, probability, states (kets or density matrices; "
              "complex entries as strings \"a+bj\"), state_probabilities, labels, key", required="yes",
              schema=_SETTINGS_SCHEMA),
    FieldSpec("bob.settings", "list", "Bob's settings: name, probability, povm (matrices summing to the identity), "
              "labels, discard (outcome indices announced and dropped)", required="yes", schema=_SETTINGS_SCHEMA),
    FieldSpec("sifting.key_pairs", "list", "[alice setting, bob setting] name pairs whose rounds make key",
              required="yes", schema={"type": "array", "minItems": 1,
                                      "items": {"type": "array", "items": {"type": "string"}, "minItems": 2,
                                                "maxItems": 2}}),
    FieldSpec("statistics.depolarising", "number", "channel model: depolarising probability p, (1-p) s + p I/d on "
              "the signal space", domain=Domain(0.0, 1.0), required="this or statistics.expected"),
    FieldSpec("statistics.transmittance", "number", "channel model: probability that the signal arrives (else "
              "Bob gets the vacuum state)", domain=Domain(0.0, 1.0, lower_open=True), default=1.0),
    FieldSpec("statistics.vacuum", "number", "index of the vacuum basis vector of Bob's space (needed with "
              "transmittance < 1)", domain=Domain(0, 15, integer=True)),
    FieldSpec("statistics.expected", "list", "expected statistics: one {alice, bob, table} per pair of settings, "
              "table[state][outcome] = p(outcome | state, settings)", required="this or statistics.depolarising",
              schema=_EXPECTED_SCHEMA),
    FieldSpec("budget.rounds", "number", "N: rounds per block (signals sent)", unit="rounds", domain=POSITIVE_COUNT,
              required="yes"),
    FieldSpec("budget.signal_rate_hz", "number", "rounds per second", unit="Hz", domain=RATE_HZ),
    *block_security_specs("security."),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n H(K|B))",
              domain=EFFICIENCY_DOMAIN, default=1.1),
    FieldSpec("analysis.attacks", "choice", "attacks the key length holds against", choices=ATTACKS,
              default="collective"),
    FieldSpec("analysis.statistics", "choice", "confidence intervals of the test statistics", choices=("exact",),
              default="exact"),
    FieldSpec("design.key_probability", "number", "fixed probability of the key setting, Alice and Bob (default: "
              "optimised)", domain=_OPEN_UNIT),
    FieldSpec("design.test_fraction", "number", "fixed probability that a round is a test round (default: "
              "optimised)", domain=_OPEN_UNIT),
)
SCENARIO_SCHEMA = {sec: {k: by_name(SCENARIO_SPECS)[f"{sec}.{k}"] for k in keys}
                   for sec, keys in sections_of(SCENARIO_SPECS).items()}
SCENARIO_SCHEMA_RULES = {"": {"required": ["alice", "bob", "sifting", "statistics", "budget", "security"]},
                         "budget": {"required": ["rounds"]},
                         "statistics": {"oneOf": [{"required": ["depolarising"], "not": {"required": ["expected"]}},
                                                  {"required": ["expected"], "not": {"required": ["depolarising"]}}]}}


@dataclass(frozen=True)
class DescribedScenario:
    """A validated scenario; ``data`` is the normalised nested mapping (defaults filled in).

    Attributes
    ----------
    description : Description
    conditional : numpy.ndarray
        ``conditional[j, o] = p(Bob's outcome b | signal (x, k), Bob's setting y)`` for signal ``j`` and outcome
        ``o = (y, b)`` (order of :func:`~.description.picture_index`).
    rounds : int
    signal_rate_hz : float or None
    eps_sec, eps_cor : float
    efficiency : float
    key_probability, test_fraction : float or None
        Fixed design parameters (None: optimised).
    """

    data: dict
    description: Description
    conditional: np.ndarray
    rounds: int
    signal_rate_hz: float | None
    eps_sec: float
    eps_cor: float
    efficiency: float
    key_probability: float | None
    test_fraction: float | None


def conditional_table(desc: Description, depolarising: float, transmittance: float = 1.0,
                      vacuum: int | None = None) -> np.ndarray:
    """``p(b | x, k, y) = Tr(Lambda(sigma_{x,k}) M_{b|y})`` for the channel
    ``Lambda(s) = t [(1-p) s + p Tr(s) Pi / r] + (1-t) Tr(s) |vac><vac|`` (``Pi`` the projector off the vacuum,
    rank ``r``; the identity when there is no vacuum)."""
    d = desc.dim
    pi = np.eye(d)
    vac = np.zeros((d, d))
    if vacuum is not None:
        vac[vacuum, vacuum] = 1.0
        pi = pi - vac
    r = float(np.trace(pi))
    sig, out, ns, no = picture_index(desc)
    table = np.zeros((ns, no))
    for (x, k), j in sig.items():
        s = desc.alice[x].elements[k]
        tr = complex(np.trace(s)).real
        lam = transmittance * ((1 - depolarising) * s + depolarising * tr * pi / r) + (1 - transmittance) * tr * vac
        for (y, b), o in out.items():
            table[j, o] = float(np.trace(lam @ desc.bob[y].elements[b]).real)
    return np.clip(table, 0.0, 1.0)


def joint_expected(desc: Description, conditional: np.ndarray) -> np.ndarray:
    """``P[j, o] = p_x p_{k|x} q_y p(b | x, k, y)``: the joint probabilities of one round."""
    sig, out, ns, no = picture_index(desc)
    w_sig = np.zeros(ns)
    for (x, k), j in sig.items():
        w_sig[j] = desc.alice[x].probability * desc.alice[x].element_probabilities[k]
    w_out = np.zeros(no)
    for (y, b), o in out.items():
        w_out[o] = desc.bob[y].probability
    return w_sig[:, None] * w_out[None, :] * conditional


def biased(desc: Description, key_probability: float) -> Description:
    """The description with the key setting (of the first key pair) chosen with ``key_probability`` by Alice and by
    Bob; the other settings of each share the rest in their given proportions (a party with one setting keeps
    it)."""
    x0, y0 = desc.key_pairs[0]

    def spread(settings, i0):
        if len(settings) == 1:
            return None
        rest = math.fsum(s.probability for i, s in enumerate(settings) if i != i0)
        return tuple(key_probability if i == i0 else (1 - key_probability) * s.probability / rest
                     for i, s in enumerate(settings))
    return desc.with_probabilities(spread(desc.alice, x0), spread(desc.bob, y0))


def parse_scenario(data) -> DescribedScenario:
    """Validate a scenario mapping (from TOML); errors name ``section.field`` or the element of the description.

    Raises
    ------
    InputError
    """
    norm = read_schema_sections(data, SCENARIO_SCHEMA, raw_kinds=("list", "table"))
    desc = parse_description({"description": {k: v for k, v in norm["description"].items()},
                              "alice": norm["alice"], "bob": norm["bob"], "sifting": norm["sifting"]})
    st = norm["statistics"]
    if ("depolarising" in st) == ("expected" in st):
        raise InputError("statistics.depolarising", st.get("depolarising"),
                         "exactly one of statistics.depolarising (a channel model) or statistics.expected (tables)")
    if "expected" in st:
        for f in ("transmittance", "vacuum"):
            if f in data.get("statistics", {}):
                raise InputError(f"statistics.{f}", st[f], "absent with statistics.expected (a channel-model field)")
        cond = parse_counts(st["expected"], desc, "statistics.expected", integer=False)
        if np.isnan(cond).any():
            sig, out, _, _ = picture_index(desc)
            j, o = [int(v[0]) for v in np.nonzero(np.isnan(cond))]
            x = [xx for (xx, k), jj in sig.items() if jj == j][0]
            y = [yy for (yy, b), oo in out.items() if oo == o][0]
            raise InputError("statistics.expected", f"no table for alice {desc.alice[x].name!r}, bob "
                             f"{desc.bob[y].name!r}", "one table per pair of settings")
    else:
        vac = st.get("vacuum")
        if vac is not None:
            vac = int(vac)
            if vac >= desc.dim:
                raise InputError("statistics.vacuum", vac, f"an index of Bob's space in [0, {desc.dim - 1}]")
        if st["transmittance"] < 1.0 and vac is None:
            raise InputError("statistics.transmittance", st["transmittance"],
                             "1 unless statistics.vacuum names the vacuum vector that a lost signal becomes")
        cond = conditional_table(desc, float(st["depolarising"]), float(st["transmittance"]), vac)
    b = norm["budget"]
    if "rounds" not in b:
        raise InputError("budget.rounds", None, f"the rounds per block, {POSITIVE_COUNT.describe()}")
    eps_sec, eps_cor = security_targets(norm["security"], "security.")
    d = norm["design"]
    return DescribedScenario(norm, desc, cond, int(b["rounds"]), b.get("signal_rate_hz"), eps_sec, eps_cor,
                             float(norm["reconciliation"]["efficiency"]), d.get("key_probability"),
                             d.get("test_fraction"))


def scenario_fields() -> list:
    """Dotted names of every scenario field."""
    return [f"{s}.{f}" for s, fields in SCENARIO_SCHEMA.items() for f in fields]


def with_field(scenario: DescribedScenario, dotted_name: str, value) -> DescribedScenario:
    """Copy of ``scenario`` with one field replaced and the whole scenario re-validated."""
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of: " + ", ".join(scenario_fields()))
    section, name = dotted_name.split(".", 1)
    data = {s: dict(v) for s, v in scenario.data.items()}
    if section == "security":
        data["security"] = security_fields_with(data["security"], scenario.eps_sec, scenario.eps_cor, name, value)
    else:
        data[section][name] = value
    if dotted_name == "statistics.depolarising":
        data["statistics"].pop("expected", None)
    if dotted_name == "statistics.expected":
        for f in ("depolarising", "transmittance", "vacuum"):
            data["statistics"].pop(f, None)
    return parse_scenario(data)


def default_scenario() -> DescribedScenario:
    """The example qubit BB84 scenario (fictional numbers), built in so that ``design`` has a default."""
    return parse_scenario(DEFAULT_SCENARIO)


_S = 0.7071067811865476
#: The built-in scenario: qubit BB84 as a described protocol, depolarising channel (fictional numbers); the same
#: content as examples/described/bb84_qubit.toml.
DEFAULT_SCENARIO = {
    "protocol": {"name": PROTOCOL_NAME, "label": "qubit BB84, depolarising channel (fictional)"},
    "description": {"label": "qubit BB84", "tolerance": 1e-9},
    "alice": {"settings": [
        {"name": "Z", "probability": 0.5, "states": [[1, 0], [0, 1]], "labels": ["0", "1"], "key": [0, 1]},
        {"name": "X", "probability": 0.5, "states": [[_S, _S], [_S, -_S]], "labels": ["+", "-"]}]},
    "bob": {"settings": [
        {"name": "Z", "probability": 0.5, "povm": [[[1, 0], [0, 0]], [[0, 0], [0, 1]]], "labels": ["0", "1"]},
        {"name": "X", "probability": 0.5, "povm": [[[0.5, 0.5], [0.5, 0.5]], [[0.5, -0.5], [-0.5, 0.5]]],
         "labels": ["+", "-"]}]},
    "sifting": {"key_pairs": [["Z", "Z"]]},
    "statistics": {"depolarising": 0.04},
    "budget": {"rounds": 10_000_000_000},
    "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
    "reconciliation": {"efficiency": 1.1},
}
