"""Decoy-state designs by post-processing block size: ``block.key_detections`` (expected key-basis detections
per block) instead of ``block.pulses``, and block sizes answered in pulses or in key-basis detections.

The block is still closed after a number of pulses fixed before it (the block rule); the design chooses that
number with the free parameters.  The checks compare with the expected-count model of finitekey.channel
(N p_k q_X^2 D_k live, Lim et al. 2014) and with the design at the equivalent number of pulses.
"""

import json
import math

import pytest

from finitekey.cautions import CAUTION
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.protocols.decoy_bb84 import design as DD
from finitekey.protocols import BlockTarget, get
from finitekey.protocols import decoy_bb84 as D


def _data(block):
    d = D.default_scenario().as_dict()
    d["block"] = block
    return d


# ---- parsing -----------------------------------------------------------------------------------------------
def test_either_field_is_accepted():
    sp = D.parse_scenario(_data({"pulses": 1e10}))
    assert (sp.pulses, sp.key_detections, sp.size_kind) == (1e10, None, "pulses")
    sk = D.parse_scenario(_data({"key_detections": 1000000}))
    assert (sk.pulses, sk.key_detections, sk.size_kind) == (None, 1000000, "key_detections")
    assert isinstance(sk.key_detections, int)
    assert D.parse_scenario(_data({"key_detections": 1e6})).key_detections == 1000000  # integral float
    # the echo keeps the form given, and parses back to the same scenario
    assert sk.as_dict()["block"] == {"key_detections": 1000000}
    assert D.parse_scenario(sk.as_dict()) == sk


def test_both_fields_refused_in_one_line_naming_both():
    with pytest.raises(InputError) as info:
        D.parse_scenario(_data({"pulses": 1e10, "key_detections": 1000000}))
    msg = str(info.value)
    assert "block.pulses" in msg and "block.key_detections" in msg and "\n" not in msg


def test_neither_field_refused_naming_both():
    with pytest.raises(InputError) as info:
        D.parse_scenario(_data({}))
    assert info.value.field == "block.pulses" and "block.key_detections" in str(info.value)


@pytest.mark.parametrize("value", [1e6 + 0.5, 0, -5, "many", [1000000], True, float("nan"), 1e16])
def test_key_detections_must_be_a_positive_integer(value):
    with pytest.raises(InputError) as info:
        D.parse_scenario(_data({"key_detections": value}))
    assert info.value.field == "block.key_detections" and "an integer in [1, " in str(info.value)


def test_with_field_switches_between_the_two_forms():
    s = D.default_scenario()
    k = D.with_field(s, "block.key_detections", 500000)
    assert (k.pulses, k.key_detections) == (None, 500000)
    back = D.with_field(k, "block.pulses", 1e9)
    assert (back.pulses, back.key_detections) == (1e9, None)
    assert "block.key_detections" in D.scenario_fields()


# ---- design ------------------------------------------------------------------------------------------------
def _fixed(s, design):
    """``s`` with the free parameters of ``design`` fixed (nothing left to optimise under hoeffding)."""
    p = design.parameters
    s = D.with_field(s, "protocol.intensities", p["intensities"])
    s = D.with_field(s, "protocol.intensity_probabilities", p["intensity_probabilities"])
    return D.with_field(s, "protocol.key_basis_probability", p["key_basis_probability"])


@pytest.mark.parametrize("target", [100000, 10**8])
def test_design_meets_the_detection_target_and_equals_the_design_at_its_pulses(target):
    s = D.with_field(D.default_scenario(), "block.key_detections", target)
    r = DD.design(s, "hoeffding")
    assert r.expected.secret_key_length > 0
    ec = r.expected_counts
    N = ec["pulses"]
    assert N == int(N) and r.parameters["block_pulses"] == N
    p = r.parameters
    # expected key-basis detections per pulse from the model (finitekey.channel, N p_k q_X^2 D_k live)
    per_pulse = sum(s.model.expected_counts(1.0, p["intensities"], p["intensity_probabilities"],
                                            p["key_basis_probability"]).key_detections)
    assert abs(ec["expected_key_detections"] - target) <= per_pulse / 2 + 1e-9 * target   # N rounded to a pulse
    assert ec["expected_key_detections"] == pytest.approx(N * per_pulse, rel=1e-12)
    rounded = sum(int(round(x)) for x in ec["key_basis.detections"])
    assert abs(rounded - target) <= len(p["intensities"])          # plus the rounding of each count
    assert ec["key_detections_target"] == target
    # the same parameters at that many pulses give the same certified key (and rates, fill time)
    at_pulses = DD.design(_fixed(s, r).with_pulses(N), "hoeffding")
    assert at_pulses.expected.secret_key_length == r.expected.secret_key_length
    assert at_pulses.secret_key_rate_per_signal == r.secret_key_rate_per_signal
    assert at_pulses.block_fill_time_s == r.block_fill_time_s == N / 1e9
    # the result says how the block is closed
    note = " ".join(r.notes)
    assert f"N = {int(N)} pulses" in note and "fixed before the block" in note and "not closed" in note
    assert r.to_dict()["notes"] == list(r.notes)
    assert at_pulses.notes == ()


