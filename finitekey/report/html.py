"""Self-contained offline HTML for a :class:`~finitekey.report.build.ReportData`.

One file, no network: the style sheet is inline, figures are base64 PNG
``data:`` URIs, the key-length formula is inline SVG drawn by matplotlib's
mathtext from the result's own ``formula`` LaTeX.  No script runs and nothing
is fetched from a CDN.

Element ids a reader (or a test) can rely on: ``formula``, ``summary``,
``parameters-table``, ``ledger-table``, ``sweep-table``, ``blocksize-table``,
``assumptions``, ``references``, ``cautions``, ``provenance``; figures are
``<img class="plot">`` with ids ``plot-ledger``, ``plot-rate``, ``plot-blocksize``.

References
----------
.. [1] WHATWG, "HTML Living Standard" -- ``data:`` URLs and inline ``<svg>``.
"""

from __future__ import annotations

import base64
import html
import json
import re

from .formats import short_number, status_text
from .tables import table_view

__all__ = ["CSS", "to_html"]

CSS = """
:root { --ink:#1d2433; --muted:#5d6472; --line:#d8d2c4; --paper:#fdfcf8; --accent:#1f7a74; --warn:#9a3b1c; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 15px/1.5 "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; }
header { background:#22303f; color:#f4efe3; padding:1.4rem 2rem 1.1rem; border-bottom:4px solid var(--accent); }
header h1 { margin:0; font-size:1.45rem; letter-spacing:0.01em; }
header p { margin:0.3rem 0 0; color:#cfc7b4; font-size:0.9rem; }
main { max-width:1100px; margin:0 auto; padding:1rem 2rem 3rem; }
section { margin:1.6rem 0; }
h2 { font-size:1.1rem; border-bottom:1px solid var(--line); padding-bottom:0.2rem; color:#22303f; }
h2 .num { color:var(--accent); margin-right:0.4rem; }
h3 { font-size:0.95rem; margin:1rem 0 0.3rem; color:var(--muted); text-transform:uppercase; letter-spacing:0.05em; }
table { border-collapse:collapse; font-size:0.85rem; margin:0.4rem 0 0.8rem; }
th, td { padding:0.22rem 0.6rem; border-bottom:1px solid var(--line); text-align:left; vertical-align:top; }
th { background:#efeadd; font-weight:600; }
td.num { text-align:right; white-space:nowrap; font-variant-numeric: tabular-nums;
         font-family:"DejaVu Sans Mono", monospace; }
.scroll { overflow-x:auto; }
.grid { display:flex; flex-wrap:wrap; gap:0 1.6rem; align-items:flex-start; }
.cards { display:flex; flex-wrap:wrap; gap:0.8rem; }
.card { background:white; border:1px solid var(--line); border-left:4px solid var(--accent); padding:0.5rem 0.9rem;
        min-width:12rem; }
.card .label { color:var(--muted); font-size:0.78rem; text-transform:uppercase; letter-spacing:0.04em; }
.card .value { font-size:1.2rem; font-weight:600; font-family:"DejaVu Sans Mono", monospace; }
figure { margin:0.8rem 0; }
figure.formula { background:white; border:1px solid var(--line); padding:0.8rem; overflow-x:auto; }
figure.formula svg { max-width:100%; height:auto; }
img.plot { max-width:100%; height:auto; border:1px solid var(--line); background:white; }
figcaption { color:var(--muted); font-size:0.82rem; margin-top:0.3rem; }
.caution { border:2px solid var(--warn); background:#fbefe8; padding:0.7rem 1rem; color:#5a2410; }
code, pre { font-family:"DejaVu Sans Mono", monospace; font-size:0.8rem; }
pre { background:#f3f0e7; padding:0.6rem; overflow-x:auto; white-space:pre-wrap; }
footer { color:var(--muted); font-size:0.78rem; border-top:1px solid var(--line); margin-top:2rem; padding-top:0.6rem; }
@media print {
  @page { size: A4; margin: 12mm; }
  @page wide { size: A4 landscape; margin: 10mm; }
  .wide { page: wide; }
  body { background:white; font-size:9pt; }
  header { background:none; color:var(--ink); padding:0 0 0.4rem; border-bottom:2px solid var(--ink); }
  header p { color:var(--muted); }
  main { max-width:none; padding:0; }
  .scroll { overflow:visible !important; }
  table { width:100%; max-width:100%; table-layout:auto; font-size:7pt; break-inside:auto; }
  thead { display:table-header-group; }
  tr { break-inside:avoid; }
  th, td { padding:0.1rem 0.25rem; white-space:normal !important; }
  th { overflow-wrap:anywhere; }
  td.num { font-size:6.5pt; white-space:nowrap !important; }
  td.list { white-space:normal !important; }
  section, figure { break-inside:avoid-page; }
  h2, h3 { break-after:avoid; }
  img.plot { max-width:100%; height:auto; }
  figure.formula, pre { overflow:visible; white-space:pre-wrap; overflow-wrap:anywhere; }
  figure.formula svg { max-width:100%; height:auto; }
  details > summary { display:none; }
  details { display:block; }
}
"""


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _cell(x) -> str:
    if isinstance(x, _Spelled):
        cls = (' class="num list"' if x.is_list else ' class="num"') if x.numeric else ""
        return f"<td{cls}>{_e(x.text)}</td>"
    if isinstance(x, (int, float)) and not isinstance(x, bool):
        return f'<td class="num">{_e(short_number(x))}</td>'
    if isinstance(x, (list, tuple)):
        return f'<td class="num">{_e(", ".join(short_number(v) for v in x))}</td>'
    if isinstance(x, dict):
        return f"<td><code>{_e(json.dumps(x, sort_keys=True))}</code></td>"
    return f"<td>{_e(short_number(x) if x is None else x)}</td>"


