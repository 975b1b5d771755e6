"""``finitekey keylength BLOCK`` -- certified secret key length of one observed block, or of a batch.

A ``.json`` file holds one block (an object) or a list of blocks; ``.jsonl``/``.ndjson`` and ``.csv`` hold one
block per line.  Each block names its protocol (``"protocol": "bb84"`` or ``"decoy-bb84"``) and is dispatched
through the protocol registry.  With ``--json`` a single block gives one JSON document and a batch gives JSON
Lines (one result per input line); otherwise a table.  A bad line fails the run with an error naming the line.
``--compact`` (implies ``--json``) leaves out the text that is the same for every block of a protocol.

``BLOCK = -`` reads a stream of JSON Lines from standard input and answers each non-empty line with one JSON
line on standard output, flushed at once, so that a post-processing stack can keep one process open and read
each answer before sending the next block.  A bad line does not stop the stream: it is answered with one
``{"line": N, "error": ..., "field": ..., "allowed": ...}`` line (the same message also goes to standard
error), and the exit status at the end of the input is 2 if any line was bad (3 if a computation failed on
an otherwise valid line), else 0.  Blank lines are skipped without an answer.
"""

from __future__ import annotations

import argparse
import json
import sys
from types import SimpleNamespace

from .. import protocols
from ..errors import ComputationError, InputError
from ..files import read_records, unique_object_pairs
from .render import caution_block, fmt, json_document, table, to_json, to_json_line

__all__ = ["COMMAND", "load_blocks", "render_key_result", "render_ledger", "compact", "COMPACT_OMITS", "stream"]

#: Fields of a key-length result's JSON that ``--compact`` leaves out: text repeated unchanged for every block of
#: a protocol (about two thirds of a BB84 line).  Everything else stays, including fields added later.
COMPACT_OMITS = ("assumptions", "formula", "references")


def statistics_help(design: bool = False) -> str:
    """Help text of ``--statistics``: each registered protocol's methods, its default first.

    With ``design=True`` only the methods a protocol's design and block-size search support
    (``design_statistics`` of the protocol object, when it declares one).
    """
    parts = []
    for proto in protocols.all_protocols():
        names = getattr(proto, "design_statistics", proto.statistics_methods) if design else proto.statistics_methods
        methods = [proto.default_statistics] + [m for m in names if m != proto.default_statistics]
        parts.append(f"{proto.name}: {methods[0]} (default), " + ", ".join(methods[1:]))
    head = "parameter-estimation statistics, per protocol"
    if design:
        head += " (a bb84 scenario's [analysis] statistics is its default)"
    return head + "; " + "; ".join(parts)


def _args(p: argparse.ArgumentParser) -> None:
    p.add_argument("block", help="block file: .json (one block or a list), .jsonl or .csv (one block per line); "
                                 "'-' reads JSON Lines from standard input and answers each line at once")
    p.add_argument("--statistics", default=None, help=statistics_help())
    p.add_argument("--json", action="store_true", help="machine-readable output (JSON; JSON Lines for a batch)")
    p.add_argument("--compact", action="store_true",
                   help="JSON without the assumptions, formula, references and ledger descriptions, which repeat "
                        "for every block (implies --json)")
    p.add_argument("--jobs", default="1", help="worker processes for a large batch (default 1; results identical)")


def compact(d: dict) -> dict:
    """The compact form of a key-length result's JSON dictionary (``--compact``).

    Parameters
    ----------
    d : dict
        ``KeyLengthResult.to_dict()``.

    Returns
    -------
    dict
        A copy without :data:`COMPACT_OMITS` and without the ledger terms' descriptions; the key length, the
        epsilon sums, the ledger's numbers, terms, estimates and any status fields are kept.
    """
    out = {k: v for k, v in d.items() if k not in COMPACT_OMITS}
    if isinstance(out.get("ledger"), list):
        out["ledger"] = [{k: v for k, v in t.items() if k != "description"} for t in out["ledger"]]
    return out


