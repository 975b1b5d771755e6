"""From a sweep to figures: group rows into curves and add the reference curves the protocol offers.

The first varied field is the horizontal axis; a second varied field (for
instance the block size) gives one curve per value.  Rate plots add, when
the protocol provides them, the asymptotic rate of the same device model and
the repeaterless bound :math:`-\\log_2(1-\\eta)` at the channel transmittance
:math:`\\eta` of each point (:func:`reference_curves`).

References
----------
.. [1] S. Pirandola, R. Laurenza, C. Ottaviani, L. Banchi, Nat. Commun. 8, 15043 (2017)
   -- the repeaterless bound (cited from memory).
"""

from __future__ import annotations

from .. import protocols
from ..errors import FiniteKeyError, InputError
from .formats import short_number
from .plots import Curve, axis_label, blocksize_figure, ledger_figure, rate_figure, repeaterless_bound, use_log
from .sweep import SweepTable, _scenario_at

__all__ = ["series", "reference_curves", "rate_plot", "blocksize_plot", "ledger_plot", "KINDS"]

KINDS = ("rate", "blocksize", "ledger")


def series(table: SweepTable, value_key: str) -> list:
    """Rows grouped into curves: x = first varied field, one curve per value of the second field.

    Rows with an error contribute no point.  A third or later varied field is
    not plotted: it must take a single value (otherwise the curves would mix).

    Raises
    ------
    InputError
        If the sweep has no varied field, or more than two fields with several values.
    """
    if not table.axes:
        raise InputError("--vary", None, "at least one varied field for the horizontal axis")
    multi = [a for a in table.axes[2:] if len(a.values) > 1]
    if multi:
        raise InputError("--vary", multi[0].text, "at most two fields with several values in a plot "
                                                  "(the first for the axis, the second for the curves)")
    xf = table.axes[0].field
    family = table.axes[1] if len(table.axes) > 1 else None
    groups: dict = {}
    for r in table.rows:
        key = r["point"].get(family.field) if family is not None else None
        groups.setdefault(key, ([], []))
        if r.get("error"):
            continue
        groups[key][0].append(r["point"][xf])
        groups[key][1].append(r.get(value_key))
    curves = []
    for key in (family.values if family is not None else [None]):
        xs, ys = groups.get(key, ([], []))
        label = "finite key" if family is None else f"{axis_label(family.field).split(' (')[0]} = {short_number(key)}"
        curves.append(Curve(label=label, x=tuple(xs), y=tuple(ys), kind="finite", meta={"family": key}))
    return curves


def _transmittance(proto, scenario):
    for name in ("transmittance", "channel_transmittance", "link_transmittance"):
        fn = getattr(proto, name, None)
        if callable(fn):
            return float(fn(scenario))
    return None


def _asymptotic(proto, scenario, statistics):
    for name in ("asymptotic_rate", "asymptotic_key_rate"):
        fn = getattr(proto, name, None)
        if callable(fn):
            return float(fn(scenario))
    return None


def reference_curves(table: SweepTable, loaded) -> list:
    """The asymptotic curve and the repeaterless bound along the first axis, when the protocol offers them.

    The protocol may provide ``asymptotic_rate(scenario)`` (bits per pulse,
    infinite block, same device model) and ``transmittance(scenario)`` (the
    channel's end-to-end transmittance :math:`\\eta`, detector included as the
    protocol defines it).  Points where a value cannot be computed are left out.
    """
    proto = loaded.protocol_object()
    xf = table.axes[0].field
    fixed = [(a.field, a.values[0]) for a in table.axes[2:]]
    asym_x, asym_y, bound_x, bound_y = [], [], [], []
    for x in table.axes[0].values:
        try:
            scenario = _scenario_at(proto, loaded.data, [(xf, x)] + fixed)
        except FiniteKeyError:
            continue
        try:
            a = _asymptotic(proto, scenario, table.statistics)
        except FiniteKeyError:
            a = None
        if a is not None:
            asym_x.append(x)
            asym_y.append(a)
        try:
            eta = _transmittance(proto, scenario)
        except FiniteKeyError:
            eta = None
        if eta is not None and 0 <= eta < 1:
            bound_x.append(x)
            bound_y.append(float(repeaterless_bound(eta)))
    out = []
    if asym_x:
        out.append(Curve("asymptotic rate (infinite block, same devices)", tuple(asym_x), tuple(asym_y),
                         kind="asymptotic"))
    if bound_x:
        out.append(Curve("repeaterless bound  −log₂(1−η)", tuple(bound_x), tuple(bound_y), kind="bound"))
    return out


def rate_plot(table: SweepTable, loaded, references: bool = True, title: str | None = None):
    """Key rate per pulse against the first varied field, with reference curves."""
    curves = series(table, "secret_key_rate_per_pulse")
    if references:
        curves += reference_curves(table, loaded)
    xs = table.axes[0].values
    name = title if title is not None else f"{table.protocol}: secret key rate"
    return rate_figure(curves, axis_label(table.axes[0].field), title=name, logx=use_log(xs), logy=True,
                       note=_note(table))


def blocksize_plot(table: SweepTable, title: str | None = None):
    """Smallest block size against the first varied field (mode ``"blocksize"`` sweeps)."""
    if table.mode != "blocksize":
        raise InputError("--kind", "blocksize", "a block-size sweep (internal: run the sweep in blocksize mode)")
    curves = series(table, "block_size")
    kinds = {r.get("block_size_kind") for r in table.rows if r.get("block_size_kind")}
    unit = kinds.pop() if len(kinds) == 1 else "block size units"
    name = title if title is not None else f"{table.protocol}: smallest block for target '{table.target}'"
    return blocksize_figure(curves, axis_label(table.axes[0].field), ylabel=f"smallest block ({unit})",
                            title=name, logx=use_log(table.axes[0].values), logy=True, note=_note(table))


def ledger_plot(ledger: list, protocol: str = "", note: str = ""):
    """Bar chart of one result's epsilon ledger."""
    return ledger_figure(ledger, title=f"{protocol}: epsilon ledger".lstrip(": "), note=note)


def _note(table: SweepTable) -> str:
    p = table.provenance
    return f"finitekey {p.get('version', '')} · input sha256 {p.get('input_sha256', '')[:12]}"
