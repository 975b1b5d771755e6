"""Tables a specification can use: one number formatter, column choice, pivots, CSV, LaTeX, print CSS, plots.

Outside references used here:

* Python's format mini-language (``format(n, ",")``, PEP 378) for digit grouping and ``format(x, ".3e")`` for
  significant digits; ``decimal`` for exact decimal values;
* ``pandas.read_csv`` with no options, and the ``csv`` module (RFC 4180);
* ``numpy.logspace`` for log-spaced ranges;
* pdflatex (TeX Live, Debian) and its log's ``Overfull \\hbox`` warnings, when installed;
* the PNG specification (ISO/IEC 15948): IHDR width/height and pHYs pixels per metre, read by hand here;
* matplotlib's own renderer for the bounding boxes of texts and legends.
"""

from __future__ import annotations

import io
import json
import math
import re
import shutil
import struct
import subprocess
from decimal import Decimal

import numpy as np
import pytest

from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.report import formats
from finitekey.report.grid import Axis, parse_vary
from finitekey.report.html import CSS
from finitekey.report.numbers import csv_number, format_column, spell
from finitekey.report.sweep import SweepTable
from finitekey.report.tables import parse_columns, table_view

PROV = {"tool": "finitekey", "version": "0.1.0", "input": "examples/metro.toml", "input_sha256": "cd" * 32,
        "command": "finitekey table metro.toml --vary=link.distance_km=0:120:10 --vary=block.pulses=1e9,1e10,1e11"}


def _wide_table(distances=tuple(range(0, 121, 10)), pulses=(10**9, 10**10, 10**11), error_at=None):
    """A decoy-like sweep: 13 x 3 = 39 rows, 14 columns (two of them lists), rates over five decades."""
    axes = (Axis("link.distance_km", tuple(distances), "link.distance_km=0:120:10"),
            Axis("block.pulses", tuple(pulses), "block.pulses=1e9,1e10,1e11"))
    rows = []
    i = 0
    for d in distances:
        for n in pulses:
            rate = 1.8e-2 * 10 ** (-0.035 * d) * (1 + 0.1 * math.log10(n / 1e9))
            key = int(rate * n)
            r = {"index": i, "point": {"link.distance_km": d, "block.pulses": n},
                 "secret_key_length": key, "secret_key_rate_per_pulse": key / n,
                 "secret_key_rate_bps": key / n * 1e9,
                 "parameters": {"intensities": [0.55 - d * 1e-3, 0.089 + d * 1e-4, 0.0002],
                                "intensity_probabilities": [0.925, 0.0583, 0.0167],
                                "key_basis_probability": 0.9369128143069116,
                                "epsilon_split": {"count_estimation": 0.7828115368084582,
                                                  "phase_error_sampling": 0.21568846319154186,
                                                  "chain_rule": 0.00099999, "privacy_amplification": 0.0005}},
                 "eps_total": 1.0000099999999999e-10 if i % 2 else 1.00001e-10,
                 "block_fill_time_s": n / 1e9, "ledger": [], "design": {}, "error": None}
            if error_at == (d, n):
                r = {"index": i, "point": {"link.distance_km": d, "block.pulses": n},
                     "error": "ComputationError: no positive key at this point"}
            # flatten the nested split the way sweep._design_row does
            if "parameters" in r:
                p = r["parameters"]
                split = p.pop("epsilon_split")
                p.update({f"epsilon_split.{k}": v for k, v in split.items()})
            rows.append(r)
            i += 1
    return SweepTable("decoy-bb84", "design", axes, tuple(rows), None, None, dict(PROV))


def _numeric_cells(view, target):
    """Spelled cells of every all-numeric column of a view."""
    spelled = view.spelled(target)
    out = {}
    for j, c in enumerate(view.columns):
        raw = [r[j] for r in view.rows if r[j] is not None]
        if raw and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in raw):
            out[c.key] = [r[j] for r, rr in zip(spelled, view.rows) if rr[j] is not None]
    return out


