"""Protocol-independent decoy-state estimation for one or more senders (``finitekey.decoy``).

Given the senders (intensities and their probabilities), certified intervals on the expected counts of
every setting (one intensity index per sender) in the tagged formulation ``E_k = sum_n p_{k|n} s_n``,
optionally the exact total, joint rows and known bounds, the engine returns certified bounds on the
photon-number-resolved counts ``s_n`` (closed forms where they exist, else a linear programme with rigorous
truncation and a weak-duality certificate in ball arithmetic), and a float twin for designs.

Layer: below the protocols (imports errors, compile and its own modules only).  Proof notes:
``proofs_notes/decoy/``.

Public API
----------
Sender, JointRow, settings, tags, bound, bound_float, closed_form_name.
"""

from .closed_forms import (poisson_weights, single_single_lower, single_single_upper, three_intensity,
                           three_intensity_errors, two_intensity, two_intensity_errors,
                           two_intensity_vacuum_upper)
from .estimate import METHODS, SENSES, bound, bound_float, closed_form_name
from .model import ANY, JointRow, Sender, settings
from .tagging import tags

__all__ = ["Sender", "JointRow", "ANY", "settings", "tags", "bound", "bound_float", "closed_form_name",
           "METHODS", "SENSES", "poisson_weights", "three_intensity", "three_intensity_errors", "two_intensity",
           "two_intensity_vacuum_upper", "two_intensity_errors", "single_single_lower", "single_single_upper"]
