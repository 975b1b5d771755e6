"""Wrong, mislabelled or oddly encoded inputs: every one ends in one line naming the field (exit 2), never a
traceback; and the two protocols accept the same common fields with the same meaning.

Expected values here are the project's own rules (field names, declared ranges), not outside numbers; where a
number is compared, its source is named beside the check.
"""

import copy
import json
import math

import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.files import read_json, read_records, read_toml

BB84_BLOCK = {"protocol": "bb84", "key_bits": 1000000, "test_bits": 100000, "test_errors": 2000,
              "ec_leak_bits": 160000, "eps_sec": 1e-10, "eps_cor": 1e-15}

DECOY_BLOCK = {"protocol": "decoy-bb84", "intensities": [0.6184, 0.0946, 0.0002],
               "intensity_probabilities": [0.9008, 0.0913, 0.0079],
               "key_basis": {"detections": [173646385, 2719648, 563], "errors": [2926542, 46159, 42]},
               "test_basis": {"detections": [1070573, 16767, 3], "errors": [18043, 285, 0]},
               "ec_leak_bits": 24376420, "eps_sec": 1e-10, "eps_cor": 1e-15}

DECOY_TOML = """\
[protocol]
name = "decoy-bb84"
[link]
distance_km = {distance}
fiber_loss_db_per_km = 0.2
[detector]
efficiency = 0.1
dark_count_probability = 6e-7
[block]
pulses = {pulses}
[security]
{security}
[reconciliation]
efficiency = 1.16
"""

BB84_TOML = """\
[protocol]
name = "bb84"
[channel]
qber = {qber}
[budget]
detections = {detections}
[security]
{security}
"""

SECURITY = "eps_sec = 1e-10\neps_cor = 1e-15"


def decoy_toml(distance="50.0", pulses="1e10", security=SECURITY):
    return DECOY_TOML.format(distance=distance, pulses=pulses, security=security)


def bb84_toml(qber="0.02", detections="1000000", security=SECURITY):
    return BB84_TOML.format(qber=qber, detections=detections, security=security)


def write(tmp_path, name, text, encoding="utf-8"):
    p = tmp_path / name
    p.write_text(text, encoding=encoding)
    return str(p)


def run(capsys, argv):
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def one_line_error(rc, out, err, *needles):
    """Exit 2, nothing on stdout, exactly one line on stderr, containing every needle."""
    assert rc == 2, (rc, out, err)
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for n in needles:
        assert n in lines[0], (n, lines[0])
    return lines[0]


# --- a list or table where one number is expected -------------------------------------------------------------
@pytest.mark.parametrize("text, field", [
    (decoy_toml(distance="[1, 2]"), "link.distance_km"),
    (decoy_toml(pulses="[1e10]"), "block.pulses"),
    (decoy_toml(security="eps_sec = [1e-10]\neps_cor = 1e-15"), "security.eps_sec"),
    (decoy_toml(distance="{ a = 1 }"), "link.distance_km"),
    (bb84_toml(qber="[0.01, 0.02]"), "channel.qber"),
    (bb84_toml(detections="[1000000]"), "budget.detections"),
])
def test_list_where_a_number_is_expected_is_one_line(tmp_path, capsys, text, field):
    path = write(tmp_path, "s.toml", text)
    line = one_line_error(*run(capsys, ["design", path]), field, "not a list")
    assert "is not allowed" in line


@pytest.mark.parametrize("proto_block, path_to, value", [
    (BB84_BLOCK, ("key_bits",), [1, 2]),
    (BB84_BLOCK, ("eps_sec",), [1e-10]),
    (DECOY_BLOCK, ("ec_leak_bits",), [1, 2]),
    (DECOY_BLOCK, ("key_basis", "detections", 0), [1, 2]),
    (DECOY_BLOCK, ("intensities", 1), [0.1]),
    (DECOY_BLOCK, ("intensity_probabilities", 0), {"a": 1}),
])
def test_block_field_holding_a_list_is_one_line(tmp_path, capsys, proto_block, path_to, value):
    block = copy.deepcopy(proto_block)
    target = block
    for key in path_to[:-1]:
        target = target[key]
    target[path_to[-1]] = value
    path = write(tmp_path, "b.json", json.dumps(block))
    field = path_to[0] + "".join(f".{k}" if isinstance(k, str) else f"[{k}]" for k in path_to[1:])
    one_line_error(*run(capsys, ["keylength", path]), field)


