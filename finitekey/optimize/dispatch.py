"""Protocol-independent design and block-size entry points (dispatch on the scenario's protocol)."""

from __future__ import annotations

from .. import protocols
from ..protocols import scenario_from_dict  # defined with the registry; re-exported for existing callers

__all__ = ["design", "blocksize", "scenario_from_dict"]


def design(data, statistics=None):
    """Design for a scenario mapping, with the protocol its ``[protocol] name`` selects.

    Parameters
    ----------
    data : dict
        Scenario mapping (the parsed TOML; see the protocol's ``parse_scenario``).
    statistics : str, optional
        Statistics method (default: the scenario's, else the protocol's).

    Returns
    -------
    DesignResult
    """
    proto, sc = scenario_from_dict(data)
    return proto.design(sc, statistics)


def blocksize(data, target, statistics=None, unit=None):
    """Smallest block reaching ``target`` for a scenario mapping.

    Parameters
    ----------
    data : dict
        Scenario mapping (the parsed TOML).
    target : BlockTarget or str
        A :class:`~finitekey.protocols.BlockTarget` or its text form (``"positive"``, ``"bits=L"``,
        ``"fraction=F"``).
    statistics : str, optional
    unit : str, optional
        The unit of the answer (decoy-bb84: ``"pulses"`` or ``"key_detections"``; BB84: the unit of its
        budget); default: the unit the scenario gives its block size in.

    Returns
    -------
    BlockSizeResult
    """
    proto, sc = scenario_from_dict(data)
    t = target if isinstance(target, protocols.BlockTarget) else protocols.BlockTarget.parse(target)
    return proto.blocksize(sc, t, statistics, unit=unit)
