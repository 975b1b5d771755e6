"""Gather everything a spec report shows: design at the scenario, sweeps, figures, formula, assumptions.

:func:`build_report` runs the computations once and returns a frozen
:class:`ReportData`; :mod:`finitekey.report.html` and
:mod:`finitekey.report.latex` only lay it out, so the HTML page and the LaTeX
fragment always show the same numbers.

References
----------
.. [1] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, "Tight finite-key
   analysis for quantum cryptography", Nat. Commun. 3, 634 (2012) -- the
   kind of result a report documents (key length, ledger, assumptions).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..cautions import CAUTION
from ..errors import FiniteKeyError
from .figures import blocksize_plot, ledger_plot, rate_plot
from .formula import RenderedFormula, render_formula
from .plots import figure_bytes
from .tables import parse_columns
from .sweep import LoadedScenario, SweepTable, _design_row, provenance, run_sweep

__all__ = ["Figure", "ReportData", "build_report", "default_vary"]


@dataclass(frozen=True)
class Figure:
    """One embedded figure: element id, caption, PNG bytes."""

    ident: str
    caption: str
    png: bytes


@dataclass(frozen=True)
class ReportData:
    """Everything a report shows (see :func:`build_report`)."""

    protocol: str
    title: str
    scenario_data: dict
    scenario_echo: dict
    design: dict
    formula: RenderedFormula
    sweep: SweepTable | None
    blocksize: SweepTable | None
    figures: tuple
    assumptions: tuple
    references: tuple
    provenance: dict
    caution: str = CAUTION
    notes: tuple = field(default_factory=tuple)
    columns: str | None = None  # --columns for the design sweep table (None: the default, narrow set)


#: Sweeps used when the caller gives no --vary: the first field the protocol has wins.
_DEFAULT_SWEEPS = (
    ("link.distance_km", "link.distance_km=0:200:20"),
    ("channel.qber", "channel.qber=0.0:0.1:0.01"),
    ("expected.qber", "expected.qber=0.0:0.1:0.01"),
    ("qber", "qber=0.0:0.1:0.01"),
)


def default_vary(proto) -> list:
    """A one-axis sweep for a report without --vary (distance for link scenarios, else the QBER), or none."""
    fields = list(proto.scenario_fields())
    for name, expr in _DEFAULT_SWEEPS:
        if name in fields:
            return [expr]
    for f in fields:
        if f.endswith(".qber") or f.endswith("distance_km"):
            return [f"{f}=0:0.1:0.01" if f.endswith(".qber") else f"{f}=0:200:20"]
    return []


def build_report(loaded: LoadedScenario, vary=None, statistics: str | None = None, blocksize_target: str | None = None,
                 jobs: int | None = None, cluster: str | None = None, progress: bool | None = None,
                 command: str = "", title: str | None = None, columns: str | None = None) -> ReportData:
    """Compute the design at the scenario, the sweep(s) and the figures for a report.

    Parameters
    ----------
    loaded : LoadedScenario
    vary : list of str, optional
        Sweep axes; None means :func:`default_vary`; an empty list means no sweep.
    statistics : str, optional
    blocksize_target : str, optional
        When given, also tabulate the smallest block reaching this target along the first axis.
    jobs, cluster, progress, command
        As for :func:`finitekey.report.sweep.run_sweep`.
    columns : str, optional
        ``--columns`` for the sweep table (see :func:`finitekey.report.tables.parse_columns`); checked here.

    Raises
    ------
    InputError
        As :func:`run_sweep`.
    """
    proto = loaded.protocol_object()
    scenario = proto.parse_scenario(loaded.data)
    design = proto.design(scenario, statistics=statistics)
    row = _design_row(design)
    d = row["design"]
    expected = d["expected"]
    notes = []
    if vary is None:
        vary = default_vary(proto)
    sweep = None
    if vary:
        sweep = run_sweep(loaded, vary, mode="design", statistics=statistics, jobs=jobs, cluster=cluster,
                          progress=progress, command=command)
        if columns is not None:
            parse_columns(columns, sweep)  # an unknown column is an InputError before anything is written
    # defaults hiding an effect at the scenario's design, once: the sweep's table lists its own under it
    swept = {w for r in (sweep.rows if sweep is not None else ()) for w in (r.get("design") or {}).get("warnings", ())}
    notes += ["warning: " + w for w in d.get("warnings", ()) if w not in swept]
    bsweep = None
    if blocksize_target and vary:
        first = vary[:1]
        bsweep = run_sweep(loaded, first, mode="blocksize", statistics=statistics, target=blocksize_target,
                           jobs=jobs, cluster=cluster, progress=progress, command=command)
    figures = [Figure("plot-ledger", "Epsilon ledger of the design at the scenario: each term's contribution "
                                     "(weight × epsilon) to the total security parameter.",
                      figure_bytes(ledger_plot(expected["ledger"], loaded.protocol,
                                               scenario=Path(loaded.path).stem), "png"))]
    if sweep is not None:
        try:
            figures.append(Figure("plot-rate", "Secret key rate per pulse along the sweep, with the reference "
                                               "curves the protocol provides (asymptotic rate, repeaterless bound).",
                                  figure_bytes(rate_plot(sweep, loaded), "png")))
        except FiniteKeyError as exc:
            notes.append(f"rate plot omitted: {exc}")
    if bsweep is not None:
        try:
            figures.append(Figure("plot-blocksize", f"Smallest block reaching the target '{bsweep.target}'.",
                                  figure_bytes(blocksize_plot(bsweep), "png")))
        except FiniteKeyError as exc:
            notes.append(f"block-size plot omitted: {exc}")
    return ReportData(
        protocol=loaded.protocol,
        title=title or f"finitekey specification report: {loaded.protocol}",
        scenario_data=loaded.data,
        scenario_echo=d.get("scenario", {}) or {},
        design=row,
        formula=render_formula(expected.get("formula", ""), "svg"),
        sweep=sweep,
        blocksize=bsweep,
        figures=tuple(figures),
        # a design's notes (e.g. how a block designed for key-basis detections is closed) are read with the
        # assumptions they qualify
        assumptions=tuple(expected.get("assumptions", ())) + tuple(d.get("notes", ())),
        references=tuple(expected.get("references", ())),
        provenance=provenance(loaded, command),
        notes=tuple(notes),
        columns=columns,
    )
