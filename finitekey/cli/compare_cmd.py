"""``finitekey compare A.toml B.toml [...] --vary FIELD=VALUES``: several scenarios (any protocols), one table.

Every scenario file is designed at every grid point; the rows form one table (any table format, with
provenance and the caution) and, with an image among the ``-o`` files, one figure with a curve per scenario,
the repeaterless bound where the protocols report their channel transmittance, and where a rate crosses it.
"""

from __future__ import annotations

import argparse
import os
import shlex
import sys
from pathlib import Path
from types import SimpleNamespace

from ..errors import InputError
from ..outputs import STDOUT, output_format, plan_outputs, write_outputs
from ..report import formats
from ..report.compare import SCENARIO_FIELD, load_scenarios, run_compare
from ..report.grid import parse_vary
from ..report.tables import check_column_names, parse_pivot_fields, static_column_keys
from .plot_cmd import parse_dpi, parse_size
from .table_cmd import COLUMNS_HELP, VARY_HELP, _positive_int

#: File-name extensions of the figure an ``-o`` may name.
IMAGE_EXTENSIONS = {"png": (".png",), "svg": (".svg",), "pdf": (".pdf",)}


def _args(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenarios", nargs="+", metavar="SCENARIO",
                   help="two or more scenario TOML files, each naming its protocol in [protocol] name; the legend "
                        "and the table's scenario column use [protocol] label, else the file name")
    p.add_argument("--vary", action="append", default=None, metavar="FIELD=VALUES", required=True,
                   help=VARY_HELP + " The field must exist in every scenario file (e.g. link.distance_km for the "
                                    "link protocols, security.eps_sec for all).")
    p.add_argument("--statistics", default=None,
                   help="statistics method for every scenario (each protocol must offer it; default: each "
                        "protocol's own)")
    p.add_argument("--jobs", type=_positive_int, default=None,
                   help="local worker processes for all points of all scenarios (default min(2, CPUs)); 1 runs "
                        "in this process")
    p.add_argument("--cluster", default=None, metavar="ADDRESS",
                   help="run on Dask instead: a scheduler address (tcp://HOST:PORT) or 'local'")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="always draw the progress bar (default: only when stderr is a terminal)")
    g.add_argument("--quiet", dest="progress", action="store_false", help="never draw the progress bar")
    p.add_argument("--format", choices=formats.FORMATS, default=None,
                   help="table format: csv (with its FILE.csv.meta.json sidecar), json, md, tex or text (default: "
                        "from the table file's extension, else md)")
    p.add_argument("--columns", default=None, metavar="KEYS",
                   help=COLUMNS_HELP + " A comparison adds the columns scenario, protocol, channel_transmittance "
                                       "and repeaterless_bound.")
    p.add_argument("--pivot", default=None, metavar="ROW,COL[,QUANTITY]",
                   help="a two-way table, e.g. --pivot link.distance_km,scenario puts the scenarios side by side "
                        "(one column each, cells: key rate per pulse)")
    p.add_argument("-o", "--output", action="append", default=None, metavar="FILE",
                   help="output file, at most one table (.md, .csv, .json, .tex, .txt; default: the table goes to "
                        "stdout) and one figure (.png, .svg, .pdf: key rate per scenario against the first varied "
                        "field); repeat -o for both. All files are checked before computing and written together "
                        "or not at all")
    p.add_argument("--per-second", action="store_true",
                   help="plot the key rate in bit/s instead of bit/pulse (the repeaterless bound, per channel use, "
                        "is then not drawn)")
    p.add_argument("--size", default=None, metavar="WxH", help="figure size in inches, e.g. 7x4.4 (the default)")
    p.add_argument("--dpi", default=None, metavar="N", help="PNG resolution in dots per inch (default 110)")


def split_outputs(outputs) -> tuple:
    """``-o`` values -> (table path or None, image path or None): the extension decides which is which.

    Raises
    ------
    InputError
        For two table files or two images.
    """
    table, image = None, None
    for o in outputs or []:
        suffix = Path(o).suffix.lower() if o != STDOUT else ""
        if any(suffix in exts for exts in IMAGE_EXTENSIONS.values()):
            if image is not None:
                raise InputError("--output", o, f"at most one figure (already {image!r})")
            image = o
        else:
            if table is not None:
                raise InputError("--output", o, f"at most one table file (already {table!r}) and one figure "
                                                "(.png, .svg or .pdf)")
            table = o
    return table, image


