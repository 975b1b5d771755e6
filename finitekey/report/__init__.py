"""Sweeps, tables, plots, and HTML / LaTeX reports built on the protocol interface.

* :mod:`.grid` -- ``--vary FIELD=VALUES`` parsing and cartesian grids;
* :mod:`.runner` -- one picklable function over many inputs: serial, local processes, or Dask;
* :mod:`.sweep` -- design / fixed / block-size evaluation at every grid point, :class:`SweepTable`;
* :mod:`.formats` -- CSV, JSON, Markdown and LaTeX tables with provenance;
* :mod:`.plots`, :mod:`.figures` -- figures from row data, and from sweeps;
* :mod:`.formula` -- the key-length formula drawn offline by mathtext;
* :mod:`.build`, :mod:`.html`, :mod:`.latex` -- the specification report.
"""

from .grid import Axis, GridPoint, expand_grid, parse_vary
from .runner import default_jobs, run_map
from .sweep import LoadedScenario, SweepTable, evaluate_point, load_scenario, run_sweep

__all__ = [
           "Axis",
           "GridPoint",
           "LoadedScenario",
           "SweepTable",
           "default_jobs",
           "evaluate_point",
           "expand_grid",
           "load_scenario",
           "parse_vary",
           "run_map",
           "run_sweep",
]
