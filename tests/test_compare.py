"""``finitekey compare``: several scenario files of different protocols designed over one grid.

Outside references used here:

* ``finitekey design --json`` run on each scenario file on its own (the same numbers must come back);
* numpy for the pure-loss channel: ``eta = 10**(-loss_dB / 10)`` and the repeaterless bound
  ``-log2(1 - eta)`` of Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043 (2017), eq. (7)
  (the formula from memory; common knowledge in the field);
* exponentials ``a * 10**(-k x)``, whose log-ratio is linear in ``x``, so their crossing is known exactly.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import mpmath
import numpy as np
import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.report import compare as C
from finitekey.report import figures
from tests.scenarios import bb84_toml

ROOT = Path(__file__).resolve().parents[1]
METRO = ROOT / "examples" / "metro_datacentre.toml"
TF = ROOT / "examples" / "coastal_relay_tf.toml"


def run(capsys, argv):
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):  # an inline table (e.g. one setting of a described protocol)
        return "{" + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + "}"
    if isinstance(v, float):
        return repr(v)
    return str(v)


def toml_text(data: dict) -> str:
    """A nested mapping of scalars and lists as TOML (sections of one level, as the scenario files use)."""
    lines = []
    for section, fields in data.items():
        lines.append(f"[{section}]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in fields.items()]
        lines.append("")
    return "\n".join(lines)


def _bb84_file(tmp_path, eps_sec="1e-10") -> Path:
    p = tmp_path / "qubit_link.toml"
    p.write_text(bb84_toml("qubit link").replace("eps_sec = 1e-10", f"eps_sec = {eps_sec}"))
    return p


# ---------------------------------------------------------------------------------------------------------
# the numbers: a comparison gives what each file gives on its own
# ---------------------------------------------------------------------------------------------------------
def test_compare_rows_equal_design_of_each_file_alone(tmp_path, capsys):
    bb84 = _bb84_file(tmp_path)
    out = tmp_path / "cmp.json"
    rc, _, err = run(capsys, ["compare", METRO, bb84, "--vary", "security.eps_sec=1e-10,1e-8", "--jobs", "1",
                              "--quiet", "-o", out])
    assert rc == 0, err
    doc = json.loads(out.read_text())
    assert [s["protocol"] for s in doc["scenarios"]] == ["decoy-bb84", "bb84"]
    assert doc["caution"] and len(doc["provenance"]["inputs"]) == 2
    rows = doc["rows"]
    assert len(rows) == 4
    for r in rows:
        eps = r["point"]["security.eps_sec"]
        src = METRO if r["protocol"] == "decoy-bb84" else bb84
        text = src.read_text()
        alone = tmp_path / f"alone_{r['protocol']}_{eps:g}.toml"
        assert "eps_sec = 1e-10" in text
        alone.write_text(text.replace("eps_sec = 1e-10", f"eps_sec = {eps!r}"))
        rc, dout, err = run(capsys, ["design", alone, "--json"])
        assert rc == 0, err
        d = json.loads(dout)
        assert r["secret_key_length"] == d["secret_key_length"]
        assert r["status"] == d["status"]
        assert r["secret_key_rate_per_pulse"] == d["secret_key_rate_per_signal"]
        assert r["secret_key_length"] > 0
    # the bb84 scenario has no link model: no transmittance, no bound
    assert all(r["repeaterless_bound"] is None for r in rows if r["protocol"] == "bb84")
    assert all(r["repeaterless_bound"] is not None for r in rows if r["protocol"] == "decoy-bb84")


def test_labels_from_protocol_label_or_file_name_and_made_unique(tmp_path):
    bb84 = _bb84_file(tmp_path)
    s = C.load_scenarios([METRO, bb84, bb84])
    assert [x.label for x in s] == ["metro_datacentre", "qubit link", f"qubit link ({bb84})"]
    tf = C.load_scenarios([TF, METRO])
    assert tf[0].label == "Gull Point - Heron Island - Saltmarsh"


# ---------------------------------------------------------------------------------------------------------
# the repeaterless bound and its crossing
# ---------------------------------------------------------------------------------------------------------
def _stub_rows(monkeypatch, rates):
    """Replace the design at every point by a stub whose key rate per pulse is ``rates(protocol, x)``."""
    def fake(task):
        x = dict(task.assignments)["link.distance_km"]
        rate = rates(task.protocol, x)
        key = rate is not None and rate > 0
        return {"index": task.index, "point": dict(task.assignments), "error": None,
                "status": {"key": key, "reason": None if key else "below_one_bit",
                           "reason_text": None if key else "below one bit", "detail": ""},
                "secret_key_length": int(rate * 1e10) if key else 0, "secret_key_rate_per_pulse": rate or 0.0,
                "secret_key_rate_per_detection": None, "secret_key_rate_bps": None, "parameters": {},
                "eps_total": 1e-10, "eps_sec": 1e-10, "eps_cor": 1e-15, "block_fill_time_s": None, "ledger": [],
                "design": {"warnings": ["a default hides an effect"] if task.protocol == "decoy-bb84" else []}}
    monkeypatch.setattr(C, "evaluate_point", fake)


def test_bound_equals_minus_log2_one_minus_eta_at_every_point(monkeypatch):
    xs = [0, 120, 380]
    _stub_rows(monkeypatch, lambda proto, x: 1e-4)
    scen = C.load_scenarios([METRO, TF])
    table = C.run_compare(scen, ["link.distance_km=0,120,380"], jobs=1)
    # the link losses read from the files here (tomllib), not through finitekey
    import tomllib
    metro, tf = (tomllib.loads(p.read_text()) for p in (METRO, TF))
    loss_metro = np.array([metro["link"]["fiber_loss_db_per_km"] * x + metro["link"].get("extra_loss_db", 0.0)
                           for x in xs])
    loss_tf = np.array([tf["link"]["fiber_loss_db_per_km"] * x + tf["link"]["alice_extra_loss_db"]
                        + tf["link"]["bob_extra_loss_db"] for x in xs])
    for label, loss in ((scen[0].label, loss_metro), (scen[1].label, loss_tf)):
        eta = 10.0 ** (-loss / 10.0)
        # -log2(1 - eta) in numpy; log1p because 1 - eta cancels for eta ~ 1e-8 (plain np.log2(1 - eta) is
        # off by ~1e-8 relative there), and checked once more at 50 digits with mpmath
        want = -np.log1p(-eta) / np.log(2.0)
        with mpmath.workdps(50):
            want_mp = [float(-mpmath.log(1 - mpmath.mpf(e)) / mpmath.log(2)) for e in eta]
        np.testing.assert_allclose(want, want_mp, rtol=1e-14)
        np.testing.assert_allclose(want, -np.log2(1.0 - eta), rtol=1e-7)
        rows = [r for r in table.rows if r["point"]["scenario"] == label]
        got_eta = np.array([r["channel_transmittance"] for r in rows])
        got = np.array([r["repeaterless_bound"] for r in rows])
        np.testing.assert_allclose(got_eta, eta, rtol=1e-12)
        np.testing.assert_allclose(got, want, rtol=1e-12)
    # the figure draws exactly these values as its bound curves
    seen = {}

    def capture(curves, *a, **k):
        seen["curves"] = curves
        seen["crossings"] = k.get("crossings")
    monkeypatch.setattr(figures, "compare_figure", capture)
    figures.compare_plot(table)
    bounds = [c for c in seen["curves"] if c.kind == "bound"]
    assert len(bounds) == 2  # two links of different loss: two bounds
    wanted = sorted(tuple(-np.log1p(-10.0 ** (-loss / 10)) / np.log(2.0)) for loss in (loss_metro, loss_tf))
    got = sorted(tuple(float(y) for y in b.y) for b in bounds)
    assert [len(g) for g in got] == [len(w) for w in wanted]
    for g, w in zip(got, wanted):  # pytest.approx takes no nested sequences (pytest >= 9.1), so row by row
        assert list(g) == pytest.approx(list(w), rel=1e-12)


def test_crossing_of_two_exponentials_is_exact():
    # rate = 1e-3 * 10**(-0.01 x), bound = 10**(-0.02 x) (both per use): equal where 10**(0.01 x) = 1e3, x = 300
    xs = list(range(0, 501, 50))
    rates = [1e-3 * 10 ** (-0.01 * x) for x in xs]
    bounds = [10 ** (-0.02 * x) for x in xs]
    (c,) = C.bound_crossings(xs, rates, bounds)
    assert c["direction"] == "above" and c["between"] in ([250, 300], [300, 350])  # x = 300 is a grid point
    assert c["x"] == pytest.approx(300.0, abs=1e-9)
    # a missing point (no key) breaks the sequence: no crossing interpolated across it
    rates[6] = None
    assert C.bound_crossings(xs[5:8], rates[5:8], bounds[5:8]) == []
    # falling under the bound
    (d,) = C.bound_crossings(xs, [10 ** (-0.03 * x) * 10 for x in xs], bounds)
    assert d["direction"] == "below" and d["x"] == pytest.approx(100.0, abs=1e-9)


def test_table_notes_the_crossing_and_the_scenario_files(monkeypatch):
    # a relay-like rate that beats the bound beyond 250 km: 10**(-1.5) * 10**(-0.01 x) against the TF link's bound
    _stub_rows(monkeypatch, lambda proto, x: 10 ** (-0.01 * 0.165 * x - 4.0) if proto == "tf-sns" else None)
    scen = C.load_scenarios([METRO, TF])
    table = C.run_compare(scen, ["link.distance_km=100:500:100"], jobs=1)
    (c,) = table.crossings
    assert c["scenario"] == scen[1].label and 100 <= c["x"] <= 500
    from finitekey.report.formats import to_markdown, to_text
    text = to_text(table)
    assert f"{scen[1].label}: the key rate per pulse rises above the repeaterless bound from link.distance_km" in text
    assert str(METRO) in text and "tf-sns" in text
    assert f"warning ({scen[0].label}): a default hides an effect" in text  # whose design the warning is about
    assert "repeaterless bound [bit/channel use]" in text
    md = to_markdown(table, pivot="link.distance_km,scenario")
    assert scen[1].label in md


# ---------------------------------------------------------------------------------------------------------
# bad input: one line, exit 2, nothing written
# ---------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("case", ["one_file", "missing_field", "unknown_protocol", "two_tables"])
def test_bad_input_is_one_line_and_leaves_no_file(tmp_path, capsys, case):
    bb84 = _bb84_file(tmp_path)
    unknown = tmp_path / "mystery.toml"
    unknown.write_text('[protocol]\nname = "no-such-protocol"\n')
    outs = [tmp_path / "t.md", tmp_path / "f.png"]
    argv = {"one_file": ["compare", METRO, "--vary", "link.distance_km=10,20"],
            "missing_field": ["compare", METRO, bb84, "--vary", "link.distance_km=10,20"],
            "unknown_protocol": ["compare", METRO, unknown, "--vary", "security.eps_sec=1e-10,1e-9"],
            "two_tables": ["compare", METRO, bb84, "--vary", "security.eps_sec=1e-10", "-o", tmp_path / "x.csv"],
            }[case]
    rc, out, err = run(capsys, argv + [a for o in outs for a in ("-o", o)])
    assert rc == 2
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert out == ""
    for o in outs + [tmp_path / "x.csv"]:
        assert not o.exists()
    assert list(tmp_path.glob(".*part")) == []
    if case == "missing_field":
        assert str(bb84) in err and "link.distance_km" in err and "security.eps_sec" in err
    if case == "unknown_protocol":
        assert "no-such-protocol" in err
    if case == "one_file":
        assert "at least two scenario files" in err


def test_csv_with_sidecar_and_figure_written_together(monkeypatch, tmp_path, capsys):
    _stub_rows(monkeypatch, lambda proto, x: 10 ** (-0.01 * 0.165 * x - 4.0) if proto == "tf-sns"
               else (1e-3 * 10 ** (-0.021 * x) if x < 200 else None))
    csv_path, fig = tmp_path / "c.csv", tmp_path / "c.svg"
    rc, out, err = run(capsys, ["compare", METRO, TF, "--vary", "link.distance_km=50:450:100", "--jobs", "1",
                                "-o", csv_path, "-o", fig])
    assert rc == 0, err
    assert out == ""
    import csv as csvmod
    rows = list(csvmod.DictReader(csv_path.open()))
    assert len(rows) == 10 and {r["protocol"] for r in rows} == {"decoy-bb84", "tf-sns"}
    meta = json.loads((tmp_path / "c.csv.meta.json").read_text())
    assert meta["caution"] and len(meta["provenance"]["inputs"]) == 2
    svg = fig.read_text()
    assert 'id="bound-crossing' in svg and 'id="no-key' in svg


def test_plot_options_need_a_figure(tmp_path, capsys):
    rc, _, err = run(capsys, ["compare", METRO, _bb84_file(tmp_path), "--vary", "security.eps_sec=1e-10",
                              "--per-second"])
    assert rc == 2 and "--per-second" in err


# ---------------------------------------------------------------------------------------------------------
# every protocol keeps working in 'finitekey table'
# ---------------------------------------------------------------------------------------------------------
def default_scenario_data(proto) -> dict:
    """The protocol's default scenario as a mapping: ``as_dict()``, else its scenario module's DEFAULT_SCENARIO."""
    s = proto.default_scenario()
    if callable(getattr(s, "as_dict", None)):
        return s.as_dict()
    import importlib
    mod = importlib.import_module(type(proto).__module__ + ".scenario")
    return getattr(mod, "DEFAULT_SCENARIO")


#: Protocols whose two-point table takes long (measured on the shared 2-core machine under load), run with -m slow.
LONG_TABLES = {"described": "a numerical solve at every design step: about 24 s for two points"}


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n in LONG_TABLES else n
                                  for n in protocols.names()])  # the others: about 0.3-4 s each
def test_every_protocol_default_scenario_survives_a_two_point_table(tmp_path, capsys, name):
    proto = protocols.get(name)
    data = default_scenario_data(proto)
    assert proto.parse_scenario(data) is not None
    path = tmp_path / f"{name}.toml"
    path.write_text(toml_text(data))
    field = "security.eps_sec"
    assert field in proto.scenario_fields(), f"{name}: no {field} to vary"
    out = tmp_path / "t.json"
    rc, _, err = run(capsys, ["table", path, "--vary", f"{field}=1e-10,1e-9", "--jobs", "1", "--quiet", "-o", out])
    assert rc == 0, err
    doc = json.loads(out.read_text())
    assert len(doc["rows"]) == 2 and doc["caution"]
    assert all(r["error"] is None for r in doc["rows"]), [r["error"] for r in doc["rows"]]
    assert all(math.isfinite(r["secret_key_length"]) for r in doc["rows"])
