"""Protocol-independent design entry points.

:mod:`.dispatch` holds the entry points that dispatch a scenario mapping on its
``[protocol] name`` through the registry.  Each protocol's own design (free
parameters, block size, reach) lives in its package,
``finitekey/protocols/NAME/design.py``; the generic searches it uses are in
:mod:`finitekey.searching` (numpy/scipy only), re-exported here.
"""

from __future__ import annotations

from ..searching import golden_max, maximize_box, smallest_passing

__all__ = ["maximize_box", "golden_max", "smallest_passing"]
