"""Parameter sweeps: the design optimiser (or a block-size search) at every point of a grid.

A sweep starts from one scenario file, replaces the varied fields through the
protocol's ``with_field`` at every grid point (:mod:`finitekey.report.grid`),
and runs at each point one of

* ``"design"`` -- ``protocol.design``: free parameters chosen by the optimiser;
* ``"fixed"`` -- the key length at the expected counts with the scenario's own
  parameters (the protocol's fixed-parameter evaluation, see :func:`fixed_evaluator`);
* ``"blocksize"`` -- ``protocol.blocksize``: the smallest block reaching a
  :class:`~finitekey.protocols.BlockTarget`.

Points are evaluated by the module-level :func:`evaluate_point`, which takes
only plain data (protocol name, the scenario's TOML dictionary, the
assignments), so it runs unchanged in a local process pool or on Dask workers
(:func:`finitekey.report.runner.run_map`).  Rows come back sorted by grid
index, so the output does not depend on where or in which order points ran.

References
----------
.. [1] Python documentation, ``hashlib.sha256`` -- input fingerprint in the provenance.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__, protocols
from ..errors import FiniteKeyError, InputError
from ..files import read_toml
from ..optimize.dispatch import scenario_from_dict
from .formats import status_text
from .grid import Axis, GridPoint, expand_grid, parse_vary
from .runner import run_map

__all__ = [
    "MODES",
    "LoadedScenario",
    "PointTask",
    "SweepTable",
    "evaluate_point",
    "fixed_evaluator",
    "flatten",
    "load_scenario",
    "provenance",
    "run_sweep",
]

MODES = ("design", "fixed", "blocksize")


@dataclass(frozen=True)
class LoadedScenario:
    """A scenario file as read: its protocol, the raw TOML data and its fingerprint.

    Attributes
    ----------
    protocol : str
        Registry name from the file's ``[protocol] name``.
    data : dict
        The TOML dictionary (plain data; re-parsed in each worker).
    path : str
    sha256 : str
        SHA-256 of the file's bytes.
    """

    protocol: str
    data: dict
    path: str
    sha256: str

    def protocol_object(self):
        """The registered protocol object named by the file.

        Returns
        -------
        object
        """
        return protocols.get(self.protocol)

    def scenario(self):
        """The file's scenario, parsed by its protocol (errors name the field).

        Returns
        -------
        object
        """
        return self.protocol_object().parse_scenario(self.data)


def load_scenario(path) -> LoadedScenario:
    """Read and validate a scenario TOML file.

    The protocol is named by the ``[protocol]`` section's ``name`` (required,
    as for ``finitekey design``); the whole file is validated by that
    protocol's ``parse_scenario`` before any sweep starts.

    Raises
    ------
    InputError
        For a missing file, bad TOML, an unknown protocol or an invalid scenario.
    """
    data = read_toml(path)
    proto, _ = scenario_from_dict(data)  # validates now, before workers start
    name = proto.name
    digest = hashlib.sha256(Path(path).read_bytes()).hexdigest()
    return LoadedScenario(protocol=name, data=data, path=str(path), sha256=digest)


@dataclass(frozen=True)
class PointTask:
    """Everything a worker needs to evaluate one grid point (plain, picklable data)."""

    index: int
    protocol: str
    data: dict
    assignments: tuple
    mode: str = "design"
    statistics: str | None = None
    target: str | None = None


#: How each protocol's own scenario fields switch the optimiser off: the fields that must be given (the free
#: parameters) and the fields the sweep sets so that ``design`` evaluates instead of optimising.  A protocol
#: that offers ``evaluate(scenario, statistics=None)`` is used directly instead.  bb84: every choice is fixed
#: (basis bias from design.p_x, epsilon split from design.smoothing_share).  decoy-bb84: intensities, their
#: probabilities and the basis bias are fixed; the epsilon split is still chosen by the protocol's design,
#: since its scenario has no field for it.  described: the key-setting probability and the test fraction are fixed
#: (its design has no other free parameter).
FIXED_PARAMETER_FIELDS = {
    "bb84": (("design.p_x",), (("design.optimise_split", False),)),
    "decoy-bb84": (("protocol.intensities", "protocol.intensity_probabilities", "protocol.key_basis_probability"),
                   ()),
    "tf-sns": (("protocol.signal_intensity", "protocol.sending_probability", "protocol.decoy_intensities",
                "protocol.decoy_probabilities", "protocol.key_window_probability"), ()),
    "described": (("design.key_probability", "design.test_fraction"), ()),
    "mdi-bb84": (("protocol.alice_intensities", "protocol.alice_intensity_probabilities", "protocol.bob_intensities",
                  "protocol.bob_intensity_probabilities", "protocol.key_basis_probability"), ()),
}


def _given(data: dict, dotted: str) -> bool:
    sec, _, key = dotted.partition(".")
    return isinstance(data.get(sec), dict) and key in data[sec]


def fixed_evaluator(proto, data: dict | None = None):
    """How to evaluate the key length with the scenario's own parameters (``--fixed``), or None.

    Returns a function ``(scenario, statistics) -> DesignResult``.  Uses the
    protocol's ``evaluate(scenario, statistics=None)`` when it has one;
    otherwise the protocol's scenario convention in
    :data:`FIXED_PARAMETER_FIELDS` (every free parameter given in the file,
    optimiser switched off through a scenario field).

    Raises
    ------
    InputError
        If the scenario (``data``) does not fix every free parameter.
    """
    fn = getattr(proto, "evaluate", None)
    if callable(fn):
        return lambda scenario, statistics: fn(scenario, statistics=statistics)
    conv = FIXED_PARAMETER_FIELDS.get(proto.name)
    if conv is None:
        return None
    required, settings = conv
    if data is not None:
        missing = [f for f in required if not _given(data, f)]
        if missing:
            raise InputError("--fixed", proto.name,
                             "a scenario file that gives the free parameters " + ", ".join(required)
                             + " (missing: " + ", ".join(missing) + "); --fixed keeps them as given")

    def run(scenario, statistics):
        for name, value in settings:
            scenario = proto.with_field(scenario, name, value)
        return proto.design(scenario, statistics=statistics)
    return run


def _scenario_at(proto, data: dict, assignments) :
    scenario = proto.parse_scenario(data)
    for name, value in assignments:
        scenario = proto.with_field(scenario, name, value)
    return scenario


def flatten(d: dict, prefix: str = "") -> dict:
    """Nested mapping -> one level with dotted keys; lists/tuples kept as lists."""
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(flatten(v, key + "."))
        elif isinstance(v, tuple):
            out[key] = list(v)
        else:
            out[key] = v
    return out


def _number(x):
    if x is None or isinstance(x, (bool, int, str)):
        return x
    x = float(x)
    return x if math.isfinite(x) else None


def _design_row(design) -> dict:
    d = design.to_dict()
    return {
        "status": d["status"],
        "secret_key_length": int(d["secret_key_length"]),
        "secret_key_rate_per_pulse": _number(d["secret_key_rate_per_signal"]),
        "secret_key_rate_per_detection": _number(d.get("secret_key_rate_per_detection")),
        "secret_key_rate_bps": _number(d.get("secret_key_rate_bps")),
        # no parameters are chosen when there is no key: those cells stay blank, the status says why
        "parameters": flatten(d.get("parameters") or {}),
        "eps_total": _number(d["expected"]["eps_total"]),
        "eps_sec": _number(d["expected"]["eps_sec"]),
        "eps_cor": _number(d["expected"]["eps_cor"]),
        "block_fill_time_s": _number(d.get("block_fill_time_s")),
        "ledger": d["expected"]["ledger"],
        "design": d,
    }


def evaluate_point(task: PointTask) -> dict:
    """Evaluate one grid point; returns a JSON-ready row (module-level so that it pickles).

    A point where the protocol cannot produce a result (e.g. no block size
    reaches the target at that distance) gives a row with ``"error"`` set and
    no numbers, instead of aborting the whole sweep.
    """
    proto = protocols.get(task.protocol)
    row = {"index": task.index, "point": dict(task.assignments)}
    try:
        scenario = _scenario_at(proto, task.data, task.assignments)
        if task.mode == "design":
            row.update(_design_row(proto.design(scenario, statistics=task.statistics)))
        elif task.mode == "fixed":
            fn = fixed_evaluator(proto, task.data)
            if fn is None:
                raise InputError("--fixed", task.protocol, "a protocol with a fixed-parameter evaluation")
            row.update(_design_row(fn(scenario, task.statistics)))
        elif task.mode == "blocksize":
            target = protocols.BlockTarget.parse(task.target)
            res = proto.blocksize(scenario, target, statistics=task.statistics)
            row["block_size"] = int(res.size)
            row["block_size_kind"] = res.size_kind
            row["target"] = str(target)
            row.update(_design_row(res.design))
        else:
            raise InputError("mode", task.mode, "one of: " + ", ".join(MODES))
        row["error"] = None
    except FiniteKeyError as exc:
        row["error"] = f"{type(exc).__name__}: {exc}"
    return row


@dataclass(frozen=True)
class SweepTable:
    """The result of a sweep: one row per grid point, in grid order, with provenance.

    Attributes
    ----------
    protocol : str
    mode : str
        ``"design"``, ``"fixed"`` or ``"blocksize"``.
    axes : tuple of Axis
    rows : tuple of dict
        JSON-ready rows (see :func:`evaluate_point`), sorted by ``"index"``.
    statistics : str or None
    target : str or None
        The block-size target (mode ``"blocksize"``).
    provenance : dict
        ``tool``, ``version``, ``input``, ``input_sha256``, ``command``.
    """

    protocol: str
    mode: str
    axes: tuple
    rows: tuple
    statistics: str | None = None
    target: str | None = None
    provenance: dict = field(default_factory=dict)

    @property
    def fields(self) -> list:
        return [a.field for a in self.axes]

    def parameter_names(self) -> list:
        """Union of the chosen-parameter names over all rows, in first-seen order."""
        names = []
        for r in self.rows:
            for k in r.get("parameters", {}) or {}:
                if k not in names:
                    names.append(k)
        return names

    def columns(self) -> list:
        """``(key, header, unit)`` of every flat column, in table order."""
        cols = [(f, f, "") for f in self.fields]
        if self.mode == "blocksize":
            cols += [("block_size", "block size", ""), ("block_size_kind", "block size unit", "")]
        cols.append(("status", "status", ""))
        cols += [("secret_key_length", "secret key length", "bit"),
                 ("secret_key_rate_per_pulse", "key rate per pulse", "bit/pulse")]
        if any(r.get("secret_key_rate_per_detection") is not None for r in self.rows):
            cols.append(("secret_key_rate_per_detection", "key rate per detection", "bit/detection"))
        cols.append(("secret_key_rate_bps", "key rate per second", "bit/s"))
        cols += [(f"parameters.{p}", p, "") for p in self.parameter_names()]
        cols += [("eps_total", "total epsilon", ""), ("block_fill_time_s", "block fill time", "s")]
        if any(r.get("error") for r in self.rows):
            cols.append(("error", "error", ""))
        return cols

    def flat_rows(self) -> list:
        """One list of cell values per row, aligned with :meth:`columns` (None for missing)."""
        out = []
        for r in self.rows:
            cells = []
            for key, _, _ in self.columns():
                if key in r.get("point", {}):
                    cells.append(r["point"][key])
                elif key.startswith("parameters."):
                    cells.append((r.get("parameters") or {}).get(key[len("parameters."):]))
                elif key == "status":
                    cells.append(status_text(r.get("status")))
                else:
                    cells.append(r.get(key))
            out.append(cells)
        return out

    def to_dict(self) -> dict:
        """JSON-ready table: provenance, protocol, mode, statistics, target, varied fields, columns, rows.

        Returns
        -------
        dict
        """
        return {"provenance": dict(self.provenance), "protocol": self.protocol, "mode": self.mode,
                "statistics": self.statistics, "target": self.target,
                "vary": [{"field": a.field, "values": list(a.values), "text": a.text} for a in self.axes],
                "columns": [{"key": k, "header": h, "unit": u} for k, h, u in self.columns()],
                "rows": list(self.rows)}


def provenance(loaded: LoadedScenario, command: str) -> dict:
    """Tool version, input file and its SHA-256, and the command line (no clock time: output is reproducible)."""
    return {"tool": "finitekey", "version": __version__, "input": loaded.path, "input_sha256": loaded.sha256,
            "command": command}


def run_sweep(loaded: LoadedScenario, vary: Sequence[str] | Sequence[Axis] = (), mode: str = "design",
              statistics: str | None = None, target: str | None = None, jobs: int | None = None,
              cluster: str | None = None, progress: bool | None = None, command: str = "") -> SweepTable:
    """Run a sweep over the grid of ``vary`` and return a :class:`SweepTable`.

    Parameters
    ----------
    loaded : LoadedScenario
    vary : sequence of str or Axis
        ``FIELD=VALUES`` expressions (parsed against ``protocol.scenario_fields()``).
    mode : {"design", "fixed", "blocksize"}
    statistics : str, optional
        Statistics method; default the protocol's.
    target : str, optional
        Block-size target text (``BlockTarget.parse``), mode ``"blocksize"`` only; default ``"positive"``.
    jobs, cluster, progress
        See :func:`finitekey.report.runner.run_map`.
    command : str
        Command line for the provenance.

    Raises
    ------
    InputError
        For a bad grid, an unknown field, a value a field does not accept (all
        points are validated before any work starts), or ``--fixed`` with a
        protocol that has no fixed-parameter evaluation.
    """
    proto = loaded.protocol_object()
    if mode not in MODES:
        raise InputError("mode", mode, "one of: " + ", ".join(MODES))
    if statistics is not None and statistics not in proto.statistics_methods:
        raise InputError("--statistics", statistics, "one of: " + ", ".join(proto.statistics_methods))
    if mode == "fixed" and fixed_evaluator(proto, loaded.data) is None:
        raise InputError("--fixed", loaded.protocol,
                         "a protocol with a fixed-parameter evaluation (this protocol only offers the design "
                         "optimiser; drop --fixed)")
    if mode == "blocksize":
        target = str(protocols.BlockTarget.parse("positive" if target is None else target))
    else:
        target = None
    fields = list(proto.scenario_fields())
    axes = tuple(a if isinstance(a, Axis) else parse_vary(a, fields) for a in vary)
    for a in axes:
        if a.field not in fields:
            raise InputError("--vary", a.field, "one of the scenario fields: " + ", ".join(fields))
    grid: list[GridPoint] = expand_grid(axes)
    base = proto.parse_scenario(loaded.data)
    for pt in grid:  # validate every value up front, in this process
        s = base
        for name, value in pt.assignments:
            s = proto.with_field(s, name, value)
    tasks = [PointTask(pt.index, loaded.protocol, loaded.data, pt.assignments, mode, statistics, target)
             for pt in grid]
    rows = run_map(evaluate_point, tasks, jobs=jobs, cluster=cluster, progress=progress)
    rows = tuple(sorted(rows, key=lambda r: r["index"]))
    return SweepTable(protocol=loaded.protocol, mode=mode, axes=axes, rows=rows,
                      statistics=statistics, target=target, provenance=provenance(loaded, command))