# ------------------------------------------------------------------------------------------ number formatter
def test_one_notation_per_column_in_every_human_format():
    # The reported bug: 0.001 beside 1.000e-03 in one column.  Rates here span 1.8e-2 .. 1.1e-6.
    t = _wide_table()
    view = table_view(t, "all")
    sci = {"text": re.compile(r"^-?\d\.\d+e-?\d+$"), "tex": re.compile(r"^-?\d\.\d+e-?\d+$"),
           "md": re.compile(r"^-?\d\.\d+×10[⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+$"), "html": re.compile(r"^-?\d\.\d+×10[⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+$")}
    for target, pattern in sci.items():
        for key, cells in _numeric_cells(view, target).items():
            kinds = {bool(pattern.match(c)) for c in cells if c != "0"}
            assert len(kinds) == 1, (target, key, cells)  # all scientific or all plain
    rates = _numeric_cells(view, "text")["secret_key_rate_per_pulse"]
    assert all("e" in c for c in rates)
    # significant digits: 4 for rates, 3 for epsilons; reference: Python's own format(x, ".Ne")
    for c, row in zip(rates, view.rows):
        x = row[[k.key for k in view.columns].index("secret_key_rate_per_pulse")]
        assert float(c) == float(format(x, ".3e"))
    assert set(_numeric_cells(view, "text")["eps_total"]) == {"1.00e-10"}  # format(1.00001e-10, ".2e") = 1.00e-10


def test_counts_are_exact_and_grouped_like_pep_378():
    t = _wide_table()
    view = table_view(t)
    j = [c.key for c in view.columns].index("secret_key_length")
    for target, sep in (("text", " "), ("md", " "), ("html", "\u202f")):
        cells = [r[j] for r in view.spelled(target)]
        for cell, row in zip(cells, view.rows):
            n = row[j]
            want = format(n, ",").replace(",", sep) if n >= 10000 else str(n)  # reference: PEP 378 grouping
            assert cell == want
    # LaTeX: the digits go to siunitx unchanged (it groups them: group-minimum-digits=5)
    tex = formats.to_latex(t)
    assert str(view.rows[0][j]) in tex and "group-minimum-digits=5" in tex


def test_input_columns_show_the_decimal_text():
    cells = format_column([0.01, 0.1, 0.05], "input")
    assert [spell(c) for c in cells] == ["0.01", "0.10", "0.05"]  # exact, aligned decimals
    cells = format_column([10**9, 10**10, 3 * 10**11], "input")
    assert [spell(c) for c in cells] == ["1e9", "1e10", "3e11"]
    assert [spell(c, "md") for c in cells] == ["1×10⁹", "1×10¹⁰", "3×10¹¹"]
    for x in (0.02, 1e-10, 2.5e-6):  # the shortest text equals the decimal the user typed
        assert Decimal(spell(format_column([x], "input")[0])) == Decimal(str(x))


def test_keylength_and_bound_text_tables_use_the_same_formatter():
    from finitekey.cli.render import fmt
    from finitekey.report.numbers import format_number
    for x in (4100179, 0.0219898, 1e-20, 123456.789, 0.5):
        assert fmt(x) == format_number(x, "real", "text", sig=6, trim=True)
    assert fmt(4100179) == "4 100 179" and fmt(1e-20) == "1e-20" and fmt(0.5) == "0.5"
    assert fmt(0.021989828111791596) == "0.0219898" and fmt(123456.789) == "1.23457e5"


# ------------------------------------------------------------------------------------------ CSV
def test_csv_reads_with_pandas_with_no_options():
    pandas = pytest.importorskip("pandas")  # in the test extra; reference: pandas' own CSV parser
    t = _wide_table(error_at=(120, 10**9))
    text = formats.to_csv(t)
    df = pandas.read_csv(io.StringIO(text))
    assert list(df.columns) == [k for k, _, _ in t.columns()]
    assert len(df) == 39
    assert df["secret_key_length"].dtype.kind == "f"  # one missing value: pandas gives float with NaN
    assert df["link.distance_km"].dtype.kind == "i" and df["secret_key_rate_per_pulse"].dtype.kind == "f"
    ok = [r for r in t.rows if not r.get("error")]
    got = df[df["error"].isna()]
    assert [float(x) for x in got["secret_key_rate_per_pulse"]] == [r["secret_key_rate_per_pulse"] for r in ok]
    # epsilons: rounded up to 15 significant digits (no 1.0000099999999999e-10 binary noise), never below
    assert set(df["eps_total"].dropna()) == {1.00001e-10}
    assert all(float(csv_number(r["eps_total"], "epsilon")) >= r["eps_total"] for r in ok)
    assert "1.0000099999999999e-10" not in text and "#" not in text.splitlines()[0]