def _table(ident: str | None, headers, rows, wide: bool = False) -> str:
    attr = f' id="{_e(ident)}"' if ident else ""
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(_cell(c) for c in r) + "</tr>" for r in rows)
    cls = "scroll wide" if wide else "scroll"
    return f'<div class="{cls}"><table{attr}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>'


def _kv_rows(d: dict, prefix: str = "") -> list:
    rows = []
    for k, v in d.items():
        if isinstance(v, dict):
            rows += _kv_rows(v, f"{prefix}{k}.")
        else:
            rows.append([f"{prefix}{k}", v])
    return rows


def _svg_inline(svg: str) -> str:
    start = svg.find("<svg")
    svg = svg[start:] if start >= 0 else svg
    svg = re.sub(r"<metadata>.*?</metadata>", "", svg, flags=re.DOTALL)
    return svg.replace("<svg ", '<svg role="img" aria-label="key-length formula" ', 1)


class _Spelled:
    """A cell already formatted by the house formatter (numbers.py)."""

    def __init__(self, text: str, numeric: bool, is_list: bool = False):
        self.text = text
        self.numeric = numeric
        self.is_list = is_list


def _sweep_section(table, ident: str, columns=None) -> str:
    """A sweep table with the chosen (default: narrow) columns, numbers formatted column by column."""
    view = table_view(table, columns)
    headers = [f"{h} [{c.unit}]" if c.unit else h for h, c in zip(view.headers("html"), view.columns)]
    spelled = view.spelled("html")
    rows = [[_Spelled(t, not isinstance(raw, str), isinstance(raw, (list, tuple))) for t, raw in zip(srow, rrow)]
            for srow, rrow in zip(spelled, view.rows)]
    notes = "".join(f"<p><em>{_e(n)}</em></p>" for n in view.notes)
    # more than 7 columns: printed on a landscape page (CSS named page), numbers never broken inside
    return _table(ident, headers, rows, wide=len(view.columns) > 7) + notes


def _fmt_seconds(x) -> str:
    if x is None:
        return "–"
    for unit, scale in (("days", 86400.0), ("h", 3600.0), ("min", 60.0), ("s", 1.0)):
        if x >= scale or unit == "s":
            return f"{x / scale:.3g} {unit}"
    return str(x)  # pragma: no cover


