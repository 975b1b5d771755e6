"""Field declarations: ``finitekey fields``, ``finitekey schema`` and the README tables come from the declarations
the parsers validate with.

Sources: the JSON Schema checks use the ``jsonschema`` package (draft 2020-12 meta-schema and validator, an
outside implementation of the specification); the rest compares the declarations with the parsers' own
behaviour (common practice, no source).
"""

import copy
import glob
import importlib
import json
import math
import os
import re
import tomllib

import jsonschema
import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.protocols import bb84, decoy_bb84
from finitekey.protocols._spec import markdown_table

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PROTOCOLS = tuple(protocols.names())   # every registered protocol: a new one is checked without edits here


def _example_blocks():
    out = []
    for path in sorted(glob.glob(os.path.join(ROOT, "examples", "blocks", "*.json*"))):
        with open(path) as fh:
            text = fh.read()
        if path.endswith(".jsonl"):
            out += [json.loads(line) for line in text.splitlines() if line.strip()]
        else:
            out.append(json.loads(text))
    return out


def _example_scenarios():
    out = []
    for path in sorted(glob.glob(os.path.join(ROOT, "examples", "**", "*.toml"), recursive=True)):
        with open(path, "rb") as fh:
            out.append(tomllib.load(fh))
    return out


def _validator(name):
    proto, kind = name.rsplit("-", 1)
    schema = protocols.get(proto).json_schema(kind)
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