def test_key_detection_design_maximises_the_key_per_pulse():
    # At a fixed number of key-basis detections, the design's key per pulse is at least that of the parameters
    # another design chose (the pulses-mode design at 1e10 pulses), and it differs from maximising the key
    # per block (which would buy test data with ever more pulses).
    base = D.default_scenario()
    other = DD.design(base, "hoeffding")
    T = int(round(other.expected_counts["expected_key_detections"]))
    s = D.with_field(base, "block.key_detections", T)
    free = DD.design(s, "hoeffding")
    fixed = DD.design(_fixed(s, other), "hoeffding")
    assert fixed.expected.secret_key_length > 0
    assert free.secret_key_rate_per_signal >= fixed.secret_key_rate_per_signal
    assert free.expected_counts["pulses"] < 2 * fixed.expected_counts["pulses"]


def test_exact_design_with_key_detections_is_certified_at_its_counts():
    s = D.with_field(D.default_scenario(), "block.key_detections", 10**6)
    r = DD.design(s)
    p, ec = r.parameters, r.expected_counts
    blk = D.parse_block({"intensities": p["intensities"], "intensity_probabilities": p["intensity_probabilities"],
                         "key_basis": {"detections": [int(round(x)) for x in ec["key_basis.detections"]],
                                       "errors": [int(round(x)) for x in ec["key_basis.errors"]]},
                         "test_basis": {"detections": [int(round(x)) for x in ec["test_basis.detections"]],
                                        "errors": [int(round(x)) for x in ec["test_basis.errors"]]},
                         "ec_leak_bits": ec["ec_leak_bits"], "eps_sec": 1e-10, "eps_cor": 1e-15,
                         "epsilon_split": dict(p["epsilon_split"])})
    assert D.key_length(blk).secret_key_length == r.expected.secret_key_length > 0
    assert r.secret_key_rate_per_signal == r.expected.secret_key_length / ec["pulses"]


def test_no_key_design_stays_within_the_largest_block():
    # Found while writing the reach check: with no key anywhere the search drifted to q_X ~ 3e-4, a block of
    # ~1e19 pulses, and the certified stage refused it; the objective now penalises blocks beyond 1e15 pulses.
    s = D.with_field(D.with_field(D.default_scenario(), "block.key_detections", 10**7), "link.distance_km", 200.0)
    r = DD.design(s, "hoeffding")
    assert r.expected.secret_key_length == 0 and not r.status.key
    assert r.expected_counts["pulses"] <= DD.MAX_PULSES


@pytest.mark.slow
def test_reach_with_key_detections_keeps_the_target():
    s = D.with_field(D.default_scenario(), "block.key_detections", 10**7)
    res = DD.reach(s, "hoeffding", tolerance_km=5.0)
    assert res.reach_km is not None and res.reach_km > 50.0
    assert res.at_reach.expected_counts["key_detections_target"] == 10**7


# ---- block size --------------------------------------------------------------------------------------------
def _fixed_scenario():
    """Every free parameter fixed (hoeffding: nothing to optimise), so a block-size search is fast."""
    s = D.default_scenario()
    return _fixed(s, DD.design(s, "hoeffding"))


def test_blocksize_in_both_units_is_consistent():
    s = _fixed_scenario()
    target = BlockTarget.parse("bits=100000")
    by_pulses = DD.blocksize(s, target, "hoeffding")                    # the scenario's unit: pulses
    assert by_pulses.size_kind == "pulses"
    T0 = int(round(by_pulses.design.expected_counts["expected_key_detections"]))
    sk = D.with_field(s, "block.key_detections", T0 * 3)                 # a scenario in key detections
    by_det = DD.blocksize(sk, target, "hoeffding")                      # its unit: key detections
    assert by_det.size_kind == "key_detections"
    expected_at_pulse_answer = by_pulses.design.expected_counts["expected_key_detections"]
    assert abs(by_det.size - expected_at_pulse_answer) <= by_det.resolution + 1
    assert abs(by_det.design.expected_counts["pulses"] - by_pulses.size) <= by_pulses.resolution + 1
    assert by_det.design.expected.secret_key_length >= 100000
    assert any("fixed before the block" in n for n in by_det.design.notes)
    # the unit may also be asked for explicitly, either way round, with the same spelling as the CLI
    again = DD.blocksize(s, target, "hoeffding", unit="key-detections")
    assert again.size_kind == "key_detections"
    assert abs(again.size - expected_at_pulse_answer) <= again.resolution + 1
    as_pulses = DD.blocksize(sk, target, "hoeffding", unit="pulses")
    assert as_pulses.size_kind == "pulses" and abs(as_pulses.size - by_pulses.size) <= by_pulses.resolution + 1
    # the resolution is the bracket the bisection left (about 1e-3 in log10, i.e. 0.23%)
    assert 0 < by_pulses.resolution <= 0.003 * by_pulses.size


