"""Every result says whether it gives a key and, if not, why (finitekey.protocols._result.Status).

Covers: the reason each analysis finds (bb84, decoy-bb84, the designs), JSON of every result type, the text
of keylength / design / blocksize / design --reach, table rows without chosen parameters, the no-key marks of
a rate plot, the report's status, the reach search's limits and the bb84 budget's signal rate.
"""

import json
import math

import pytest
from scipy.stats import entropy

from finitekey.cautions import CAUTION
from finitekey.cli import main
from finitekey.protocols import KEY, BlockTarget, DesignResult, KeyLengthResult, NoKeyReason, ReachResult, Status
from finitekey.protocols import bb84 as B
from finitekey.protocols import decoy_bb84 as D
from finitekey.protocols.decoy_bb84 import design as DD
from finitekey.report.figures import series
from finitekey.report.formats import to_csv, to_markdown
from finitekey.report.plots import Curve, rate_figure
from finitekey.report.sweep import SweepTable

from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
STREAM = str(ROOT / "examples" / "blocks" / "bb84_stream.jsonl")
METRO = ROOT / "examples" / "metro_datacentre.toml"


def run(capsys, argv):
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def h2(p):
    """Binary entropy from scipy.stats.entropy (base 2), an outside reference."""
    return float(entropy([p, 1 - p], base=2))


def _bb84(**kw):
    d = {"key_bits": 1000000, "test_bits": 50000, "test_errors": 1190, "ec_leak_bits": 181500,
         "eps_sec": 1e-10, "eps_cor": 1e-15}
    d.update(kw)
    return B.parse_block(d)


def _metro(tmp_path, **fields):
    text = METRO.read_text()
    for dotted, value in fields.items():
        key = dotted.split(".")[1]
        lines = [(f"{key} = {value}" if ln.split("=")[0].strip() == key else ln) for ln in text.splitlines()]
        text = "\n".join(lines) + "\n"
    p = tmp_path / "metro.toml"
    p.write_text(text)
    return str(p)


# ---------------------------------------------------------------------------------------------------------
# the status type
# ---------------------------------------------------------------------------------------------------------
def test_status_refuses_to_contradict_the_length():
    led = B.block_ledger(1e-10, 1e-15)
    with pytest.raises(ValueError):
        KeyLengthResult("bb84", 0, led, "exact", status=KEY)
    with pytest.raises(ValueError):
        KeyLengthResult("bb84", 10, led, "exact", status=Status.no_key(NoKeyReason.BLOCK_TOO_SMALL))
    with pytest.raises(TypeError):
        Status.no_key("too small")
    # without a status: key for a positive length, else the generic reason
    assert KeyLengthResult("bb84", 10, led, "exact").status.key
    assert KeyLengthResult("bb84", 0, led, "exact").status.reason is NoKeyReason.BELOW_ONE_BIT


def test_status_json_and_text():
    s = Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, "phi = 0.6")
    assert s.to_dict() == {"key": False, "reason": "phase_error_bound",
                           "reason_text": NoKeyReason.PHASE_ERROR_BOUND.text, "detail": "phi = 0.6"}
    assert s.text().startswith("no key: ") and s.text().endswith("; phi = 0.6")
    assert KEY.to_dict()["key"] is True and KEY.text() == "key"


# ---------------------------------------------------------------------------------------------------------
# bb84: the reason the analysis found
# ---------------------------------------------------------------------------------------------------------
def test_bb84_key_has_key_status_in_json():
    r = B.key_length(_bb84())
    assert r.secret_key_length > 0 and r.status.key
    assert r.to_dict()["status"] == {"key": True, "reason": None, "reason_text": None, "detail": ""}