def _result_dict(res, args) -> dict:
    d = res.to_dict()
    return compact(d) if getattr(args, "compact", False) else d


#: Blocks come from :func:`finitekey.files.read_records` (single JSON, JSON list, JSON Lines or CSV).
load_blocks = read_records


def _at(line, exc: InputError) -> InputError:
    if line is None:
        return exc
    return InputError(f"line {line}: {exc.field}", exc.value, exc.allowed)


def _parse(line, data):
    try:
        return protocols.block_from_dict(data)
    except InputError as exc:
        raise _at(line, exc) from None


def render_ledger(ledger) -> str:
    rows = [[t.name, t.role.value, t.charge.value, t.weight, t.epsilon, t.contribution] for t in ledger.terms]
    rows.append(["eps_cor (correctness)", "", "", "", "", ledger.eps_cor])
    rows.append(["eps_sec (secrecy)", "", "", "", "", ledger.eps_sec])
    rows.append(["eps_total", "", "", "", "", ledger.eps_total])
    return table(rows, ["epsilon term", "role", "charged as", "weight", "epsilon", "contribution"])


def _unit(name: str) -> str:
    if "failure" in name:
        return "probability"
    if "rate" in name or "qber" in name or name in ("mu", "phi"):
        return "fraction"
    if name.startswith("note"):
        return "flag"
    if name.endswith("_bits"):
        return "bits"
    return "count"


def render_key_result(res, label: str | None = None) -> str:
    """Human-readable rendering of a KeyLengthResult (protocol independent); ``label`` names the block."""
    rows = [["protocol", res.protocol, ""], ["statistics", res.statistics, ""],
            ["secret key length", res.secret_key_length, "bits"], ["status", res.status.text(), ""]]
    for k, v in getattr(res, "settings", {}).items():
        rows.append([f"setting: {k}", str(v), ""])
    for k, v in res.terms.items():
        rows.append([f"term: {k}", fmt(v), "bits"])
    for k, v in res.estimates.items():
        rows.append([f"estimate: {k}", fmt(v), _unit(k)])
    parts = ([] if label is None else [f"block: {label}"])   # above the table: a long label would widen it
    parts += [table(rows, ["quantity", "value", "unit"]), "", "Epsilon ledger:", render_ledger(res.ledger), "",
              "Assumptions:"] + [f"  - {a}" for a in res.assumptions]
    parts += ["Sources:"] + [f"  - {r}" for r in res.references]
    return "\n".join(parts)


def _line_result(line: int, text: str, statistics, compact_output: bool) -> dict:
    """Answer to one line of a stream: the result, or raise InputError / ComputationError naming the line."""
    try:
        data = json.loads(text, object_pairs_hook=unique_object_pairs)
    except InputError as exc:  # a field given twice
        raise _at(line, exc) from None
    except json.JSONDecodeError as exc:
        shown = text.strip() if len(text.strip()) <= 60 else text.strip()[:57] + "..."
        raise InputError(f"line {line}: block", shown,
                         f"one JSON object per line ({exc.msg} at column {exc.colno})") from None
    proto, block = _parse(line, data)
    try:
        res = proto.key_length(block, statistics)
    except InputError as exc:
        raise _at(line, exc) from None
    d = compact(res.to_dict()) if compact_output else res.to_dict()
    d["line"] = line
    label = getattr(block, "label", None)
    if label is not None:
        d["label"] = label
    return json_document(d)


