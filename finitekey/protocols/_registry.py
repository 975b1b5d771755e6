"""The protocol registry, kept apart so that protocol modules can import it without a cycle.

Each protocol analysis module creates one protocol object and registers it
under its ``name`` (``"bb84"``, ``"decoy-bb84"``).  The command line dispatches
on a block's ``"protocol"`` field and a scenario's ``[protocol] name`` through
:func:`get`, so adding a protocol never touches the CLI.
"""

from __future__ import annotations

from ..errors import InputError

__all__ = ["register", "get", "names", "all_protocols"]

_REGISTRY: dict = {}

#: Methods every registered protocol object must provide (see notes in DEVELOPERS.md).
REQUIRED = ("parse_block", "key_length", "parse_scenario", "default_scenario", "design", "blocksize",
            "scenario_fields", "with_field", "fields_table", "json_schema")


def register(obj):
    """Register the protocol object ``obj`` under ``obj.name`` and return it.

    Raises
    ------
    ValueError
        If a protocol of that name is registered already.
    TypeError
        If ``obj`` lacks a name or one of the required methods.
    """
    name = getattr(obj, "name", None)
    if not isinstance(name, str) or not name:
        raise TypeError(f"a protocol needs a non-empty string 'name', got {obj!r}")
    missing = [m for m in REQUIRED if not callable(getattr(obj, m, None))]
    if missing:
        raise TypeError(f"protocol {name!r} lacks the methods {missing}")
    if name in _REGISTRY:
        raise ValueError(f"a protocol named {name!r} is registered already")
    _REGISTRY[name] = obj
    return obj


def get(name):
    """Return the registered protocol called ``name``.

    Raises
    ------
    InputError
        For an unknown name (or a non-string), listing the registered names.
    """
    try:
        return _REGISTRY[name]
    except (KeyError, TypeError):
        raise InputError("protocol", name, "one of: " + ", ".join(names())) from None


def names() -> list:
    """Names of all registered protocols, sorted."""
    return sorted(_REGISTRY)


def all_protocols() -> list:
    """The registered protocol objects, in name order."""
    return [_REGISTRY[n] for n in names()]
