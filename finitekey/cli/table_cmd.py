"""``finitekey table SCENARIO.toml --vary FIELD=VALUES ...``: a parameter table over a grid of scenarios."""

from __future__ import annotations

import argparse
import os
import shlex
import sys
from types import SimpleNamespace

from ..errors import InputError
from ..outputs import STDOUT, output_format, plan_outputs, write_outputs
from ..report import formats
from ..report.sweep import load_scenario, run_sweep
from ..report.tables import check_column_names, parse_pivot_fields, static_column_keys

VARY_HELP = ("FIELD=VALUES: vary one scenario field (dotted name, e.g. link.distance_km). VALUES is a list "
             "'1e6,1e8,1e10', a range 'start:stop:step' (e.g. 0:150:10), computed exactly in decimal, stop "
             "included when it lands on the grid, or a log-spaced range 'start:stop:logN' of N points from start "
             "to stop, both included, evenly spaced in log10 (e.g. 1e6:1e12:log7 gives 1e6, 1e7, ..., 1e12; "
             "as numpy.logspace). Repeat --vary for a cartesian grid, the first one varying slowest. Unknown "
             "fields are rejected with the list of valid ones.")

COLUMNS_HELP = ("columns to show, in order: comma-separated column keys (the CSV header names, e.g. "
                "link.distance_km,secret_key_length,parameters.key_basis_probability); 'default' and 'all' expand "
                "in place (default,parameters.intensities). Default: md, tex and text show the varied fields, the "
                "block size (with --blocksize), key length, key rate per pulse and per second and total epsilon, "
                "which fit a portrait page; csv and json keep every column. An unknown key is rejected with the "
                "list of valid ones.")

PIVOT_HELP = ("ROW_FIELD,COLUMN_FIELD[,QUANTITY]: a two-way table with one row per value of one varied field, "
              "one column per value of another, each cell one quantity (default: key rate per pulse; the block "
              "size with --blocksize), e.g. --pivot link.distance_km,block.pulses,secret_key_length. Every other "
              "varied field must have a single value.")


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
                   help="csv (plain: header row and data rows only; the caution and provenance go to the sidecar "
                        "FILE.csv.meta.json, written together with the CSV, or to stderr when the CSV goes to "
                        "stdout; lists as a;b;c), json (rows carry the full ledger), md, tex (booktabs and siunitx) "
                        "or text (default: from -o's extension, else md; an extension that names no format is "
                        "refused unless --format is given)")
    p.add_argument("--columns", default=None, metavar="KEYS", help=COLUMNS_HELP)
    p.add_argument("--pivot", default=None, metavar="ROW,COL[,QUANTITY]", help=PIVOT_HELP)
    p.add_argument("-o", "--output", default=None,
                   help="output file (checked before the sweep starts, written atomically; a .csv also gets its "
                        ".csv.meta.json sidecar, both or neither; see 'Output files' in README.md); default stdout")


def _early_checks(args, mode: str) -> None:
    """Reject a bad --columns or --pivot before the sweep runs (parameter columns are checked after it)."""
    fields = []
    for v in args.vary or []:
        fields.append(str(v).partition("=")[0].strip())
    if args.columns is not None and args.pivot is not None:
        raise InputError("--columns", args.columns, "no --columns with --pivot (the pivot's cells are one quantity)")
    check_column_names(args.columns, static_column_keys(mode, fields))
    if args.pivot is not None:
        rf, cf, _ = parse_pivot_fields(args.pivot)
        for f in (rf, cf):
            if f not in fields:
                raise InputError("--pivot", f, "one of the varied fields: "
                                 + (", ".join(fields) or "(none: add --vary)"))


def _run(args) -> int:
    fmt = output_format(args.output, "--output", formats.EXTENSIONS, explicit=args.format, default="md")
    requests = [("--output", args.output, fmt)]
    to_file = args.output not in (None, STDOUT)
    if fmt == "csv" and to_file:
        requests.append(("--output (sidecar)", formats.sidecar_path(args.output), "json"))
    targets = plan_outputs(requests, inputs=[args.scenario])
    mode = "fixed" if args.fixed else ("blocksize" if args.blocksize else "design")
    _early_checks(args, mode)
    loaded = load_scenario(args.scenario)
    mode = "fixed" if args.fixed else ("blocksize" if args.blocksize else "design")
    _early_checks(args, mode)
    loaded = load_scenario(args.scenario)
    extra = ["--fixed"] if args.fixed else ([f"--blocksize={args.blocksize}"] if args.blocksize else [])
    extra.append(f"--format={fmt}")
    if args.columns is not None:
        extra.append(f"--columns={args.columns}")
    if args.pivot is not None:
        extra.append(f"--pivot={args.pivot}")
    if args.output:
        extra.append(f"--output={args.output}")
    table = run_sweep(loaded, args.vary or [], mode=mode, statistics=args.statistics, target=args.blocksize,
                      jobs=args.jobs, cluster=args.cluster, progress=args.progress,
                      command=command_line(args, "table", extra))
    text = formats.render_table(table, fmt, columns=args.columns, pivot=args.pivot)
    if fmt != "csv":
        write_outputs([(targets[0], text)])
        return 0
    if not to_file:
        write_outputs([(targets[0], text)])
        meta = formats.csv_meta_lines(table, columns=args.columns, pivot=args.pivot)
        sys.stderr.write("".join(f"# {line}\n" for line in meta))
        return 0
    sidecar = formats.csv_sidecar(table, text, os.path.basename(args.output), columns=args.columns, pivot=args.pivot)
    write_outputs([(targets[0], text), (targets[1], sidecar)])  # the CSV and its sidecar: both or neither
    return 0


TABLE = SimpleNamespace(NAME="table", add_arguments=_args, run=_run)
