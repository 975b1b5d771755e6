"""Figures from sweep rows: key rate against a link field, smallest block size, the epsilon ledger.

Figures are built on :class:`matplotlib.figure.Figure` with the Agg canvas
(no pyplot, no global state); the house style is applied with
:func:`matplotlib.rc_context` around drawing and saving only, never by changing
the global ``rcParams``.  Every function here takes plain row data (lists of
numbers, ledger dictionaries), so it can be tested without any protocol.

The curves a rate plot shows:

* one finite-key curve per block size (or per value of the second varied field);
* the asymptotic (infinite-key) rate of the same device model, when the protocol provides it;
* the repeaterless bound :math:`-\\log_2(1-\\eta)` of a pure-loss channel of
  transmittance :math:`\\eta`, which no protocol without repeaters can beat.

References
----------
.. [1] S. Pirandola, R. Laurenza, C. Ottaviani, L. Banchi, "Fundamental limits
   of repeaterless quantum communications", Nat. Commun. 8, 15043 (2017) --
   the bound :math:`-\\log_2(1-\\eta)` secret bits per channel use (computed by
   :func:`finitekey.channel.repeaterless_bound`).
.. [2] J. D. Hunter, "Matplotlib: A 2D graphics environment", Comput. Sci. Eng. 9, 90 (2007).
"""

from __future__ import annotations

import io
import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..cautions import CAUTION, FIGURE_CAUTION
from ..channel import repeaterless_bound
from ..errors import InputError
from .numbers import format_number

__all__ = [
    "DEFAULT_DPI",
    "DEFAULT_SIZE",
    "PLOT_FORMATS",
    "STYLE",
    "Curve",
    "axis_label",
    "blocksize_figure",
    "compare_figure",
    "figure_bytes",
    "ledger_figure",
    "rate_figure",
    "repeaterless_bound",
    "use_log",
]

PLOT_FORMATS = ("png", "svg", "pdf")

#: The house style: ink-blue frame, warm palette, light dotted grid, no top/right spines.
STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 10.0,
    "axes.facecolor": "#fbfaf6",
    "figure.facecolor": "white",
    "axes.edgecolor": "#2b3a55",
    "axes.labelcolor": "#2b3a55",
    "axes.titleweight": "bold",
    "axes.titlesize": 11.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.grid.which": "both",
    "grid.color": "#c9c3b3",
    "grid.linestyle": ":",
    "grid.linewidth": 0.6,
    "xtick.color": "#2b3a55",
    "ytick.color": "#2b3a55",
    "legend.frameon": False,
    "legend.fontsize": 8.5,
    "lines.linewidth": 1.8,
    "svg.fonttype": "path",
    "svg.hashsalt": "finitekey",  # reproducible SVG ids
}

#: Finite-key curves cycle through these (ochre, teal, plum, brick, olive, slate).
PALETTE = ("#c8811a", "#1f7a74", "#7b4f8e", "#b23b2e", "#6b7d2a", "#44546a")
MARKERS = ("o", "s", "D", "^", "v", "P")


@dataclass(frozen=True)
class Curve:
    """One plotted line.

    Attributes
    ----------
    label : str
        Legend text.
    x, y : tuple of float
        Points; non-positive or missing ``y`` are dropped on a log axis.
    kind : str
        ``"finite"`` (markers, palette colour), ``"asymptotic"`` (dashed ink) or
        ``"bound"`` (dotted grey, shaded region above it).
    """

    label: str
    x: tuple
    y: tuple
    kind: str = "finite"
    meta: dict = field(default_factory=dict)


_UNITS = (("_db_per_km", "dB/km"), ("_km", "km"), ("_db", "dB"), ("_hz", "Hz"), ("_bps", "bit/s"),
          ("_ns", "ns"), ("_ps", "ps"), ("_s", "s"), ("_m", "m"))

_NAMES = {"qber": "QBER", "pulses": "pulses per block", "signals": "signals per block",
          "detections": "detections per block", "key_detections": "key-basis detections per block",
          "distance_km": "distance", "size": "block size"}


def axis_label(field_name: str, quantity: str | None = None) -> str:
    """Axis text with unit for a dotted scenario field, e.g. ``link.distance_km`` -> ``distance (km)``."""
    last = field_name.rsplit(".", 1)[-1]
    unit = ""
    for suffix, u in _UNITS:
        if last.endswith(suffix):
            unit = u
            break
    name = quantity or _NAMES.get(last)
    if name is None:
        base = last
        for suffix, _ in _UNITS:
            if base.endswith(suffix):
                base = base[: -len(suffix)]
                break
        name = base.replace("_", " ")
    if last == "qber" or "error" in last or "efficiency" in last:
        unit = unit or "fraction"
    return f"{name} ({unit})" if unit else name


