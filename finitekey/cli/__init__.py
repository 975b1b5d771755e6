"""Command-line entry point: parse, call the API, render.

Each sub-command lives in its own module of this package as an object with
``NAME``, ``add_arguments(parser)`` and ``run(args) -> int``; the table
:data:`SUBCOMMANDS` below names each module and its one-line help.  Only the
module of the sub-command being run is imported (``finitekey --help`` imports
none of them), so that start-up does not pay for sympy, scipy.optimize or
matplotlib unless the sub-command uses them.  User errors
(:class:`~finitekey.errors.InputError`, including operating-system errors on
files and on standard output) print one line to stderr and exit with status
2, never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import re
import sys
from typing import NamedTuple

from .. import __version__
from ..errors import ComputationError, InputError
from ..outputs import guarded_stdout, os_reason


class SubCommand(NamedTuple):
    """One sub-command: its name, the module and attribute holding it, and its one-line help."""

    name: str
    module: str
    attribute: str
    help: str


#: Every sub-command, in the order ``finitekey --help`` lists them.
SUBCOMMANDS = (
    SubCommand("bounds", "bounds_cmd", "LIST", "list the registered finite-size bounds"),
    SubCommand("bound", "bounds_cmd", "EVAL",
               "evaluate one bound: deviation for a failure probability, or the reverse"),
    SubCommand("keylength", "keylength_cmd", "COMMAND",
               "certified secret key length of an observed block (or a batch, or a stream on stdin)"),
    SubCommand("design", "design_cmd", "COMMAND", "choose basis bias, test fraction and epsilon split for a scenario"),
    SubCommand("blocksize", "blocksize_cmd", "COMMAND", "smallest block size reaching a key target, with its design"),
    SubCommand("table", "table_cmd", "TABLE",
               "parameter table over a grid of scenarios (design, fixed or block size)"),
    SubCommand("plot", "plot_cmd", "PLOT", "plot key rate, smallest block size or the epsilon ledger"),
    SubCommand("compare", "compare_cmd", "COMPARE",
               "several scenario files (any protocols) designed over one grid: one table and one figure"),
    SubCommand("report", "report_cmd", "REPORT", "self-contained offline HTML report (and optional LaTeX fragment)"),
    SubCommand("fields", "fields_cmd", "FIELDS",
               "list every scenario and block field of a protocol: type, unit, default, allowed range"),
    SubCommand("schema", "fields_cmd", "SCHEMA", "JSON Schema of a block or scenario (e.g. bb84-block)"),
)


class Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line: field, value given, what is allowed; exit status 2.

    argparse's own errors print the usage block and often repeat the option's name ("argument --jobs:
    --jobs = ..."); here they are rewritten into the shape of :class:`~finitekey.errors.InputError` messages,
    followed only by a pointer to ``--help``.  Sub-parsers inherit the class.
    """

    def error(self, message):
        """Print one line to stderr and exit with status 2 (overrides :meth:`argparse.ArgumentParser.error`)."""
        self.exit(2, f"{self.prog}: error: {one_line_usage_error(message)} (see {self.prog} --help)\n")


def _unquote(text: str) -> str:
    return ", ".join(t.strip().strip("'\"") for t in text.split(","))


def one_line_usage_error(message: str) -> str:
    """Rewrite an argparse error message as ``FIELD = VALUE is not allowed; expected ...`` (one line).

    Parameters
    ----------
    message : str
        The message argparse passes to :meth:`Parser.error`.

    Returns
    -------
    str
        The same information on one line, the option named once.
    """
    message = " ".join(str(message).split())
    m = re.fullmatch(r"the following arguments are required: (.*)", message)
    if m:
        names = m.group(1)
        return f"{names} {'is' if ',' not in names else 'are'} missing; expected a value (a required argument)"
    m = re.fullmatch(r"unrecognized arguments: (.*)", message)
    if m:
        return f"{m.group(1)} is not allowed; expected only the options and arguments of this command"
    m = re.fullmatch(r"argument (\S+): (.*)", message)
    if not m:
        return message
    names, rest = m.group(1), m.group(2)
    name = names.split("/")[-1]
    if rest.startswith(tuple(f"{n} " for n in names.split("/"))):
        return rest  # our own option types already say "NAME = VALUE is not allowed; expected ..."
    c = re.fullmatch(r"invalid choice: (.*?) \(choose from (.*)\)", rest)
    if c:
        return f"{name} = {c.group(1)} is not allowed; expected one of: {_unquote(c.group(2))}"
    v = re.fullmatch(r"invalid (\w+) value: (.*)", rest)
    if v:
        kind = {"int": "an integer", "float": "a number"}.get(v.group(1), "a valid value")
        return f"{name} = {v.group(2)} is not allowed; expected {kind}"
    if rest in ("expected one argument", "expected at least one argument"):
        return f"{name} is missing its value; expected {name} VALUE"
    w = re.fullmatch(r"not allowed with argument (\S+)", rest)
    if w:
        return f"{name} is not allowed together with {w.group(1).split('/')[-1]}; expected one of the two"
    return f"{name}: {rest}"


