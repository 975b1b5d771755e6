"""What a sweep table shows: the choice and order of columns, and pivot tables.

A :class:`~finitekey.report.sweep.SweepTable` holds every quantity at every
grid point.  :func:`table_view` turns it into a :class:`TableView` -- the
columns to show, their headers, units and quantity kinds, and the raw cell
values -- which every output format lays out (:mod:`finitekey.report.formats`,
:mod:`finitekey.report.html`).

* ``--columns`` (:func:`parse_columns`): a comma-separated list of column keys
  in the order wanted; the words ``default`` and ``all`` expand in place
  (``default,parameters.key_basis_probability``).  An unknown key is an
  :class:`~finitekey.errors.InputError` listing the valid ones.
* The default columns (:func:`default_columns`) are the varied fields, the block
  size (block-size sweeps), the status when some row has no key (``no key``, the
  reasons listed under the table), the key length, the key rate per pulse (or per
  detection when there is no per-pulse rate), the key rate per second and the
  total epsilon: at most eight narrow columns, which fit a portrait page.
  Machine formats (CSV, JSON) default to every column.
* ``--pivot ROW_FIELD,COLUMN_FIELD[,QUANTITY]`` (:func:`parse_pivot`): one
  row per value of one varied field, one column per value of another, each
  cell one quantity (default: the key rate per pulse, or the block size in
  block-size sweeps).  Every other varied field must have a single value.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from ..errors import InputError
from .numbers import column_kind, format_column, format_number, spell

__all__ = ["Column", "TableView", "check_column_names", "default_columns", "parse_columns", "parse_pivot",
           "parse_pivot_fields", "static_column_keys", "table_view"]


@dataclass(frozen=True)
class Column:
    """One shown column.

    Attributes
    ----------
    key : str
        Machine name (CSV header, ``--columns`` name).
    header : str
        Human header text (without the unit).
    unit : str
        Unit text, "" for none.
    kind : str
        Quantity kind for the number formatter (:func:`finitekey.report.numbers.column_kind`).
    """

    key: str
    header: str
    unit: str = ""
    kind: str = "real"


@dataclass(frozen=True)
class TableView:
    """A table ready to be laid out: columns, raw cells, a caption and notes.

    Attributes
    ----------
    columns : tuple of Column
    rows : tuple of tuple
        Raw cell values (numbers, strings, lists, None for missing), aligned with ``columns``.
    caption : str
    notes : tuple of str
        Lines printed under the table (rows without a result, the pivot's fixed fields).
    corner : str
        For a pivot: the text above the row labels naming both fields; "" otherwise.
    pivot : dict or None
        ``row_field``, ``column_field``, ``quantity`` for a pivot table.
    """

    columns: tuple
    rows: tuple
    caption: str = ""
    notes: tuple = ()
    corner: str = ""
    pivot: dict | None = None
    head: tuple = ()

    def headers(self, target: str = "text") -> list:
        """Header texts; a pivot's value columns spell their value for ``target`` (``1×10⁹`` in md)."""
        out = []
        for i, c in enumerate(self.columns):
            h = self.head[i] if i < len(self.head) else None
            out.append(spell(h, "text" if target == "tex" else target) if h is not None else c.header)
        return out

    def formatted(self) -> list:
        """Cells formatted column by column (one notation per column; a pivot's body as one block)."""
        n = len(self.columns)
        out = [[None] * n for _ in self.rows]
        if self.pivot is not None and n > 1:
            groups = [[0], list(range(1, n))]
        else:
            groups = [[i] for i in range(n)]
        for g in groups:
            vals = [r[i] for r in self.rows for i in g]
            cells = format_column(vals, self.columns[g[0]].kind)
            k = 0
            for ri in range(len(self.rows)):
                for i in g:
                    out[ri][i] = cells[k]
                    k += 1
        return out

    def spelled(self, target: str, missing: str = "–") -> list:
        """Formatted cells spelled for ``target`` (``text``, ``md``, ``html`` or ``tex``)."""
        return [[spell(c, target, missing) for c in row] for row in self.formatted()]


def _all_columns(table) -> list:
    return [(k, h, u) for k, h, u in table.columns()]


def default_columns(table) -> list:
    """Keys of the default (narrow) column set of a sweep table; see the module docstring."""
    keys = [k for k, _, _ in table.columns()]
    out = list(table.fields)
    if table.mode == "blocksize":
        out.append("block_size")
    out.append("secret_key_length")
    has_pulse = any(r.get("secret_key_rate_per_pulse") is not None for r in table.rows)
    out.append("secret_key_rate_per_pulse" if has_pulse or "secret_key_rate_per_detection" not in keys
               else "secret_key_rate_per_detection")
    if any(r.get("secret_key_rate_bps") is not None for r in table.rows):
        out.append("secret_key_rate_bps")
    out += list(getattr(table, "extra_default_columns", ()))  # a comparison: the repeaterless bound
    out.append("eps_total")
    if any(not (r.get("status") or {"key": True}).get("key", True) for r in table.rows if not r.get("error")):
        out.insert(len(table.fields) + (1 if table.mode == "blocksize" else 0), "status")  # only when a row has none
    return [k for k in out if k in keys]


def parse_columns(spec, table) -> list:
    """Column keys from a ``--columns`` text (or list of keys), validated against the table's columns.

    Parameters
    ----------
    spec : str or sequence of str or None
        ``"default"``, ``"all"``, or comma-separated keys (the two words expand in place).
        None means the default set.
    table : SweepTable

    Raises
    ------
    InputError
        For an empty list or an unknown column; the message lists every valid column.
    """
    valid = [k for k, _, _ in _all_columns(table)]
    if spec is None:
        return default_columns(table)
    tokens = spec.split(",") if isinstance(spec, str) else list(spec)
    tokens = [t.strip() for t in tokens]
    if not tokens or any(not t for t in tokens):
        raise InputError("--columns", spec, "a comma-separated list of columns with no empty entries, e.g. "
                                            "default,parameters.key_basis_probability")
    out = []
    for t in tokens:
        if t == "default":
            add = default_columns(table)
        elif t == "all":
            add = valid
        elif t in valid:
            add = [t]
        else:
            raise InputError("--columns", t, "default, all, or one of the columns: " + ", ".join(valid))
        out += [k for k in add if k not in out]
    return out


def check_column_names(spec, static_keys: Sequence[str]) -> None:
    """Early check of ``--columns`` before a sweep runs (parameter columns are known only afterwards).

    Names that start with ``parameters.`` are accepted here and checked against the rows later.
    """
    if spec is None:
        return
    for t in (x.strip() for x in spec.split(",")):
        if not t:
            raise InputError("--columns", spec, "a comma-separated list of columns with no empty entries")
        if t in ("default", "all") or t in static_keys or t.startswith("parameters."):
            continue
        raise InputError("--columns", t, "default, all, or one of the columns: " + ", ".join(static_keys)
                         + ", parameters.NAME (the chosen parameters)")


def static_column_keys(mode: str, fields) -> list:
    """Column keys known before a sweep runs (every column except the chosen parameters)."""
    keys = list(fields)
    if mode == "blocksize":
        keys += ["block_size", "block_size_kind"]
    keys += ["secret_key_length", "secret_key_rate_per_pulse", "secret_key_rate_per_detection",
             "secret_key_rate_bps", "eps_total", "block_fill_time_s", "error"]
    return keys


def parse_pivot_fields(text: str):
    """``ROW_FIELD,COLUMN_FIELD[,QUANTITY]`` -> (row, column, quantity or None); syntax only."""
    return _parse_pivot_text(text)


def _parse_pivot_text(text: str):
    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) not in (2, 3) or not all(parts):
        raise InputError("--pivot", text, "ROW_FIELD,COLUMN_FIELD[,QUANTITY], e.g. link.distance_km,block.pulses")
    return parts[0], parts[1], (parts[2] if len(parts) == 3 else None)


