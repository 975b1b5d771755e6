"""Parsing helpers shared by the protocols' block and scenario readers.

Every protocol reads the same security fields (``eps_sec`` and ``eps_cor``, or ``eps_total`` with an optional
``eps_cor_share``) and the same free-text ``label``; they are read here once, so the protocols accept the same
forms with the same meaning and the same error messages.
"""

from __future__ import annotations

import math

from ..domains import PROBABILITY, SECURITY_EPSILON
from ..errors import InputError
from ._spec import FieldSpec

__all__ = ["DEFAULT_EPS_COR_SHARE", "SECURITY_FIELDS", "SECURITY_SCHEMA_RULE", "block_security_specs",
           "security_targets", "security_fields_with", "split_eps_total",
           "read_label", "one_of", "check_sections", "check_split", "read_schema_sections"]

#: Share of ``eps_total`` given to correctness when only ``eps_total`` is given.
DEFAULT_EPS_COR_SHARE = 0.1
#: The security fields of a block (or of a scenario's ``[security]`` section).
SECURITY_FIELDS = ("eps_sec", "eps_cor", "eps_total", "eps_cor_share")


def block_security_specs(prefix: str = "") -> tuple:
    """The declarations of the security fields, named ``prefix + field`` (``"security."`` in a scenario).

    Returns
    -------
    tuple of FieldSpec
        eps_sec, eps_cor, eps_total, eps_cor_share (the order of :data:`SECURITY_FIELDS`).
    """
    return (
        FieldSpec(prefix + "eps_sec", "number", "secrecy target", domain=SECURITY_EPSILON,
                  required="with eps_cor, or eps_total"),
        FieldSpec(prefix + "eps_cor", "number", "correctness target", domain=SECURITY_EPSILON,
                  required="with eps_sec, or eps_total"),
        FieldSpec(prefix + "eps_total", "number", "total security target, split into eps_sec and eps_cor",
                  domain=SECURITY_EPSILON, required="or eps_sec and eps_cor"),
        FieldSpec(prefix + "eps_cor_share", "number", f"share of eps_total given to eps_cor (default "
                  f"{DEFAULT_EPS_COR_SHARE})", domain=PROBABILITY, required="only with eps_total"),
    )


#: Rules across the security fields (eps_sec and eps_cor, or eps_total), for a JSON Schema.
SECURITY_SCHEMA_RULE = {"oneOf": [
    {"required": ["eps_sec", "eps_cor"],
     "not": {"anyOf": [{"required": ["eps_total"]}, {"required": ["eps_cor_share"]}]}},
    {"required": ["eps_total"], "not": {"anyOf": [{"required": ["eps_sec"]}, {"required": ["eps_cor"]}]}}]}


def split_eps_total(total: float, share: float, field: str = "eps_total", share_field: str = "eps_cor_share"
                    ) -> tuple:
    """``(eps_sec, eps_cor)`` from a total: ``eps_cor = total * share``, ``eps_sec`` just below the rest.

    ``eps_sec`` is rounded one float down from ``total - eps_cor`` so that ``eps_sec + eps_cor <= total``.

    Raises
    ------
    InputError
        If either part falls below :data:`~finitekey.domains.SECURITY_EPSILON`.
    """
    eps_cor = total * share
    eps_sec = math.nextafter(total - eps_cor, 0.0)
    if not SECURITY_EPSILON.contains(eps_cor):
        raise InputError(share_field, share, f"a share leaving eps_cor = {field} * share in "
                         f"{SECURITY_EPSILON.interval()}")
    if not SECURITY_EPSILON.contains(eps_sec):
        raise InputError(field, total, "a total whose split into eps_sec and eps_cor keeps both in "
                         + SECURITY_EPSILON.interval())
    return eps_sec, eps_cor