# --- None never shows in a message ----------------------------------------------------------------------------
def test_missing_field_says_missing_not_none(tmp_path, capsys):
    block = dict(BB84_BLOCK)
    del block["test_errors"]
    path = write(tmp_path, "b.json", json.dumps(block))
    line = one_line_error(*run(capsys, ["keylength", path]), "test_errors is missing")
    assert "None" not in line and "(missing field)" not in line


@pytest.mark.parametrize("field, allowed", [("x", "a number (missing field)"), ("x", "a value (required field)"),
                                            ("x", "a number")])
def test_input_error_formats_none_as_missing(field, allowed):
    text = str(InputError(field, None, allowed))
    assert text == "x is missing; expected " + allowed.split(" (")[0]


def test_missing_security_fields_in_both_protocols(tmp_path, capsys):
    for text, field in ((decoy_toml(security="eps_sec = 1e-10"), "security.eps_cor"),
                        (bb84_toml(security="eps_cor = 1e-15"), "security.eps_sec")):
        path = write(tmp_path, "s.toml", text)
        line = one_line_error(*run(capsys, ["design", path]), f"{field} is missing")
        assert "None" not in line


# --- tiny epsilons are named as given, with the value as given ------------------------------------------------
@pytest.mark.parametrize("text, field", [
    (decoy_toml(security="eps_sec = 5e-324\neps_cor = 1e-15"), "security.eps_sec"),
    (bb84_toml(security="eps_sec = 5e-324\neps_cor = 1e-15"), "security.eps_sec"),
    (decoy_toml(security="eps_sec = 1e-10\neps_cor = 5e-324"), "security.eps_cor"),
    (bb84_toml(security="eps_total = 5e-324"), "security.eps_total"),
])
def test_subnormal_epsilon_names_the_field_and_value_as_given(tmp_path, capsys, text, field):
    path = write(tmp_path, "s.toml", text)
    line = one_line_error(*run(capsys, ["design", path]), f"{field} = 5e-324 is not allowed")
    assert float(line.split(" = ")[1].split(" ")[0]) == 5e-324  # the value shown round-trips


@pytest.mark.parametrize("block", [dict(BB84_BLOCK, eps_sec=5e-324), dict(DECOY_BLOCK, eps_sec=5e-324)])
def test_subnormal_epsilon_in_a_block(tmp_path, capsys, block):
    path = write(tmp_path, "b.json", json.dumps(block))
    one_line_error(*run(capsys, ["keylength", path]), "eps_sec = 5e-324 is not allowed")


def test_eps_cor_share_that_underflows_names_the_share():
    block = {k: v for k, v in BB84_BLOCK.items() if k not in ("eps_sec", "eps_cor")}
    with pytest.raises(InputError) as info:
        protocols.get("bb84").parse_block(block | {"eps_total": 1e-10, "eps_cor_share": 1e-300})
    assert info.value.field == "eps_cor_share" and info.value.value == 1e-300


# --- counts are integers ----------------------------------------------------------------------------------------
def test_fractional_pulses_refused_integral_float_accepted(tmp_path, capsys):
    bad = write(tmp_path, "bad.toml", decoy_toml(pulses="12345.6"))
    one_line_error(*run(capsys, ["design", bad]), "block.pulses = 12345.6", "an integer in [1, 1e+15]")
    sc = protocols.get("decoy-bb84").parse_scenario(read_toml(write(tmp_path, "ok.toml", decoy_toml(pulses="1e10"))))
    assert sc.pulses == 1e10


@pytest.mark.parametrize("block, field", [(dict(BB84_BLOCK, key_bits=1000000.5), "key_bits"),
                                          (dict(DECOY_BLOCK, pulses=1e9 + 0.5), "pulses"),
                                          (dict(DECOY_BLOCK, ec_leak_bits=24376420.25), "ec_leak_bits")])
def test_fractional_block_counts_refused(block, field):
    with pytest.raises(InputError) as info:
        protocols.get(block["protocol"]).parse_block(block)
    assert info.value.field == field