def test_bb84_stream_line_4_leakage_exceeds_the_entropy():
    # examples/blocks/bb84_stream.jsonl line 4: 5600 errors in 50000 test bits, 560000 bits disclosed
    r = B.key_length(_bb84(test_errors=5600, ec_leak_bits=560000))
    assert r.secret_key_length == 0
    assert r.status.reason is NoKeyReason.PENALTIES_EXCEED_ENTROPY
    phi = r.estimates["phase_error_rate_upper"]
    assert phi < 0.5
    # outside check: n (1 - h(phi)) with scipy's entropy is below the disclosed bits alone
    assert 1e6 * (1 - h2(phi)) < 560000
    assert "leakage 560000" in r.status.detail
    assert r.to_dict()["status"]["reason"] == "penalties_exceed_entropy"


def test_bb84_phase_error_at_half():
    r = B.key_length(_bb84(key_bits=1000, test_bits=100, test_errors=45, ec_leak_bits=0))
    assert r.secret_key_length == 0 and r.status.reason is NoKeyReason.PHASE_ERROR_BOUND
    assert "test QBER 0.45" in r.status.detail


def test_bb84_design_beyond_threshold_and_too_small():
    base = {"protocol": {"name": "bb84"}, "channel": {"qber": 0.12}, "budget": {"detections": 1e8},
            "security": {"eps_sec": 1e-10, "eps_cor": 1e-15}}
    # 1 - 2.1 h(0.12) < 0 (h from scipy): no key at any size
    assert 1 - 2.1 * h2(0.12) < 0
    d = B.design.design(B.parse_scenario({**base, "reconciliation": {"efficiency": 1.1}}))
    assert d.expected.secret_key_length == 0 and d.status.reason is NoKeyReason.THRESHOLD_EXCEEDED
    j = d.to_dict()
    assert j["parameters"] is None and "p_x" in j["parameters_tried"]
    assert j["status"]["reason"] == "threshold_exceeded"
    small = B.design.design(B.parse_scenario({**base, "channel": {"qber": 0.02}, "budget": {"detections": 3}}))
    assert small.status.reason is NoKeyReason.BLOCK_TOO_SMALL
    ok = B.design.design(B.parse_scenario({**base, "channel": {"qber": 0.02}}))
    assert ok.status.key and ok.to_dict()["parameters"]["p_x"] > 0.5


# ---------------------------------------------------------------------------------------------------------
# decoy-bb84
# ---------------------------------------------------------------------------------------------------------
def _decoy(mu, p, kd, ke, td, te, leak=0):
    return D.parse_block({"intensities": list(mu), "intensity_probabilities": list(p),
                          "key_basis": {"detections": list(kd), "errors": list(ke)},
                          "test_basis": {"detections": list(td), "errors": list(te)},
                          "ec_leak_bits": leak, "eps_sec": 1e-10, "eps_cor": 1e-15})


def test_decoy_inconsistent_block_says_so():
    # a block from tests/test_decoy_consistency.py (no errors at all: impossible under the decoy model)
    b = _decoy([0.5, 0.1, 2e-4], [0.8, 0.15, 0.05], [4000000, 1500000, 1000], [0, 0, 0],
               [400000, 150000, 100], [0, 0, 0])
    r = D.key_length(b)
    assert r.secret_key_length == 0 and r.status.reason is NoKeyReason.INCONSISTENT_BLOCK
    assert "key-basis" in r.status.detail


def test_decoy_example_block_has_key_and_leakage_kills_it():
    data = json.loads((ROOT / "examples" / "blocks" / "decoy_block.json").read_text())
    r = D.key_length(D.parse_block(data))
    assert r.secret_key_length > 0 and r.status.key
    data["ec_leak_bits"] = sum(data["key_basis"]["detections"])   # everything disclosed
    r = D.key_length(D.parse_block(data))
    assert r.secret_key_length == 0 and r.status.reason is NoKeyReason.PENALTIES_EXCEED_ENTROPY


