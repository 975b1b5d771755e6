"""Field declarations: one :class:`FieldSpec` per input field, from which validation, listings and schemas follow.

A protocol declares each field of its blocks and scenarios once (name, kind, unit, domain or choices, default,
whether it is required, one line of description).  Its parser validates with the declaration
(:meth:`FieldSpec.check`), ``finitekey fields`` lists the declarations (:func:`table_rows`) and ``finitekey
schema`` turns them into a JSON Schema (:func:`json_schema`), so the three cannot drift apart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..domains import Domain
from ..errors import InputError

__all__ = ["FieldSpec", "DefaultWarning", "table_rows", "format_table", "json_schema", "domain_schema", "by_name",
           "sections_of", "default_text", "markdown_table"]

#: Kinds of field: a number (real or whole, after its domain), a choice among strings, a boolean, free text,
#: or a structured value (a list or a table) whose parser checks its inside (its schema is given by hand).
KINDS = ("number", "choice", "bool", "text", "list", "table")


@dataclass(frozen=True)
class FieldSpec:
    """One declared input field.

    Parameters
    ----------
    name : str
        The field as users write it: ``"key_bits"`` (a block) or ``"section.field"`` (a scenario).
    kind : str
        One of :data:`KINDS`.
    unit : str
        Unit of a number (``"Hz"``, ``"dB/km"``, ``"s"``, ``"bits"``...), ``""`` for a pure number or none.
    domain : Domain or None
        Allowed values of a number.
    default : object
        The value taken when the field is absent; None when absent means "not given".
    required : str
        ``"yes"``, ``"no"``, or a short rule (``"one of pulses, key_detections"``).
    description : str
        One line saying what the field is.
    choices : tuple of str
        Allowed values of a choice.
    schema : dict or None
        JSON Schema of a structured field (a list or a table), written by hand beside the parser.
    """

    name: str
    kind: str
    description: str
    unit: str = ""
    domain: Domain | None = None
    default: object = None
    required: str = "no"
    choices: tuple = ()
    schema: dict | None = field(default=None, compare=False)

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"FieldSpec {self.name}: kind {self.kind!r} not in {KINDS}")
        if self.kind == "number" and self.domain is None:
            raise ValueError(f"FieldSpec {self.name}: a number needs a domain")

    @property
    def key(self) -> str:
        """The field's name inside its section (the part after the last dot)."""
        return self.name.rsplit(".", 1)[-1]

    @property
    def section(self) -> str | None:
        """The scenario section, or None for a block field."""
        return self.name.split(".", 1)[0] if "." in self.name else None

    def allowed(self) -> str:
        """What the field accepts, in the words of the parser's error messages."""
        if self.kind == "number":
            return self.domain.describe()
        if self.kind == "choice":
            return "one of: " + ", ".join(self.choices)
        if self.kind == "bool":
            return "true or false"
        if self.kind == "text":
            return "a string"
        return "a list" if self.kind == "list" else "a table"

    def check(self, value, field_name: str | None = None):
        """Validate one value of a simple field (number, choice, bool, text) and return it.

        Raises
        ------
        InputError
            ``FIELD = VALUE is not allowed; expected ...`` with :meth:`allowed` as the expectation.
        """
        fname = field_name or self.name
        if self.kind == "number":
            return self.domain.check_scalar(fname, value)
        if self.kind == "bool":
            if not isinstance(value, bool):
                raise InputError(fname, value, "true or false")
            return value
        if self.kind == "text":
            if not isinstance(value, str):
                raise InputError(fname, value, "a string")
            return value
        if self.kind == "choice":
            if not isinstance(value, str) or value not in self.choices:
                raise InputError(fname, value, "one of: " + ", ".join(self.choices))
            return value
        raise TypeError(f"{self.name}: a {self.kind} is checked by its parser")  # pragma: no cover

    def range_text(self) -> str:
        """The allowed range for a listing: the interval, the choices, or the kind."""
        if self.kind == "number":
            return ("integer " if self.domain.integer else "") + self.domain.interval()
        if self.kind == "choice":
            return " | ".join(self.choices)
        return {"bool": "true | false", "text": "text", "list": "list", "table": "table"}[self.kind]

    def type_text(self) -> str:
        """``integer``, ``real``, ``choice``, ``bool``, ``text``, ``list`` or ``table``."""
        if self.kind == "number":
            return "integer" if self.domain.integer else "real"
        return self.kind

    def to_schema(self) -> dict:
        """JSON Schema (draft 2020-12) of the field's value."""
        if self.schema is not None:
            out = dict(self.schema)
        elif self.kind == "number":
            out = domain_schema(self.domain)
        elif self.kind == "choice":
            out = {"enum": list(self.choices)}
        elif self.kind == "bool":
            out = {"type": "boolean"}
        elif self.kind == "text":
            out = {"type": "string"}
        else:  # pragma: no cover - structured fields carry their schema
            out = {"type": "array" if self.kind == "list" else "object"}
        out["description"] = self.description + (f" [{self.unit}]" if self.unit else "")
        if self.default is not None:
            out["default"] = self.default
        return out


