"""finitekey: finite-key security parameters for quantum key distribution.

Design aid only: every result holds under the proof assumptions and device
model it states.  Deployed systems need an independent security evaluation
under the applicable standards and certification schemes.

``import finitekey`` loads nothing heavy.  The attributes below are imported
on first use: :func:`load_scenario`, :func:`load_block` and
:func:`load_blocks` (from :mod:`finitekey.protocols`), and the subpackages
``protocols``, ``bounds`` and ``optimize``.
"""

import importlib

__version__ = "0.1.0"

__all__ = ["__version__", "load_scenario", "load_block", "load_blocks", "protocols", "bounds", "optimize"]

#: Public attributes imported on first use: name -> (module, attribute or None for the module itself).
_ON_USE = {
    "load_scenario": ("finitekey.protocols", "load_scenario"),
    "load_block": ("finitekey.protocols", "load_block"),
    "load_blocks": ("finitekey.protocols", "load_blocks"),
    "protocols": ("finitekey.protocols", None),
    "bounds": ("finitekey.bounds", None),
    "optimize": ("finitekey.optimize", None),
}


def __getattr__(name):
    """Import the public attributes of :data:`_ON_USE` when first used (PEP 562)."""
    try:
        module, attribute = _ON_USE[name]
    except KeyError:
        raise AttributeError(f"module 'finitekey' has no attribute {name!r}") from None
    obj = importlib.import_module(module)
    return obj if attribute is None else getattr(obj, attribute)


def __dir__():
    return sorted(set(globals()) | set(_ON_USE))