def security_targets(given: dict, prefix: str = "") -> tuple:
    """Read ``(eps_sec, eps_cor)`` from a mapping holding eps_sec and eps_cor, or eps_total [and eps_cor_share].

    Parameters
    ----------
    given : dict
        The block, or the scenario's ``[security]`` section.
    prefix : str
        Prefix of the field names in messages, e.g. ``"security."``.

    Raises
    ------
    InputError
        Naming the field as given, with the value as given, for a missing, mixed or out-of-range value.
    """
    if "eps_total" in given:
        for other in ("eps_sec", "eps_cor"):
            if other in given:
                raise InputError(prefix + other, given[other], f"absent when {prefix}eps_total is given")
        total = SECURITY_EPSILON.check_scalar(prefix + "eps_total", given["eps_total"])
        share = PROBABILITY.check_scalar(prefix + "eps_cor_share",
                                         given.get("eps_cor_share", DEFAULT_EPS_COR_SHARE))
        return split_eps_total(float(total), float(share), prefix + "eps_total", prefix + "eps_cor_share")
    if "eps_cor_share" in given:
        raise InputError(prefix + "eps_cor_share", given["eps_cor_share"], f"used only with {prefix}eps_total")
    out = []
    for name in ("eps_sec", "eps_cor"):
        if name not in given:
            raise InputError(prefix + name, None, SECURITY_EPSILON.describe() + f" (or give {prefix}eps_total)")
        out.append(float(SECURITY_EPSILON.check_scalar(prefix + name, given[name])))
    return tuple(out)


def security_fields_with(given: dict, eps_sec: float, eps_cor: float, name: str, value) -> dict:
    """The security fields with ``name`` set to ``value`` (a sweep over one security field).

    Setting ``eps_sec`` or ``eps_cor`` of a scenario given by ``eps_total`` switches it to the explicit form,
    keeping the other target at its current value (``eps_sec``, ``eps_cor``); setting ``eps_total`` or
    ``eps_cor_share`` switches to (or stays in) the total form.
    """
    out = dict(given)
    if name in ("eps_sec", "eps_cor"):
        if "eps_total" in out:
            out = {"eps_sec": eps_sec, "eps_cor": eps_cor}
    elif name in ("eps_total", "eps_cor_share"):
        out.pop("eps_sec", None)
        out.pop("eps_cor", None)
        if name == "eps_cor_share" and "eps_total" not in out:
            out["eps_total"] = eps_sec + eps_cor
    out[name] = value
    return out


def read_label(given: dict, field: str = "label"):
    """The optional free-text label (a string; an integer is taken as its decimal text), or None."""
    label = given.get("label")
    if label is None:
        return None
    if isinstance(label, bool) or not isinstance(label, (str, int)):
        raise InputError(field, label, "a text identifier (a string)")
    return str(label)


def one_of(given: dict, names: tuple, prefix: str = "", allowed: str = "") -> str:
    """The one field of ``names`` (two alternatives) present in ``given``.

    Parameters
    ----------
    given : dict
        The section as given.
    names : tuple of str
        The two alternative field names, the usual one first.
    prefix : str
        Prefix of the field names in messages, e.g. ``"block."``.
    allowed : str
        What the first field holds, for the message when neither is given.

    Raises
    ------
    InputError
        Naming both fields when both are given (the second one as the field) or neither is (the first).
    """
    first, second = (prefix + n for n in names)
    present = [n for n in names if n in given]
    if len(present) == 2:
        raise InputError(second, given[names[1]], f"absent when {first} is given (give one of {first} or {second})")
    if not present:
        raise InputError(first, None, (allowed + " " if allowed else "") + f"(or give {second} instead)")
    return present[0]


