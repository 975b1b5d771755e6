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

from ..errors import FiniteKeyError, InputError
from .formats import short_number, status_text
from .plots import (DEFAULT_SIZE, Curve, axis_label, blocksize_figure, compare_figure, ledger_figure, rate_figure, repeaterless_bound,
                    use_log)
from .compare import SCENARIO_FIELD, CompareTable, channel_transmittance
from .sweep import SweepTable, _scenario_at

__all__ = ["KINDS", "blocksize_plot", "compare_plot", "ledger_plot", "rate_plot", "rate_quantity", "reference_curves", "scenario_name",
           "series"]

KINDS = ("rate", "blocksize", "ledger")


def series(table: SweepTable, value_key: str) -> list:
    """Rows grouped into curves: x = first varied field, one curve per value of the second field.

    Rows with an error contribute no point.  Rows whose status is no key contribute no point either; their
    x values and reasons go to the curve's ``meta["no_key_x"]`` / ``meta["no_key_reasons"]``, which the
    figure marks on the horizontal axis.  A third or later varied field is
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
    no_key: dict = {}
    for r in table.rows:
        key = r["point"].get(family.field) if family is not None else None
        groups.setdefault(key, ([], []))
        if r.get("error"):
            continue
        status = r.get("status") or {}
        if status and not status.get("key"):
            xs_, reasons = no_key.setdefault(key, ([], []))
            xs_.append(r["point"][xf])
            reason = status_text(status)
            if reason not in reasons:
                reasons.append(reason)
            continue
        groups[key][0].append(r["point"][xf])
        value = (r.get("design") or {}).get("secret_key_rate_per_detection") if value_key == "_per_detection" \
            else r.get(value_key)
        groups[key][1].append(value)
    curves = []
    for key in (family.values if family is not None else [None]):
        xs, ys = groups.get(key, ([], []))
        label = "finite key" if family is None else f"{axis_label(family.field).split(' (')[0]} = {_compact(key)}"
        nk_x, nk_reasons = no_key.get(key, ([], []))
        curves.append(Curve(label=label, x=tuple(xs), y=tuple(ys), kind="finite",
                            meta={"family": key, "no_key_x": tuple(nk_x), "no_key_reasons": tuple(nk_reasons)}))
    return curves


def _compact(v) -> str:
    """Legend value: 1e+09 -> 1e9, 0.02 -> 0.02."""
    if isinstance(v, (int, float)) and not isinstance(v, bool) and v != 0 and (abs(v) >= 1e5 or abs(v) < 1e-3):
        m, e = f"{float(v):.3g}".split("e")
        return f"{m}e{int(e)}"
    return short_number(v)


def rate_quantity(table: SweepTable) -> tuple:
    """Which rate to plot: ``(row key, design key, unit)``.

    Per detection when every computed row has a per-detection rate (protocols
    whose scenario has no link model, such as ``bb84``, state their asymptotic
    rate per detection); otherwise per pulse (signal) sent.
    """
    ok = [r for r in table.rows if not r.get("error")]
    if ok and all((r.get("design") or {}).get("secret_key_rate_per_detection") is not None for r in ok):
        return "secret_key_rate_per_detection", "bit/detection"
    return "secret_key_rate_per_pulse", "bit/pulse"


def _fibre_transmittance(scenario, proto=None):
    """Transmittance of the link alone (no detector): the channel the repeaterless bound is about.

    :func:`finitekey.report.compare.channel_transmittance` (the protocol's optional hook, then the link
    models the protocols share).
    """
    return channel_transmittance(proto, scenario)


def _asymptotic(proto, scenario, unit: str):
    """Asymptotic (infinite-block) rate in ``unit``, from the protocol's own functions, or None."""
    if unit == "bit/detection":
        fn = getattr(proto, "asymptotic_rate", None)  # bb84: per detection, p_X -> 1
        return float(fn(scenario)) if callable(fn) else None
    per_pulse = getattr(proto, "asymptotic_rate_per_pulse", None)   # a protocol's own asymptote (tf-sns)
    if callable(per_pulse):
        return float(per_pulse(scenario))
    if proto.name == "decoy-bb84":
        from ..protocols import decoy_bb84
        # infinite decoys, no sifting loss: the same asymptote the block-size target 'fraction=F' refers to
        rate, _ = decoy_bb84.optimal_gllp_rate(scenario.model, scenario.ec_efficiency, sifting=1.0)
        return float(rate)
    return None


