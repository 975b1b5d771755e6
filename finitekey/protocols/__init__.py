"""Protocol analyses: one module per protocol, each registering one protocol object.

A protocol object turns an observed block into a certified secret key length
(:class:`~finitekey.protocols._result.KeyLengthResult`), designs free
parameters for a scenario and solves for block sizes.  The modules are imported
here explicitly, each on its own line, so that importing this package registers
every protocol.
"""

from __future__ import annotations

from ._loading import block_from_dict, load_block, load_blocks, load_scenario, scenario_from_dict
from ._registry import all_protocols, get, names, register
from ._result import (KEY, BlockSizeResult, BlockTarget, BlockTargetKind, DesignResult, KeyLengthResult,
                      NoKeyReason, ReachResult, Status)

__all__ = ["register", "get", "names", "all_protocols", "KeyLengthResult", "DesignResult", "BlockTarget",
           "BlockTargetKind", "BlockSizeResult", "ReachResult", "NoKeyReason", "Status", "KEY", "DEFAULT_PROTOCOL",
           "load_scenario", "load_block", "load_blocks", "scenario_from_dict", "block_from_dict"]

#: Protocol whose default scenario ``finitekey design`` uses when no file is given.
DEFAULT_PROTOCOL = "decoy-bb84"

from . import bb84  # noqa: E402,F401  (each import registers its protocol)
from . import decoy_bb84  # noqa: E402,F401
from . import tf_sns  # noqa: E402,F401
from . import described  # noqa: E402,F401
from . import mdi_bb84  # noqa: E402,F401