def test_decoy_phase_error_at_half():
    # half of the detections in error at every intensity (error correction discloses n h(1/2) = n bits):
    # the phase-error bound is 1/2
    b = _decoy([0.5, 0.1, 2e-4], [0.8, 0.15, 0.05], [400000, 15000, 200], [200000, 7500, 100],
               [400000, 15000, 200], [200000, 7500, 100], leak=415200)
    r = D.key_length(b)
    assert r.secret_key_length == 0
    assert r.estimates["single_photon_key_detections_lower"] >= 1
    assert r.estimates["single_photon_test_detections_lower"] >= 1
    assert r.estimates["phase_error_rate_upper"] >= 0.5
    assert r.status.reason is NoKeyReason.PHASE_ERROR_BOUND


def test_decoy_design_at_300_km_is_no_key_beyond_threshold(tmp_path, capsys):
    # By hand: 0.21 dB/km x 300 km + 2.5 dB = 65.5 dB, so transmittance x efficiency = 10^-6.55 x 0.25 = 7.0e-8,
    # below the dark-count probability 5e-7: dark counts dominate every intensity.
    assert 10 ** -6.55 * 0.25 < 5e-7
    path = _metro(tmp_path, **{"link.distance_km": 300.0})
    rc, out, _ = run(capsys, ["design", path])
    assert rc == 0
    assert "Status: NO KEY -- " in out and NoKeyReason.THRESHOLD_EXCEEDED.text in out
    assert "parameter: intensities" not in out and "Design (" not in out
    assert "No parameters are chosen" in out and CAUTION in out
    rc, out, _ = run(capsys, ["design", path, "--json"])
    d = json.loads(out)
    assert d["status"]["key"] is False and d["status"]["reason"] == "threshold_exceeded"
    assert d["parameters"] is None and len(d["parameters_tried"]["intensities"]) == 3
    assert d["expected"]["status"]["key"] is False


def test_decoy_design_small_block_no_positive_design():
    sc = D.with_field(D.with_field(D.default_scenario(), "link.distance_km", 120.0), "block.pulses", 1e6)
    r = DD.design(sc)
    assert r.expected.secret_key_length == 0
    assert r.status.reason is NoKeyReason.NO_POSITIVE_DESIGN
    assert r.status.detail.startswith("at the best point tried: ")


# ---------------------------------------------------------------------------------------------------------
# reach
# ---------------------------------------------------------------------------------------------------------
def test_reach_without_fibre_loss_is_an_input_error(capsys):
    rc, out, err = run(capsys, ["design", str(ROOT / "examples" / "freespace_pass.toml"), "--reach"])
    assert rc == 2 and out == ""
    assert "link.fiber_loss_db_per_km" in err and "Traceback" not in err
    assert "999" not in err


def test_reach_at_the_search_limit_is_not_a_distance(tmp_path, capsys):
    sc = D.with_field(D.default_scenario(), "link.fiber_loss_db_per_km", 0.001)
    r = DD.reach(sc, max_km=100.0)
    assert r.reach_km is None and r.limit_reached and r.status.key
    assert "search limit 100 km" in r.status.detail
    d = r.to_dict()
    assert d["reach_km"] is None and d["limit_reached"] is True and d["search_limit_km"] == 100.0
    assert d["secret_key_length_at_reach"] > 0
    from finitekey.cli.design_cmd import render_reach
    text = render_reach(r)
    assert "not found" in text and "beyond" in text


def test_reach_result_with_a_distance():
    sc = D.with_field(D.with_field(D.default_scenario(), "block.pulses", 1e8), "link.fiber_loss_db_per_km", 2.0)
    r = DD.reach(sc, "hoeffding", tolerance_km=1.0)
    assert r.reach_km is not None and not r.limit_reached and r.status.key and r.reach_km < 100
    assert r.to_dict()["reach_km"] == r.reach_km
    with pytest.raises(ValueError):
        ReachResult(5.0, "exact", 0.1, 1000.0, KEY, limit_reached=True, at_reach=r.at_reach)