def reference_curves(table: SweepTable, loaded, unit: str = "bit/pulse") -> list:
    """The asymptotic curve and the repeaterless bound along the first axis, when the protocol offers them.

    * asymptotic rate: ``bb84.asymptotic_rate`` (per detection) or, for
      ``decoy-bb84``, :func:`finitekey.protocols.decoy_bb84.scenario.optimal_gllp_rate`
      with infinitely many decoys and no sifting loss (per pulse);
    * repeaterless bound: :func:`finitekey.channel.repeaterless_bound` at the
      fibre transmittance :math:`\\eta = 10^{-\\mathrm{loss}/10}` of the link (per
      channel use = per pulse; drawn only for rates per pulse).

    Points where a value cannot be computed are left out.
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
            a = _asymptotic(proto, scenario, unit)
        except FiniteKeyError:
            a = None
        if a is not None:
            asym_x.append(x)
            asym_y.append(a)
        eta = _fibre_transmittance(scenario, proto) if unit == "bit/pulse" else None
        if eta is not None and 0 <= eta < 1:
            bound_x.append(x)
            bound_y.append(float(repeaterless_bound(eta)))
    out = []
    if asym_x:
        out.append(Curve("asymptotic rate (infinite block, same devices)", tuple(asym_x), tuple(asym_y),
                         kind="asymptotic"))
    if bound_x:
        out.append(Curve("repeaterless bound −log₂(1−η), η = link transmittance (detector excluded)",
                         tuple(bound_x), tuple(bound_y), kind="bound"))
    return out


def scenario_name(table: SweepTable) -> str:
    """The scenario's name for titles: the input file's stem (``examples/metro.toml`` -> ``metro``)."""
    from pathlib import PurePath
    path = str(table.provenance.get("input", "") or "")
    return PurePath(path).stem if path else ""


def _title(table: SweepTable, what: str) -> str:
    name = scenario_name(table)
    return f"{name} ({table.protocol}): {what}" if name else f"{table.protocol}: {what}"


def rate_plot(table: SweepTable, loaded, references: bool = True, title: str | None = None, size=None):
    """Key rate against the first varied field, one curve per value of the second, with reference curves.

    The title names the scenario (its file name) and the protocol; ``size`` is (width, height) in inches.
    """
    key, unit = rate_quantity(table)
    curves = series(table, key if key != "secret_key_rate_per_detection" else "_per_detection")
    if references:
        curves += reference_curves(table, loaded, unit)
    xs = table.axes[0].values
    name = title if title is not None else _title(table, "secret key rate")
    return rate_figure(curves, axis_label(table.axes[0].field), ylabel=f"secret key rate ({unit})", title=name,
                       logx=use_log(xs), logy=True, note=_note(table), size=size)


def blocksize_plot(table: SweepTable, title: str | None = None, size=None):
    """Smallest block size against the first varied field (mode ``"blocksize"`` sweeps)."""
    if table.mode != "blocksize":
        raise InputError("--kind", "blocksize", "a block-size sweep (internal: run the sweep in blocksize mode)")
    curves = series(table, "block_size")
    kinds = {r.get("block_size_kind") for r in table.rows if r.get("block_size_kind")}
    unit = kinds.pop().replace("_", " ") if len(kinds) == 1 else "block size units"
    name = title if title is not None else _title(table, f"smallest block for target '{table.target}'")
    return blocksize_figure(curves, axis_label(table.axes[0].field), ylabel=f"smallest block ({unit})",
                            title=name, logx=use_log(table.axes[0].values), logy=True, note=_note(table), size=size)


def ledger_plot(ledger: list, protocol: str = "", note: str = "", scenario: str = "", size=None):
    """Bar chart of one result's epsilon ledger; the title names the scenario when given."""
    who = f"{scenario} ({protocol})" if scenario and protocol else (scenario or protocol)
    return ledger_figure(ledger, title=f"{who}: epsilon ledger".lstrip(": "), note=note, size=size)