def stream(lines, out, err, statistics=None, compact_output: bool = False) -> int:
    """Answer a stream of JSON Lines blocks one by one (``finitekey keylength -``).

    Parameters
    ----------
    lines : iterable of str
        Input lines (e.g. ``iter(sys.stdin.readline, "")``); blank lines are skipped.
    out, err : text streams
        One JSON line per non-empty input line goes to ``out``, flushed after each; error messages also go to
        ``err``.
    statistics : str, optional
        Statistics method for every block (default: each block's or the protocol's).
    compact_output : bool
        Write the :func:`compact` form.

    Returns
    -------
    int
        Exit status: 0 if every line gave a result, 2 if any line was bad input, else 3 if a computation failed.
    """
    status = 0
    for number, text in enumerate(lines, start=1):
        if not text.strip():
            continue
        try:
            answer = to_json_line(_line_result(number, text, statistics, compact_output))
        except InputError as exc:
            field = exc.field.split(": ", 1)[1] if exc.field.startswith(f"line {number}: ") else exc.field
            answer = json.dumps({"line": number, "error": str(exc), "field": field, "allowed": exc.allowed},
                                separators=(",", ":"))
            print(f"finitekey keylength: error: {exc}", file=err, flush=True)
            status = 2
        except ComputationError as exc:
            answer = json.dumps({"line": number, "error": f"line {number}: computation failed: {exc}"},
                                separators=(",", ":"))
            print(f"finitekey keylength: line {number}: computation failed: {exc}", file=err, flush=True)
            status = status or 3
        out.write(answer + "\n")
        out.flush()
    return status


def _run(args) -> int:
    try:
        jobs = int(args.jobs)
    except ValueError:
        raise InputError("--jobs", args.jobs, "a whole number of worker processes >= 1") from None
    if jobs < 1:
        raise InputError("--jobs", args.jobs, "a whole number of worker processes >= 1")
    if args.compact:
        args.json = True
    if args.block == "-":
        if jobs != 1:
            raise InputError("--jobs", args.jobs, "1 when blocks are read from standard input (one at a time)")
        return stream(iter(sys.stdin.readline, ""), sys.stdout, sys.stderr, args.statistics, args.compact)
    records, batch = load_blocks(args.block)
    if not records:
        raise InputError("block", args.block, "a file with at least one block")
    parsed = [(line,) + _parse(line, data) for line, data in records]
    results = []
    # Group consecutive blocks of a protocol that offers a batch path (shared caches); order is kept.
    i = 0
    while i < len(parsed):
        proto = parsed[i][1]
        j = i
        while j < len(parsed) and parsed[j][1] is proto:
            j += 1
        chunk = parsed[i:j]
        try:
            if hasattr(proto, "key_length_batch") and len(chunk) > 1:
                out = proto.key_length_batch([c[2] for c in chunk], args.statistics, jobs=jobs)
            else:
                out = [proto.key_length(c[2], args.statistics) for c in chunk]
        except InputError as exc:
            raise _at(chunk[0][0] if len(chunk) == 1 else None, exc) from None
        results.extend(out)
        i = j
    if not batch:
        res = results[0]
        label = getattr(parsed[0][2], "label", None)
        if args.json:
            d = _result_dict(res, args)
            if label is not None:
                d["label"] = label
            print(to_json(json_document(d)))
        else:
            print(render_key_result(res, label))
            print("\n" + caution_block())
        return 0
    if args.json:
        for (line, _, block), res in zip(parsed, results):
            d = _result_dict(res, args)
            d["line"] = line
            label = getattr(block, "label", None)
            if label is not None:
                d["label"] = label
            print(to_json_line(json_document(d)))
        return 0
    rows = []
    for (line, _, block), res in zip(parsed, results):
        rows.append([line, getattr(block, "label", None) or "", res.protocol, res.statistics,
                     res.secret_key_length, res.eps_sec, res.eps_cor,
                     "key" if res.status.key else "no key: " + res.status.reason.text])
    print(table(rows, ["line", "label", "protocol", "statistics", "secret key (bits)", "eps_sec", "eps_cor",
                       "status"]))
    print("\n" + caution_block())
    return 0


COMMAND = SimpleNamespace(NAME="keylength", add_arguments=_args, run=_run)