def to_html(report) -> str:
    """The report as one HTML document (str)."""
    r = report
    row = r.design
    d = row["design"]
    exp = d["expected"]
    n = 0

    def h2(title: str) -> str:
        nonlocal n
        n += 1
        return f'<h2><span class="num">{n}</span>{_e(title)}</h2>'

    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_e(r.title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>",
             f"<header><h1>{_e(r.title)}</h1><p>protocol <strong>{_e(r.protocol)}</strong> · input "
             f"{_e(r.provenance.get('input', ''))} · finitekey {_e(r.provenance.get('version', ''))}</p></header>",
             "<main>",
             f'<p class="caution" id="caution-top">{_e(r.caution)}</p>']

    # summary
    status = row.get("status") or {"key": True}
    cards = [("status", "key" if status.get("key") else "no key"),
             ("secret key length", f"{int(row['secret_key_length']):,} bit".replace(",", " ")),
             ("key rate per pulse", short_number(row["secret_key_rate_per_pulse"])),
             ("key rate per second", short_number(row["secret_key_rate_bps"])
              + (" bit/s" if row["secret_key_rate_bps"] is not None else "")),
             ("total epsilon", short_number(row["eps_total"])),
             ("block fill time", _fmt_seconds(row["block_fill_time_s"])),
             ("statistics", exp.get("statistics", ""))]
    parts.append("<section>" + h2("Result at the scenario") + '<div class="cards" id="summary">'
                 + "".join(f'<div class="card"><div class="label">{_e(k)}</div><div class="value">{_e(v)}</div></div>'
                           for k, v in cards) + "</div>"
                 + (f'<p class="caution" id="status">{_e(status_text(status))}'
                    + (f"; {_e(status.get('detail'))}" if status.get("detail") else "") + "</p>"
                    if not status.get("key") else "")
                 + "</section>")

    # scenario and device model
    sec = ["<section>", h2("Scenario and device model"),
           "<p>The scenario file as read (every field validated by the protocol), section by section.</p>"]
    sec.append('<div class="grid">')
    for name, content in r.scenario_data.items():
        sec.append('<div class="block">')
        if isinstance(content, dict):
            sec.append(f"<h3>[{_e(name)}]</h3>")
            sec.append(_table(f"scenario-{name}", ["field", "value"], _kv_rows(content)))
        else:
            sec.append(_table(None, ["field", "value"], [[name, content]]))
        sec.append("</div>")
    sec.append("</div>")
    if r.scenario_echo:
        sec.append("<details><summary>validated scenario (as the protocol echoes it, defaults filled in)</summary>"
                   + _table("scenario-echo", ["field", "value"], _kv_rows(r.scenario_echo)) + "</details>")
    sec.append("</section>")
    parts += sec

    # chosen parameters (none when there is no key)
    if status.get("key"):
        parts.append("<section>" + h2("Chosen parameters")
                     + "<p>Free parameters selected by the design optimiser for this scenario, and the expected "
                       "counts the key length is computed from.</p>"
                     + _table("parameters-table", ["parameter", "value"], _kv_rows(row.get("parameters") or {}))
                     + ("<h3>expected counts</h3>" + _table("counts-table", ["quantity", "value"],
                                                            _kv_rows(d.get("expected_counts") or {}))
                        if d.get("expected_counts") else "")
                     + "</section>")
    else:
        parts.append("<section>" + h2("Chosen parameters")
                     + f'<p id="parameters-table">No parameters are chosen: {_e(status_text(status))}.</p>'
                     + "</section>")

    # formula
    f = r.formula
    if f.ok:
        pic = f'<figure class="formula" id="formula">{_svg_inline(f.data)}' \
              f"<figcaption>Key-length formula, drawn offline from the result's LaTeX.</figcaption></figure>"
    else:
        pic = f'<figure class="formula" id="formula"><pre>{_e(f.latex)}</pre>' \
              f"<figcaption>{_e(f.message)}; LaTeX source shown.</figcaption></figure>"
    parts.append("<section>" + h2("Key-length formula") + pic
                 + f"<details><summary>LaTeX source</summary><pre id=\"formula-latex\">{_e(f.latex)}</pre></details>"
                 + "<h3>terms (bits)</h3>"
                 + _table("terms-table", ["term", "bits"], list((exp.get("terms") or {}).items()))
                 + "<h3>estimates</h3>" + _table("estimates-table", ["quantity", "value"],
                                                  list((exp.get("estimates") or {}).items()))
                 + "</section>")

    # ledger
    led_rows = [[t["name"], t["role"], t.get("charge", ""), t["weight"], t["epsilon"], t["contribution"],
                 t.get("description", "")] for t in exp["ledger"]]
    led_rows += [["eps_cor", "correctness", "", "", "", exp["eps_cor"], "sum of correctness contributions"],
                 ["eps_sec", "secrecy", "", "", "", exp["eps_sec"], "sum of secrecy contributions"],
                 ["eps_total", "", "", "", "", exp["eps_total"], "eps_cor + eps_sec"]]
    parts.append("<section>" + h2("Epsilon ledger")
                 + "<p>charged as: failure = a failure probability charged once per event; smoothing = a smoothing "
                   "parameter whose event must fail with probability at most its square, costing twice itself per "
                   "appearance; hashing = the leftover-hash term. weight x epsilon = contribution.</p>"
                 + _table("ledger-table", ["term", "role", "charged as", "weight", "epsilon", "contribution",
                                           "covers"], led_rows)
                 + "</section>")

    # sweeps and figures
    figs = {fig.ident: fig for fig in r.figures}

    def fig_html(ident):
        fig = figs.get(ident)
        if fig is None:
            return ""
        b64 = base64.b64encode(fig.png).decode("ascii")
        return (f'<figure><img class="plot" id="{_e(ident)}" alt="{_e(fig.caption)}" '
                f'src="data:image/png;base64,{b64}"><figcaption>{_e(fig.caption)}</figcaption></figure>')

    sw = ["<section>", h2("Tables and plots"), fig_html("plot-ledger")]
    if r.sweep is not None:
        sw.append(f"<h3>design sweep over {_e(', '.join(a.text for a in r.sweep.axes))}</h3>")
        sw.append(_sweep_section(r.sweep, "sweep-table", r.columns))
        sw.append(fig_html("plot-rate"))
    if r.blocksize is not None:
        sw.append(f"<h3>smallest block for target '{_e(r.blocksize.target)}'</h3>")
        sw.append(_sweep_section(r.blocksize, "blocksize-table"))
        sw.append(fig_html("plot-blocksize"))
    for note in r.notes:
        sw.append(f"<p><em>{_e(note)}</em></p>")
    sw.append("</section>")
    parts += sw

    # assumptions and sources
    nref = len(r.references)
    src = f"the analysis in sources [1]–[{nref}]" if nref > 1 else ("source [1]" if nref == 1 else "–")
    parts.append("<section>" + h2("Proof assumptions")
                 + "<p>The key length holds only if every assumption below holds. Each is an assumption of the "
                   "security analysis cited beside it (numbers refer to the list of sources).</p>"
                 + _table("assumptions", ["#", "assumption", "source"],
                          [[i, a, src] for i, a in enumerate(r.assumptions, start=1)])
                 + "<h3>sources</h3><ol id=\"references\">"
                 + "".join(f"<li>{_e(ref)}</li>" for ref in r.references) + "</ol></section>")

    parts.append("<section>" + h2("Cautions") + f'<div class="caution" id="cautions"><p>{_e(r.caution)}</p>'
                 "<p>Numbers are computed for the device model above; real devices deviate from any model. "
                 "The expected-count design is not a measurement: the key length of an observed block must be "
                 "computed from its own counts (<code>finitekey keylength</code>).</p></div></section>")

    p = r.provenance
    parts.append(f'<footer id="provenance">Generated by {_e(p.get("tool"))} {_e(p.get("version"))} from '
                 f'<code>{_e(p.get("input"))}</code> (SHA-256 <code>{_e(p.get("input_sha256"))}</code>) with '
                 f'<code>{_e(p.get("command"))}</code>.</footer>')
    parts += ["</main>", "</body>", "</html>"]
    return "\n".join(parts) + "\n"
