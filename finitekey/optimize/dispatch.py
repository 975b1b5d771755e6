"""Protocol-independent design and block-size entry points (dispatch on the scenario's protocol)."""

from __future__ import annotations

from .. import protocols
from ..errors import InputError

__all__ = ["design", "blocksize", "scenario_from_dict"]


def scenario_from_dict(data, default_protocol: str | None = None):
    """Return ``(protocol, scenario)`` for a scenario mapping, dispatching on ``[protocol] name``."""
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a TOML table with a [protocol] section")
    section = data.get("protocol", {})
    if not isinstance(section, dict):
        raise InputError("protocol", section, "a TOML table [protocol] with name = \"...\"")
    name = section.get("name")
    if name is None:
        if default_protocol is None:
            raise InputError("protocol.name", None, "one of: " + ", ".join(protocols.names()))
        name = default_protocol
    proto = protocols.get(name)
    return proto, proto.parse_scenario(data)


def design(data, statistics=None):
    """Design for a scenario mapping (see the protocol's ``parse_scenario``)."""
    proto, sc = scenario_from_dict(data)
    return proto.design(sc, statistics)


def blocksize(data, target, statistics=None):
    """Smallest block reaching ``target`` (a :class:`~finitekey.protocols.BlockTarget` or its text form)."""
    proto, sc = scenario_from_dict(data)
    t = target if isinstance(target, protocols.BlockTarget) else protocols.BlockTarget.parse(target)
    return proto.blocksize(sc, t, statistics)
