"""``finitekey report SCENARIO.toml -o report.html [--latex FILE.tex]``: a self-contained specification report."""

from __future__ import annotations

import argparse
from types import SimpleNamespace

from ..outputs import output_format, plan_outputs, write_outputs
from ..report.build import build_report
from ..report.html import to_html
from ..report.latex import report_latex
from ..report.sweep import load_scenario
from .table_cmd import add_sweep_arguments, command_line

#: File-name extensions of the report's two outputs.
HTML_EXTENSIONS = {"html": (".html", ".htm")}
LATEX_EXTENSIONS = {"tex": (".tex",)}


def _args(p: argparse.ArgumentParser) -> None:
    add_sweep_arguments(p)
    p.add_argument("-o", "--output", required=True,
                   help="HTML file to write (self-contained, works offline; written atomically)")
    p.add_argument("--latex", metavar="FILE.tex", default=None,
                   help="also write a LaTeX fragment with the formula and the tables (needs amsmath)")
    p.add_argument("--blocksize", metavar="TARGET", default=None,
                   help="also tabulate and plot the smallest block along the first varied field "
                        "('positive', 'bits=N' or 'fraction=F')")
    p.add_argument("--columns", default=None, metavar="KEYS",
                   help="columns of the sweep table, as for 'finitekey table --columns' (default: the varied fields, "
                        "key length, key rates and total epsilon)")
    p.add_argument("--no-sweep", action="store_true",
                   help="no sweep table or rate plot (by default, without --vary, a distance or QBER sweep is shown)")


def _run(args) -> int:
    html_fmt = output_format(args.output, "--output", HTML_EXTENSIONS, format_option=None)
    requests = [("--output", args.output, html_fmt)]
    if args.latex is not None:
        requests.append(("--latex", args.latex, output_format(args.latex, "--latex", LATEX_EXTENSIONS,
                                                              format_option=None)))
    targets = plan_outputs(requests, inputs=[args.scenario])  # every output checked before anything runs
    loaded = load_scenario(args.scenario)
    extra = [f"--output={args.output}"] + ([f"--latex={args.latex}"] if args.latex else []) \
        + ([f"--blocksize={args.blocksize}"] if args.blocksize else []) + (["--no-sweep"] if args.no_sweep else []) \
        + ([f"--columns={args.columns}"] if args.columns else [])
    vary = [] if args.no_sweep else args.vary
    report = build_report(loaded, vary=vary, statistics=args.statistics, blocksize_target=args.blocksize,
                          jobs=args.jobs, cluster=args.cluster, progress=args.progress,
                          command=command_line(args, "report", extra), columns=args.columns)
    html_text = to_html(report)
    tex = report_latex(report) if args.latex else None
    write_outputs(list(zip(targets, [html_text, tex])))  # both files or neither
    return 0


REPORT = SimpleNamespace(NAME="report", add_arguments=_args, run=_run)