def test_csv_sidecar_written_with_the_csv(tmp_path, capsys):
    scenario = tmp_path / "link.toml"
    scenario.write_text("[protocol]\nname = \"bb84\"\n[channel]\nqber = 0.02\n[budget]\nsignals = 1e10\n"
                        "detection_probability = 1e-3\nsignal_rate_hz = 1e9\n[security]\neps_sec = 1e-10\n"
                        "eps_cor = 1e-15\n")
    out = tmp_path / "t.csv"
    assert main(["table", str(scenario), "--vary", "channel.qber=0.01,0.02", "--jobs", "1", "-o", str(out)]) == 0
    import csv
    import hashlib
    rows = list(csv.reader(io.StringIO(out.read_text())))
    assert rows[0][0] == "channel.qber" and [r[0] for r in rows[1:]] == ["0.01", "0.02"]
    side = json.loads((tmp_path / "t.csv.meta.json").read_text())
    assert side["caution"].startswith("Caution")
    assert side["provenance"]["input_sha256"] == hashlib.sha256(scenario.read_bytes()).hexdigest()
    assert side["provenance"]["version"] and "--vary=channel.qber=0.01,0.02" in side["provenance"]["command"]
    assert side["csv_sha256"] == hashlib.sha256(out.read_bytes()).hexdigest()


# ------------------------------------------------------------------------------------------ columns and pivot
def test_columns_choose_and_order():
    t = _wide_table()
    keys = parse_columns("secret_key_length,link.distance_km", t)
    assert keys == ["secret_key_length", "link.distance_km"]
    view = table_view(t, "secret_key_length,link.distance_km")
    assert [c.key for c in view.columns] == keys and view.rows[3] == (t.rows[3]["secret_key_length"], 10)
    assert parse_columns("default,parameters.intensities", t)[-1] == "parameters.intensities"
    assert parse_columns("all", t) == [k for k, _, _ in t.columns()]
    assert len(parse_columns(None, t)) <= 8  # the default set is narrow
    with pytest.raises(InputError) as info:
        parse_columns("secret_key_lenght", t)
    msg = str(info.value)
    assert "secret_key_lenght" in msg and "secret_key_length" in msg and "parameters.intensities" in msg
    assert "\n" not in msg