# ---------------------------------------------------------------------------------------------------------
# keylength and blocksize text
# ---------------------------------------------------------------------------------------------------------
def test_keylength_batch_line_4_shows_the_reason(capsys):
    rc, out, _ = run(capsys, ["keylength", STREAM])
    assert rc == 0
    lines = [ln for ln in out.splitlines() if ln.strip().startswith(("1 ", "2 ", "3 ", "4 "))]
    assert len(lines) == 4
    assert lines[3].rstrip().endswith("no key: " + NoKeyReason.PENALTIES_EXCEED_ENTROPY.text)
    assert all(ln.rstrip().endswith("key") and "no key" not in ln for ln in lines[:3])
    rc, out, _ = run(capsys, ["keylength", STREAM, "--json"])
    rows = [json.loads(x) for x in out.splitlines()]
    assert [r["status"]["key"] for r in rows] == [True, True, True, False]
    assert rows[3]["status"]["reason"] == "penalties_exceed_entropy"


def test_keylength_single_block_text_has_status(tmp_path, capsys):
    p = tmp_path / "b.json"
    p.write_text(json.dumps({"protocol": "bb84", "key_bits": 1000, "test_bits": 100, "test_errors": 45,
                             "ec_leak_bits": 0, "eps_sec": 1e-10, "eps_cor": 1e-15}))
    rc, out, _ = run(capsys, ["keylength", str(p)])
    assert rc == 0 and "no key: " + NoKeyReason.PHASE_ERROR_BOUND.text in out


def test_blocksize_names_the_file_and_echoes_the_size_found(capsys):
    path = str(ROOT / "examples" / "blocks" / "bb84_lab_link.toml")
    rc, out, _ = run(capsys, ["blocksize", path, "--target", "bits=1000000"])
    assert rc == 0
    assert "built-in default scenario" not in out and f"Scenario ({path})" in out
    text = out
    rc, out, _ = run(capsys, ["blocksize", path, "--target", "bits=1000000", "--json"])
    d = json.loads(out)
    assert d["status"]["key"] is True
    assert d["size_kind"] == "detections" and d["size"] != 2000000   # the file's budget is 2000000
    echoed = d["design"]["scenario"]["budget"]["detections"]
    assert echoed == d["size"] and d["design"]["expected_counts"]["detections"] == d["size"]
    shown = f"{d['size']:,}".replace(",", " ")
    assert f"detections={shown}" in text and "detections=2 000 000" not in text


def test_bb84_blocksize_result_carries_the_status():
    sc = B.parse_scenario({"protocol": {"name": "bb84"}, "channel": {"qber": 0.02},
                           "budget": {"signals": 1e9, "detection_probability": 1e-3},
                           "security": {"eps_sec": 1e-10, "eps_cor": 1e-15}})
    r = B.design.blocksize(sc, BlockTarget.parse("positive"))
    assert r.status.key and r.to_dict()["status"]["key"] is True
    # a signal budget: the echo gives the signals found, not the scenario's 1e9
    assert r.design.scenario["budget"]["signals"] == r.size


# ---------------------------------------------------------------------------------------------------------
# bb84 rates per signal and per second
# ---------------------------------------------------------------------------------------------------------
def _lab(budget):
    return {"protocol": {"name": "bb84"}, "channel": {"qber": 0.03}, "budget": budget,
            "security": {"eps_sec": 1e-10, "eps_cor": 1e-15}}


def test_detection_budget_with_signal_rate_needs_the_detection_probability(tmp_path, capsys):
    with pytest.raises(Exception) as info:
        B.parse_scenario(_lab({"detections": 2000000, "signal_rate_hz": 1e8}))
    assert "budget.signal_rate_hz" in str(info.value)
    p = tmp_path / "s.toml"
    p.write_text('[protocol]\nname = "bb84"\n[channel]\nqber = 0.03\n[budget]\ndetections = 2000000\n'
                 'signal_rate_hz = 1e8\n[security]\neps_sec = 1e-10\neps_cor = 1e-15\n')
    rc, out, err = run(capsys, ["design", str(p)])
    assert rc == 2 and out == "" and "budget.signal_rate_hz" in err and "detection_probability" in err


