"""``finitekey blocksize [SCENARIO.toml] --target positive|bits=L|fraction=F [--unit pulses|key-detections]`` --
smallest block for a target."""

from __future__ import annotations

import argparse
from types import SimpleNamespace

from ..protocols import BlockTarget
from .design_cmd import load_scenario, render_design
from .keylength_cmd import statistics_help
from .render import caution_block, fmt, json_document, table, to_json

__all__ = ["COMMAND"]


def _args(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", nargs="?", default=None, help="scenario file (TOML); default: built-in scenario")
    p.add_argument("--target", required=True,
                   help="'positive' (any key), 'bits=L' (at least L key bits) or 'fraction=F' (F of the "
                        "asymptotic rate)")
    p.add_argument("--statistics", default=None, help=statistics_help(design=True))
    p.add_argument("--unit", default=None,
                   help="decoy-bb84: give the size in 'pulses' or 'key-detections' (expected key-basis detections "
                        "of the smallest block, which is still closed after a fixed number of pulses); default: "
                        "the unit of the scenario's [block]. BB84: the unit of its [budget]")
    p.add_argument("--json", action="store_true", help="machine-readable output")


def _run(args) -> int:
    target = BlockTarget.parse(args.target)
    proto, sc = load_scenario(args.scenario)
    res = proto.blocksize(sc, target, args.statistics, unit=args.unit)
    if args.json:
        print(to_json(json_document(res.to_dict())))
        return 0
    rows = [["target", str(res.target), ""], ["smallest block", fmt(int(res.size)), res.size_kind],
            ["status", res.status.text(), ""]]
    if getattr(res, "resolution", 1) > 1:
        rows.append(["search resolution", fmt(int(res.resolution)), res.size_kind])
    if res.size_kind == "key_detections":   # the block itself is a number of pulses: show it
        rows.append(["pulses per block", fmt(int(res.design.expected_counts["pulses"])), "pulses"])
    print(table(rows, ["quantity", "value", "unit"]))
    print("\nDesign at that size:")
    print(render_design(res.design, args.scenario))
    print("\n" + caution_block())
    return 0


COMMAND = SimpleNamespace(NAME="blocksize", add_arguments=_args, run=_run)