def as_option(exc: InputError, args) -> InputError:
    """Name an API field by the option that gave it (``statistics`` -> ``--statistics``), with the value as typed.

    The API names its parameters (``statistics``, ``eps``, ``target``); when the bad value is exactly what an
    option of this command carried, the message names the option the user wrote instead.
    """
    given = getattr(args, str(exc.field), None)
    if not isinstance(given, str) or str(exc.field).startswith("-"):
        return exc
    same = given == exc.value
    if not same:
        try:
            same = float(given) == float(exc.value)
        except (TypeError, ValueError):
            same = False
    if not same:
        return exc
    return InputError("--" + str(exc.field).replace("_", "-"), given, exc.allowed)


def load_subcommand(entry: SubCommand):
    """Import the module of one sub-command and return its command object (``NAME``, ``add_arguments``, ``run``).

    Parameters
    ----------
    entry : SubCommand
        A row of :data:`SUBCOMMANDS`.

    Returns
    -------
    object
        The command object; its ``NAME`` equals ``entry.name``.
    """
    module = importlib.import_module(f"{__name__}.{entry.module}")
    return getattr(module, entry.attribute)


def _chosen(argv) -> str | None:
    """The sub-command named on the command line (the first argument not starting with '-'), if any."""
    for arg in argv:
        if not arg.startswith("-"):
            return arg
        if arg == "--":
            return None
    return None


def build_parser(argv=None) -> argparse.ArgumentParser:
    """The argument parser; only the sub-command named in ``argv`` gets its arguments (and its imports).

    Parameters
    ----------
    argv : list of str or None
        The command line without the program name (default ``sys.argv[1:]``).  With ``argv=[]`` or ``--help``
        no sub-command module is imported.

    Returns
    -------
    argparse.ArgumentParser
    """
    argv = sys.argv[1:] if argv is None else list(argv)
    chosen = _chosen(argv)
    parser = Parser(
        prog="finitekey",
        description="Finite-key security parameters for QKD: epsilon budgets, block sizes, parameter design, "
                    "certified key lengths. Design aid only; see the cautions in every output.")
    parser.add_argument("--version", action="version", version=f"finitekey {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for entry in SUBCOMMANDS:
        p = sub.add_parser(entry.name, help=entry.help, description=entry.help)
        if entry.name == chosen:
            cmd = load_subcommand(entry)
            cmd.add_arguments(p)
            p.set_defaults(_run=cmd.run)
    return parser


def main(argv=None) -> int:
    """Run the command line ``argv`` (default ``sys.argv[1:]``) and return the exit status.

    Parameters
    ----------
    argv : list of str or None
        Arguments without the program name.

    Returns
    -------
    int
        0 on success, 2 for bad input (one line on stderr), 3 when a computation failed, 130 on interrupt.
    """
    argv = sys.argv[1:] if argv is None else list(argv)
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return 0
    try:
        with guarded_stdout():  # output errors (disk full) become one line; flushed here, not at exit
            return int(args._run(args) or 0)
    except InputError as exc:
        exc = as_option(exc, args)
        print(f"finitekey {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except ComputationError as exc:
        print(f"finitekey {args.command}: computation failed: {exc}", file=sys.stderr)
        return 3
    except BrokenPipeError:  # output piped into a reader that stopped early (e.g. head)
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except OSError as exc:  # any other operating-system error on a file: one line, no traceback
        where = f"{exc.filename!r}: " if getattr(exc, "filename", None) else ""
        print(f"finitekey {args.command}: error: {where}{os_reason(exc)}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("finitekey: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