# --- UTF-8 byte-order mark --------------------------------------------------------------------------------------
def test_byte_order_mark_is_accepted_in_every_input_format(tmp_path):
    bom = "\ufeff"
    assert read_json(write(tmp_path, "b.json", bom + json.dumps(BB84_BLOCK))) == BB84_BLOCK
    recs, batch = read_records(write(tmp_path, "b.jsonl", bom + json.dumps(BB84_BLOCK) + "\n"))
    assert batch and recs[0][1] == BB84_BLOCK
    header = ",".join(BB84_BLOCK)
    recs, _ = read_records(write(tmp_path, "b.csv", bom + header + "\n" + ",".join(map(str, BB84_BLOCK.values()))))
    assert recs[0][1]["protocol"] == "bb84" and recs[0][1]["key_bits"] == 1000000
    assert read_toml(write(tmp_path, "s.toml", bom + bb84_toml()))["channel"]["qber"] == 0.02


def test_byte_order_mark_json_block_through_the_cli(tmp_path, capsys):
    path = write(tmp_path, "b.json", json.dumps(BB84_BLOCK), encoding="utf-8-sig")
    rc, out, err = run(capsys, ["keylength", path, "--json"])
    assert rc == 0 and err == "" and json.loads(out)["secret_key_length"] > 0


def test_csv_label_stays_text(tmp_path):
    header = ",".join(BB84_BLOCK) + ",label"
    recs, _ = read_records(write(tmp_path, "b.csv", header + "\n" + ",".join(map(str, BB84_BLOCK.values())) + ",0001"))
    assert recs[0][1]["label"] == "0001"
    assert protocols.get("bb84").parse_block(recs[0][1]).label == "0001"


# --- a name given twice is refused, not silently the last -------------------------------------------------------
def test_repeated_json_key_is_refused(tmp_path, capsys):
    text = json.dumps(BB84_BLOCK)[:-1] + ', "test_errors": 5}'
    path = write(tmp_path, "b.json", text)
    one_line_error(*run(capsys, ["keylength", path]), "test_errors", "given once")
    path = write(tmp_path, "b.jsonl", json.dumps(BB84_BLOCK) + "\n" + text + "\n")
    one_line_error(*run(capsys, ["keylength", path]), "line 2", "test_errors", "given once")


def test_repeated_csv_column_is_refused(tmp_path, capsys):
    header = ",".join(BB84_BLOCK) + ",test_errors"
    row = ",".join(map(str, BB84_BLOCK.values())) + ",5"
    path = write(tmp_path, "b.csv", header + "\n" + row + "\n")
    one_line_error(*run(capsys, ["keylength", path]), "test_errors", "once")


# --- parity of the two protocols --------------------------------------------------------------------------------
def test_decoy_scenario_accepts_label_and_eps_total_like_bb84(tmp_path):
    bb84 = protocols.get("bb84").parse_scenario(read_toml(write(
        tmp_path, "b.toml", bb84_toml(security="eps_total = 1e-9\neps_cor_share = 0.2"))))
    text = decoy_toml(security="eps_total = 1e-9\neps_cor_share = 0.2").replace(
        'name = "decoy-bb84"', 'name = "decoy-bb84"\nlabel = "test link"')
    decoy = protocols.get("decoy-bb84").parse_scenario(read_toml(write(tmp_path, "d.toml", text)))
    assert (decoy.eps_sec, decoy.eps_cor) == (bb84.eps_sec, bb84.eps_cor)
    assert decoy.eps_sec + decoy.eps_cor <= 1e-9 and math.isclose(decoy.eps_cor, 2e-10)
    assert decoy.label == "test link" and decoy.as_dict()["protocol"]["label"] == "test link"
    # a copy with one field changed keeps the total form
    again = protocols.get("decoy-bb84").with_field(decoy, "link.distance_km", 20.0)
    assert (again.eps_sec, again.eps_cor) == (decoy.eps_sec, decoy.eps_cor)
    changed = protocols.get("decoy-bb84").with_field(decoy, "security.eps_sec", 1e-12)
    assert changed.eps_sec == 1e-12 and changed.eps_cor == decoy.eps_cor


def test_decoy_block_accepts_eps_total_like_bb84():
    common = {"eps_total": 1e-9}
    bb = protocols.get("bb84").parse_block({k: v for k, v in BB84_BLOCK.items() if k not in ("eps_sec", "eps_cor")}
                                           | common)
    dc = protocols.get("decoy-bb84").parse_block({k: v for k, v in DECOY_BLOCK.items()
                                                  if k not in ("eps_sec", "eps_cor")} | common)
    assert (dc.eps_sec, dc.eps_cor) == (bb.eps_sec, bb.eps_cor)
    with pytest.raises(InputError) as info:
        protocols.get("decoy-bb84").parse_block(dict(DECOY_BLOCK, eps_total=1e-9))
    assert info.value.field == "eps_sec"