def test_detection_budget_with_probability_gives_signal_rates():
    d = B.design.design(B.parse_scenario(_lab({"detections": 2000000, "detection_probability": 0.02,
                                        "signal_rate_hz": 1e8})))
    ell = d.expected.secret_key_length
    signals = 2000000 / 0.02                       # by hand: 1e8 signals
    assert d.secret_key_rate_per_signal == pytest.approx(ell / signals, rel=1e-12)
    assert d.secret_key_rate_per_detection == pytest.approx(ell / 2000000, rel=1e-12)
    assert d.secret_key_rate_bps == pytest.approx(ell / signals * 1e8, rel=1e-12)
    assert d.block_fill_time_s == pytest.approx(1.0, rel=1e-12)   # 1e8 signals at 1e8 per second


def test_detection_budget_alone_has_no_per_signal_rate(capsys, tmp_path):
    d = B.design.design(B.parse_scenario(_lab({"detections": 2000000})))
    assert d.secret_key_rate_per_signal is None and d.secret_key_rate_bps is None and d.block_fill_time_s is None
    assert d.to_dict()["secret_key_rate_per_signal"] is None
    p = tmp_path / "s.toml"
    p.write_text('[protocol]\nname = "bb84"\n[channel]\nqber = 0.03\n[budget]\ndetections = 2000000\n'
                 '[security]\neps_sec = 1e-10\neps_cor = 1e-15\n')
    rc, out, _ = run(capsys, ["design", str(p)])
    assert rc == 0 and "bits per signal" not in out and "bits per detection" in out


# ---------------------------------------------------------------------------------------------------------
# tables, plots, reports
# ---------------------------------------------------------------------------------------------------------
def _rows():
    def row(i, L, key):
        st = KEY.to_dict() if key else Status.no_key(NoKeyReason.THRESHOLD_EXCEEDED, "d").to_dict()
        return {"index": i, "point": {"link.distance_km": L}, "status": st, "secret_key_length": 100 if key else 0,
                "secret_key_rate_per_pulse": 1e-5 if key else 0.0, "secret_key_rate_bps": None,
                "parameters": {"intensities": [0.5, 0.1, 2e-4]} if key else {}, "eps_total": 1e-10,
                "block_fill_time_s": 10.0, "error": None}
    return (row(0, 100.0, True), row(1, 150.0, True), row(2, 200.0, False))


def _table():
    from finitekey.report.grid import parse_vary
    axis = parse_vary("link.distance_km=100,150,200", ["link.distance_km"])
    return SweepTable("decoy-bb84", "design", (axis,), _rows(), None, None, {"tool": "finitekey"})


def test_table_rows_show_status_and_no_parameters_without_key():
    t = _table()
    keys = [k for k, _, _ in t.columns()]
    assert "status" in keys
    cells = t.flat_rows()
    status = keys.index("status")
    mu = keys.index("parameters.intensities")
    assert cells[0][status] == "key" and cells[0][mu] == [0.5, 0.1, 2e-4]
    assert cells[2][status] == "no key: " + NoKeyReason.THRESHOLD_EXCEEDED.text and cells[2][mu] is None
    csv_last = [ln for ln in to_csv(t).splitlines() if ln.startswith("200")][0]
    assert "no key: " in csv_last and "0.5" not in csv_last
    md = to_markdown(t)  # human tables: a short "no key" cell, the reason listed under the table
    assert "| 200 | no key |" in md
    assert "- no key at link.distance_km = 200: " + NoKeyReason.THRESHOLD_EXCEEDED.text in md


