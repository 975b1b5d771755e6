"""Report building blocks that need no protocol: grids, formats, atomic writes, plots, formula, HTML.

Outside references used here: Python's ``csv`` and ``json`` parsers and
``html.parser`` (each output must parse with them), exact decimal arithmetic
(``fractions.Fraction``) for the range grid, the PNG signature of the PNG
specification (ISO/IEC 15948, bytes 89 50 4E 47 0D 0A 1A 0A), and
``matplotlib.image`` decoding the pixels back.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import math
import os
import re
from fractions import Fraction
from html.parser import HTMLParser

import numpy as np
import pytest

from finitekey.errors import InputError
from finitekey.files import atomic_write
from finitekey.report import formats
from finitekey.report.formula import mathtext_source, render_formula
from finitekey.report.grid import Axis, expand_grid, parse_vary
from finitekey.report.plots import Curve, axis_label, figure_bytes, ledger_figure, rate_figure, use_log
from finitekey.report.sweep import SweepTable

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


# ----------------------------------------------------------------------------------------------- grid
def test_range_matches_exact_rational_grid():
    # reference: the grid start + i*step computed in exact rationals, stop included iff it lands on the grid
    for text, (a, b, s) in {"0:150:10": ("0", "150", "10"), "0:1:0.3": ("0", "1", "0.3"),
                            "0.01:0.11:0.01": ("0.01", "0.11", "0.01"), "5:1:-2": ("5", "1", "-2")}.items():
        a, b, s = Fraction(a), Fraction(b), Fraction(s)
        want = []
        x = a
        while (x - b) * (1 if s > 0 else -1) <= 0:
            want.append(x)
            x += s
        got = parse_vary(f"f={text}").values
        assert len(got) == len(want), text
        assert all(Fraction(g) == w if isinstance(g, int) else abs(g - float(w)) == 0.0 for g, w in zip(got, want))


def test_range_inclusive_stop_and_no_drift():
    vals = parse_vary("link.distance_km=0:150:10").values
    assert vals[0] == 0 and vals[-1] == 150 and len(vals) == 16
    assert all(isinstance(v, int) for v in vals)
    q = parse_vary("q=0:0.1:0.01").values
    assert len(q) == 11 and q[-1] == 0.1  # 0.1 exactly as float('0.1'); float accumulation would give 0.09999...
    assert parse_vary("q=0:1:0.3").values == (0, 0.3, 0.6, 0.9)  # 1 is not on the grid


def test_list_values_types():
    ax = parse_vary("block.pulses=1e6,1e8,1e10")
    assert ax.values == (10**6, 10**8, 10**10) and all(isinstance(v, int) for v in ax.values)
    assert parse_vary("x=0.5, 2.5").values == (0.5, 2.5)
    assert parse_vary("s=exact,serfling").values == ("exact", "serfling")


@pytest.mark.parametrize("text", ["nofield", "=1,2", "f=", "f=1,,2", "f=0:10", "f=0:10:0", "f=10:0:1",
                                  "f=a:b:c", "f=0:1e9:1", "f=1:inf:1"])
def test_bad_vary_expressions(text):
    with pytest.raises(InputError) as info:
        parse_vary(text)
    assert "expected" in str(info.value)


def test_unknown_field_lists_valid_fields():
    with pytest.raises(InputError) as info:
        parse_vary("link.distanse_km=0:10:5", ["link.distance_km", "block.pulses"])
    msg = str(info.value)
    assert "link.distanse_km" in msg and "link.distance_km" in msg and "block.pulses" in msg


def test_grid_is_cartesian_first_axis_slowest():
    a = parse_vary("a=1,2,3")
    b = parse_vary("b=10,20")
    grid = expand_grid([a, b])
    assert [p.as_dict() for p in grid] == [{"a": x, "b": y} for x in (1, 2, 3) for y in (10, 20)]
    assert [p.index for p in grid] == list(range(6))
    assert len(expand_grid([])) == 1 and expand_grid([])[0].assignments == ()
    with pytest.raises(InputError):
        expand_grid([a, parse_vary("a=5")])


# ----------------------------------------------------------------------------------------------- formats
def _ledger():
    return [{"name": "error_verification", "epsilon": 1e-15, "role": "correctness", "weight": 1,
             "contribution": 1e-15, "description": "hash"},
            {"name": "smoothing", "epsilon": 2.5e-11, "role": "secrecy", "weight": 2, "contribution": 5e-11,
             "description": "smoothing"},
            {"name": "privacy_amplification", "epsilon": 5e-11, "role": "secrecy", "weight": 1,
             "contribution": 5e-11, "description": "hashing"},
            {"name": "parameter_estimation", "epsilon": 6.25e-22, "role": "secrecy", "weight": 0,
             "contribution": 0.0, "description": "enters via smoothing"}]


def _table(mode="design", error_row=False):
    axes = (Axis("link.distance_km", (0, 50), "link.distance_km=0:50:50"), Axis("block.pulses", (10**8,), ""))
    rows = []
    for i, d in enumerate((0, 50)):
        r = {"index": i, "point": {"link.distance_km": d, "block.pulses": 10**8},
             "secret_key_length": 123456 - i, "secret_key_rate_per_pulse": 1.23456789e-3 / (i + 1),
             "secret_key_rate_bps": 1.2345e5 / (i + 1), "parameters": {"mu": 0.5, "p_x": 0.9, "note|x": "a&b_c"},
             "eps_total": 1.0000000000000001e-10, "block_fill_time_s": 3.5, "ledger": _ledger(),
             "design": {"expected": {"ledger": _ledger()}}, "error": None}
        if mode == "blocksize":
            r.update(block_size=10**6 * (i + 1), block_size_kind="pulses", target="positive")
        rows.append(r)
    if error_row:
        rows.append({"index": 2, "point": {"link.distance_km": 900, "block.pulses": 10**8},
                     "error": "ComputationError: no key"})
    return SweepTable("demo", mode, axes, tuple(rows), None, "positive" if mode == "blocksize" else None,
                      {"tool": "finitekey", "version": "0.1.0", "input": "s.toml", "input_sha256": "ab" * 32,
                       "command": "finitekey table s.toml --vary=link.distance_km=0:50:50"})


def test_csv_parses_and_keeps_full_precision():
    t = _table(error_row=True)
    text = formats.to_csv(t)
    rows = list(csv.DictReader(io.StringIO(text)))  # reference: the csv module (RFC 4180 dialect)
    assert len(rows) == 3
    assert float(rows[0]["secret_key_rate_per_pulse"]) == 1.23456789e-3
    assert float(rows[0]["eps_total"]) == 1.0000000000000001e-10  # repr round-trips exactly
    assert rows[0]["parameters.note|x"] == "a&b_c"
    assert rows[2]["secret_key_length"] == "" and "no key" in rows[2]["error"]
    side = json.loads(formats.csv_sidecar(t, text, "t.csv"))  # provenance and caution live in the sidecar
    assert side["provenance"]["input_sha256"] == "ab" * 32 and side["provenance"]["command"].startswith(
        "finitekey table") and side["caution"].startswith("Caution")


def test_json_parses_with_ledger_and_provenance():
    d = json.loads(formats.to_json(_table()))
    assert d["provenance"]["input_sha256"] == "ab" * 32
    assert d["rows"][0]["ledger"][1]["weight"] == 2
    assert [c["key"] for c in d["columns"]][:2] == ["link.distance_km", "block.pulses"]
    bad = _table()
    bad.rows[0]["eps_total"] = math.nan
    with pytest.raises(ValueError):
        formats.to_json(bad)


def test_markdown_structure():
    text = formats.to_markdown(_table("blocksize"), columns="all")
    lines = [ln for ln in text.splitlines() if ln.startswith("|")]
    ncol = len(_table("blocksize").columns())
    assert len(lines) == 2 + 2
    for ln in lines:  # every row has the same number of unescaped pipes
        assert len(re.findall(r"(?<!\\)\|", ln)) == ncol + 1
    assert "block size" in lines[0] and "note\\|x" in lines[0]
    assert "0.001235" in lines[2]


def _latex_balanced(text: str) -> None:
    body = "\n".join(ln for ln in text.splitlines() if not ln.lstrip().startswith("%"))
    stripped = re.sub(r"\\\\|\\[{}$%&_#]", "", body)  # \\ (new line) first, then escaped specials
    depth = 0
    for ch in stripped:
        depth += {"{": 1, "}": -1}.get(ch, 0)
        assert depth >= 0
    assert depth == 0
    assert stripped.count("$") % 2 == 0
    envs = re.findall(r"\\(begin|end)\{(\w+\*?)\}", body)
    stack = []
    for kind, name in envs:
        if kind == "begin":
            stack.append(name)
        else:
            assert stack and stack.pop() == name
    assert not stack


def test_latex_structure_and_escaping():
    t = _table()
    text = formats.to_latex(t, columns="all")
    _latex_balanced(text)
    ncol = len(t.columns())
    for ln in text.splitlines():
        if ln.endswith(r"\\") and not ln.startswith(r"\multicolumn") and not ln.startswith(r"\caption"):
            assert len(re.findall(r"(?<!\\)&", ln)) == ncol - 1
    assert r"a\&b\_c" in text and "0.001235" in text  # 0.001235 is printed plainly
    assert "1.00e-10" in text  # an epsilon: scientific, typeset by siunitx


def test_render_table_rejects_unknown_format():
    with pytest.raises(InputError):
        formats.render_table(_table(), "xlsx")
    assert formats.format_for_path("a/b.CSV") == "csv" and formats.format_for_path("x") == "md"


# ----------------------------------------------------------------------------------------------- atomic writes
def test_interrupted_write_leaves_no_partial_file(tmp_path, monkeypatch):
    target = tmp_path / "table.csv"
    target.write_text("old complete content\n")

    def boom(fd):
        raise KeyboardInterrupt("simulated interruption after the data was written")

    monkeypatch.setattr("finitekey.outputs.os.fsync", boom)
    with pytest.raises(KeyboardInterrupt):
        atomic_write(target, formats.to_csv(_table()))
    assert target.read_text() == "old complete content\n"  # old file intact
    assert sorted(os.listdir(tmp_path)) == ["table.csv"]  # no temporary left behind
    new = tmp_path / "new.md"
    with pytest.raises(KeyboardInterrupt):
        atomic_write(new, formats.to_markdown(_table()))
    assert not new.exists() and os.listdir(tmp_path) == ["table.csv"]


# ----------------------------------------------------------------------------------------------- plots
def _decode_png(data: bytes) -> np.ndarray:
    import matplotlib.image as mpimg
    assert data[:8] == PNG_SIGNATURE
    return mpimg.imread(io.BytesIO(data), format="png")


def test_rate_figure_draws_every_curve_and_is_deterministic():
    x = tuple(range(0, 101, 10))
    eta = [0.5 * 10 ** (-0.02 * d) for d in x]
    curves = [Curve("block = 1e8", x, tuple(1e-3 * e for e in eta)),
              Curve("block = 1e10", x, tuple(2e-3 * e for e in eta)),
              Curve("asymptotic", x, tuple(3e-3 * e for e in eta), kind="asymptotic"),
              Curve("repeaterless bound", x, tuple(-math.log2(1 - e) for e in eta), kind="bound")]
    fig = rate_figure(curves, axis_label("link.distance_km"), title="t")
    ax = fig.axes[0]
    assert ax.get_yscale() == "log" and ax.get_xscale() == "linear"
    assert ax.get_xlabel() == "distance (km)" and "bit" in ax.get_ylabel()
    legend = [t.get_text().replace("\n", " ") for t in fig.legends[0].get_texts()]
    assert legend[:4] == [c.label for c in curves] and "shaded" in legend[4]  # the band has an entry too
    png = figure_bytes(fig, "png")
    img = _decode_png(png)
    assert img.shape[0] > 300 and img.shape[1] > 500
    assert float(img[..., :3].std()) > 0.05  # not blank
    svg = [figure_bytes(rate_figure(curves, "d", title="t"), "svg") for _ in range(2)]
    assert svg[0] == svg[1]
    assert figure_bytes(fig, "pdf")[:5] == b"%PDF-"


def test_rate_figure_drops_nonpositive_points_and_refuses_empty():
    fig = rate_figure([Curve("a", (1, 2, 3), (1e-3, 0.0, None))], "x")
    line = fig.axes[0].get_lines()[0]
    assert list(line.get_xdata()) == [1.0]
    with pytest.raises(InputError):
        rate_figure([Curve("a", (1, 2), (0.0, 0.0))], "x")


def test_ledger_figure_bars_and_total():
    led = _ledger()
    fig = ledger_figure(led)
    ax = fig.axes[0]
    widths = sorted(p.get_width() for p in ax.patches if p.get_width() > 0)
    assert widths == sorted([1e-15, 5e-11, 5e-11, 6.25e-22])
    total_line = [ln for ln in ax.get_lines() if ln.get_gid() == "total-epsilon"][0]
    assert total_line.get_xdata()[0] == pytest.approx(1e-15 + 1e-10, rel=1e-12)
    with pytest.raises(InputError):
        ledger_figure([])


def test_axis_labels_and_log_choice():
    assert axis_label("link.fiber_loss_db_per_km") == "fiber loss (dB/km)"
    assert axis_label("block.pulses") == "pulses per block"
    assert axis_label("channel.qber") == "QBER (fraction)"
    assert use_log([1e6, 1e8]) and not use_log([0, 10, 100]) and not use_log([1, 50])


def test_no_global_rcparams_change():
    import matplotlib
    before = dict(matplotlib.rcParams)
    figure_bytes(ledger_figure(_ledger()), "png")
    after = dict(matplotlib.rcParams)
    assert before == after


# ----------------------------------------------------------------------------------------------- formula
def test_formula_renders_sympy_latex_to_svg():
    import sympy as sp
    n, e, eps = sp.symbols("n e_ph epsilon_PA", positive=True)
    latex = r"\ell = \left\lfloor " + sp.latex(n * (1 - e) - 2 * sp.log(1 / (2 * eps), 2)) + r" \right\rfloor"
    r = render_formula(latex)
    assert r.ok and r.data.lstrip().startswith("<?xml") and "<svg" in r.data and "<path" in r.data
    png = render_formula(latex, fmt="png")
    assert png.ok and png.data[:8] == PNG_SIGNATURE


def test_formula_rewrites_and_fallback():
    assert mathtext_source(r"\operatorname{leak}_{EC} + \text{bits}") == r"\mathrm{leak}_{EC} + \mathrm{bits}"
    assert render_formula(r"\operatorname{leak}_{EC},\quad \text{x}").ok
    bad = render_formula(r"\frac{1}{")
    assert not bad.ok and bad.data is None and "mathtext" in bad.message


# ----------------------------------------------------------------------------------------------- html
class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.imgs, self.stack_errors, self.refs = set(), [], 0, []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.imgs.append(a)
        for k in ("src", "href"):
            if a.get(k):
                self.refs.append(a[k])


def _report_data():
    from finitekey.report.build import Figure, ReportData
    t = _table()
    png = figure_bytes(ledger_figure(_ledger()), "png")
    row = dict(t.rows[0])
    row["design"] = {"expected": {"ledger": _ledger(), "terms": {"min_entropy": 1e5}, "estimates": {"phi": 0.02},
                                  "eps_total": 1e-10, "eps_sec": 1e-10, "eps_cor": 1e-15, "statistics": "exact",
                                  "formula": r"\ell = n - \operatorname{leak}_{EC}"},
                     "expected_counts": {"key_detections": 1000}, "scenario": {"link": {"distance_km": 0}}}
    return ReportData("demo", "demo report <&>", {"protocol": {"name": "demo"}, "link": {"distance_km": 0}},
                      {"link": {"distance_km": 0}}, row, render_formula(r"\ell = n - \operatorname{leak}_{EC}"),
                      t, None, (Figure("plot-ledger", "ledger", png),), ("assumption one", "two"),
                      ("A. Author, J. 1, 2 (2000)",), t.provenance)


def test_html_is_self_contained_and_well_formed():
    from finitekey.report.html import to_html
    page = to_html(_report_data())
    p = _Collector()
    p.feed(page)
    for ident in ("formula", "summary", "parameters-table", "ledger-table", "sweep-table", "assumptions",
                  "references", "cautions", "provenance", "plot-ledger"):
        assert ident in p.ids, ident
    # offline: every src/href is inline data or an in-page anchor; no scripts, no external style sheets
    assert all(ref.startswith("data:") or ref.startswith("#") for ref in p.refs), p.refs
    assert "<script" not in page and "<link" not in page and "@import" not in page
    img = p.imgs[0]
    data = base64.b64decode(img["src"].split(",", 1)[1])
    assert data[:8] == PNG_SIGNATURE
    assert "demo report &lt;&amp;&gt;" in page  # escaped
    assert page.count("<svg") == 1 and "Caution" in page


def test_report_latex_fragment_structure():
    from finitekey.report.latex import report_latex, wrap_document
    tex = report_latex(_report_data())
    _latex_balanced(tex)
    _latex_balanced(wrap_document(tex))
    assert r"\operatorname{leak}_{EC}" in tex and r"\begin{tabular}" in tex


def test_latex_compiles_when_a_tex_engine_exists(tmp_path):
    import shutil
    import subprocess
    engine = next((e for e in ("pdflatex", "lualatex", "xelatex") if shutil.which(e)), None)
    if engine is None:
        pytest.skip("no TeX engine installed; the LaTeX output is checked structurally instead")
    from finitekey.report.latex import report_latex, wrap_document
    doc = tmp_path / "doc.tex"
    doc.write_text(wrap_document(report_latex(_report_data()) + formats.to_latex(_table("blocksize"))))
    res = subprocess.run([engine, "-interaction=nonstopmode", "-halt-on-error", doc.name], cwd=tmp_path,
                         capture_output=True, text=True, timeout=120, check=False)
    assert res.returncode == 0, res.stdout[-3000:]
    assert (tmp_path / "doc.pdf").read_bytes()[:5] == b"%PDF-"


def test_latex_escape_handles_unicode_symbols():
    out = formats.latex_escape("eta × 2 ≤ ε_s − 1, 50%")
    assert out == r"eta \ensuremath{\times} 2 \ensuremath{\le} \ensuremath{\varepsilon}\_s - 1, 50\%"
    assert all(ord(c) < 128 for c in out)


def test_input_error_pickles_and_atomic_write_uses_normal_permissions(tmp_path):
    # Errors cross process boundaries in parallel sweeps; output files must not end up private (0600).
    import os
    import pickle

    from finitekey.errors import InputError
    from finitekey.files import atomic_write

    err = pickle.loads(pickle.dumps(InputError("link.distance_km", -1.0, "a real number in [0, inf)")))
    assert isinstance(err, InputError) and err.field == "link.distance_km" and "-1.0" in str(err)
    umask = os.umask(0o022)
    try:
        atomic_write(tmp_path / "t.txt", "x")
    finally:
        os.umask(umask)
    assert (os.stat(tmp_path / "t.txt").st_mode & 0o777) == 0o644


def test_every_figure_format_carries_the_caution():
    # House rule: every output carries the caution of finitekey.cautions, figures included.  It goes into
    # the metadata: PNG "Disclaimer" text chunk (a keyword registered in the PNG specification, 11.3.4.2),
    # SVG Dublin Core "rights", PDF info dictionary "Subject".  Before this check a plot had no caution.
    import zlib
    from finitekey.cautions import CAUTION
    fig = rate_figure([Curve("a", (1, 2, 3), (1e-3, 2e-3, 3e-3))], "x", title="t")
    prov = {"version": "0", "input": "a.toml", "input_sha256": "ab", "command": "finitekey plot a.toml"}
    for p in (None, prov):
        png = figure_bytes(fig, "png", provenance=p)
        chunks, i = {}, 8
        while i < len(png):  # walk the PNG chunks (PNG specification section 5.3)
            n = int.from_bytes(png[i:i + 4], "big")
            kind, data = png[i + 4:i + 8], png[i + 8:i + 8 + n]
            if kind == b"tEXt":
                k, v = data.split(b"\0", 1)
                chunks[k.decode("latin-1")] = v.decode("latin-1")
            elif kind == b"zTXt":
                k, v = data.split(b"\0", 1)
                chunks[k.decode("latin-1")] = zlib.decompress(v[1:]).decode("latin-1")
            elif kind == b"iTXt":
                k, rest = data.split(b"\0", 1)
                chunks[k.decode("latin-1")] = rest.split(b"\0", 2)[2].split(b"\0", 1)[-1].decode("utf-8")
            i += 12 + n
        assert chunks.get("Disclaimer") == CAUTION
        svg = figure_bytes(fig, "svg", provenance=p).decode("utf-8")
        assert CAUTION in svg
        pdf = figure_bytes(fig, "pdf", provenance=p)
        assert b"design aids, not a certificate" in pdf


@pytest.mark.parametrize("size", [None, (3.5, 2.6)])
def test_every_figure_shows_the_caution_on_its_face(size):
    # House rule (common practice, no source): the caution is visible on the figure itself, not only in the
    # file's metadata, inside the figure, and overlapping neither the title nor the stamp. Before this check
    # a figure printed on paper carried no caution.
    from finitekey.cautions import FIGURE_CAUTION
    fig = rate_figure([Curve("a", (1, 2, 3), (1e-3, 2e-3, 3e-3))], "x", title="a title", note="stamp", size=size)
    texts = [t for t in fig.texts if t.get_gid() == "caution-line"]
    assert len(texts) == 1 and " ".join(texts[0].get_text().split()) == FIGURE_CAUTION
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    box = texts[0].get_window_extent(r)
    fig_box = fig.bbox
    assert box.x0 >= fig_box.x0 - 0.5 and box.x1 <= fig_box.x1 + 0.5 and box.y0 >= fig_box.y0 - 0.5
    assert box.y1 <= fig_box.y1 + 0.5
    title = fig.axes[0].title.get_window_extent(r)
    stamp = [t for t in fig.texts if t.get_gid() == "provenance-stamp"][0].get_window_extent(r)
    assert not box.overlaps(title) and not box.overlaps(stamp)
