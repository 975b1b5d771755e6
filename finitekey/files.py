"""Reading input files and writing output files safely.

Inputs: JSON, JSON Lines, CSV and TOML, with errors that name the file, the
field and the problem.  Outputs: :func:`atomic_write` is the one-file shortcut
of :mod:`finitekey.outputs` (checked path, temporary file renamed into place).
"""

from __future__ import annotations

import csv
import io
import json
import sys
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from .errors import InputError
from .outputs import plan_outputs, write_outputs

__all__ = ["atomic_write", "read_json", "read_toml", "read_records"]


def atomic_write(path, data, option: str = "output") -> None:
    """Write ``data`` (str or bytes) to ``path`` atomically, after the checks of :mod:`finitekey.outputs`.

    A shortcut for one file: :func:`finitekey.outputs.plan_outputs` then
    :func:`finitekey.outputs.write_outputs`.

    Raises
    ------
    InputError
        When ``path`` may not be written (see :func:`finitekey.outputs.plan_outputs`) or the write fails.
    """
    (target,) = plan_outputs([(option, str(path), None)])
    write_outputs([(target, data)])


def _read_text(path) -> str:
    p = Path(path)
    if not p.is_file():
        raise InputError("file", str(path), "a path to an existing, readable file")
    try:
        return p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError("file", str(path), f"a readable UTF-8 text file ({exc})") from None


def read_json(path) -> object:
    """Parse a JSON file; syntax errors name the file, line and column."""
    text = _read_text(path)
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: line {exc.lineno} column {exc.colno}", exc.msg, "valid JSON") from None


def read_toml(path) -> dict:
    """Parse a TOML file; syntax errors name the file and the problem."""
    text = _read_text(path)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(str(path), str(exc), "valid TOML") from None


def read_records(path):
    """Read blocks from a file: one per line of JSON Lines (``.jsonl``/``.ndjson``) or CSV (``.csv``), else JSON.

    Returns
    -------
    records : list of (int or None, dict)
        Each record with the line number it came from (None for a single JSON object).
    batch : bool
        Whether the file holds a batch (lines, or a JSON list) rather than one block.

    CSV cells that look like numbers become int or float; list-valued fields are written ``a;b;c``.
    Errors name the file and the line.
    """
    p = str(path)
    if p.endswith((".jsonl", ".ndjson")):
        out = []
        for i, line in enumerate(_read_text(path).splitlines(), start=1):
            if not line.strip():
                continue
            try:
                out.append((i, json.loads(line)))
            except json.JSONDecodeError as exc:
                raise InputError(f"{path}: line {i}", exc.msg, "one JSON object per line") from None
        return out, True
    if p.endswith(".csv"):
        reader = csv.DictReader(io.StringIO(_read_text(path)))
        out = []
        for row in reader:
            line = reader.line_num
            if None in row:
                raise InputError(f"{path}: line {line}", row[None], "no more cells than header columns")
            out.append((line, {k: _cell(v) for k, v in row.items() if v not in ("", None)}))
        return out, True
    data = read_json(path)
    if isinstance(data, list):
        return [(i, d) for i, d in enumerate(data, start=1)], True
    return [(None, data)], False


def _cell(v: str):
    if ";" in v:
        return [_cell(x) for x in v.split(";")]
    try:
        return int(v)
    except ValueError:
        pass
    try:
        return float(v)
    except ValueError:
        return v
