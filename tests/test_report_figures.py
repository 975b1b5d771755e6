"""Figures built from sweeps: grouping rows into curves, reference curves, and the formula rewrites.

Outside references: the repeaterless bound -log2(1 - eta) evaluated with mpmath at 30 digits, with the fibre
transmittance eta = 10^(-loss/10) (Pirandola, Laurenza, Ottaviani, Banchi, Nat. Commun. 8, 15043 (2017);
formula from memory); matplotlib's own mathtext parser for the rewritten formulas.
"""

from __future__ import annotations

import mpmath
import pytest

from finitekey.errors import InputError
from finitekey.report.figures import blocksize_plot, rate_plot, rate_quantity, reference_curves, series
from finitekey.report.formula import mathtext_source, render_formula
from finitekey.report.grid import Axis
from finitekey.report.sweep import SweepTable, load_scenario

DECOY_TOML = """
[protocol]
name = "decoy-bb84"
[link]
distance_km = 10.0
fiber_loss_db_per_km = 0.2
extra_loss_db = 1.0
[detector]
efficiency = 0.2
dark_count_probability = 1e-7
misalignment_error = 0.01
[block]
pulses = 1e10
[security]
eps_sec = 1e-10
eps_cor = 1e-15
[reconciliation]
efficiency = 1.16
"""


def _row(i, d, n, rate, error=None, **extra):
    r = {"index": i, "point": {"link.distance_km": d, "block.pulses": n}, "secret_key_rate_per_pulse": rate,
         "block_size": extra.get("block_size"), "block_size_kind": "pulses", "error": error,
         "design": {"secret_key_rate_per_detection": None}}
    return r


def _sweep(rows, mode="design"):
    axes = (Axis("link.distance_km", (0, 50, 100)), Axis("block.pulses", (10**9, 10**11)))
    return SweepTable("decoy-bb84", mode, axes, tuple(rows), None, "positive" if mode == "blocksize" else None,
                      {"version": "0", "input_sha256": "0" * 64})


def test_series_groups_by_second_axis_and_skips_errors():
    rows = [_row(0, 0, 10**9, 1e-2), _row(1, 0, 10**11, 2e-2), _row(2, 50, 10**9, 1e-3), _row(3, 50, 10**11, 2e-3),
            _row(4, 100, 10**9, None, error="ComputationError: none"), _row(5, 100, 10**11, 2e-4)]
    curves = series(_sweep(rows), "secret_key_rate_per_pulse")
    assert [c.label for c in curves] == ["pulses per block = 1e9", "pulses per block = 1e11"]
    assert curves[0].x == (0, 50) and curves[0].y == (1e-2, 1e-3)
    assert curves[1].x == (0, 50, 100) and curves[1].y == (2e-2, 2e-3, 2e-4)
    with pytest.raises(InputError):
        series(SweepTable("x", "design", (), (), None, None, {}), "secret_key_rate_per_pulse")


def test_reference_curves_match_mpmath_bound(tmp_path):
    p = tmp_path / "d.toml"
    p.write_text(DECOY_TOML)
    loaded = load_scenario(p)
    t = _sweep([])
    curves = {c.kind: c for c in reference_curves(t, loaded, "bit/pulse")}
    bound = curves["bound"]
    assert bound.x == (0, 50, 100)
    with mpmath.workdps(30):
        for L, y in zip(bound.x, bound.y):
            eta = mpmath.mpf(10) ** (-(mpmath.mpf("0.2") * L + 1) / 10)
            want = -mpmath.log(1 - eta) / mpmath.log(2)
            assert y == pytest.approx(float(want), rel=1e-12)
    asym = curves["asymptotic"]
    assert all(a < b for a, b in zip(asym.y, bound.y))  # no protocol beats the repeaterless bound
    assert asym.y[0] > asym.y[1] > asym.y[2] > 0


def test_rate_plot_from_rows_with_references(tmp_path):
    p = tmp_path / "d.toml"
    p.write_text(DECOY_TOML)
    rows = [_row(i, d, n, 1e-2 * 10 ** (-0.02 * d) * (2 if n > 10**9 else 1))
            for i, (d, n) in enumerate([(d, n) for d in (0, 50, 100) for n in (10**9, 10**11)])]
    fig = rate_plot(_sweep(rows), load_scenario(p))
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert len(labels) == 5 and any("asymptotic" in s for s in labels) and any("repeaterless" in s for s in labels)
    assert any("shaded" in s for s in labels)  # the band above the bound has its own entry
    assert fig.axes[0].get_xlabel() == "distance (km)" and "bit" in fig.axes[0].get_ylabel()


def test_rate_quantity_per_detection_for_bb84_rows():
    rows = [{"index": 0, "point": {"channel.qber": 0.02}, "error": None,
             "design": {"secret_key_rate_per_detection": 0.5}}]
    t = SweepTable("bb84", "design", (Axis("channel.qber", (0.02,)),), tuple(rows), None, None, {})
    assert rate_quantity(t) == ("secret_key_rate_per_detection", "bit/detection")
    assert rate_quantity(_sweep([_row(0, 0, 10**9, 1e-3)]))[1] == "bit/pulse"


def test_blocksize_plot_needs_blocksize_rows():
    rows = [_row(i, d, n, 1e-3, block_size=10**6 * (i + 1)) for i, (d, n) in
            enumerate([(d, n) for d in (0, 50, 100) for n in (10**9, 10**11)])]
    fig = blocksize_plot(_sweep(rows, "blocksize"))
    assert fig.axes[0].get_yscale() == "log" and "pulses" in fig.axes[0].get_ylabel()
    with pytest.raises(InputError):
        blocksize_plot(_sweep(rows, "design"))


@pytest.mark.parametrize("latex", [
    r"\ell = \Big\lfloor s_{X,1}^{L}\,\big(1 - h(\phi)\big) \Big\rfloor",
    r"\Pr[\phi_{key} > \phi] \le \varepsilon_s^2,\quad x \ge 0",
    r"\operatorname{leak}_{EC} + \text{tag}",
])
def test_protocol_style_formulas_render(latex):
    r = render_formula(latex)
    assert r.ok, r.message
    assert r"\Big" not in r.source and r"\le " not in r.source


def test_rewrite_keeps_leq():
    assert mathtext_source(r"a \le b \leq c \ge d") == r"a \leq b \leq c \geq d"