def test_unknown_column_on_the_command_line_is_one_line_exit_2(tmp_path, capsys):
    scenario = tmp_path / "s.toml"
    scenario.write_text("[protocol]\nname = \"bb84\"\n[channel]\nqber = 0.02\n[budget]\nsignals = 1e10\n"
                        "detection_probability = 1e-3\n")
    assert main(["table", str(scenario), "--vary", "channel.qber=0.01,0.02", "--columns", "nope"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "nope" in err and "secret_key_length" in err and "Traceback" not in err


def test_pivot_rows_columns_cells():
    t = _wide_table()
    view = table_view(t, pivot="link.distance_km,block.pulses")
    assert [r[0] for r in view.rows] == list(range(0, 121, 10))
    assert len(view.columns) == 4
    by_point = {(r["point"]["link.distance_km"], r["point"]["block.pulses"]): r for r in t.rows}
    for row in view.rows:
        for n, cell in zip((10**9, 10**10, 10**11), row[1:]):
            assert cell == by_point[(row[0], n)]["secret_key_rate_per_pulse"]
    md = formats.to_markdown(t, pivot="link.distance_km,block.pulses,secret_key_length")
    assert "| link.distance_km \\ block.pulses | 1×10⁹ | 1×10¹⁰ | 1×10¹¹ |" in md
    doc = json.loads(formats.to_json(t, pivot="block.pulses,link.distance_km"))
    assert doc["pivot"]["row_values"] == [10**9, 10**10, 10**11] and len(doc["pivot"]["cells"][0]) == 13
    for bad in ("link.distance_km", "link.distance_km,link.distance_km", "link.distance_km,nope",
                "link.distance_km,block.pulses,nope"):
        with pytest.raises(InputError):
            table_view(t, pivot=bad)


# ------------------------------------------------------------------------------------------ log ranges
@pytest.mark.parametrize("start,stop,n", [(1e6, 1e12, 7), (1e6, 1e7, 3), (1e-3, 1.0, 10), (5.0, 0.05, 5),
                                          (1e9, 3e11, 13)])
def test_log_range_matches_numpy_logspace(start, stop, n):
    got = parse_vary(f"f={start!r}:{stop!r}:log{n}").values
    want = np.logspace(math.log10(start), math.log10(stop), n)  # reference: numpy.logspace
    assert len(got) == n
    np.testing.assert_allclose(np.array(got, dtype=float), want, rtol=1e-13)
    assert float(got[0]) == start and float(got[-1]) == stop  # both ends exactly as typed


def test_log_range_decades_are_exact_integers_and_errors():
    assert parse_vary("block.pulses=1e6:1e12:log7").values == tuple(10**k for k in range(6, 13))
    for bad in ("f=0:10:log3", "f=-1:10:log3", "f=1:10:log1", "f=1:10:logx", "f=1:10:log200001"):
        with pytest.raises(InputError):
            parse_vary(bad)


# ------------------------------------------------------------------------------------------ LaTeX
def test_latex_uses_booktabs_and_siunitx_columns():
    t = _wide_table()
    tex = formats.to_latex(t)
    assert r"\toprule" in tex and r"\midrule" in tex and r"\bottomrule" in tex and r"\hline" not in tex
    assert re.search(r"S\[table-format=\d+\.\d+e-\d\]", tex)  # scientific S column (key rate)
    assert "% needs \\usepackage{booktabs,siunitx" in tex
    wide = formats.to_latex(t, columns="all")
    assert r"\begin{landscape}" in wide and r"\begin{longtable}" in wide and "(part 1 of" in wide


def _compile(tmp_path, fragment):
    engine = shutil.which("pdflatex")
    if engine is None:
        pytest.skip("no pdflatex installed (apt-get install texlive-latex-base texlive-latex-recommended "
                    "texlive-science); the LaTeX structure is checked without it")
    doc = tmp_path / "doc.tex"
    doc.write_text("\\documentclass{article}\n\\usepackage{booktabs,siunitx,longtable,pdflscape}\n"
                   "\\begin{document}\n" + fragment + "\\end{document}\n")
    res = subprocess.run([engine, "-interaction=nonstopmode", "-halt-on-error", doc.name], cwd=tmp_path,
                         capture_output=True, text=True, timeout=120, check=False)
    log = (tmp_path / "doc.log").read_text(errors="replace")
    assert res.returncode == 0, res.stdout[-3000:]
    return log


@pytest.mark.parametrize("kw", [{}, {"columns": "all"}, {"pivot": "link.distance_km,block.pulses"},
                                {"pivot": "block.pulses,link.distance_km"}],
                         ids=["default", "all-columns", "pivot", "pivot-transposed"])
def test_latex_compiles_without_overfull_boxes(tmp_path, kw):
    # The reported bug: 39 rows x 14 columns overflowed the page by about 1100 pt.
    log = _compile(tmp_path, formats.to_latex(_wide_table(error_at=(60, 10**10)), **kw))
    assert "Overfull" not in log, [ln for ln in log.splitlines() if "Overfull" in ln]


# ------------------------------------------------------------------------------------------ HTML print CSS
def test_print_css_lets_wide_tables_wrap():
    m = re.search(r"@media print\s*\{(.*)\}\s*$", CSS.strip(), re.S)
    assert m, "no print style sheet"
    rules = dict((sel.strip(), body) for sel, body in re.findall(r"([^{}]+)\{([^{}]*)\}", m.group(1)))
    assert "overflow:visible" in rules[".scroll"].replace(" ", "")
    assert "white-space:normal" in rules["th, td"].replace(" ", "")
    assert "white-space:nowrap" in rules["td.num"].replace(" ", "")  # a number is never broken inside
    assert "width:100%" in rules["table"].replace(" ", "")
    assert "table-header-group" in rules["thead"]
    assert "landscape" in rules["@page wide"] and "page:wide" in rules[".wide"].replace(" ", "")


def test_report_sweep_table_has_default_columns_and_one_notation():
    from finitekey.report.html import _sweep_section
    html_text = _sweep_section(_wide_table(), "sweep-table")
    assert html_text.count("<th>") == len(table_view(_wide_table()).columns) <= 7
    assert "e-0" not in html_text and "×10⁻" in html_text
    assert 'class="scroll"' in html_text  # fits a portrait page
    wide = _sweep_section(_wide_table(), "sweep-table", "all")
    assert 'class="scroll wide"' in wide  # printed on a landscape page
    assert "\u202f" in wide  # counts grouped with narrow no-break spaces: never broken across lines


def test_printed_report_puts_a_wide_table_on_a_landscape_page(tmp_path):
    # Reference: headless Chromium's own print to PDF; the PDF's page boxes (/MediaBox) are plain text.
    chromium = shutil.which("chromium")
    if chromium is None:
        pytest.skip("needs chromium (apt-get install -y chromium)")
    scenario = tmp_path / "link.toml"
    scenario.write_text("[protocol]\nname = \"bb84\"\n[channel]\nqber = 0.02\n[budget]\nsignals = 1e10\n"
                        "detection_probability = 1e-3\nsignal_rate_hz = 1e9\n[security]\neps_sec = 1e-10\n"
                        "eps_cor = 1e-15\n")
    page = tmp_path / "r.html"
    assert main(["report", str(scenario), "--vary", "channel.qber=0.01:0.05:0.01", "--columns", "all",
                 "--jobs", "1", "-o", str(page)]) == 0
    pdf = tmp_path / "r.pdf"
    res = subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                          "--disable-background-networking", f"--user-data-dir={tmp_path / 'profile'}",
                          f"--print-to-pdf={pdf}", "--no-pdf-header-footer", page.as_uri()],
                         capture_output=True, text=True, timeout=120, check=False)
    assert pdf.exists(), res.stderr[-2000:]
    boxes = re.findall(rb"/MediaBox \[0 0 ([\d.]+) ([\d.]+)\]", pdf.read_bytes())
    assert any(float(w) < float(h) for w, h in boxes)  # portrait pages
    assert any(float(w) > float(h) for w, h in boxes)  # and the landscape page of the wide sweep table