def parse_pivot(text: str, table) -> dict:
    """Validate a ``--pivot ROW_FIELD,COLUMN_FIELD[,QUANTITY]`` text against a sweep table.

    Returns
    -------
    dict
        ``row_field``, ``column_field``, ``quantity``.

    Raises
    ------
    InputError
        When a field is not varied, both fields are the same, another varied
        field has several values, or the quantity is not a column.
    """
    rf, cf, q = _parse_pivot_text(text)
    fields = table.fields
    for f in (rf, cf):
        if f not in fields:
            raise InputError("--pivot", f, "one of the varied fields: " + (", ".join(fields) or "(none: add --vary)"))
    if rf == cf:
        raise InputError("--pivot", text, "two different varied fields")
    for a in table.axes:
        if a.field not in (rf, cf) and len(a.values) > 1:
            raise InputError("--pivot", a.text, "a single value for every varied field other than " f"{rf} and {cf}")
    keys = [k for k, _, _ in table.columns() if k not in fields]
    if q is None:
        rates = [k for k in default_columns(table) if k.startswith("secret_key_rate")]
        q = "block_size" if table.mode == "blocksize" else (rates[0] if rates else "secret_key_length")
    if q not in keys:
        raise InputError("--pivot", q, "a quantity, one of: " + ", ".join(keys))
    return {"row_field": rf, "column_field": cf, "quantity": q}


def _where(row) -> str:
    """A grid point as text, values as the table shows them (``link.distance_km = 200``)."""
    return ", ".join(f"{k} = {format_number(v, 'input') if isinstance(v, (int, float)) else v}"
                     for k, v in row.get("point", {}).items()) or "the scenario"


def _error_notes(table) -> list:
    notes = []
    for r in table.rows:
        if r.get("error"):
            where = _where(r)
            notes.append(f"no result at {where}: {r['error']}")
    return notes