def _command(args, fmt: str) -> str:
    words = ["finitekey", "compare", *args.scenarios]
    words += [f"--vary={v}" for v in args.vary or []]
    for opt in ("statistics", "jobs", "cluster", "columns", "pivot", "size", "dpi"):
        val = getattr(args, opt, None)
        if val is not None:
            words.append(f"--{opt}={val}")
    if args.per_second:
        words.append("--per-second")
    words.append(f"--format={fmt}")
    words += [f"--output={o}" for o in args.output or []]
    return shlex.join(words)


def _early_checks(args, plotting: bool) -> None:
    """Reject bad --vary syntax, --columns, --pivot and plot options before anything is computed."""
    axes = [parse_vary(v) for v in args.vary or []]
    fields = [SCENARIO_FIELD] + [a.field for a in axes]
    if args.columns is not None and args.pivot is not None:
        raise InputError("--columns", args.columns, "no --columns with --pivot (the pivot's cells are one quantity)")
    check_column_names(args.columns, static_column_keys("design", fields)
                       + ["protocol", "channel_transmittance", "repeaterless_bound"])
    if args.pivot is not None:
        rf, cf, _ = parse_pivot_fields(args.pivot)
        for f in (rf, cf):
            if f not in fields:
                raise InputError("--pivot", f, "one of: " + ", ".join(fields))
    if plotting:
        multi = [a for a in axes[1:] if len(a.values) > 1]
        if multi:
            raise InputError("--vary", multi[0].text, "a single value for every varied field after the first when "
                                                      "a figure is written (one curve per scenario)")
    elif args.per_second or args.size or args.dpi:
        opt = "--per-second" if args.per_second else ("--size" if args.size else "--dpi")
        raise InputError(opt, getattr(args, opt.lstrip("-").replace("-", "_")),
                         "a figure among the -o files (.png, .svg or .pdf) for this option")


def _run(args) -> int:
    size, dpi = parse_size(args.size), parse_dpi(args.dpi)
    table_out, image_out = split_outputs(args.output)
    fmt = output_format(table_out, "--output", formats.EXTENSIONS, explicit=args.format, default="md")
    requests = [("--output", table_out, fmt)]
    to_file = table_out not in (None, STDOUT)
    if fmt == "csv" and to_file:
        requests.append(("--output (sidecar)", formats.sidecar_path(table_out), "json"))
    if image_out is not None:
        requests.append(("--output", image_out, output_format(image_out, "--output", IMAGE_EXTENSIONS,
                                                              format_option=None)))
    targets = plan_outputs(requests, inputs=args.scenarios)  # every output checked before anything runs
    _early_checks(args, image_out is not None)
    scenarios = load_scenarios(args.scenarios)
    command = _command(args, fmt)
    table = run_compare(scenarios, args.vary or [], statistics=args.statistics, jobs=args.jobs,
                        cluster=args.cluster, progress=args.progress, command=command)
    text = formats.render_table(table, fmt, columns=args.columns, pivot=args.pivot)
    items = [(targets[0], text)]
    if fmt == "csv" and to_file:
        items.append((targets[1], formats.csv_sidecar(table, text, os.path.basename(table_out), columns=args.columns,
                                                      pivot=args.pivot)))
    if image_out is not None:
        from ..report.figures import compare_plot  # matplotlib only when a figure is asked for
        from ..report.plots import figure_bytes

        fig = compare_plot(table, per_second=args.per_second, size=size)
        items.append((targets[-1], figure_bytes(fig, targets[-1].format, table.provenance, dpi=dpi)))
    write_outputs(items)  # every file or none; the table on stdout last
    if fmt == "csv" and not to_file:
        meta = formats.csv_meta_lines(table, columns=args.columns, pivot=args.pivot)
        sys.stderr.write("".join(f"# {line}\n" for line in meta))
    return 0


COMPARE = SimpleNamespace(NAME="compare", add_arguments=_args, run=_run)
