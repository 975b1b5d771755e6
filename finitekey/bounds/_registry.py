"""The registry itself, kept apart so that bound modules can import it without a cycle."""

from __future__ import annotations

from ..errors import InputError
from ._base import Bound

_REGISTRY: dict[str, Bound] = {}
def register(bound):
    """Register a bound instance (or a Bound subclass, which is instantiated) under its name.

    Usable as a decorator on a class or as a function on an instance; returns its argument.
    """
    inst = bound() if isinstance(bound, type) else bound
    if not isinstance(inst, Bound):
        raise TypeError(f"only Bound instances can be registered, got {inst!r}")
    if inst.name in _REGISTRY:
        raise ValueError(f"a bound named {inst.name!r} is registered already")
    _REGISTRY[inst.name] = inst
    return bound


def get(name: str) -> Bound:
    """Return the registered bound called ``name``."""
    try:
        return _REGISTRY[name]
    except KeyError:
        raise InputError("bound", name, "one of: " + ", ".join(sorted(_REGISTRY))) from None


def names() -> list[str]:
    """Names of all registered bounds, sorted."""
    return sorted(_REGISTRY)


def all_bounds() -> list[Bound]:
    return [_REGISTRY[n] for n in names()]
