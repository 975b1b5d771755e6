"""Warnings for defaults that probably hide a physical effect (declared as data in DEFAULT_WARNINGS).

The 1 MHz threshold is common practice, no source (gated detectors' dead times of 10 ns to 10 us, from memory);
the tests check the mechanism: which rule fires, once, naming the field, in text and JSON outputs.
"""

import json
import os

import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.protocols import decoy_bb84
from finitekey.protocols._spec import DefaultWarning

DECOY = protocols.get("decoy-bb84")
ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def test_rule_fires_only_at_its_value_and_above_its_threshold():
    rule = DefaultWarning("detector.dead_time_s", 0.0, "detection_rate_hz", 1e6, "detections per second", "why")
    assert rule.check(0.0, {"detection_rate_hz": 2e6}).startswith("detector.dead_time_s = 0 ")
    assert rule.check(1e-8, {"detection_rate_hz": 2e6}) is None
    assert rule.check(0.0, {"detection_rate_hz": 5e5}) is None
    assert rule.check(0.0, {}) is None


def test_every_rule_names_a_declared_scenario_field():
    declared = {s.name: s for s in decoy_bb84.SCENARIO_SPECS}
    for rule in decoy_bb84.DEFAULT_WARNINGS:
        assert rule.field in declared
        assert declared[rule.field].default == rule.value  # the rule is about the declared default


@pytest.fixture(scope="module")
def default_design():
    return DECOY.design(DECOY.default_scenario())


def test_default_scenario_at_6_mhz_warns_about_dead_time(default_design):
    d = default_design
    counts = d.expected_counts
    rate = (sum(counts["key_basis.detections"]) + sum(counts["test_basis.detections"])) / d.block_fill_time_s
    assert rate > 1e6  # 1 GHz, 50 km of 0.2 dB/km, 10% detector: about 6e6 clicks per second
    fields = [w.split(" = ")[0] for w in d.warnings]
    assert fields == ["detector.dead_time_s", "detector.afterpulse_probability"]
    assert d.to_dict()["warnings"] == list(d.warnings)


def test_no_warning_when_the_effect_is_given_or_the_rate_is_low():
    sc = DECOY.with_field(DECOY.default_scenario(), "detector.dead_time_s", 1e-8)
    sc = DECOY.with_field(sc, "detector.afterpulse_probability", 0.01)
    assert DECOY.design(sc).warnings == ()
    slow = DECOY.with_field(DECOY.default_scenario(), "source.repetition_rate_hz", 1e7)  # about 6e4 clicks/s
    assert DECOY.design(slow).warnings == ()


def test_design_text_and_json_carry_the_warning_once(capsys):
    assert main(["design"]) == 0
    out = capsys.readouterr().out
    lines = [ln for ln in out.splitlines() if ln.startswith("warning:")]
    assert len(lines) == 2 and lines[0].startswith("warning: detector.dead_time_s = 0")
    assert main(["design", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [w.split(" = ")[0] for w in doc["warnings"]] == ["detector.dead_time_s", "detector.afterpulse_probability"]


def test_table_prints_one_warning_line_per_rule_over_all_rows(capsys):
    # examples/metro_datacentre.toml gives afterpulse_probability but no dead time: one rule fires
    path = os.path.join(ROOT, "examples", "metro_datacentre.toml")
    assert main(["table", path, "--vary", "block.pulses=1e9,1e10", "--format", "text"]) == 0
    out = capsys.readouterr().out
    lines = [ln for ln in out.splitlines() if ln.startswith("warning:")]
    assert len(lines) == 1 and lines[0].startswith("warning: detector.dead_time_s = 0")


def test_report_lists_the_warning_once(tmp_path):
    path = os.path.join(ROOT, "examples", "metro_datacentre.toml")
    out = tmp_path / "r.html"
    assert main(["report", path, "--no-sweep", "-o", str(out)]) == 0
    assert out.read_text().count("warning: detector.dead_time_s = 0") == 1