@pytest.mark.slow
def test_blocksize_in_both_units_is_consistent_with_free_parameters():
    s = D.default_scenario()
    target = BlockTarget.parse("positive")
    by_pulses = DD.blocksize(s, target, "hoeffding")
    by_det = DD.blocksize(s, target, "hoeffding", unit="key_detections")
    assert abs(by_det.size - by_pulses.design.expected_counts["expected_key_detections"]) <= by_det.resolution + 1


def test_blocksize_unit_errors():
    s = _fixed_scenario()
    with pytest.raises(InputError) as info:
        get("decoy-bb84").blocksize(s, BlockTarget.parse("positive"), "hoeffding", unit="frames")
    assert info.value.field == "unit"
    bb = get("bb84")
    with pytest.raises(InputError) as info:
        bb.blocksize(bb.default_scenario(), BlockTarget.parse("positive"), unit="pulses")
    assert info.value.field == "unit" and "signals" in str(info.value)


# ---- CLI ---------------------------------------------------------------------------------------------------
TOML = """\
[protocol]
name = "decoy-bb84"
intensities = [0.55, 0.2, 0.0002]
intensity_probabilities = [0.75, 0.15, 0.1]
key_basis_probability = 0.75
[link]
distance_km = 50.0
fiber_loss_db_per_km = 0.2
[detector]
efficiency = 0.1
dark_count_probability = 6e-7
[source]
repetition_rate_hz = 1e9
[block]
{block}
[security]
eps_sec = 1e-10
eps_cor = 1e-15
[reconciliation]
efficiency = 1.16
"""


def _write(tmp_path, block, name="s.toml"):
    p = tmp_path / name
    p.write_text(TOML.format(block=block))
    return str(p)


def _one_line_error(capsys, argv, *needles):
    rc = main(argv)
    out, err = capsys.readouterr()
    assert rc == 2 and out == "" and "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    for n in needles:
        assert n in lines[0], (n, lines[0])


@pytest.mark.parametrize("block, needles", [
    ("pulses = 1e10\nkey_detections = 1000000", ("block.pulses", "block.key_detections")),
    ("key_detections = 1000000.5", ("block.key_detections", "an integer")),
    ("key_detections = 0", ("block.key_detections",)),
    ("", ("block.pulses", "block.key_detections")),
])
def test_cli_bad_block_exit_2(tmp_path, capsys, block, needles):
    path = _write(tmp_path, block)
    for argv in (["design", path], ["blocksize", path, "--target", "positive"]):
        _one_line_error(capsys, argv, *needles)


def test_cli_bad_unit_exit_2(tmp_path, capsys):
    path = _write(tmp_path, "key_detections = 1000000")
    _one_line_error(capsys, ["blocksize", path, "--target", "positive", "--unit", "frames"], "unit", "frames")


def test_cli_design_and_blocksize_with_key_detections(tmp_path, capsys):
    path = _write(tmp_path, "key_detections = 1000000")
    assert main(["design", path, "--statistics", "hoeffding", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["scenario"]["block"] == {"key_detections": 1000000}
    assert abs(d["expected_counts"]["expected_key_detections"] - 1e6) < 1.0
    assert d["parameters"]["block_pulses"] == d["expected_counts"]["pulses"]
    assert main(["design", path, "--statistics", "hoeffding"]) == 0
    out = capsys.readouterr().out
    assert "Note: The block is closed after N = " in out and CAUTION in out
    assert main(["blocksize", path, "--target", "bits=100000", "--statistics", "hoeffding"]) == 0
    out = capsys.readouterr().out
    assert "key_detections" in out and "pulses per block" in out and CAUTION in out
    assert main(["blocksize", path, "--target", "bits=100000", "--statistics", "hoeffding", "--unit", "pulses",
                 "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["size_kind"] == "pulses"


def test_cli_table_varies_key_detections(tmp_path, capsys):
    path = _write(tmp_path, "pulses = 1e10")
    assert main(["table", path, "--vary", "block.key_detections=100000,1000000", "--statistics", "hoeffding",
                 "--format", "json", "--jobs", "1"]) == 0
    out = capsys.readouterr().out
    d = json.loads(out)
    rows = d["rows"]
    assert [r["point"]["block.key_detections"] for r in rows] == [100000, 1000000]
    for r in rows:
        ec = r["design"]["expected_counts"]
        assert abs(ec["expected_key_detections"] - r["point"]["block.key_detections"]) < 1.0
        assert r["design"]["scenario"]["block"] == {"key_detections": r["point"]["block.key_detections"]}
    assert math.isclose(rows[1]["design"]["expected_counts"]["pulses"] / rows[0]["design"]["expected_counts"]["pulses"],
                        10.0, rel_tol=1e-3)   # fixed parameters: pulses scale with the target


def test_report_lists_how_the_block_closes(tmp_path):
    from finitekey.report.build import build_report
    from finitekey.report.html import to_html
    from finitekey.report.sweep import load_scenario
    rep = build_report(load_scenario(_write(tmp_path, "key_detections = 1000000")), vary=[], statistics="hoeffding")
    html = to_html(rep)
    assert any("The block is closed after N = " in a for a in rep.assumptions)
    assert "The block is closed after N = " in html and CAUTION in html