# --- command-line usage errors: one line, the option named once, exit 2 ----------------------------------------
@pytest.mark.parametrize("argv, needles", [
    (["bound", "hoeffding", "n=10", "--eps", "1e-3", "--dps", "abc"], ["--dps = 'abc' is not allowed", "[15, 1000]"]),
    (["bound", "hoeffding", "n=10", "--eps", "1e-3", "--dps", "0"], ["--dps = '0' is not allowed"]),
    (["bound", "hoeffding", "n=10", "--eps", "1e-3", "--dps", "1e6"], ["--dps = '1e6' is not allowed"]),
    (["keylength"], ["block is missing"]),
    (["bound", "hoeffding", "--eps", "1", "--deviation", "2"], ["--deviation", "--eps"]),
    (["table", "x.toml", "--jobs", "0"], ["--jobs = '0' is not allowed"]),
    (["table", "x.toml", "--format", "xls"], ["--format = 'xls' is not allowed", "csv"]),
    (["nosuch"], ["'nosuch' is not allowed", "keylength"]),
    (["keylength", "x.json", "--bogus"], ["--bogus"]),
])
def test_usage_errors_are_one_line(capsys, argv, needles):
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    assert info.value.code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "usage:" not in err and "--help" in lines[0]
    for n in needles:
        assert n in lines[0], (n, lines[0])
    if " = " in needles[0]:  # the option is named once (argparse alone says "argument --jobs: --jobs = ...")
        option = needles[0].split(" = ")[0]
        assert lines[0].count(option + " ") == 1, lines[0]


def test_dps_inside_its_range_still_works(capsys):
    rc, out, err = run(capsys, ["bound", "hoeffding", "n=1000", "--eps", "1e-3", "--dps", "30", "--json"])
    assert rc == 0, err
    d = json.loads(out)
    # mpmath at 30 digits against the float64 value of the same bound (agreement to float precision)
    assert math.isclose(float(d["deviation_mp"]), d["deviation"], rel_tol=1e-12)


# --- a NAME=VALUE pair given twice is refused ------------------------------------------------------------------
def test_repeated_bound_parameter_is_refused(capsys):
    line = one_line_error(*run(capsys, ["bound", "hoeffding", "n=10", "n=20", "--eps", "1e-3"]), "n = 'n=20'")
    assert "given once" in line


def test_repeated_vary_field_is_refused(tmp_path, capsys):
    path = write(tmp_path, "s.toml", bb84_toml())
    one_line_error(*run(capsys, ["table", path, "--vary", "channel.qber=0.01", "--vary", "channel.qber=0.02",
                                 "--jobs", "1", "--quiet"]), "channel.qber", "at most once")
    out = tmp_path / "l.png"
    one_line_error(*run(capsys, ["plot", path, "--kind", "ledger", "--vary", "channel.qber=0.01",
                                 "--vary", "channel.qber=0.02", "-o", str(out)]), "at most once")
    assert not out.exists()


# --- every JSON output carries the caution; the bounds text too ------------------------------------------------
def test_every_json_output_has_the_caution(tmp_path, capsys):
    from finitekey.cautions import CAUTION

    bb = write(tmp_path, "b.json", json.dumps(dict(BB84_BLOCK, label="blk-1")))
    batch = write(tmp_path, "b.jsonl", json.dumps(BB84_BLOCK) + "\n" + json.dumps(DECOY_BLOCK) + "\n")
    scen = write(tmp_path, "s.toml", bb84_toml())
    for argv in (["bounds", "--json"], ["bound", "hoeffding", "n=100", "--eps", "1e-3", "--json"],
                 ["keylength", bb, "--json"], ["design", scen, "--json"],
                 ["blocksize", scen, "--target", "positive", "--json"]):
        rc, out, err = run(capsys, argv)
        assert rc == 0, (argv, err)
        assert json.loads(out)["caution"] == CAUTION, argv
    rc, out, _ = run(capsys, ["keylength", batch, "--json"])
    assert rc == 0
    assert [json.loads(x)["caution"] for x in out.splitlines()] == [CAUTION, CAUTION]
    rc, out, _ = run(capsys, ["bounds"])
    assert rc == 0 and CAUTION in out