def _warning_notes(table) -> list:
    """One ``warning:`` line per distinct warning of the rows' designs (a default hiding an effect)."""
    seen = []
    several = bool(getattr(table, "scenarios", ()))  # a comparison: say whose design the warning is about
    for r in table.rows:
        who = r.get("point", {}).get("scenario") if several else None
        for w in (r.get("design") or {}).get("warnings", ()):
            w = f"warning ({who}): {w}" if who else f"warning: {w}"
            if w not in seen:
                seen.append(w)
    return seen


def _status_notes(table) -> list:
    notes = []
    for r in table.rows:
        st = r.get("status") or {}
        if st and not st.get("key", True) and not r.get("error"):
            where = _where(r)
            reason = st.get("reason_text") or st.get("reason")
            notes.append(f"no key at {where}: {reason}" + (f"; {st['detail']}" if st.get("detail") else ""))
    return notes


def _caption(table) -> str:
    what = {"design": "designed parameters", "fixed": "key length with the scenario's parameters",
            "blocksize": f"smallest block for target '{table.target}'"}.get(table.mode, table.mode)
    over = ", ".join(table.fields) or "the scenario alone"
    return f"{table.protocol}: {what} over {over}"


def table_view(table, columns=None, pivot=None, human: bool = True) -> TableView:
    """The shown part of a sweep table.

    Parameters
    ----------
    table : SweepTable
    columns : str or list of str, optional
        ``--columns`` text or keys; default: :func:`default_columns` when
        ``human``, every column otherwise.
    pivot : str or dict, optional
        ``--pivot`` text (or the dict of :func:`parse_pivot`).
    human : bool
        Whether the view is for a human format (affects only the default columns).
    """
    notes = _error_notes(table) + _warning_notes(table) + list(getattr(table, "notes", ()))  # a comparison's own
    if pivot is not None:
        if columns is not None:
            raise InputError("--columns", columns, "no --columns with --pivot (the pivot's cells are one quantity)")
        return _pivot_view(table, pivot if isinstance(pivot, dict) else parse_pivot(pivot, table), notes)
    all_cols = {k: (h, u) for k, h, u in table.columns()}
    if columns is None and not human:
        keys = list(all_cols)
    else:
        keys = parse_columns(columns, table)
    flat = table.flat_rows()
    index = {k: i for i, k in enumerate(all_cols)}
    rows = tuple(tuple(cells[index[k]] for k in keys) for cells in flat)
    if human and "status" in keys:  # short cells; the reasons go under the table
        j = keys.index("status")
        rows = tuple(r[:j] + (("no key" if isinstance(r[j], str) and r[j].startswith("no key") else r[j]),) + r[j + 1:]
                     for r in rows)
        notes = _status_notes(table) + notes
    cols = []
    for j, k in enumerate(keys):
        h, u = all_cols[k]
        if k == "block_size":
            kinds = {r.get("block_size_kind") for r in table.rows if r.get("block_size_kind")}
            if len(kinds) == 1:
                u = kinds.pop()
        cols.append(Column(k, h, u, column_kind(k, [r[j] for r in rows])))
    if "error" in keys:
        notes = []
    return TableView(tuple(cols), rows, _caption(table), tuple(notes))


def _pivot_view(table, spec: dict, notes: list) -> TableView:
    rf, cf, q = spec["row_field"], spec["column_field"], spec["quantity"]
    axes = {a.field: a for a in table.axes}
    rvals, cvals = list(axes[rf].values), list(axes[cf].values)
    headers = {k: (h, u) for k, h, u in table.columns()}
    qi = [k for k, _, _ in table.columns()].index(q)
    cells = {}
    for r, flat in zip(table.rows, table.flat_rows()):
        p = r.get("point", {})
        cells[(p.get(rf), p.get(cf))] = flat[qi]
    rows = tuple(tuple([rv] + [cells.get((rv, cv)) for cv in cvals]) for rv in rvals)
    qkind = column_kind(q, [c for c in cells.values()])
    head_cells = format_column(cvals, "input")
    qh, qu = headers[q]
    cols = [Column(rf, rf, "", column_kind(rf, rvals))]
    for cv, hc in zip(cvals, head_cells):
        cols.append(Column(f"{q}@{cf}={cv}", spell(hc, "text"), qu, qkind))
    head = (None,) + tuple(head_cells)
    fixed = [f"{a.field} = {a.values[0]}" for a in table.axes if a.field not in (rf, cf)]
    extra = [f"fixed: {', '.join(fixed)}"] if fixed else []
    caption = f"{table.protocol}: {qh}" + (f" [{qu}]" if qu else "") + f" by {rf} (rows) and {cf} (columns)"
    return TableView(tuple(cols), rows, caption, tuple(extra + notes), corner=f"{rf} \\ {cf}",
                     pivot={"row_field": rf, "column_field": cf, "quantity": q, "header": qh, "unit": qu}, head=head)