def use_log(values: Sequence) -> bool:
    """Log axis when every value is positive and they span at least two decades (common practice, no source)."""
    vals = [float(v) for v in values if v is not None and isinstance(v, (int, float)) and not isinstance(v, bool)]
    if len(vals) < 2 or min(vals) <= 0:
        return False
    return max(vals) / min(vals) >= 100.0


#: Default figure size (inches) and PNG resolution (dots per inch).
DEFAULT_SIZE = (7.0, 4.4)
DEFAULT_DPI = 110
#: Height of the strip kept free at the top of a figure for the provenance stamp (points).
STAMP_STRIP_PT = 13.0
#: Font size (points) of the caution line every figure shows under its stamp.
CAUTION_FONT_PT = 6.0


def _caution_lines(width_in: float) -> str:
    return _wrap(FIGURE_CAUTION, 0.98 * 72.0 * width_in, CAUTION_FONT_PT)


def _caution_strip_pt(width_in: float) -> float:
    """Height of the strip for the caution line(s) at this figure width."""
    return 6.0 + 1.45 * CAUTION_FONT_PT * (_caution_lines(width_in).count("\n") + 1)


def _style_for(size) -> dict:
    """The house style with fonts scaled down for narrow figures (to 70 % at half the default width)."""
    w = float((size or DEFAULT_SIZE)[0])
    k = max(0.7, min(1.0, w / DEFAULT_SIZE[0]))
    st = dict(STYLE)
    for key in ("font.size", "axes.titlesize", "legend.fontsize"):
        st[key] = STYLE[key] * k
    return st


def _wrap(text: str, width_pt: float, fontsize: float) -> str:
    """Wrap ``text`` to lines that fit ``width_pt`` at ``fontsize`` (DejaVu Sans: about 0.6 em per character)."""
    n = max(14, int(width_pt / (0.6 * fontsize)))
    return "\n".join(textwrap.wrap(text, n)) if len(text) > n else text


def _eps(x: float) -> str:
    """An epsilon as the tables show it (the house number formatter, 3 significant digits)."""
    return format_number(x, "epsilon", "text")


def _new_figure(size=None, stamp: bool = False) -> Figure:
    size = tuple(size) if size is not None else DEFAULT_SIZE
    fig = Figure(figsize=size, dpi=DEFAULT_DPI, layout="constrained")
    # keep strips at the top for the stamp (with one) and the caution line, so that no title, label or legend
    # can run into them (a legend placed "outside lower center" ignores a strip at the foot)
    top = (STAMP_STRIP_PT if stamp else 0.0) + _caution_strip_pt(size[0])
    fig.get_layout_engine().set(rect=(0.0, 0.0, 1.0, 1.0 - min(0.35, top / (72.0 * size[1]))))
    FigureCanvasAgg(fig)
    return fig


def _points(c: Curve, logy: bool, logx: bool):
    xs, ys = [], []
    for x, y in zip(c.x, c.y):
        if x is None or y is None:
            continue
        x, y = float(x), float(y)
        if not (math.isfinite(x) and math.isfinite(y)):
            continue
        if (logy and y <= 0) or (logx and x <= 0):
            continue
        xs.append(x)
        ys.append(y)
    return xs, ys


def _no_key_x(c: Curve, logx: bool) -> list:
    out = []
    for x in c.meta.get("no_key_x", ()) if c.kind == "finite" else ():
        if x is not None and math.isfinite(float(x)) and not (logx and float(x) <= 0):
            out.append(float(x))
    return out