def _note(table: SweepTable) -> str:
    p = table.provenance
    return f"finitekey {p.get('version', '')} · input sha256 {p.get('input_sha256', '')[:12]}"


def compare_plot(table: CompareTable, per_second: bool = False, title: str | None = None, size=None):
    """One curve per scenario of a comparison against the first varied field, the bound and its crossings.

    Parameters
    ----------
    table : CompareTable
        From :func:`finitekey.report.compare.run_compare`; every varied field after the first must have a
        single value.
    per_second : bool
        Plot the key rate in bits per second instead of bits per pulse; the repeaterless bound (per channel
        use) and its crossings are then not drawn.
    title : str, optional
    size : (float, float), optional
        Width and height in inches.

    Raises
    ------
    InputError
        Without a varied field, with a second varied field of several values, or when no scenario has a
        positive rate.
    """
    axes = table.axes[1:]
    if not axes:
        raise InputError("--vary", None, "at least one varied field for the horizontal axis of the plot")
    multi = [a for a in axes[1:] if len(a.values) > 1]
    if multi:
        raise InputError("--vary", multi[0].text, "a single value for every varied field after the first in a "
                                                  "plot (one curve per scenario along the first field)")
    xf = axes[0].field
    key, rate_unit = ("secret_key_rate_bps", "bit/s") if per_second else ("secret_key_rate_per_pulse", "bit/pulse")
    curves, bounds = [], {}
    for sc in table.scenarios:
        label = sc["label"]
        rows = [r for r in table.rows if r["point"][SCENARIO_FIELD] == label]
        xs, ys, nk_x, nk_reasons = [], [], [], []
        for r in rows:
            if r.get("error"):
                continue
            status = r.get("status") or {}
            if status and not status.get("key"):
                nk_x.append(r["point"][xf])
                reason = status_text(status).removeprefix("no key: ").split(" (")[0].split(":")[0]
                if reason not in nk_reasons:  # the short reason; the table's notes give the detail
                    nk_reasons.append(reason)
                continue
            xs.append(r["point"][xf])
            ys.append(r.get(key))
        reasons = (f"{label}: {', '.join(nk_reasons)}",) if nk_reasons else ()
        curves.append(Curve(label, tuple(xs), tuple(ys), kind="finite",
                            meta={"no_key_x": tuple(nk_x), "no_key_reasons": reasons}))
        bx = tuple(r["point"][xf] for r in rows if r.get("repeaterless_bound") is not None)
        by = tuple(r["repeaterless_bound"] for r in rows if r.get("repeaterless_bound") is not None)
        if bx and not per_second:
            bounds.setdefault((bx, tuple(round(v, 12) for v in by)), (by, []))[1].append(label)
    for (bx, _), (by, labels) in bounds.items():
        if len(bounds) == 1:
            text = "repeaterless bound −log₂(1−η), η = channel transmittance (detector excluded)"
        else:  # one bound per link: short entries, the y label says "per channel use"
            text = "repeaterless bound, link of " + ", ".join(labels)
        curves.append(Curve(text, bx, by, kind="bound"))
    xlabel = axis_label(xf)
    unit = xlabel.rpartition(" (")[2].rstrip(")") if xlabel.endswith(")") else ""
    crossings = [] if per_second else [
        {"x": c["x"], "label": f"{c['scenario']}: rate {'above' if c['direction'] == 'above' else 'below'} the "
                               f"bound beyond about {short_number(c['x'])}" + (f" {unit}" if unit else "")
                               + " (interpolated)"}
        for c in table.crossings]
    xs = axes[0].values
    name = title if title is not None else "secret key rate by scenario"
    if size is None:  # the legend below the axes grows with the scenarios: a taller default figure
        size = (DEFAULT_SIZE[0], DEFAULT_SIZE[1] + 0.45 * max(0, len(curves) - 2))
    p = table.provenance
    shas = ", ".join(i.get("input_sha256", "")[:12] for i in p.get("inputs", ()))
    note = f"finitekey {p.get('version', '')} · inputs sha256 {shas}"
    return compare_figure(curves, xlabel, ylabel=f"secret key rate ({rate_unit})", crossings=crossings,
                          title=name, logx=use_log(xs), logy=True, note=note, size=size)
