"""Scenario and block files to parsed protocol objects, dispatching on the protocol they name.

A scenario (TOML) names its protocol in ``[protocol] name``; a block (JSON, JSON Lines or CSV) in its
``"protocol"`` field.  Every error is an :class:`~finitekey.errors.InputError` naming the file or line, the
field and what is allowed, as on the command line.
"""

from __future__ import annotations

from ..errors import InputError
from ..files import read_records, read_toml
from ._registry import get, names

__all__ = ["scenario_from_dict", "block_from_dict", "load_scenario", "load_block", "load_blocks"]


def scenario_from_dict(data, default_protocol: str | None = None):
    """Return ``(protocol, scenario)`` for a scenario mapping, dispatching on ``[protocol] name``.

    Parameters
    ----------
    data : dict
        The parsed TOML mapping.
    default_protocol : str, optional
        Protocol to use when the mapping names none; without it a missing name is an error.

    Returns
    -------
    protocol : object
        The registered protocol object.
    scenario : object
        The protocol's validated scenario.

    Raises
    ------
    InputError
        For a mapping without a usable ``[protocol]`` table, an unknown protocol, or a bad scenario field.
    """
    if not isinstance(data, dict):
        raise InputError("scenario", data, "a TOML table with a [protocol] section")
    section = data.get("protocol", {})
    if not isinstance(section, dict):
        raise InputError("protocol", section, "a TOML table [protocol] with name = \"...\"")
    name = section.get("name")
    if name is None:
        if default_protocol is None:
            raise InputError("protocol.name", None, "one of: " + ", ".join(names()))
        name = default_protocol
    proto = get(name)
    return proto, proto.parse_scenario(data)


def block_from_dict(data):
    """Return ``(protocol, block)`` for one block mapping, dispatching on its ``"protocol"`` field.

    Parameters
    ----------
    data : dict
        One observed block, e.g. ``{"protocol": "bb84", "key_bits": ..., ...}``.

    Returns
    -------
    protocol : object
        The registered protocol object.
    block : object
        The protocol's validated block.

    Raises
    ------
    InputError
        For a non-mapping, a missing or unknown protocol, or a bad block field.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, "a JSON object with a \"protocol\" field")
    if "protocol" not in data:
        raise InputError("protocol", None, "one of: " + ", ".join(names()) + " (missing field)")
    proto = get(data["protocol"])
    return proto, proto.parse_block(data)


def load_scenario(path):
    """Read a scenario file (TOML) and return the parsed scenario of the protocol it names.

    Parameters
    ----------
    path : str or os.PathLike
        A TOML file with a ``[protocol] name = "..."`` table (see the README's scenario tables).

    Returns
    -------
    object
        The protocol's validated scenario (e.g. ``BB84Scenario`` or ``DecoyScenario``); pass it to
        ``finitekey.protocols.get(name).design`` or ``.blocksize``.

    Raises
    ------
    InputError
        Naming the file (missing, unreadable, not TOML) or the field and its allowed values.

    Examples
    --------
    >>> import finitekey
    >>> sc = finitekey.load_scenario("examples/metro_datacentre.toml")  # doctest: +SKIP
    >>> finitekey.protocols.get("decoy-bb84").design(sc)  # doctest: +SKIP
    """
    return scenario_from_dict(read_toml(path))[1]


def _located(line, exc: InputError) -> InputError:
    return exc if line is None else InputError(f"line {line}: {exc.field}", exc.value, exc.allowed)


def load_blocks(path) -> list:
    """Read every block of a block file and return the parsed blocks, in file order.

    Parameters
    ----------
    path : str or os.PathLike
        ``.json`` (one block or a list), ``.jsonl``/``.ndjson`` or ``.csv`` (one block per line).

    Returns
    -------
    list
        The validated blocks (each of the protocol its ``"protocol"`` field names).

    Raises
    ------
    InputError
        Naming the file, the line (for batches) and the field.
    """
    records, _ = read_records(path)
    if not records:
        raise InputError("block", str(path), "a file with at least one block")
    out = []
    for line, data in records:
        try:
            out.append(block_from_dict(data)[1])
        except InputError as exc:
            raise _located(line, exc) from None
    return out


def load_block(path):
    """Read a file holding one block and return the parsed block.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.json`` file with one block object (or any block file with exactly one block).

    Returns
    -------
    object
        The validated block (e.g. ``BB84Block``); pass it to ``finitekey.protocols.get(name).key_length``.

    Raises
    ------
    InputError
        Naming the file or field, or when the file holds more than one block (use :func:`load_blocks`).
    """
    blocks = load_blocks(path)
    if len(blocks) != 1:
        raise InputError("block", str(path), f"a file with exactly one block (it holds {len(blocks)}; "
                                             "use load_blocks for a batch)")
    return blocks[0]
