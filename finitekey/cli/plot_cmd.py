"""``finitekey plot SCENARIO.toml --vary ... -o FILE.png``: key rate, smallest block size or epsilon ledger."""

from __future__ import annotations

import argparse
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
    p.add_argument("-o", "--output", required=True,
                   help="output image: .png, .svg or .pdf (checked before the sweep starts, written atomically)")


#: File-name extensions of the image formats.
EXTENSIONS = {f: ("." + f,) for f in PLOT_FORMATS}


def _run(args) -> int:
    fmt = output_format(args.output, "--output", EXTENSIONS, format_option=None)
    (target,) = plan_outputs([("--output", args.output, fmt)], inputs=[args.scenario])
    loaded = load_scenario(args.scenario)
    cmd = command_line(args, "plot", [f"--kind={args.kind}", f"--output={args.output}"])
    if args.kind == "ledger":
        proto = loaded.protocol_object()
        scenario = proto.parse_scenario(loaded.data)
        for v in args.vary or []:  # a ledger plot may take single-valued --vary as overrides
            from ..report.grid import parse_vary
            axis = parse_vary(v, list(proto.scenario_fields()))
            if len(axis.values) != 1:
                raise InputError("--vary", v, "a single value for --kind ledger (it plots one design)")
            scenario = proto.with_field(scenario, axis.field, axis.values[0])
        row = _design_row(proto.design(scenario, statistics=args.statistics))
        fig = ledger_plot(row["ledger"], loaded.protocol, note=f"finitekey · input sha256 {loaded.sha256[:12]}")
    else:
        if not args.vary:
            raise InputError("--vary", None, "at least one FIELD=VALUES for --kind " + args.kind)
        if args.kind == "rate":
            table = run_sweep(loaded, args.vary, mode="design", statistics=args.statistics, jobs=args.jobs,
                              cluster=args.cluster, progress=args.progress, command=cmd)
            fig = rate_plot(table, loaded)
        else:
            table = run_sweep(loaded, args.vary, mode="blocksize", statistics=args.statistics, target=args.target,
                              jobs=args.jobs, cluster=args.cluster, progress=args.progress, command=cmd)
            fig = blocksize_plot(table)
    write_outputs([(target, figure_bytes(fig, fmt, provenance(loaded, cmd)))])
    return 0


PLOT = SimpleNamespace(NAME="plot", add_arguments=_args, run=_run)
