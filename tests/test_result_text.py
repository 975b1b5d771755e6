"""Results: ``repr`` is one short line; ``str``/``summary()`` give every field and the caution.

Common practice, no source: a repr that prints kilobytes (the default dataclass repr with assumptions, formula
and nested designs) makes results unusable at an interactive prompt or in logs.
"""

import json
from pathlib import Path

import pytest

from finitekey import protocols
from finitekey.cautions import CAUTION
from finitekey.protocols import BlockTarget

ROOT = Path(__file__).resolve().parents[1]
BLOCK = {"protocol": "bb84", "key_bits": 1000000, "test_bits": 50000, "test_errors": 1250,
         "ec_leak_bits": 190000, "eps_sec": 1e-10, "eps_cor": 1e-15}


def _one_line(text: str, *needles):
    assert "\n" not in text and len(text) < 260, text
    for n in needles:
        assert n in text, (n, text)


@pytest.fixture(scope="module")
def bb84_results():
    p = protocols.get("bb84")
    key = p.key_length(p.parse_block(BLOCK))
    no_key = p.key_length(p.parse_block(dict(BLOCK, ec_leak_bits=900000)))
    sc = p.default_scenario()
    return key, no_key, p.design(sc), p.blocksize(sc, BlockTarget.parse("positive"))


def test_key_length_repr_is_one_line_with_protocol_length_and_eps(bb84_results):
    key, no_key, _, _ = bb84_results
    _one_line(repr(key), "KeyLengthResult(", "'bb84'", f"secret_key_length={key.secret_key_length}",
              "eps_sec=1e-10", "eps_cor=1e-15", "'key'")
    _one_line(repr(no_key), "secret_key_length=0", "no key: ")


def test_key_length_summary_has_every_field_and_the_caution(bb84_results):
    key = bb84_results[0]
    text = key.summary()
    assert str(key) == text and text.splitlines()[0] == repr(key)
    for name in [t.name for t in key.ledger.terms] + list(key.terms) + list(key.estimates):
        assert name in text
    for a in key.assumptions:
        assert a in text
    assert text.rstrip().endswith(CAUTION)


def test_design_and_blocksize_repr(bb84_results):
    _, _, design, size = bb84_results
    _one_line(repr(design), "DesignResult(", "'bb84'", f"secret_key_length={design.expected.secret_key_length}",
              "eps_sec=")
    _one_line(repr(size), "BlockSizeResult(", f"size={size.size}", "target='positive'", "eps_sec=")
    for r in (design, size):
        assert str(r).splitlines()[0] == repr(r) and CAUTION in str(r)
        assert len(str(r).splitlines()) > 10


def test_reach_repr():
    p = protocols.get("decoy-bb84")
    sc = p.with_field(p.default_scenario(), "block.pulses", 1e8)
    r = p.reach(sc, "hoeffding")
    _one_line(repr(r), "ReachResult(", "reach_km=", "status=")
    assert CAUTION in r.summary()


def test_summary_values_match_to_dict(bb84_results):
    key = bb84_results[0]
    d = key.to_dict()
    assert f"secret_key_length: {d['secret_key_length']}" in key.summary()
    assert json.loads(json.dumps(d)) == d  # to_dict itself unchanged: still JSON-ready
