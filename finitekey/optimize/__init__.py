"""Parameter design and block-size solvers.

:mod:`._common` holds protocol-independent numerical helpers (numpy/scipy
only, so protocol modules use them without an import cycle);
:mod:`.dispatch` holds the protocol-independent entry points that dispatch a
scenario mapping on its ``[protocol] name`` through the registry.
"""

from __future__ import annotations

from ..searching import golden_max, maximize_box, smallest_passing

__all__ = ["maximize_box", "golden_max", "smallest_passing"]