def test_single_block_keeps_its_label(tmp_path, capsys):
    for block in (dict(BB84_BLOCK, label="blk-1"), dict(DECOY_BLOCK, label="blk-1")):
        path = write(tmp_path, "b.json", json.dumps(block))
        rc, out, _ = run(capsys, ["keylength", path, "--json"])
        assert rc == 0 and json.loads(out)["label"] == "blk-1"
        rc, out, _ = run(capsys, ["keylength", path])
        assert rc == 0 and "blk-1" in out


def test_statistics_help_lists_each_protocols_methods(capsys):
    with pytest.raises(SystemExit):
        main(["keylength", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    for proto in protocols.all_protocols():
        assert proto.name + ":" in text
        for m in proto.statistics_methods:
            assert m in text
    assert "kato" in text and "serfling" in text


# --- the batch function has the same shape in every protocol -----------------------------------------------------
def test_every_protocol_has_a_batch_function():
    for proto in protocols.all_protocols():
        assert callable(getattr(proto, "key_length_batch", None)), proto.name


def test_decoy_batch_equals_block_by_block(monkeypatch):
    from finitekey.protocols import decoy_bb84 as mod
    from finitekey.protocols.decoy_bb84 import analysis

    variants = [DECOY_BLOCK, dict(DECOY_BLOCK, ec_leak_bits=30000000), dict(DECOY_BLOCK, ec_leak_bits=20000000)]
    blocks = [mod.parse_block(b) for b in variants]
    single = [mod.key_length(b, "chernoff") for b in blocks]
    batch = protocols.get("decoy-bb84").key_length_batch(blocks, "chernoff")
    assert [r.to_dict() for r in batch] == [r.to_dict() for r in single]
    assert len({r.secret_key_length for r in single}) == 3  # the three blocks differ, so order is checked
    monkeypatch.setattr(analysis, "_PARALLEL_MIN", 2)
    parallel = mod.key_length_batch(blocks, "chernoff", jobs=2)
    assert [r.to_dict() for r in parallel] == [r.to_dict() for r in single]
    with pytest.raises(InputError):
        mod.key_length_batch(blocks, "nosuch")


# --- every proof note an output cites is installed with the package ---------------------------------------------
def _strings(obj):
    if isinstance(obj, str):
        yield obj
    elif isinstance(obj, dict):
        for v in obj.values():
            yield from _strings(v)
    elif isinstance(obj, (list, tuple)):
        for v in obj:
            yield from _strings(v)


def test_cited_proof_notes_exist_in_the_installed_package(tmp_path, capsys):
    import importlib.resources
    import re

    from finitekey import bounds

    texts = []
    for block in (BB84_BLOCK, DECOY_BLOCK, dict(BB84_BLOCK, ec_efficiency=1.1, key_qber=0.02, ec_leak_bits=None)):
        block = {k: v for k, v in block.items() if v is not None}
        proto = protocols.get(block["protocol"])
        texts += list(_strings(proto.key_length(proto.parse_block(block)).to_dict()))
    for proto in protocols.all_protocols():
        texts += list(_strings(proto.design(proto.default_scenario()).to_dict()))
    for b in bounds.all_bounds():
        texts += list(_strings(b.describe()))
    joined = "\n".join(texts)
    assert "proofs_notes/" not in joined  # the source tree's folder is not installed; cite finitekey/_notes/
    cited = set(re.findall(r"finitekey/_notes/([\w/]+\.md)", joined))
    assert "reconciliation.md" in cited  # at least the decoy assumptions cite notes
    root = importlib.resources.files("finitekey")
    for rel in sorted(cited):
        assert root.joinpath("_notes", *rel.split("/")).is_file(), rel
    # every protocol and bound module has its note in the package
    for proto in protocols.all_protocols():
        assert root.joinpath("_notes", "protocols", proto.name.replace("-", "_") + ".md").is_file(), proto.name


# --- result names: estimates say what they bound; settings are not assumptions ----------------------------------
def test_estimate_names_are_distinct_and_settings_are_separate(tmp_path, capsys):
    dec = protocols.get("decoy-bb84")
    r = dec.key_length(dec.parse_block(DECOY_BLOCK))
    assert r.settings == {"analysis": "three-intensity"}
    assert not any(a.startswith("analysis") for a in r.assumptions)
    assert {"vacuum_key_detections_lower", "single_photon_key_detections_lower",
            "single_photon_test_detections_lower", "single_photon_test_errors_upper",
            "phase_error_rate_upper"} <= set(r.estimates)
    assert not {"s0_lower", "s1_lower", "s1_test_lower", "e1_test_errors_upper"} & set(r.estimates)
    bb = protocols.get("bb84")
    rb = bb.key_length(bb.parse_block(BB84_BLOCK))
    assert {"phase_error_count_upper", "phase_error_rate_upper"} <= set(rb.estimates)
    # the count and the rate agree: rate = count / key_bits (the exact statistics bound the count)
    assert rb.estimates["phase_error_rate_upper"] == rb.estimates["phase_error_count_upper"] / BB84_BLOCK["key_bits"]
    assert r.to_dict()["settings"] == {"analysis": "three-intensity"}
    path = write(tmp_path, "d.json", json.dumps(DECOY_BLOCK))
    rc, out, _ = run(capsys, ["keylength", path])
    assert rc == 0 and "setting: analysis" in out and "three-intensity" in out


def test_mpmath_precision_has_the_same_range_in_the_api():
    from finitekey import bounds

    b = bounds.get("hoeffding")
    for dps in (0, 10**6, 2.5):
        with pytest.raises(InputError) as info:
            b.deviation_mp(1e-3, dps=dps, n=100)
        assert info.value.field == "dps"
    with pytest.raises(InputError):
        b.failure_probability_mp(0.1, dps=10**6, n=100)
    # inside the range: mpmath agrees with float64 (the bound's float code) to float precision
    assert math.isclose(float(b.deviation_mp(1e-3, dps=30, n=100)), float(b.deviation(1e-3, n=100)), rel_tol=1e-12)


# --- a tiny rate or detection probability would make a fill time or a signal count infinite ---------------------
@pytest.mark.parametrize("text, field", [
    (bb84_toml(detections="1000000\ndetection_probability = 5e-324"), "budget.detection_probability"),
    (bb84_toml(detections="1000000\ndetection_probability = 1e-3\nsignal_rate_hz = 5e-324"), "budget.signal_rate_hz"),
    (decoy_toml() + "[source]\nrepetition_rate_hz = 5e-324\n", "source.repetition_rate_hz"),
])
def test_subnormal_rates_are_refused_by_field(tmp_path, capsys, text, field):
    path = write(tmp_path, "s.toml", text)
    one_line_error(*run(capsys, ["design", path, "--json"]), f"{field} = 5e-324 is not allowed")


def test_json_writer_refusal_is_one_line():
    from finitekey.cli.render import to_json, to_json_line
    from finitekey.errors import ComputationError

    for writer in (to_json, to_json_line):
        with pytest.raises(ComputationError, match="JSON cannot carry"):
            writer({"block_fill_time_s": math.inf})


def test_stream_line_with_a_repeated_field_is_refused():
    import io

    from finitekey.cli.keylength_cmd import stream

    out, err = io.StringIO(), io.StringIO()
    line = json.dumps(BB84_BLOCK)[:-1] + ', "test_errors": 5}'
    assert stream([json.dumps(BB84_BLOCK), line], out, err) == 2
    answers = [json.loads(x) for x in out.getvalue().splitlines()]
    assert answers[0]["secret_key_length"] > 0
    assert answers[1]["line"] == 2 and answers[1]["field"] == "test_errors" and "once" in answers[1]["error"]


@pytest.mark.parametrize("argv, head", [
    (["keylength", "BLOCK", "--statistics", "foo"], "--statistics = 'foo' is not allowed"),
    (["bound", "hoeffding", "n=10", "--eps", "2"], "--eps = '2' is not allowed"),
    (["bound", "hoeffding", "n=10", "--deviation", "-1"], "--deviation = '-1' is not allowed"),
    (["blocksize", "--target", "bits=-1"], "--target = 'bits=-1' is not allowed"),
])
def test_option_values_are_named_by_the_option_as_typed(tmp_path, capsys, argv, head):
    block = write(tmp_path, "b.json", json.dumps(BB84_BLOCK))
    argv = [block if a == "BLOCK" else a for a in argv]
    one_line_error(*run(capsys, argv), head)