@dataclass(frozen=True)
class DefaultWarning:
    """A rule flagging a field left at a value that probably hides a physical effect (declared as data).

    The rule fires when the field holds ``value`` (its default: the effect is not modelled) and the design's
    ``quantity`` exceeds ``threshold``.

    Parameters
    ----------
    field : str
        The scenario field, e.g. ``"detector.dead_time_s"``.
    value : float
        The value that leaves the effect out (the default).
    quantity : str
        The design figure compared, e.g. ``"detection_rate_hz"``.
    threshold : float
        Above this the effect is probably present.
    label : str
        The quantity and its unit in words, e.g. ``"detections per second"``.
    why : str
        What the value hides, for the message.
    """

    field: str
    value: float
    quantity: str
    threshold: float
    label: str
    why: str

    def check(self, field_value, figures: dict) -> str | None:
        """The warning text when the rule fires for ``field_value`` and the design ``figures``, else None."""
        x = figures.get(self.quantity)
        if x is None or field_value != self.value or not x > self.threshold:
            return None
        return (f"{self.field} = {default_text(self.value)} (the default: not modelled) while the design expects "
                f"more than {self.threshold:g} {self.label}: {self.why}")


def domain_schema(domain: Domain) -> dict:
    """JSON Schema of a number in ``domain``: type, minimum / exclusiveMinimum, maximum / exclusiveMaximum."""
    out: dict = {"type": "integer" if domain.integer else "number"}
    if not math.isinf(domain.lower):
        out["exclusiveMinimum" if domain.lower_open else "minimum"] = _num(domain.lower)
    if not math.isinf(domain.upper):
        out["exclusiveMaximum" if domain.upper_open else "maximum"] = _num(domain.upper)
    return out


def _num(x: float):
    return int(x) if float(x).is_integer() and abs(x) < 2**53 else float(x)


def by_name(specs) -> dict:
    """``{name: spec}`` of a tuple of specs."""
    return {s.name: s for s in specs}


def sections_of(specs) -> dict:
    """``{section: (key, ...)}`` of scenario specs, in declaration order."""
    out: dict = {}
    for s in specs:
        out.setdefault(s.section, ())
        out[s.section] += (s.key,)
    return out


def table_rows(specs) -> list:
    """Rows ``(name, type, unit, default, range, required, description)`` of a listing."""
    return [(s.name, s.type_text(), s.unit or "-", default_text(s.default), s.range_text(), s.required,
             s.description) for s in specs]


def default_text(value) -> str:
    """A default as a listing shows it: ``-`` for none, ``true``, ``"exact"``, ``0.0002``, ``3``."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def format_table(rows, header=("field", "type", "unit", "default", "allowed", "required", "description")) -> str:
    """Plain-text table of :func:`table_rows` rows, columns padded (the description last, unpadded)."""
    all_rows = [tuple(header)] + [tuple(r) for r in rows]
    widths = [max(len(r[i]) for r in all_rows) for i in range(len(header) - 1)]
    lines = []
    for r in all_rows:
        lines.append("  ".join(c.ljust(w) for c, w in zip(r[:-1], widths)) + "  " + r[-1])
    return "\n".join(lines)


def markdown_table(rows, header=("field", "type", "unit", "default", "allowed", "required", "description")) -> str:
    """Markdown table of :func:`table_rows` rows (the README's scenario tables are this text)."""
    def cell(c, i):
        c = c.replace("|", "\\|")
        return f"`{c}`" if i == 0 else c
    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(cell(c, i) for i, c in enumerate(r)) + " |" for r in rows]
    return "\n".join(lines)


def json_schema(title: str, specs, *, sections: bool, extra: dict | None = None) -> dict:
    """A JSON Schema (draft 2020-12) of a block (``sections=False``) or a scenario (``sections=True``).

    Parameters
    ----------
    title : str
        The schema's title, e.g. ``"bb84-block"``.
    specs : tuple of FieldSpec
        The declarations.
    sections : bool
        Whether field names are ``section.field`` (a scenario: one object per section).
    extra : dict, optional
        ``{section or "": {"required": [...], "anyOf"/"oneOf"/...}}``: rules across fields (alternatives),
        merged into the object of that section ("" for the top level).

    Returns
    -------
    dict
    """
    extra = extra or {}

    def obj(fields, where):
        props = {s.key: s.to_schema() for s in fields}
        req = [s.key for s in fields if s.required == "yes"]
        out = {"type": "object", "properties": props, "additionalProperties": False}
        if req:
            out["required"] = req
        out.update(extra.get(where, {}))
        return out

    if not sections:
        top = obj(list(specs), "")
    else:
        grouped: dict = {}
        for s in specs:
            grouped.setdefault(s.section, []).append(s)
        props = {sec: obj(fields, sec) for sec, fields in grouped.items()}
        top = {"type": "object", "properties": props, "additionalProperties": False}
        top.update(extra.get("", {}))
    return {"$schema": "https://json-schema.org/draft/2020-12/schema", "$id": f"finitekey:{title}",
            "title": title, **top}


def protocol_schema(protocol: str, kind: str, block_specs, scenario_specs, block_rules: dict | None = None,
                    scenario_rules: dict | None = None) -> dict:
    """JSON Schema of a protocol's ``"block"`` or ``"scenario"`` (the one body behind every protocol object's
    ``json_schema``).

    Returns
    -------
    dict

    Raises
    ------
    InputError
        For a ``kind`` other than ``block`` or ``scenario``.
    """
    if kind == "block":
        return json_schema(f"{protocol}-block", block_specs, sections=False, extra=block_rules)
    if kind == "scenario":
        return json_schema(f"{protocol}-scenario", scenario_specs, sections=True, extra=scenario_rules)
    raise InputError("kind", kind, "one of: block, scenario")