def check_sections(data, sections: dict, required: dict) -> None:
    """Check a scenario mapping's sections and fields against ``sections`` and ``required``.

    Parameters
    ----------
    data
        The scenario as given (from TOML).
    sections : dict
        Allowed section name -> its allowed field names.
    required : dict
        Required section name -> its required field names.

    Raises
    ------
    InputError
        Naming ``scenario`` when ``data`` is not a table, ``section`` for an unknown, non-table or missing
        section, and ``section.field`` for an unknown or missing field.
    """
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a table of sections " + ", ".join(sections))
    for sec in data:
        if sec not in sections:
            raise InputError(sec, data[sec], "one of the sections " + ", ".join(sections))
        if not isinstance(data[sec], dict):
            raise InputError(sec, data[sec], "a table of fields")
        for key in data[sec]:
            if key not in sections[sec]:
                raise InputError(f"{sec}.{key}", data[sec][key], "one of the fields "
                                 + ", ".join(f"{sec}.{k}" for k in sections[sec]))
    for sec, keys in required.items():
        if sec not in data:
            raise InputError(sec, None, f"a [{sec}] section" + (" with " + ", ".join(keys) if keys else ""))
        for key in keys:
            if key not in data[sec]:
                raise InputError(f"{sec}.{key}", None, "a value (required field)")


def check_split(split, terms: tuple, domain, *, unknown_note: str = "", list_missing: bool = False) -> dict:
    """Check an ``epsilon_split`` table: one share per secrecy term, each in ``domain``, summing to 1.

    Parameters
    ----------
    split
        The table as given.
    terms : tuple of str
        The secrecy terms, in order; every one needs a share and no other name is allowed.
    domain : Domain
        The domain of one share (the open interval (0, 1)).
    unknown_note : str
        Text appended to the message for a name not in ``terms``.
    list_missing : bool
        Whether the message for a missing term lists the terms.

    Returns
    -------
    dict
        Term -> share (float), in the order of ``terms``.

    Raises
    ------
    InputError
        Naming ``epsilon_split`` (not a table, shares not summing to 1) or ``epsilon_split.<term>`` (an unknown,
        missing or out-of-range share).
    """
    if not isinstance(split, dict):
        raise InputError("epsilon_split", split, "a table of shares for " + ", ".join(terms))
    unknown = sorted(set(split) - set(terms))
    if unknown:
        raise InputError(f"epsilon_split.{unknown[0]}", split[unknown[0]], "one of " + ", ".join(terms) + unknown_note)
    out = {}
    for n in terms:
        if n not in split:
            raise InputError(f"epsilon_split.{n}", None, "a share in (0, 1) for every secrecy term"
                             + (": " + ", ".join(terms) if list_missing else ""))
        out[n] = float(domain.check_scalar(f"epsilon_split.{n}", split[n]))
    if abs(math.fsum(out.values()) - 1.0) > 1e-9:
        raise InputError("epsilon_split", split, "shares summing to 1")
    return out


def read_schema_sections(data, schema: dict, raw_kinds: tuple = ()) -> dict:
    """Read a scenario mapping section by section against ``schema`` (section -> field name -> FieldSpec).

    Parameters
    ----------
    data
        The scenario as given (from TOML).
    schema : dict
        Section name -> {field name -> :class:`FieldSpec`}; a missing section reads as an empty one.
    raw_kinds : tuple of str
        Field kinds taken as given (checked later by the caller), e.g. ``("list", "table")``.

    Returns
    -------
    dict
        Section -> {field -> checked value}, with the declared defaults for fields not given.

    Raises
    ------
    InputError
        Naming ``scenario`` when ``data`` is not a table, the section for an unknown or non-table section, and
        ``section.field`` for an unknown field or a value outside its declared domain.
    """
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a table of sections: " + ", ".join(schema))
    unknown = [s for s in data if s not in schema]
    if unknown:
        raise InputError(str(unknown[0]), data[unknown[0]], "one of the sections: " + ", ".join(schema))
    norm: dict = {}
    for section, fields in schema.items():
        given = data.get(section, {})
        if not isinstance(given, dict):
            raise InputError(section, given, "a TOML table [" + section + "]")
        bad = [f for f in given if f not in fields]
        if bad:
            raise InputError(f"{section}.{bad[0]}", given[bad[0]], "one of: " + ", ".join(fields))
        sec = {}
        for name, spec in fields.items():
            if name in given:
                sec[name] = spec.check(given[name]) if spec.kind not in raw_kinds else given[name]
            elif spec.default is not None:
                sec[name] = spec.default
        norm[section] = sec
    return norm