# ------------------------------------------------------------------------------------------------------------
# fields: the listing holds exactly the fields the parsers accept
# ------------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", PROTOCOLS)
def test_fields_lists_every_scenario_and_block_field(name, capsys):
    proto = protocols.get(name)
    assert main(["fields", name, "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    listed = [r["field"] for r in doc["scenario"]]
    assert set(proto.scenario_fields()) <= set(listed)
    assert set(listed) - set(proto.scenario_fields()) <= {"protocol.name"}
    module = importlib.import_module("finitekey.protocols." + name.replace("-", "_"))
    assert [r["field"] for r in doc["block"]] == [spec.name for spec in module.block.BLOCK_SPECS]
    assert "caution" in doc
    for r in doc["scenario"] + doc["block"]:
        assert r["description"] and r["allowed"] and r["type"] and r["unit"]
    assert main(["fields", name]) == 0
    text = capsys.readouterr().out
    assert "Caution" in text and all(f in text for f in listed)


def test_fields_gives_units():
    rows = {r[0]: r for r in protocols.get("decoy-bb84").fields_table()["scenario"]}
    assert rows["link.fiber_loss_db_per_km"][2] == "dB/km"
    assert rows["detector.dead_time_s"][2] == "s"
    assert rows["source.repetition_rate_hz"][2] == "Hz"
    assert rows["detector.dead_time_s"][3] == "0"


def test_fields_unknown_protocol_is_one_line_exit_2(capsys):
    assert main(["fields", "b92"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "protocol = 'b92' is not allowed; expected one of: bb84, decoy-bb84" in err


def _outside(domain):
    """Values just outside a domain: below its lower end, above its upper end (finite ends only)."""
    out = []
    if not math.isinf(domain.lower):
        out.append(domain.lower if domain.lower_open else domain.lower - (1 if domain.integer else
                                                                              max(1e-3, abs(domain.lower) * 1e-3)))
    if not math.isinf(domain.upper):
        out.append(domain.upper if domain.upper_open else domain.upper * 2 + 1)
    return out


def _numeric(specs):
    return [s for s in specs if s.kind == "number"]


@pytest.mark.parametrize("name", PROTOCOLS)
def test_scenario_parser_refuses_values_outside_the_declared_domain(name):
    # Every declared scenario number, set just outside its declared range, is refused naming the field and
    # the declared range: the parser validates with the declaration, not with a copy of it.
    proto = protocols.get(name)
    base = proto.default_scenario()
    checked = 0
    for spec in _numeric(proto.scenario_specs):
        for bad in _outside(spec.domain):
            with pytest.raises(InputError) as exc:
                proto.with_field(base, spec.name, bad)
            assert exc.value.field == spec.name, (spec.name, bad, str(exc.value))
            assert spec.domain.interval() in str(exc.value), (spec.name, str(exc.value))
            checked += 1
    assert checked >= 10


_BB84_BLOCK = {"key_bits": 1000000, "test_bits": 50000, "test_errors": 1250, "ec_leak_bits": 190000,
               "eps_sec": 1e-10, "eps_cor": 1e-15}


def _base_block(name, field):
    if name == "bb84":
        d = dict(_BB84_BLOCK)
        if field in ("ec_efficiency", "key_qber"):
            del d["ec_leak_bits"]
            d.update(ec_efficiency=1.1, key_qber=0.02)
    else:   # the protocol's example block (examples/blocks/<stem>.json), found by its "protocol" field
        stems = {"decoy-bb84": "decoy_block", "mdi-bb84": "mdi_block", "tf-sns": "tf_sns_block",
                 "described": "described_block"}
        with open(os.path.join(ROOT, "examples", "blocks", f"{stems[name]}.json")) as fh:
            d = json.load(fh)
        assert d["protocol"] == name
    if field in ("eps_total", "eps_cor_share"):
        del d["eps_sec"], d["eps_cor"]
        d["eps_total"] = 1e-9
    return d


@pytest.mark.parametrize("name", PROTOCOLS)
def test_block_parser_refuses_values_outside_the_declared_domain(name):
    proto = protocols.get(name)
    checked = 0
    for spec in _numeric(proto.block_specs):
        for bad in _outside(spec.domain):
            d = _base_block(name, spec.name)
            d[spec.name] = bad
            with pytest.raises(InputError) as exc:
                proto.parse_block(d)
            assert exc.value.field == spec.name, (spec.name, bad, str(exc.value))
            checked += 1
    assert checked >= 6


# ------------------------------------------------------------------------------------------------------------
# schema
# ------------------------------------------------------------------------------------------------------------
SCHEMA_NAMES = [f"{p}-{k}" for p in PROTOCOLS for k in ("block", "scenario")]


@pytest.mark.parametrize("name", SCHEMA_NAMES)
def test_schema_command_prints_a_valid_draft_2020_12_schema(name, capsys):
    assert main(["schema", name]) == 0
    schema = json.loads(capsys.readouterr().out)
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["additionalProperties"] is False
    assert "Caution" in schema["$comment"]


def test_schema_unknown_name_is_one_line_exit_2(capsys):
    assert main(["schema", "bb84"]) == 2
    err = capsys.readouterr().err.strip()
    assert "NAME = 'bb84' is not allowed; expected one of: bb84-block" in err and err.count("\n") == 0


def test_schemas_accept_every_example_block_and_scenario():
    blocks = _example_blocks()
    scenarios = _example_scenarios()
    assert len(blocks) >= 3 and len(scenarios) >= 3
    for b in blocks:
        protocols.get(b["protocol"]).parse_block(b)          # the parser accepts it ...
        errors = list(_validator(f"{b['protocol']}-block").iter_errors(b))
        assert errors == [], (b, [e.message for e in errors])   # ... and so does the schema
    scenarios += [bb84.DEFAULT_SCENARIO, decoy_bb84.default_scenario().as_dict()]
    for s in scenarios:
        name = s["protocol"]["name"]
        protocols.get(name).parse_scenario(s)
        errors = list(_validator(f"{name}-scenario").iter_errors(s))
        assert errors == [], (name, [e.message for e in errors])


def _mutations_bb84_block():
    b = dict(_BB84_BLOCK)
    yield {**b, "key_bits": 0}
    yield {**b, "key_bits": 1.5}
    yield {**b, "key_bits": "1000"}
    yield {**b, "key_bits": True}
    yield {k: v for k, v in b.items() if k != "test_errors"}
    yield {**b, "colour": "blue"}
    yield {**b, "eps_total": 1e-9}
    yield {k: v for k, v in b.items() if k != "ec_leak_bits"}
    yield {**b, "ec_efficiency": 1.1}
    yield {**b, "statistics": "gaussian"}
    yield {**b, "overlap": 0.4}
    yield {**b, "closed_by": "quota"}
    yield {**b, "eps_sec": 1.0}


def _mutations_decoy_block():
    with open(os.path.join(ROOT, "examples", "blocks", "decoy_block.json")) as fh:
        b = json.load(fh)
    yield {**b, "ec_leak_bits": -1}
    yield {k: v for k, v in b.items() if k != "key_basis"}
    yield {**b, "key_basis": {"detections": [1, 2, 3]}}
    yield {**b, "test_basis": {**b["test_basis"], "extra": [1, 2, 3]}}
    yield {**b, "intensities": [0.5]}
    yield {**b, "protocol": "bb84-decoy"}
    yield {**b, "pulses": -5}
    yield {**b, "epsilon_split": {"count_estimation": 0.5}}
    yield {**b, "intensity_probabilities": [1.0, 0.05, 0.05]}  # each in the open interval (0, 1)


def _mutations_bb84_scenario():
    s = bb84.DEFAULT_SCENARIO
    yield {**s, "channel": {"qber": 0.5}}
    yield {**s, "channel": {}}
    yield {**s, "budget": {**s["budget"], "detections": 10}}
    yield {**s, "analysis": {"statistics": "serfling", "overlap": 1.0}}
    yield {**s, "extras": {}}
    yield {**s, "reconciliation": {"model": "cascade"}}
    yield {**s, "design": {"optimise_split": "yes"}}


def _mutations_decoy_scenario():
    s = decoy_bb84.default_scenario().as_dict()
    yield {**s, "detector": {**s["detector"], "efficiency": 0.0}}
    yield {**s, "detector": {**s["detector"], "dead_time": 1e-8}}
    yield {**s, "link": {"distance_km": 10.0}}
    yield {**s, "block": {"pulses": 1e10, "key_detections": 100}}
    yield {**s, "block": {"pulses": 1.5e15}}
    yield {**s, "protocol": {**s["protocol"], "intensity_count": 9}}
    yield {k: v for k, v in s.items() if k != "reconciliation"}
    yield {**s, "security": {"eps_sec": 1e-10, "eps_cor": 1e-15, "eps_total": 1e-9}}
    yield {**s, "source": {"repetition_rate_hz": 0.0}}


@pytest.mark.parametrize("name, mutations", [
    ("bb84-block", _mutations_bb84_block), ("decoy-bb84-block", _mutations_decoy_block),
    ("bb84-scenario", _mutations_bb84_scenario), ("decoy-bb84-scenario", _mutations_decoy_scenario)])
def test_schema_rejects_what_the_parser_rejects(name, mutations):
    proto_name, kind = name.rsplit("-", 1)
    proto = protocols.get(proto_name)
    parse = proto.parse_block if kind == "block" else proto.parse_scenario
    v = _validator(name)
    n = 0
    for bad in mutations():
        bad = copy.deepcopy(bad)
        with pytest.raises(InputError):
            parse(bad)
        assert not v.is_valid(bad), bad
        n += 1
    assert n >= 5


# ------------------------------------------------------------------------------------------------------------
# README
# ------------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", PROTOCOLS)
def test_readme_scenario_table_is_the_declared_fields(name):
    with open(os.path.join(ROOT, "README.md")) as fh:
        readme = fh.read()
    m = re.search(rf"<!-- fields {re.escape(name)} scenario:[^\n]*-->\n(.*?)\n<!-- end fields {re.escape(name)} "
                  r"scenario -->", readme, re.S)
    assert m, f"README lacks the generated scenario table of {name}"
    proto = protocols.get(name)
    assert m.group(1) == markdown_table(proto.fields_table()["scenario"])
    listed = re.findall(r"^\| `([a-z_.]+)` \|", m.group(1), re.M)
    assert listed == [s.name for s in proto.scenario_specs]


@pytest.mark.parametrize("name", ["decoy_bb84", "mdi_bb84", "tf_sns"])
def test_scenario_section_checks_name_the_section_or_field(name):
    # The three scenario readers share one section/field check; each malformed mapping is refused naming the
    # section or ``section.field`` with the same wording (common practice, no source).
    parse = importlib.import_module(f"finitekey.protocols.{name}").parse_scenario
    cases = [
        ([1], "scenario", "a table of sections "),
        ({"nosuch": {}}, "nosuch", "one of the sections "),
        ({"protocol": 3}, "protocol", "a table of fields"),
        ({"protocol": {"nosuch": 1}}, "protocol.nosuch", "one of the fields protocol."),
        ({}, "protocol", "a [protocol] section with name"),
        ({"protocol": {}}, "protocol.name", "a value (required field)"),
    ]
    for data, field, allowed in cases:
        with pytest.raises(InputError) as err:
            parse(data)
        assert err.value.field == field, (data, err.value)
        assert err.value.allowed.startswith(allowed), (data, err.value.allowed)


@pytest.mark.parametrize("name, block", [("decoy_bb84", "decoy_block.json"), ("mdi_bb84", "mdi_block.json"),
                                         ("tf_sns", "tf_sns_block.json")])
def test_epsilon_split_checks_name_the_share(name, block):
    # The three block readers share one epsilon_split check; each bad split is refused naming ``epsilon_split``
    # or the share, with the wording each protocol had (common practice, no source).
    parse = importlib.import_module(f"finitekey.protocols.{name}").parse_block
    with open(os.path.join(ROOT, "examples", "blocks", block)) as f:
        base = json.load(f)
    base.pop("epsilon_split", None)
    terms = importlib.import_module(f"finitekey.protocols.{name}.block").SECRECY_TERMS
    if name == "mdi_bb84" and not base.get("joint_constraints"):
        terms = tuple(t for t in terms if t != "joint_estimation")
    even = {t: 1 / len(terms) for t in terms}
    missing = "a share in (0, 1) for every secrecy term" + (": " + ", ".join(terms) if name == "mdi_bb84" else "")
    cases = [
        (3, "epsilon_split", "a table of shares for " + ", ".join(terms)),
        ({**even, "nosuch": 0.1}, "epsilon_split.nosuch", "one of " + ", ".join(terms)),
        ({t: v for t, v in even.items() if t != terms[-1]}, f"epsilon_split.{terms[-1]}", missing),
        ({**even, terms[0]: 1.5}, f"epsilon_split.{terms[0]}", None),
        ({t: 0.9 / len(terms) for t in terms}, "epsilon_split", "shares summing to 1"),
    ]
    assert parse({**base, "epsilon_split": even}).epsilon_split == pytest.approx(even)
    for split, field, allowed in cases:
        with pytest.raises(InputError) as err:
            parse({**base, "epsilon_split": split})
        assert err.value.field == field, (split, err.value)
        if allowed is not None:
            assert err.value.allowed.startswith(allowed), (split, err.value.allowed)
            if field != "epsilon_split.nosuch":
                assert err.value.allowed == allowed, (split, err.value.allowed)


@pytest.mark.parametrize("name", ["bb84", "described"])
def test_schema_scenario_readers_name_the_section_or_field(name):
    # BB84 and the described protocol read their sections with one shared reader; the wording of each refusal
    # is pinned here (common practice, no source).
    parse = importlib.import_module(f"finitekey.protocols.{name}").parse_scenario
    cases = [
        ([1], "scenario", "a table of sections: "),
        ({"nosuch": {}}, "nosuch", "one of the sections: "),
        ({"protocol": 3}, "protocol", "a TOML table [protocol]"),
        ({"protocol": {"nosuch": 1}}, "protocol.nosuch", "one of: "),
    ]
    for data, field, allowed in cases:
        with pytest.raises(InputError) as err:
            parse(data)
        assert err.value.field == field, (data, err.value)
        assert err.value.allowed.startswith(allowed), (data, err.value.allowed)
