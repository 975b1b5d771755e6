"""``finitekey plot SCENARIO.toml --vary ... -o FILE.png``: key rate, smallest block size or epsilon ledger."""

from __future__ import annotations

import argparse
from pathlib import Path
from types import SimpleNamespace

from ..errors import InputError
from ..outputs import output_format, plan_outputs, write_outputs
from ..report.figures import KINDS, blocksize_plot, ledger_plot, rate_plot
from ..report.plots import PLOT_FORMATS, figure_bytes
from ..report.sweep import _design_row, load_scenario, provenance, run_sweep
from .table_cmd import add_sweep_arguments, command_line


def _args(p: argparse.ArgumentParser) -> None:
    add_sweep_arguments(p)
    p.add_argument("--kind", choices=KINDS, default="rate",
                   help="rate: key rate per pulse against the first varied field, one curve per value of the second "
                        "(plus asymptotic rate and repeaterless bound when available); blocksize: smallest block "
                        "against the first varied field; ledger: epsilon ledger of the design at the scenario")
    p.add_argument("--target", default="positive",
                   help="block-size target for --kind blocksize: 'positive', 'bits=N' or 'fraction=F'")
    p.add_argument("--size", default=None, metavar="WxH",
                   help="figure size in inches, width x height, e.g. 7x4.4 (the default) or 3.5x2.6 for one column; "
                        "each between 2 and 30")
    p.add_argument("--dpi", default=None, metavar="N",
                   help="PNG resolution in dots per inch (default 110; 300 for print), between 50 and 1200; "
                        "the PNG is width*dpi x height*dpi pixels")
    p.add_argument("-o", "--output", required=True,
                   help="output image: .png, .svg or .pdf (checked before the sweep starts, written atomically)")


#: File-name extensions of the image formats.
EXTENSIONS = {f: ("." + f,) for f in PLOT_FORMATS}


def parse_size(text):
    """``"7x4.4"`` -> (7.0, 4.4) inches; None stays None."""
    if text is None:
        return None
    parts = str(text).lower().replace("×", "x").split("x")
    try:
        w, h = (float(p) for p in parts)
    except ValueError:
        raise InputError("--size", text, "WIDTHxHEIGHT in inches, e.g. 7x4.4") from None
    if not (2.0 <= w <= 30.0 and 2.0 <= h <= 30.0):
        raise InputError("--size", text, "a width and height each in [2, 30] inches, e.g. 7x4.4")
    return (w, h)


def parse_dpi(text):
    """``"300"`` -> 300.0; None stays None."""
    if text is None:
        return None
    try:
        v = float(text)
    except ValueError:
        raise InputError("--dpi", text, "a number of dots per inch in [50, 1200], e.g. 300") from None
    if not (50.0 <= v <= 1200.0):
        raise InputError("--dpi", text, "a number of dots per inch in [50, 1200], e.g. 300")
    return v


def _run(args) -> int:
    size, dpi = parse_size(args.size), parse_dpi(args.dpi)
    fmt = output_format(args.output, "--output", EXTENSIONS, format_option=None)
    (target,) = plan_outputs([("--output", args.output, fmt)], inputs=[args.scenario])
    loaded = load_scenario(args.scenario)
    opts = ([f"--size={args.size}"] if args.size else []) + ([f"--dpi={args.dpi}"] if args.dpi else [])
    cmd = command_line(args, "plot", [f"--kind={args.kind}"] + opts + [f"--output={args.output}"])
    if args.kind == "ledger":
        proto = loaded.protocol_object()
        scenario = proto.parse_scenario(loaded.data)
        from ..report.grid import expand_grid, parse_vary

        axes = [parse_vary(v, list(proto.scenario_fields())) for v in args.vary or []]
        expand_grid(axes)  # refuses a field varied twice
        for axis in axes:  # a ledger plot may take single-valued --vary as overrides
            if len(axis.values) != 1:
                raise InputError("--vary", axis.text, "a single value for --kind ledger (it plots one design)")
            scenario = proto.with_field(scenario, axis.field, axis.values[0])
        row = _design_row(proto.design(scenario, statistics=args.statistics))
        fig = ledger_plot(row["ledger"], loaded.protocol, note=f"finitekey · input sha256 {loaded.sha256[:12]}",
                          scenario=Path(loaded.path).stem, size=size)
    else:
        if not args.vary:
            raise InputError("--vary", None, "at least one FIELD=VALUES for --kind " + args.kind)
        if args.kind == "rate":
            table = run_sweep(loaded, args.vary, mode="design", statistics=args.statistics, jobs=args.jobs,
                              cluster=args.cluster, progress=args.progress, command=cmd)
            fig = rate_plot(table, loaded, size=size)
        else:
            table = run_sweep(loaded, args.vary, mode="blocksize", statistics=args.statistics, target=args.target,
                              jobs=args.jobs, cluster=args.cluster, progress=args.progress, command=cmd)
            fig = blocksize_plot(table, size=size)
    write_outputs([(target, figure_bytes(fig, fmt, provenance(loaded, cmd), dpi=dpi))])
    return 0


PLOT = SimpleNamespace(NAME="plot", add_arguments=_args, run=_run)
