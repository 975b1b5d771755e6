"""Sweeps over the registered protocols: table values equal the protocol API, formats parse, CLI errors.

References used: the protocol API itself (``design``, ``blocksize``, ``with_field``) evaluated point by point in
this process is the reference for every table cell; ``csv``/``json`` parsers; ``hashlib.sha256`` of the input
file for the provenance; a serial run for the parallel and Dask runs.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json

import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.report.sweep import load_scenario, run_sweep
from scenarios import bb84_toml

BB84_TOML = bb84_toml("sweep test (fictional)")

DECOY_TOML = """
[protocol]
name = "decoy-bb84"
[link]
distance_km = 20.0
fiber_loss_db_per_km = 0.2
[detector]
efficiency = 0.2
dark_count_probability = 1e-7
misalignment_error = 0.01
[source]
repetition_rate_hz = 1e9
[block]
pulses = 1e10
[security]
eps_sec = 1e-10
eps_cor = 1e-15
[reconciliation]
efficiency = 1.16
"""


@pytest.fixture
def bb84_file(tmp_path):
    p = tmp_path / "bb84.toml"
    p.write_text(BB84_TOML)
    return p


def _api_design(proto, path, assignments, statistics=None):
    loaded = load_scenario(path)
    sc = proto.parse_scenario(loaded.data)
    for k, v in assignments.items():
        sc = proto.with_field(sc, k, v)
    return proto.design(sc, statistics=statistics).to_dict()


def test_table_values_equal_api_values_bb84(bb84_file):
    proto = protocols.get("bb84")
    loaded = load_scenario(bb84_file)
    assert loaded.sha256 == hashlib.sha256(bb84_file.read_bytes()).hexdigest()
    t = run_sweep(loaded, ["channel.qber=0.01:0.05:0.02", "budget.signals=1e9,1e11"], jobs=2, progress=False)
    assert [r["point"] for r in t.rows] == [{"channel.qber": q, "budget.signals": n}
                                            for q in (0.01, 0.03, 0.05) for n in (10**9, 10**11)]
    for r in t.rows:
        want = _api_design(proto, bb84_file, r["point"])
        assert r["secret_key_length"] == want["secret_key_length"]
        assert r["secret_key_rate_per_pulse"] == want["secret_key_rate_per_signal"]
        assert r["secret_key_rate_per_detection"] == want["secret_key_rate_per_detection"]
        assert r["secret_key_rate_bps"] == want["secret_key_rate_bps"]
        assert r["eps_total"] == want["expected"]["eps_total"]
        assert r["block_fill_time_s"] == want["block_fill_time_s"]
        assert r["parameters"]["p_x"] == want["parameters"]["p_x"]
        assert r["ledger"] == want["expected"]["ledger"]


def test_table_values_equal_api_values_decoy(tmp_path):
    p = tmp_path / "decoy.toml"
    p.write_text(DECOY_TOML)
    proto = protocols.get("decoy-bb84")
    t = run_sweep(load_scenario(p), ["link.distance_km=0,40"], jobs=2, progress=False)
    for r in t.rows:
        want = _api_design(proto, p, r["point"])
        assert r["secret_key_length"] == want["secret_key_length"] > 0
        assert r["parameters"]["intensities"] == want["parameters"]["intensities"]
    assert t.rows[0]["secret_key_length"] > t.rows[1]["secret_key_length"]


def test_blocksize_table_equals_api(bb84_file):
    proto = protocols.get("bb84")
    t = run_sweep(load_scenario(bb84_file), ["channel.qber=0.02,0.04"], mode="blocksize", target="bits=1000",
                  jobs=1, progress=False)
    for r in t.rows:
        sc = proto.with_field(proto.parse_scenario(load_scenario(bb84_file).data), "channel.qber",
                              r["point"]["channel.qber"])
        want = proto.blocksize(sc, protocols.BlockTarget.parse("bits=1000"))
        assert r["block_size"] == want.size and r["block_size_kind"] == want.size_kind
        assert r["secret_key_length"] >= 1000
    assert t.rows[0]["block_size"] < t.rows[1]["block_size"]  # a noisier channel needs a bigger block


def test_fixed_keeps_scenario_parameters(tmp_path):
    p = tmp_path / "fixed.toml"
    p.write_text(BB84_TOML + "[design]\np_x = 0.9\nsmoothing_share = 0.5\n")
    proto = protocols.get("bb84")
    t = run_sweep(load_scenario(p), ["channel.qber=0.02"], mode="fixed", jobs=1, progress=False)
    r = t.rows[0]
    assert r["parameters"]["p_x"] == 0.9 and r["parameters"]["epsilon_split.smoothing"] == 0.5
    want = _api_design(proto, p, {"channel.qber": 0.02, "design.optimise_split": False})
    assert r["secret_key_length"] == want["secret_key_length"]
    opt = run_sweep(load_scenario(p.parent / "fixed.toml"), ["design.p_x=0.99"], jobs=1, progress=False)
    assert opt.rows[0]["parameters"]["p_x"] == 0.99


def test_fixed_decoy_keeps_intensities_and_bias(tmp_path):
    p = tmp_path / "decoy_fixed.toml"
    p.write_text(DECOY_TOML.replace('name = "decoy-bb84"', 'name = "decoy-bb84"\nintensities = [0.6, 0.1, 0.0002]\n'
                                    'intensity_probabilities = [0.9, 0.08, 0.02]\nkey_basis_probability = 0.9'))
    proto = protocols.get("decoy-bb84")
    t = run_sweep(load_scenario(p), ["link.distance_km=10"], mode="fixed", jobs=1, progress=False)
    r = t.rows[0]
    assert r["parameters"]["intensities"] == [0.6, 0.1, 0.0002]
    assert r["parameters"]["key_basis_probability"] == 0.9
    assert r["secret_key_length"] == _api_design(proto, p, {"link.distance_km": 10})["secret_key_length"]


def test_fixed_without_free_parameters_is_an_input_error(bb84_file):
    with pytest.raises(InputError) as info:
        run_sweep(load_scenario(bb84_file), ["channel.qber=0.02"], mode="fixed", jobs=1)
    assert "design.p_x" in str(info.value)


def test_cli_formats_parse_and_agree(bb84_file, tmp_path, capsys):
    base = [str(bb84_file), "--vary", "channel.qber=0.01:0.03:0.01", "--jobs", "1"]
    out = {}
    for fmt in ("csv", "json", "md", "tex"):
        dest = tmp_path / f"t.{fmt}"
        assert main(["table", *base, "-o", str(dest)]) == 0
        out[fmt] = dest.read_text()
    rows = list(csv.DictReader(io.StringIO(out["csv"])))
    doc = json.loads(out["json"])
    assert len(rows) == len(doc["rows"]) == 3
    for c, j in zip(rows, doc["rows"]):
        assert int(c["secret_key_length"]) == j["secret_key_length"]
        assert float(c["secret_key_rate_per_pulse"]) == j["secret_key_rate_per_pulse"]
        assert j["design"]["expected"]["ledger"] == j["ledger"] and len(j["ledger"]) >= 3
    sha = hashlib.sha256(bb84_file.read_bytes()).hexdigest()
    out["csv"] = (tmp_path / "t.csv.meta.json").read_text()  # the CSV's provenance is in its sidecar
    for fmt, text in out.items():
        assert sha in text and "finitekey table" in text, fmt
    assert doc["provenance"]["version"] and "--vary=channel.qber=0.01:0.03:0.01" in doc["provenance"]["command"]
    assert out["md"].count("\n|") >= 4 and r"\begin{tabular}" in out["tex"]
    # stdout when no -o
    assert main(["table", *base, "--format", "csv"]) == 0
    captured = capsys.readouterr()
    assert captured.out == (tmp_path / "t.csv").read_text()
    assert sha in captured.err and "Caution" in captured.err  # provenance on stderr when the CSV goes to stdout


def test_output_deterministic_across_jobs(bb84_file, tmp_path):
    texts = []
    for jobs in ("1", "2"):
        dest = tmp_path / f"j{jobs}.csv"
        assert main(["table", str(bb84_file), "--vary", "channel.qber=0.01:0.04:0.01", "--jobs", jobs,
                     "--format", "csv", "-o", str(dest)]) == 0
        texts.append([ln for ln in dest.read_text().splitlines() if not ln.startswith("# command")])
    assert texts[0] == texts[1]


@pytest.mark.parametrize("vary,needle", [
    ("chanel.qber=0.01", "channel.qber"),            # unknown field: the valid fields are listed
    ("channel.qber", "FIELD=VALUES"),                # no '='
    ("channel.qber=0:0.1", "start:stop:step"),       # two-part range
    ("channel.qber=0.1:0:0.01", "step points"),      # wrong direction
    ("channel.qber=0.7", "channel.qber"),            # value outside the field's range
])
def test_bad_vary_exits_2_without_traceback(bb84_file, capsys, vary, needle):
    assert main(["table", str(bb84_file), "--vary", vary, "--jobs", "1"]) == 2
    err = capsys.readouterr().err
    assert needle in err and "Traceback" not in err and err.count("\n") == 1


def test_unknown_field_message_lists_every_field(bb84_file, capsys):
    assert main(["table", str(bb84_file), "--vary", "nope=1"]) == 2
    err = capsys.readouterr().err
    for f in protocols.get("bb84").scenario_fields():
        assert f in err


def test_dask_local_cluster_equals_local_run(bb84_file):
    pytest.importorskip("distributed", reason="dask[distributed] is not installed (optional extra 'cluster')")
    loaded = load_scenario(bb84_file)
    vary = ["channel.qber=0.01,0.03", "budget.signals=1e9,1e10"]
    local = run_sweep(loaded, vary, jobs=1, progress=False)
    dask = run_sweep(loaded, vary, jobs=2, cluster="local", progress=False)
    assert dask.rows == local.rows


def test_dask_scheduler_address_equals_local_run(bb84_file):
    distributed = pytest.importorskip("distributed", reason="dask[distributed] is not installed")
    import dask
    loaded = load_scenario(bb84_file)
    vary = ["channel.qber=0.02,0.04"]
    local = run_sweep(loaded, vary, jobs=1, progress=False)
    with dask.config.set({"distributed.worker.multiprocessing-method": "fork"}):
        cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=1, host="127.0.0.1",
                                           dashboard_address=None, silence_logs=40)
    try:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        remote = run_sweep(loaded, vary, cluster=cluster.scheduler_address, progress=False)
    finally:
        cluster.close()
    assert remote.rows == local.rows


def test_unreachable_scheduler_is_an_input_error():
    pytest.importorskip("distributed", reason="dask[distributed] is not installed")
    from finitekey.report.runner import run_map
    with pytest.raises(InputError) as info:
        run_map(abs, [1], cluster="tcp://127.0.0.1:9", progress=False, connect_timeout=1.0)
    assert "--cluster" in str(info.value) and "reachable" in str(info.value)


def test_plot_command_kinds_and_provenance(bb84_file, tmp_path):
    from PIL import Image
    sha = hashlib.sha256(bb84_file.read_bytes()).hexdigest()
    rate = tmp_path / "rate.png"
    assert main(["plot", str(bb84_file), "--vary", "channel.qber=0.01,0.03", "--vary", "budget.signals=1e9,1e11",
                 "--jobs", "1", "-o", str(rate)]) == 0
    with Image.open(rate) as im:  # reference: Pillow's PNG reader
        assert im.size[0] > 500 and sha in im.text["Source"] and "finitekey plot" in im.text["Comment"]
    svg = tmp_path / "ledger.svg"
    assert main(["plot", str(bb84_file), "--kind", "ledger", "-o", str(svg)]) == 0
    assert sha in svg.read_text() and "<svg" in svg.read_text()
    pdf = tmp_path / "bs.pdf"
    assert main(["plot", str(bb84_file), "--kind", "blocksize", "--vary", "channel.qber=0.02,0.04", "--jobs", "1",
                 "--target", "bits=1000", "-o", str(pdf)]) == 0
    assert pdf.read_bytes()[:5] == b"%PDF-"


@pytest.mark.parametrize("argv,needle", [
    (["plot", "{f}", "--vary", "channel.qber=0.02", "-o", "x.gif"], ".png"),
    (["plot", "{f}", "-o", "x.png"], "--vary"),
    (["report", "{f}", "-o", "x.txt"], ".html"),
    (["report", "{f}", "-o", "x.html", "--latex", "x.doc"], ".tex"),
    (["table", "{f}", "--vary", "channel.qber=0.02", "--blocksize", "sometimes"], "bits=N"),
    (["table", "{f}", "--vary", "channel.qber=0.02", "--statistics", "magic"], "serfling"),
    (["table", "{f}", "--vary", "channel.qber=0.02", "-o", "/no/such/dir/t.md"], "existing directory"),
])
def test_cli_input_errors_exit_2(bb84_file, capsys, argv, needle, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main([a.replace("{f}", str(bb84_file)) for a in argv]) == 2
    err = capsys.readouterr().err
    assert needle in err and "Traceback" not in err


def test_report_with_latex_fragment(bb84_file, tmp_path):
    page, tex = tmp_path / "r.html", tmp_path / "r.tex"
    assert main(["report", str(bb84_file), "--vary", "channel.qber=0.02,0.04", "--blocksize", "positive",
                 "--jobs", "1", "-o", str(page), "--latex", str(tex)]) == 0
    html_text, tex_text = page.read_text(), tex.read_text()
    assert 'id="blocksize-table"' in html_text and 'id="plot-blocksize"' in html_text
    assert hashlib.sha256(bb84_file.read_bytes()).hexdigest() in tex_text
    assert tex_text.count(r"\begin{tabular}{") == 4  # result, ledger, sweep, block size
    assert r"\lfloor" in tex_text and tex_text.count(r"\begin{") == tex_text.count(r"\end{")


def test_progress_bar_only_when_asked_or_on_a_terminal(bb84_file, capsys):
    base = ["table", str(bb84_file), "--vary", "channel.qber=0.01,0.02", "--jobs", "1", "--format", "csv"]
    assert main(base) == 0
    err = capsys.readouterr().err  # stderr is not a terminal under pytest: no bar, only the CSV's provenance
    assert "points" not in err and all(ln.startswith("# ") for ln in err.splitlines())
    assert main([*base, "--progress"]) == 0
    assert "2/2 points" in capsys.readouterr().err


def test_interrupted_table_write_leaves_no_file(bb84_file, tmp_path, monkeypatch, capsys):
    def interrupted(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr("finitekey.outputs.os.fsync", interrupted)
    dest = tmp_path / "out" / "t.csv"
    dest.parent.mkdir()
    assert main(["table", str(bb84_file), "--vary", "channel.qber=0.02", "--jobs", "1", "-o", str(dest)]) == 130
    assert list(dest.parent.iterdir()) == []
    assert "interrupted" in capsys.readouterr().err


def test_scenario_must_name_its_protocol(tmp_path, capsys):
    p = tmp_path / "anonymous.toml"
    p.write_text(BB84_TOML.replace('[protocol]\nname = "bb84"\n', "[protocol]\n"))
    assert main(["table", str(p), "--vary", "channel.qber=0.02"]) == 2
    err = capsys.readouterr().err
    assert "protocol.name" in err and "bb84" in err and "decoy-bb84" in err
