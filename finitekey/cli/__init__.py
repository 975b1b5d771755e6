"""Command-line entry point: parse, call the API, render.

Each sub-command lives in its own module of this package with ``NAME``,
``HELP``, ``add_arguments(parser)`` and ``run(args) -> int``.  User errors
(:class:`~finitekey.errors.InputError`) print one line to stderr and exit
with status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import sys

from .. import __version__
from ..errors import ComputationError, InputError
from . import blocksize_cmd, bounds_cmd, design_cmd, keylength_cmd
from . import plot_cmd, report_cmd, table_cmd

COMMANDS = [bounds_cmd.LIST, bounds_cmd.EVAL, keylength_cmd.COMMAND, design_cmd.COMMAND, blocksize_cmd.COMMAND]
COMMANDS += [table_cmd.TABLE, plot_cmd.PLOT, report_cmd.REPORT]  # sweeps, plots, reports


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="finitekey",
        description="Finite-key security parameters for QKD: epsilon budgets, block sizes, parameter design, "
                    "certified key lengths. Design aid only; see the cautions in every output.")
    parser.add_argument("--version", action="version", version=f"finitekey {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for cmd in COMMANDS:
        p = sub.add_parser(cmd.NAME, help=cmd.HELP, description=cmd.HELP)
        cmd.add_arguments(p)
        p.set_defaults(_run=cmd.run)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return 0
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        print(f"finitekey {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except ComputationError as exc:
        print(f"finitekey {args.command}: computation failed: {exc}", file=sys.stderr)
        return 3
    except BrokenPipeError:  # output piped into a reader that stopped early (e.g. head)
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("finitekey: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
