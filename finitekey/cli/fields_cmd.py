"""``finitekey fields PROTOCOL`` (every scenario and block field) and ``finitekey schema NAME`` (a JSON Schema).

Both are produced from the protocols' field declarations (``fields_table()`` and ``json_schema(kind)`` of the
registered protocol objects), the same declarations their parsers validate with; nothing here is per protocol.
"""

from __future__ import annotations

import argparse
from types import SimpleNamespace

from .. import protocols
from ..cautions import CAUTION
from ..errors import InputError
from ..protocols._spec import format_table, markdown_table
from .render import caution_block, json_document, to_json

__all__ = ["FIELDS", "SCHEMA", "schema_names"]

#: The two kinds of input a protocol reads.
KINDS = ("scenario", "block")


def schema_names() -> list:
    """Every name ``finitekey schema`` accepts: ``PROTOCOL-block`` and ``PROTOCOL-scenario``."""
    return [f"{name}-{kind}" for name in protocols.names() for kind in ("block", "scenario")]


def _fields_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("protocol_name", metavar="PROTOCOL", help="protocol name: " + ", ".join(protocols.names()))
    g = p.add_mutually_exclusive_group()
    g.add_argument("--json", action="store_true", help="machine-readable output")
    g.add_argument("--markdown", action="store_true", help="Markdown tables (as in the README)")


def _fields_run(args) -> int:
    proto = protocols.get(args.protocol_name)
    tables = proto.fields_table()
    if args.json:
        keys = ("field", "type", "unit", "default", "allowed", "required", "description")
        print(to_json(json_document({"protocol": proto.name,
                                     **{k: [dict(zip(keys, r)) for r in tables[k]] for k in KINDS}})))
        return 0
    if args.markdown:
        for kind in KINDS:
            print(f"{kind.capitalize()} fields of {proto.name}:\n")
            print(markdown_table(tables[kind]))
            print()
        print(caution_block())
        return 0
    for kind in KINDS:
        title = {"scenario": f"Scenario fields ({proto.name}, TOML: [section] field = value)",
                 "block": f"Block fields ({proto.name}, JSON object)"}[kind]
        print(title)
        print(format_table(tables[kind]))
        print()
    print(f"JSON Schemas: finitekey schema {proto.name}-scenario, finitekey schema {proto.name}-block")
    print("\n" + caution_block())
    return 0


def _schema_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("schema_name", metavar="NAME", help="one of: " + ", ".join(schema_names()))


def _schema_run(args) -> int:
    name = args.schema_name
    if name not in schema_names():
        raise InputError("NAME", name, "one of: " + ", ".join(schema_names()))
    proto_name, kind = name.rsplit("-", 1)
    schema = protocols.get(proto_name).json_schema(kind)
    schema = {**schema, "$comment": CAUTION}
    print(to_json(schema))
    return 0


FIELDS = SimpleNamespace(NAME="fields", add_arguments=_fields_args, run=_fields_run)
SCHEMA = SimpleNamespace(NAME="schema", add_arguments=_schema_args, run=_schema_run)
