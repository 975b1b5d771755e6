"""The HTML report rendered by headless Chromium: the page, its formula, tables and plots actually draw.

Reference: the browser itself (Debian's chromium) -- the DOM it builds (``--dump-dom``) and the pixels it paints
(``--screenshot``), decoded with ``matplotlib.image`` and checked with numpy.  The report is made offline;
chromium runs with networking features off.
"""

from __future__ import annotations

import os
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from finitekey.cli import main
from scenarios import bb84_toml

CHROMIUM = "/usr/bin/chromium"

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not os.path.exists(CHROMIUM),
                       reason="headless browser test needs /usr/bin/chromium (apt-get install -y chromium)"),
]

SCENARIO = bb84_toml("browser test link (fictional)")

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def _chromium(tmp: Path, *args) -> subprocess.CompletedProcess:
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={tmp / 'profile'}", *args],
                          capture_output=True, text=True, timeout=120)


def _hex(colour: str) -> np.ndarray:
    return np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)], dtype=float) / 255.0


def _count_near(img: np.ndarray, colour: str, tol: float = 0.06) -> int:
    return int((np.abs(img[..., :3] - _hex(colour)).max(axis=-1) < tol).sum())


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser")
    scenario = tmp / "link.toml"
    scenario.write_text(SCENARIO)
    page = tmp / "report.html"
    assert main(["report", str(scenario), "--vary", "channel.qber=0.01,0.04", "--vary",
                 "budget.signals=1e9,1e11", "--jobs", "2", "-o", str(page)]) == 0
    dom = _chromium(tmp, "--dump-dom", page.as_uri())
    assert dom.returncode == 0, dom.stderr[-2000:]
    shots = {}
    for name, size in (("top", "1200,2000"), ("full", "1200,9000")):
        png = tmp / f"{name}.png"
        res = _chromium(tmp, f"--screenshot={png}", f"--window-size={size}", page.as_uri())
        assert res.returncode == 0 and png.exists(), res.stderr[-2000:]
        import matplotlib.image as mpimg
        shots[name] = mpimg.imread(png)
    return page.read_text(), dom.stdout, shots


def test_screenshot_is_not_blank(rendered):
    _, _, shots = rendered
    top = shots["top"]
    assert top.shape[:2] == (2000, 1200)
    assert float(top[..., :3].std()) > 0.05
    assert _count_near(top, "#22303f") > 20_000  # the header band is painted


def test_dom_has_formula_tables_and_plots(rendered):
    source, dom, _ = rendered
    assert 'id="formula"' in dom and re.search(r'id="formula"[^>]*>\s*<svg', dom)
    formula_svg = dom[dom.index('id="formula"'):]
    formula_svg = formula_svg[:formula_svg.index("</svg>")]
    assert formula_svg.count("<path") + formula_svg.count("<use") > 20  # glyphs drawn as paths
    for ident in ("sweep-table", "ledger-table", "parameters-table", "assumptions", "cautions"):
        assert f'id="{ident}"' in dom, ident
    sweep = dom[dom.index('id="sweep-table"'):]
    sweep = sweep[:sweep.index("</table>")]
    assert sweep.count("<tr>") == 1 + 4  # header + 2 x 2 grid points
    imgs = re.findall(r'<img class="plot" id="([\w-]+)"[^>]*src="data:image/png;base64,', dom)
    assert set(imgs) >= {"plot-ledger", "plot-rate"}
    assert not re.search(r'(src|href)="https?:', source)  # nothing fetched from the network


def test_plots_and_formula_paint_pixels(rendered):
    _, _, shots = rendered
    full = shots["full"]
    # ochre is used only inside the plots (first curve, correctness bar); indigo only by the formula glyphs
    assert _count_near(full, "#c8811a") > 1500
    formula = np.abs(full[..., :3] - _hex("#3a2c7a")).max(axis=-1) < 0.05
    assert formula.sum() > 300
    rows = np.where(formula.any(axis=1))[0]
    cols = np.where(formula.any(axis=0))[0]
    assert rows.max() - rows.min() < 200 and cols.max() - cols.min() > 300  # one wide line of formula
