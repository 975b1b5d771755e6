"""Reading input files and writing output files safely.

Inputs: JSON, JSON Lines, CSV and TOML, with errors that name the file, the
field and the problem.  A UTF-8 byte-order mark at the start of a file is
accepted (some editors write one).  A name given twice (a repeated key in a
JSON object, a repeated CSV column) is refused rather than silently taking
the last value; TOML refuses repeated keys itself.  Outputs: :func:`atomic_write`
is the one-file shortcut of :mod:`finitekey.outputs` (checked path, temporary
file renamed into place).
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

    Parameters
    ----------
    path : str or os.PathLike
    data : str or bytes
    option : str
        Command-line option named in error messages.

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
        return p.read_text(encoding="utf-8-sig")  # utf-8-sig: a leading byte-order mark is dropped
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError("file", str(path), f"a readable UTF-8 text file ({exc})") from None


class _DuplicateKey(Exception):
    def __init__(self, key, value):
        self.key, self.value = key, value


def _unique_pairs(pairs):
    """``object_pairs_hook`` for :func:`json.loads`: refuse an object that names a key twice."""
    out = {}
    for k, v in pairs:
        if k in out:
            raise _DuplicateKey(k, v)
        out[k] = v
    return out


def unique_object_pairs(pairs) -> dict:
    """``object_pairs_hook`` for :func:`json.loads` that raises :class:`InputError` for a key given twice."""
    try:
        return _unique_pairs(pairs)
    except _DuplicateKey as exc:
        raise InputError(str(exc.key), exc.value, "each field given once (this field is repeated)") from None


def loads_json(text: str, where: str, allowed: str = "valid JSON"):
    """Parse JSON text; syntax errors and repeated keys raise :class:`InputError` naming ``where``."""
    try:
        return json.loads(text, object_pairs_hook=_unique_pairs)
    except json.JSONDecodeError as exc:
        raise InputError(f"{where}: line {exc.lineno} column {exc.colno}", exc.msg, allowed) from None
    except _DuplicateKey as exc:
        raise InputError(f"{where}: {exc.key}", exc.value, "each field given once (this field is repeated)") \
            from None


def read_json(path) -> object:
    """Parse a JSON file; syntax errors name the file, line and column; a key given twice is refused.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    object
        The parsed JSON value.

    Raises
    ------
    InputError
    """
    return loads_json(_read_text(path), str(path))


def read_toml(path) -> dict:
    """Parse a TOML file; syntax errors name the file and the problem.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    dict

    Raises
    ------
    InputError
    """
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

    CSV cells that look like numbers become int or float (except the text columns label, protocol and
    statistics); list-valued fields are written ``a;b;c``.
    Errors name the file and the line.
    """
    p = str(path)
    if p.endswith((".jsonl", ".ndjson")):
        out = []
        for i, line in enumerate(_read_text(path).splitlines(), start=1):
            if not line.strip():
                continue
            try:
                out.append((i, json.loads(line, object_pairs_hook=_unique_pairs)))
            except json.JSONDecodeError as exc:
                raise InputError(f"{path}: line {i}", exc.msg, "one JSON object per line") from None
            except _DuplicateKey as exc:
                raise InputError(f"{path}: line {i}: {exc.key}", exc.value,
                                 "each field given once (this field is repeated)") from None
        return out, True
    if p.endswith(".csv"):
        reader = csv.DictReader(io.StringIO(_read_text(path)))
        header = reader.fieldnames or []
        repeated = sorted({h for h in header if header.count(h) > 1})
        if repeated:
            raise InputError(f"{path}: line 1", repeated[0], "each column name once (this column is repeated)")
        out = []
        for row in reader:
            line = reader.line_num
            if None in row:
                raise InputError(f"{path}: line {line}", row[None], "no more cells than header columns")
            out.append((line, {k: (v if k in _TEXT_COLUMNS else _cell(v)) for k, v in row.items()
                               if v not in ("", None)}))
        return out, True
    data = read_json(path)
    if isinstance(data, list):
        return [(i, d) for i, d in enumerate(data, start=1)], True
    return [(None, data)], False


#: CSV columns kept as text even when they look like numbers (a label "0001" stays "0001").
_TEXT_COLUMNS = ("label", "protocol", "statistics")


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