# ------------------------------------------------------------------------------------------ plots
def _png_size_and_dpi(data: bytes):
    """IHDR width/height and pHYs pixels per metre (PNG specification, ISO/IEC 15948, 11.2.2 and 11.3.5.3)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", data[16:24])
    pos = data.find(b"pHYs")
    ppm_x, _, unit = struct.unpack(">IIB", data[pos + 4:pos + 13])
    assert unit == 1  # metre
    return width, height, ppm_x * 0.0254


def _rate_fig(size=None):
    from finitekey.report.plots import Curve, rate_figure
    x = tuple(range(0, 161, 20))
    eta = [10 ** (-0.021 * d) for d in x]
    curves = [Curve("pulses per block = 1e9", x, tuple(1e-2 * e for e in eta)),
              Curve("pulses per block = 1e11", x, tuple(2e-2 * e for e in eta)),
              Curve("asymptotic rate (infinite block, same devices)", x, tuple(3e-2 * e for e in eta),
                    kind="asymptotic"),
              Curve("repeaterless bound −log₂(1−η), η = link transmittance (detector excluded)", x,
                    tuple(-math.log2(1 - 0.999 * e) for e in eta), kind="bound")]
    return rate_figure(curves, "distance (km)", title="metro_datacentre (decoy-bb84): secret key rate",
                       note="finitekey 0.1.0 · input sha256 be4137ccdf2e", size=size)


@pytest.mark.parametrize("size,dpi", [(None, None), ((3.5, 2.6), 200.0), ((10.0, 6.0), 72.0)])
def test_plot_size_and_dpi_set_the_png(size, dpi):
    from finitekey.report.plots import DEFAULT_DPI, DEFAULT_SIZE, figure_bytes
    w, h, got_dpi = _png_size_and_dpi(figure_bytes(_rate_fig(size), "png", dpi=dpi))
    size, dpi = size or DEFAULT_SIZE, dpi or DEFAULT_DPI
    assert (w, h) == (round(size[0] * dpi), round(size[1] * dpi))
    assert abs(got_dpi - dpi) < 0.01 * dpi


@pytest.mark.parametrize("size", [None, (3.5, 2.6), (5.0, 3.0)])
def test_plot_texts_do_not_collide_and_legend_is_off_the_data(size):
    fig = _rate_fig(size)
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    fig_box = fig.bbox
    ax = fig.axes[0]
    stamp = [t for t in fig.texts if t.get_gid() == "provenance-stamp"][0]
    (x0, x1), (y0, y1) = sorted(ax.get_xlim()), sorted(ax.get_ylim())
    ticks = [t for t in ax.get_xticklabels() if t.get_text() and x0 <= t.get_position()[0] <= x1]
    ticks += [t for t in ax.get_yticklabels() if t.get_text() and y0 <= t.get_position()[1] <= y1]
    texts = [ax.title, ax.xaxis.label, ax.yaxis.label] + ticks  # the tick labels drawn (inside the limits)
    legend = fig.legends[0]
    sb = stamp.get_window_extent(r)
    for t in texts + [legend]:
        bb = t.get_window_extent(r)
        assert not sb.overlaps(bb), t
    for t in texts + [legend, stamp]:  # everything inside the figure (1 px tolerance)
        bb = t.get_window_extent(r)
        assert bb.x0 >= fig_box.x0 - 1 and bb.x1 <= fig_box.x1 + 1 and bb.y0 >= -1 and bb.y1 <= fig_box.y1 + 1, t
    assert not legend.get_window_extent(r).overlaps(ax.get_window_extent(r))  # the legend hides no data
    labels = [t.get_text() for t in legend.get_texts()]
    assert any("shaded" in s for s in labels)  # the band has a legend entry


def test_plot_command_size_dpi_and_scenario_title(tmp_path, capsys):
    scenario = tmp_path / "riverside_link.toml"
    scenario.write_text("[protocol]\nname = \"bb84\"\n[channel]\nqber = 0.02\n[budget]\nsignals = 1e10\n"
                        "detection_probability = 1e-3\nsignal_rate_hz = 1e9\n[security]\neps_sec = 1e-10\n"
                        "eps_cor = 1e-15\n")
    out = tmp_path / "r.png"
    base = ["plot", str(scenario), "--vary", "channel.qber=0.01:0.05:0.01", "--jobs", "1"]
    assert main([*base, "--size", "4x3", "--dpi", "150", "-o", str(out)]) == 0
    w, h, dpi = _png_size_and_dpi(out.read_bytes())
    assert (w, h) == (600, 450) and abs(dpi - 150) < 1.5
    for bad in (["--size", "4"], ["--size", "1x1"], ["--dpi", "10"], ["--dpi", "x"]):
        assert main([*base, *bad, "-o", str(tmp_path / "bad.png")]) == 2
        assert "Traceback" not in capsys.readouterr().err
    assert not (tmp_path / "bad.png").exists()
    from finitekey.report.figures import rate_plot
    from finitekey.report.sweep import load_scenario, run_sweep
    loaded = load_scenario(scenario)
    fig = rate_plot(run_sweep(loaded, ["channel.qber=0.01,0.03"], jobs=1, progress=False), loaded)
    assert "riverside_link" in fig.axes[0].get_title(loc="left")


def test_csv_and_sidecar_are_written_both_or_neither(tmp_path, capsys):
    # The sidecar goes through the same all-or-nothing write as the CSV (finitekey.outputs): when the sidecar's
    # name is taken by a directory, the command stops before the sweep and writes no CSV.
    scenario = tmp_path / "link.toml"
    scenario.write_text("[protocol]\nname = \"bb84\"\n[channel]\nqber = 0.02\n[budget]\nsignals = 1e10\n"
                        "detection_probability = 1e-3\n")
    (tmp_path / "t.csv.meta.json").mkdir()
    assert main(["table", str(scenario), "--vary", "channel.qber=0.01,0.02", "--jobs", "1",
                 "-o", str(tmp_path / "t.csv")]) == 2
    err = capsys.readouterr().err
    assert "t.csv.meta.json" in err and err.count("\n") == 1
    assert not (tmp_path / "t.csv").exists()