def _draw_curves(ax, curves: Sequence[Curve], logx: bool, logy: bool) -> None:
    """Draw the curves; points of a finite curve with no key are marked x on the horizontal axis."""
    finite = 0
    reasons: list = []
    nbounds = sum(1 for c in curves if c.kind == "bound")
    bound_styles = ((0, (1, 2)), (0, (5, 2, 1, 2)), (0, (2, 4)))
    drawn_bounds = 0
    for c in curves:
        xs, ys = _points(c, logy, logx)
        nk = _no_key_x(c, logx)
        if not xs and not nk:
            continue
        if c.kind == "finite":
            col = PALETTE[finite % len(PALETTE)]
            if xs:
                ax.plot(xs, ys, color=col, marker=MARKERS[finite % len(MARKERS)], markersize=4.0,
                        markerfacecolor="white", markeredgewidth=1.2, label=c.label, zorder=3)
            if nk:
                ax.plot(nk, [0.0] * len(nk), transform=ax.get_xaxis_transform(), linestyle="none", marker="x",
                        markersize=7.0, markeredgewidth=1.6, color=col, clip_on=False, zorder=4, gid="no-key",
                        label="_nolegend_")
                reasons += [r for r in c.meta.get("no_key_reasons", ()) if r not in reasons]
            finite += 1
        elif c.kind == "asymptotic":
            ax.plot(xs, ys, color="#2b3a55", linestyle=(0, (6, 3)), linewidth=1.5, label=c.label, zorder=2)
        elif c.kind == "bound":
            ax.plot(xs, ys, color="#8a8478", linestyle=bound_styles[drawn_bounds % len(bound_styles)],
                    linewidth=1.6, label=c.label, zorder=1)
            drawn_bounds += 1
            if nbounds == 1:  # several bounds (links of different loss) are told apart by line style, unshaded
                top = max(ys) * (2 if logy else 1.2)
                ax.fill_between(xs, ys, [top] * len(ys), color="#8a8478", alpha=0.12, linewidth=0, zorder=0,
                                label="shaded: above the bound, out of reach without repeaters")
        else:
            raise InputError("curve.kind", c.kind, "one of: finite, asymptotic, bound")
    if reasons:
        text = "no key at the points marked x: " + "; ".join(r.removeprefix("no key: ") for r in reasons)
        ax.plot([], [], linestyle="none", marker="x", color="#2b3a55", markeredgewidth=1.6,
                label=textwrap.fill(text, 70))
    if logx:
        ax.set_xscale("log")
    if logy:
        ax.set_yscale("log")


def _finish(ax, fig, title, note) -> None:
    """Title, legend below the axes (outside: it never covers data), stamp in the strip kept free at the top.

    Title, legend entries and axis labels are wrapped to the figure's size, so
    a narrow figure (``--size 3.5x2.6``) keeps every text inside it.
    """
    from matplotlib import rcParams
    w_pt, h_pt = fig.get_figwidth() * 72.0, fig.get_figheight() * 72.0
    if title:
        ax.set_title(_wrap(title, 0.8 * w_pt, rcParams["axes.titlesize"]), loc="left")
    ax.set_ylabel(_wrap(ax.get_ylabel(), 0.75 * h_pt, rcParams["font.size"]))
    ax.set_xlabel(_wrap(ax.get_xlabel(), 0.85 * w_pt, rcParams["font.size"]))
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        fs = rcParams["legend.fontsize"]
        longest = max(len(t) for t in labels)
        ncol = 2 if len(labels) > 1 and longest * 0.6 * fs * 2 + 80 < w_pt else 1
        labels = [_wrap(t, w_pt / ncol - 40.0, fs) for t in labels]
        fig.legend(handles, labels, loc="outside lower center", ncol=ncol)
    if note:
        fig.text(0.995, 0.997, note, fontsize=6.5, color="#6d6658", ha="right", va="top", gid="provenance-stamp")
    # every figure shows the caution under the stamp (the full text is also in the file's metadata, see
    # figure_bytes)
    y = 1.0 - ((STAMP_STRIP_PT if note else 0.0) + 1.0) / h_pt
    fig.text(0.005, y, _caution_lines(fig.get_figwidth()), fontsize=CAUTION_FONT_PT, color="#6d6658", ha="left",
             va="top", gid="caution-line")