def test_real_sweep_row_without_key_has_blank_parameters(tmp_path):
    from finitekey.report.sweep import evaluate_point, PointTask
    import tomllib
    data = tomllib.loads(METRO.read_text())
    row = evaluate_point(PointTask(0, "decoy-bb84", data, (("link.distance_km", 300.0),)))
    assert row["error"] is None and row["status"]["key"] is False
    assert row["parameters"] == {} and row["design"]["parameters"] is None


def test_rate_plot_marks_points_without_key():
    curves = series(_table(), "secret_key_rate_per_pulse")
    assert curves[0].x == (100.0, 150.0) and curves[0].meta["no_key_x"] == (200.0,)
    fig = rate_figure(curves, "distance (km)")
    ax = fig.axes[0]
    marks = [ln for ln in ax.lines if ln.get_gid() == "no-key"]
    assert len(marks) == 1 and list(marks[0].get_xdata()) == [200.0]
    labels = ax.get_legend_handles_labels()[1]
    assert any(lbl.startswith("no key at the points marked x") for lbl in labels)
    # a curve without any key point still marks its points
    only = Curve("none", (), (), meta={"no_key_x": (1.0, 2.0), "no_key_reasons": ("no key: r",)})
    fig = rate_figure([Curve("k", (1.0, 2.0), (1e-5, 1e-6)), only], "x")
    assert sum(ln.get_gid() == "no-key" for ln in fig.axes[0].lines) == 1


def test_report_without_key_shows_the_reason(tmp_path):
    from finitekey.report.build import build_report
    from finitekey.report.html import to_html
    from finitekey.report.latex import report_latex
    from finitekey.report.sweep import load_scenario
    path = _metro(tmp_path, **{"link.distance_km": 300.0})
    rep = build_report(load_scenario(path), vary=[])
    html = to_html(rep)
    assert 'id="status"' in html and NoKeyReason.THRESHOLD_EXCEEDED.text in html
    assert '<table id="parameters-table"' not in html and "No parameters are chosen" in html
    tex = report_latex(rep)
    assert "no key: beyond the threshold" in tex
    assert "intensities" not in tex.split(r"\caption{decoy-bb84: result at the scenario}")[0].split("status")[1]


def test_design_result_default_status_follows_expected():
    led = B.block_ledger(1e-10, 1e-15)
    zero = KeyLengthResult("bb84", 0, led, "exact", status=Status.no_key(NoKeyReason.PHASE_ERROR_BOUND, "x"))
    d = DesignResult("bb84", {"p_x": 0.9}, zero, 0.0)
    assert d.status.reason is NoKeyReason.NO_POSITIVE_DESIGN and "phase-error" in d.status.detail
    assert math.isclose(d.to_dict()["parameters_tried"]["p_x"], 0.9)


def test_rate_plot_with_no_key_anywhere_names_the_reason():
    from finitekey.errors import InputError
    only = Curve("none", (), (), meta={"no_key_x": (1.0,), "no_key_reasons": ("no key: beyond the threshold",)})
    with pytest.raises(InputError) as info:
        rate_figure([only], "x")
    assert "beyond the threshold" in str(info.value)


def test_reach_without_key_at_0_km_gives_no_distance_and_the_reason(capsys):
    # 80 dB of fixed loss: 10^-8 x 0.1 efficiency = 1e-9 per photon, below the 6e-7 dark-count probability
    sc = D.with_field(D.default_scenario(), "link.extra_loss_db", 80.0)
    r = DD.reach(sc)
    assert r.reach_km is None and not r.limit_reached and not r.status.key
    assert r.status.reason is NoKeyReason.THRESHOLD_EXCEEDED and r.status.detail.startswith("at 0 km")
    d = r.to_dict()
    assert d["reach_km"] is None and "secret_key_length_at_reach" not in d
    from finitekey.cli.design_cmd import render_reach
    assert "none: no key even at 0 km" in render_reach(r)
