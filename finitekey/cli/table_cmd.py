"""``finitekey table SCENARIO.toml --vary FIELD=VALUES ...``: a parameter table over a grid of scenarios."""

from __future__ import annotations

import argparse
import shlex
from types import SimpleNamespace

from ..outputs import output_format, plan_outputs, write_outputs
from ..report import formats
from ..report.sweep import load_scenario, run_sweep

VARY_HELP = ("FIELD=VALUES: vary one scenario field (dotted name, e.g. link.distance_km). VALUES is a list "
             "'1e6,1e8,1e10' or a range 'start:stop:step' (e.g. 0:150:10), computed exactly in decimal; stop is "
             "included when it lands on the grid. Repeat --vary for a cartesian grid, the first one varying "
             "slowest. Unknown fields are rejected with the list of valid ones.")


def add_sweep_arguments(p: argparse.ArgumentParser, vary_required: bool = False) -> None:
    """Arguments shared by table, plot and report."""
    p.add_argument("scenario", help="scenario TOML file (its [protocol] name selects the protocol)")
    p.add_argument("--vary", action="append", default=None, metavar="FIELD=VALUES", required=vary_required,
                   help=VARY_HELP)
    p.add_argument("--statistics", default=None, help="statistics method (default: the protocol's)")
    p.add_argument("--jobs", type=_positive_int, default=None,
                   help="local worker processes (default min(2, CPUs)); 1 runs in this process")
    p.add_argument("--cluster", default=None, metavar="ADDRESS",
                   help="run on Dask instead: a scheduler address (tcp://HOST:PORT) or 'local' for a LocalCluster "
                        "on 127.0.0.1 with --jobs workers (needs the optional extra 'cluster')")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="always draw the progress bar (default: only when stderr is a terminal)")
    g.add_argument("--quiet", dest="progress", action="store_false", help="never draw the progress bar")


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--jobs = {text!r} is not allowed; expected a positive integer") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"--jobs = {text!r} is not allowed; expected a positive integer")
    return v


def command_line(args, name: str, extra=()) -> str:
    """The command as a reproducible shell line (rebuilt from the parsed arguments)."""
    words = ["finitekey", name, args.scenario]
    for v in args.vary or []:
        words.append(f"--vary={v}")
    for opt in ("statistics", "jobs", "cluster"):
        val = getattr(args, opt, None)
        if val is not None:
            words.append(f"--{opt}={val}")
    words += list(extra)
    return shlex.join(words)


def _args(p: argparse.ArgumentParser) -> None:
    add_sweep_arguments(p, vary_required=False)
    mode = p.add_mutually_exclusive_group()
    mode.add_argument("--fixed", action="store_true",
                      help="keep the scenario's own parameters (no optimiser): key length at the expected counts")
    mode.add_argument("--blocksize", metavar="TARGET", default=None,
                      help="tabulate the smallest block per point instead: 'positive', 'bits=N' or 'fraction=F'")
    p.add_argument("--format", choices=formats.FORMATS, default=None,
                   help="csv (provenance and caution in leading '#' lines; lists as a;b;c), json (rows carry the "
                        "full ledger), md or tex (default: from -o's extension, else md; an extension that names no "
                        "format is refused unless --format is given)")
    p.add_argument("-o", "--output", default=None,
                   help="output file (checked before the sweep starts, written atomically; see 'Output files' in "
                        "README.md); default stdout")


def _run(args) -> int:
    fmt = output_format(args.output, "--output", formats.EXTENSIONS, explicit=args.format, default="md")
    (target,) = plan_outputs([("--output", args.output, fmt)], inputs=[args.scenario])
    loaded = load_scenario(args.scenario)
    mode = "fixed" if args.fixed else ("blocksize" if args.blocksize else "design")
    extra = ["--fixed"] if args.fixed else ([f"--blocksize={args.blocksize}"] if args.blocksize else [])
    extra.append(f"--format={fmt}")
    if args.output:
        extra.append(f"--output={args.output}")
    table = run_sweep(loaded, args.vary or [], mode=mode, statistics=args.statistics, target=args.blocksize,
                      jobs=args.jobs, cluster=args.cluster, progress=args.progress,
                      command=command_line(args, "table", extra))
    write_outputs([(target, formats.render_table(table, fmt))])
    return 0


TABLE = SimpleNamespace(NAME="table", add_arguments=_args, run=_run)