def rate_figure(curves: Sequence[Curve], xlabel: str, ylabel: str = "secret key rate (bit/pulse)",
                title: str = "", logx: bool = False, logy: bool = True, note: str = "", size=None) -> Figure:
    """Key rate against one field: finite-key curves, the asymptotic curve and the repeaterless bound.

    ``size`` is ``(width, height)`` in inches (default :data:`DEFAULT_SIZE`).  The
    legend is placed below the axes and the ``note`` (provenance stamp) in a
    strip kept free above the title.

    Raises
    ------
    InputError
        If no curve has a point that can be drawn (e.g. every rate is zero on a log axis).
    """
    with rc_context(_style_for(size)):
        fig = _new_figure(size, stamp=bool(note))
        ax = fig.add_subplot()
        drawable = [c for c in curves if _points(c, logy, logx)[0]]
        if not drawable:
            reasons = sorted({r.removeprefix("no key: ") for c in curves for r in c.meta.get("no_key_reasons", ())})
            raise InputError("plot", "no positive key rate at any point"
                             + (" (no key: " + "; ".join(reasons) + ")" if reasons else ""),
                             "a sweep with at least one positive key rate (try a shorter distance or a larger block)")
        if ylabel.endswith("(bit/pulse)") and any(c.kind == "bound" for c in drawable):
            ylabel = ylabel.replace("(bit/pulse)", "(bit per pulse / channel use)")
        _draw_curves(ax, [c for c in curves if c in drawable or _no_key_x(c, logx)], logx, logy)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        _finish(ax, fig, title, note)
    return fig


def compare_figure(curves: Sequence[Curve], xlabel: str, ylabel: str = "secret key rate (bit/pulse)",
                   crossings: Sequence[dict] = (), title: str = "", logx: bool = False, logy: bool = True,
                   note: str = "", size=None) -> Figure:
    """Key rate of several scenarios against one field, with the repeaterless bound and where they cross it.

    ``curves`` holds one ``"finite"`` curve per scenario and any ``"bound"`` curves (see :func:`rate_figure`);
    each of ``crossings`` (``label``: legend text, ``x``) is drawn as a thin vertical dash-dot line.

    Raises
    ------
    InputError
        If no scenario has a point that can be drawn.
    """
    with rc_context(_style_for(size)):
        fig = _new_figure(size, stamp=bool(note))
        ax = fig.add_subplot()
        drawable = [c for c in curves if _points(c, logy, logx)[0]]
        if not any(c.kind == "finite" for c in drawable):
            reasons = sorted({r.removeprefix("no key: ") for c in curves for r in c.meta.get("no_key_reasons", ())})
            raise InputError("plot", "no positive key rate at any point of any scenario"
                             + (" (no key: " + "; ".join(reasons) + ")" if reasons else ""),
                             "a comparison with at least one positive key rate (try a shorter distance or a larger "
                             "block)")
        if ylabel.endswith("(bit/pulse)") and any(c.kind == "bound" for c in drawable):
            ylabel = ylabel.replace("(bit/pulse)", "(bit per pulse / channel use)")
        _draw_curves(ax, [c for c in curves if c in drawable or _no_key_x(c, logx)], logx, logy)
        styles = ((0, (5, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)), (0, (8, 2, 1, 2)))
        for k, cr in enumerate(crossings):
            x = float(cr["x"])
            if not math.isfinite(x) or (logx and x <= 0):
                continue
            ax.axvline(x, color="#2b3a55", linestyle=styles[k % len(styles)], linewidth=1.0, zorder=2,
                       gid="bound-crossing", label=cr["label"])
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        _finish(ax, fig, title, note)
    return fig


def blocksize_figure(curves: Sequence[Curve], xlabel: str, ylabel: str = "smallest block size",
                     title: str = "", logx: bool = False, logy: bool = True, note: str = "", size=None) -> Figure:
    """Smallest block size reaching a target, against one field (one curve per value of a second field)."""
    with rc_context(_style_for(size)):
        fig = _new_figure(size, stamp=bool(note))
        ax = fig.add_subplot()
        drawable = [c for c in curves if _points(c, logy, logx)[0]]
        if not drawable:
            raise InputError("plot", "no point reached the block-size target",
                             "a sweep where at least one point has a block size")
        _draw_curves(ax, drawable, logx, logy)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        _finish(ax, fig, title, note)
    return fig


