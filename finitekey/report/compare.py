"""Several scenario files, of any registered protocols, designed over one grid: one comparison table.

``finitekey compare A.toml B.toml --vary link.distance_km=0:300:25`` runs the design of every scenario file
at every grid point (the sweep engine of :mod:`.sweep`, serial or on processes, one pool for all files) and
gathers the rows into one :class:`CompareTable`.  The table is a :class:`~.sweep.SweepTable` whose first
"axis" is the scenario itself (its values are the scenarios' labels), so every table format, ``--columns``
and ``--pivot`` work unchanged (``--pivot link.distance_km,scenario`` puts the scenarios side by side).

A varied field must exist in every scenario file; otherwise one :class:`~finitekey.errors.InputError` names
the file and the field, before any computation.

Reference: where a protocol reports the end-to-end transmittance :math:`\\eta` of its channel (fibre and
fixed losses, no detector; see :func:`channel_transmittance`), each row carries :math:`\\eta` and the
repeaterless bound :math:`-\\log_2(1-\\eta)` bits per channel use, and :func:`bound_crossings` finds where a
scenario's key rate per pulse crosses that bound along the first varied field (interpolated between grid
points, linear in the logarithm of the ratio rate / bound).

References
----------
.. [1] S. Pirandola, R. Laurenza, C. Ottaviani, L. Banchi, "Fundamental limits of repeaterless quantum
   communications", Nat. Commun. 8, 15043 (2017) -- the bound :math:`-\\log_2(1-\\eta)` secret bits per use
   of a pure-loss channel of transmittance :math:`\\eta` (computed by
   :func:`finitekey.channel.repeaterless_bound`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import PurePath

from .. import __version__
from ..errors import FiniteKeyError, InputError
from .grid import Axis, expand_grid, parse_vary
from .numbers import format_number
from .runner import run_map
from .sweep import LoadedScenario, PointTask, SweepTable, _scenario_at, evaluate_point, load_scenario

__all__ = ["SCENARIO_FIELD", "CompareTable", "ComparedScenario", "bound_crossings", "channel_transmittance",
           "load_scenarios", "run_compare"]

#: The pseudo-field of a comparison table that names the scenario of a row (its first column).
SCENARIO_FIELD = "scenario"


@dataclass(frozen=True)
class ComparedScenario:
    """One scenario file of a comparison: its label (legend and table text) and the file as loaded.

    Attributes
    ----------
    label : str
        ``[protocol] label`` of the file, else the file name without extension; made unique within the
        comparison by appending the path (and a number) when two files share one.
    loaded : LoadedScenario
    """

    label: str
    loaded: LoadedScenario

    def as_dict(self) -> dict:
        """``label``, ``input`` (path), ``input_sha256``, ``protocol``.

        Returns
        -------
        dict
        """
        return {"label": self.label, "input": self.loaded.path, "input_sha256": self.loaded.sha256,
                "protocol": self.loaded.protocol}


def _own_label(loaded: LoadedScenario) -> str:
    section = loaded.data.get("protocol")
    label = section.get("label") if isinstance(section, dict) else None
    if isinstance(label, (str, int)) and not isinstance(label, bool) and str(label).strip():
        return str(label).strip()
    return PurePath(loaded.path).stem


def load_scenarios(paths: Sequence) -> tuple:
    """Read and validate every scenario file of a comparison; labels made unique.

    Parameters
    ----------
    paths : sequence of path-like
        At least two scenario TOML files (each names its protocol in ``[protocol] name``).

    Returns
    -------
    tuple of ComparedScenario

    Raises
    ------
    InputError
        For fewer than two files, or a file that cannot be read or is not a valid scenario (the message of
        the protocol's parser, which names the field).
    """
    paths = list(paths)
    if len(paths) < 2:
        raise InputError("SCENARIO", " ".join(str(p) for p in paths) or None,
                         "at least two scenario files to compare (for one file use 'finitekey table')")
    out, seen = [], set()
    for p in paths:
        loaded = load_scenario(p)
        label = _own_label(loaded)
        if label in seen:
            label = f"{label} ({loaded.path})"
        k = 2
        base = label
        while label in seen:
            label = f"{base} #{k}"
            k += 1
        seen.add(label)
        out.append(ComparedScenario(label, loaded))
    return tuple(out)


def channel_transmittance(proto, scenario) -> float | None:
    """End-to-end transmittance of a scenario's channel (fibre and fixed losses, no detector), or None.

    The channel the repeaterless bound is about.  In order:

    1. the protocol object's optional method ``channel_transmittance(scenario)`` (may return None);
    2. ``scenario.link.fibre_transmittance()`` (relay links: both arms, as ``tf-sns`` and ``mdi-bb84`` offer);
    3. ``scenario.model.link.loss_db`` (a point-to-point fibre, as ``decoy-bb84``):
       :math:`\\eta = 10^{-\\mathrm{loss}/10}`;

    otherwise None (a scenario with no link model, such as ``bb84``).

    Parameters
    ----------
    proto : object
        The registered protocol object.
    scenario : object
        Its parsed scenario.

    Returns
    -------
    float or None
    """
    hook = getattr(proto, "channel_transmittance", None)
    if callable(hook):
        eta = hook(scenario)
        return None if eta is None else float(eta)
    fibre = getattr(getattr(scenario, "link", None), "fibre_transmittance", None)
    if callable(fibre):
        return float(fibre())
    link = getattr(getattr(scenario, "model", None), "link", None)
    loss = getattr(link, "loss_db", None)
    if loss is None:
        return None
    from ..channel import transmittance
    return float(transmittance(loss, 1.0))


def _bound(eta):
    if eta is None or not (0.0 <= eta < 1.0):
        return None
    from ..channel import repeaterless_bound
    return float(repeaterless_bound(eta))


def bound_crossings(xs: Sequence, rates: Sequence, bounds: Sequence) -> list:
    """Where a key rate crosses the repeaterless bound along one axis.

    Between two neighbouring grid points that both have a positive rate and a positive bound and where
    ``rate - bound`` changes sign, the crossing is interpolated linearly in ``x`` on
    :math:`d = \\ln(\\mathrm{rate}/\\mathrm{bound})` (both decay about exponentially with distance).

    Parameters
    ----------
    xs, rates, bounds : sequences of equal length
        Grid values in order, key rates per pulse and bounds per channel use (None where missing).

    Returns
    -------
    list of dict
        ``x`` (interpolated), ``between`` (the two grid values), ``direction`` (``"above"``: the rate exceeds
        the bound beyond ``x``; ``"below"``: it falls under it).
    """
    out = []
    prev = None
    for x, r, b in zip(xs, rates, bounds):
        ok = (isinstance(x, (int, float)) and not isinstance(x, bool) and r is not None and b is not None
              and r > 0 and b > 0 and math.isfinite(r) and math.isfinite(b))
        if not ok:
            prev = None
            continue
        d = math.log(r / b)
        if prev is not None:
            x0, d0 = prev
            if (d0 <= 0 < d) or (d0 > 0 >= d):
                t = d0 / (d0 - d)
                out.append({"x": x0 + (x - x0) * t, "between": [x0, x],
                            "direction": "above" if d > 0 else "below"})
        prev = (x, d)
    return out


@dataclass(frozen=True)
class CompareTable(SweepTable):
    """A sweep table over several scenario files: one row per (scenario, grid point).

    The first axis is :data:`SCENARIO_FIELD` with the scenarios' labels as values; every row's ``point``
    names its scenario, and the row carries ``protocol`` and, where the protocol reports its channel,
    ``channel_transmittance`` and ``repeaterless_bound``.

    Attributes
    ----------
    scenarios : tuple of dict
        :meth:`ComparedScenario.as_dict` of each file, in the order given.
    crossings : tuple of dict
        :func:`bound_crossings` per scenario (and per value of the other varied fields): ``scenario``,
        ``fixed`` (the other fields' values), ``x``, ``between``, ``direction``.
    notes : tuple of str
        Lines shown under the human tables (which file each label is, the crossings).
    """

    scenarios: tuple = ()
    crossings: tuple = ()
    notes: tuple = ()

    @property
    def varied(self) -> list:
        """The varied scenario fields (the axes after the scenario axis)."""
        return [a.field for a in self.axes[1:]]

    def columns(self) -> list:
        """``(key, header, unit)`` of every flat column: the sweep's, the protocol after the scenario, and
        the channel transmittance and repeaterless bound when some row has them."""
        cols = SweepTable.columns(self)
        cols.insert(1, ("protocol", "protocol", ""))
        if any(r.get("repeaterless_bound") is not None for r in self.rows):
            at = [k for k, _, _ in cols].index("eps_total")
            cols[at:at] = [("channel_transmittance", "channel transmittance", ""),
                           ("repeaterless_bound", "repeaterless bound", "bit/channel use")]
        return cols

    @property
    def extra_default_columns(self) -> tuple:
        """Columns the human formats show by default besides the sweep's: the repeaterless bound, if any."""
        return ("repeaterless_bound",) if any(r.get("repeaterless_bound") is not None for r in self.rows) else ()

    def to_dict(self) -> dict:
        """JSON-ready table (see :meth:`SweepTable.to_dict`) with ``scenarios`` and ``bound_crossings``.

        Returns
        -------
        dict
        """
        d = SweepTable.to_dict(self)
        d["scenarios"] = [dict(s) for s in self.scenarios]
        d["bound_crossings"] = [dict(c) for c in self.crossings]
        return d


def _show(v) -> str:
    return format_number(v, "input") if isinstance(v, (int, float)) and not isinstance(v, bool) else str(v)


def _check_fields(scenarios: Sequence[ComparedScenario], axes: Sequence[Axis]) -> None:
    shared = None
    for s in scenarios:
        names = list(s.loaded.protocol_object().scenario_fields())
        shared = names if shared is None else [n for n in shared if n in names]
    shared = [n for n in shared or [] if not n.startswith("protocol.")]
    for a in axes:
        if a.field == SCENARIO_FIELD:
            raise InputError("--vary", a.text, "a scenario field (the scenario itself is the first column)")
        for s in scenarios:
            if a.field not in s.loaded.protocol_object().scenario_fields():
                raise InputError("--vary", a.field,
                                 f"a field every scenario has, but {s.loaded.path} ({s.loaded.protocol}) has no "
                                 f"field {a.field}; fields they all have: " + (", ".join(shared) or "none"))


def provenance(scenarios: Sequence[ComparedScenario], command: str) -> dict:
    """Tool version, every input file with its SHA-256 and label, and the command line (no clock time).

    Returns
    -------
    dict
        ``tool``, ``version``, ``inputs`` (list of :meth:`ComparedScenario.as_dict`), ``input`` and
        ``input_sha256`` (the files and digests joined by ``"; "``, for readers of one-input provenance),
        ``command``.
    """
    inputs = [s.as_dict() for s in scenarios]
    return {"tool": "finitekey", "version": __version__, "inputs": inputs,
            "input": "; ".join(i["input"] for i in inputs),
            "input_sha256": "; ".join(i["input_sha256"] for i in inputs), "command": command}


def run_compare(scenarios: Sequence[ComparedScenario], vary: Sequence = (), statistics: str | None = None,
                jobs: int | None = None, cluster: str | None = None, progress: bool | None = None,
                command: str = "") -> CompareTable:
    """Design every scenario at every grid point of ``vary``; one :class:`CompareTable`.

    Parameters
    ----------
    scenarios : sequence of ComparedScenario
        From :func:`load_scenarios`.
    vary : sequence of str or Axis
        ``FIELD=VALUES`` expressions; every field must exist in every scenario.
    statistics : str, optional
        Statistics method for every scenario (each protocol must offer it); default each protocol's own.
    jobs, cluster, progress
        See :func:`finitekey.report.runner.run_map` (one pool for all scenarios' points).
    command : str
        Command line for the provenance.

    Returns
    -------
    CompareTable

    Raises
    ------
    InputError
        Before any computation: a bad grid, a field some scenario lacks (naming the file and the field), a
        value a scenario does not accept, or a statistics method some protocol does not offer.
    """
    if len(scenarios) < 2:
        raise InputError("SCENARIO", len(scenarios), "at least two scenario files to compare")
    axes = tuple(a if isinstance(a, Axis) else parse_vary(a) for a in vary)
    _check_fields(scenarios, axes)
    grid = expand_grid(axes)
    if statistics is not None:
        for s in scenarios:
            methods = s.loaded.protocol_object().statistics_methods
            if statistics not in methods:
                raise InputError("--statistics", statistics, f"a method every protocol offers; {s.loaded.path} "
                                 f"({s.loaded.protocol}) offers: " + ", ".join(methods))
    extra = []  # per (scenario, point): the channel, computed here while every value is validated
    tasks = []
    for i, s in enumerate(scenarios):
        proto = s.loaded.protocol_object()
        for pt in grid:
            scenario = _scenario_at(proto, s.loaded.data, pt.assignments)  # InputError names the field
            try:
                eta = channel_transmittance(proto, scenario)
            except FiniteKeyError:
                eta = None
            extra.append((eta, _bound(eta)))
            tasks.append(PointTask(i * len(grid) + pt.index, s.loaded.protocol, s.loaded.data, pt.assignments,
                                   "design", statistics, None))
    rows = sorted(run_map(evaluate_point, tasks, jobs=jobs, cluster=cluster, progress=progress),
                  key=lambda r: r["index"])
    out = []
    for r, (eta, bound) in zip(rows, extra):
        s = scenarios[r["index"] // len(grid)]
        r = dict(r)
        r["point"] = {SCENARIO_FIELD: s.label, **r["point"]}
        r["protocol"] = s.loaded.protocol
        r["channel_transmittance"] = eta
        r["repeaterless_bound"] = bound
        out.append(r)
    labels = tuple(s.label for s in scenarios)
    all_axes = (Axis(SCENARIO_FIELD, labels, "scenario files"),) + axes
    crossings = _crossings(scenarios, axes, out)
    protocols_seen = []
    for s in scenarios:
        if s.loaded.protocol not in protocols_seen:
            protocols_seen.append(s.loaded.protocol)
    notes = ["scenarios: " + "; ".join(f"{s.label} = {s.loaded.path} ({s.loaded.protocol})" for s in scenarios)]
    notes += [_crossing_note(c, axes) for c in crossings]
    if any(r.get("repeaterless_bound") is not None for r in out):
        notes.append("repeaterless bound: -log2(1 - eta) bits per channel use at the channel transmittance eta "
                     "(fibre and fixed losses, detector excluded; Pirandola et al., Nat. Commun. 8, 15043 (2017))")
    return CompareTable(protocol=" vs ".join(protocols_seen), mode="design", axes=all_axes, rows=tuple(out),
                        statistics=statistics, target=None, provenance=provenance(scenarios, command),
                        scenarios=tuple(s.as_dict() for s in scenarios), crossings=tuple(crossings),
                        notes=tuple(notes))


def _crossings(scenarios, axes, rows) -> list:
    if not axes:
        return []
    xf = axes[0].field
    out = []
    for s in scenarios:
        groups: dict = {}
        for r in rows:
            if r["point"][SCENARIO_FIELD] != s.label:
                continue
            fixed = tuple((k, v) for k, v in r["point"].items() if k not in (SCENARIO_FIELD, xf))
            groups.setdefault(fixed, []).append(r)
        for fixed, rs in groups.items():
            xs = [r["point"][xf] for r in rs]
            rates = [r.get("secret_key_rate_per_pulse") if not r.get("error") and (r.get("status") or {}).get("key")
                     else None for r in rs]
            bounds = [r.get("repeaterless_bound") for r in rs]
            for c in bound_crossings(xs, rates, bounds):
                out.append({"scenario": s.label, "field": xf, "fixed": dict(fixed), **c})
    return out


def _crossing_note(c: dict, axes) -> str:
    where = ", ".join(f"{k} = {_show(v)}" for k, v in c["fixed"].items())
    side = "rises above" if c["direction"] == "above" else "falls below"
    return (f"{c['scenario']}: the key rate per pulse {side} the repeaterless bound from {c['field']} = about "
            f"{format_number(c['x'], 'real', 'text')} (interpolated between the grid points {_show(c['between'][0])} "
            f"and {_show(c['between'][1])})" + (f", at {where}" if where else ""))