def ledger_figure(ledger: Sequence[dict], title: str = "epsilon ledger", note: str = "", size=None) -> Figure:
    """Horizontal bars of each ledger term's contribution (weight x epsilon), log scale, coloured by role.

    Parameters
    ----------
    ledger : list of dict
        ``Ledger.as_list()`` rows: ``name``, ``epsilon``, ``role``, ``weight``, ``contribution``.

    Raises
    ------
    InputError
        For an empty ledger or a non-positive contribution.
    """
    if not ledger:
        raise InputError("ledger", ledger, "at least one term")
    names = [str(t["name"]) for t in ledger]
    weights = [int(t.get("weight", 1)) for t in ledger]
    contrib = [float(t["contribution"]) for t in ledger]
    eps = [float(t["epsilon"]) for t in ledger]
    # weight-0 terms (e.g. an estimation failure that enters only through another term) are drawn at their
    # epsilon, hatched, and do not count in the total.
    shown = [c if w != 0 else e for c, e, w in zip(contrib, eps, weights)]
    for n, v in zip(names, shown):
        if not (math.isfinite(v) and v > 0):
            raise InputError(f"ledger.{n}.contribution", v, "a positive finite number")
    roles = [str(t.get("role", "")) for t in ledger]
    colours = {"secrecy": "#1f7a74", "correctness": "#c8811a"}
    with rc_context(_style_for(size)):
        fig = _new_figure(size or (7.0, 2.0 + 0.42 * len(names)), stamp=bool(note))
        ax = fig.add_subplot()
        ypos = np.arange(len(names))[::-1]
        for y, v, r, w in zip(ypos, shown, roles, weights):
            ax.barh([y], [v], color="white" if w == 0 else colours.get(r, "#7b4f8e"), height=0.6, zorder=3,
                    edgecolor=colours.get(r, "#7b4f8e"), hatch="///" if w == 0 else None)
        for y, w, e, v in zip(ypos, weights, eps, shown):
            label = f"{w} × {_eps(e)}" if w > 1 else (_eps(v) if w == 1 else f"{_eps(e)} (weight 0)")
            ax.text(v * 1.15, y, label, va="center", fontsize=7.5, color="#2b3a55")
        contrib = [c for c in contrib if c > 0] or shown
        ax.set_yticks(ypos, names)
        ax.set_xscale("log")
        lo = min(shown)
        total = math.fsum(contrib)
        ax.set_xlim(lo / 10, total * 30)
        ax.axvline(total, color="#b23b2e", linestyle=(0, (4, 2)), linewidth=1.2, gid="total-epsilon")
        ax.set_xlabel("contribution to the security parameter (weight × epsilon)")
        handles = [Line2D([], [], color="#b23b2e", linestyle=(0, (4, 2)), label=f"total epsilon = {_eps(total)}")]
        handles += [Patch(facecolor=col, label=f"{role} term") for role, col in colours.items() if role in roles]
        if 0 in weights:
            handles.append(Patch(facecolor="white", edgecolor="#44546a", hatch="///",
                                 label="weight 0: enters through another term, not added"))
        ax.grid(axis="y", visible=False)
        _finish(ax, fig, title, note)
        fig.legend(handles=handles, loc="outside lower center", ncol=2)
    return fig


def figure_bytes(fig: Figure, fmt: str, provenance: dict | None = None, dpi: float | None = None) -> bytes:
    """Encode a figure as PNG, SVG or PDF bytes, with deterministic metadata (no dates).

    Parameters
    ----------
    dpi : float, optional
        PNG resolution in dots per inch (default :data:`DEFAULT_DPI`); the PNG is
        ``width x dpi`` by ``height x dpi`` pixels and records the resolution in
        its pHYs chunk.  Vector formats ignore it.
    provenance : dict, optional
        ``version``, ``input``, ``input_sha256``, ``command``: written into the
        file's metadata (PNG text chunks, SVG Dublin Core, PDF info dictionary).
    """
    if fmt not in PLOT_FORMATS:
        raise InputError("format", fmt, "one of: " + ", ".join(PLOT_FORMATS))
    buf = io.BytesIO()
    p = provenance or {}
    tool = f"finitekey {p.get('version', '')}".strip()
    source = f"{p.get('input', '')} sha256 {p.get('input_sha256', '')}" if p else ""
    command = p.get("command", "")
    # The caution rides in every format's metadata: PNG "Disclaimer" (a registered PNG keyword),
    # SVG Dublin Core "Rights", PDF "Subject" (after the input's name and hash when known).
    meta = {"png": {"Software": tool, "Disclaimer": CAUTION,
                    **({"Source": source, "Comment": command} if p else {})},
            "svg": {"Date": None, "Creator": tool, "Rights": CAUTION,
                    **({"Source": source, "Description": command} if p else {})},
            "pdf": {"CreationDate": None, "ModDate": None, "Creator": tool, "Producer": tool,
                    "Subject": (source + ". " if p else "") + CAUTION, **({"Keywords": command} if p else {})}}[fmt]
    with rc_context(STYLE):
        fig.savefig(buf, format=fmt, dpi=(dpi or DEFAULT_DPI) if fmt == "png" else None, metadata=meta)
    return buf.getvalue()
