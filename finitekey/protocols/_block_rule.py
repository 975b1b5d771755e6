"""How a block was closed: the block field ``closed_by``, shared by the protocols.

The sampling bounds behind every analysis here treat the test rounds as a uniformly random subset of the
sifted rounds, given their numbers.  That holds when the block is a number of rounds (signals, pulses) fixed
before it starts, each round's bases (and intensity) are chosen independently with fixed probabilities,
and the choices are announced only after the block's quantum phase.  It fails when the block is closed as
soon as a key quota and a test quota are filled: which rounds end up in the block then depends on the basis
labels and on their order, and an adversary who attacks the rounds likely to be kept as key is not seen by
the test (the iterative-sifting flaw of Pfister et al. 2016).  See proofs_notes/protocols/bb84.md, section
"The block rule".

References
----------
.. [1] C. Pfister, N. Lütkenhaus, S. Wehner, P. J. Coles, "Sifting attacks in finite-size quantum key
   distribution", New J. Phys. 18, 053001 (2016), arXiv:1506.07502.
.. [2] K. Tamaki, H.-K. Lo, A. Mizutani, G. Kato, C. C. W. Lim, K. Azuma, M. Curty, "Security of
   quantum key distribution with iterative sifting", Quantum Sci. Technol. 3, 014002 (2018),
   arXiv:1610.06499.
"""

from __future__ import annotations

import enum

from ..errors import InputError

__all__ = ["BlockClosure", "parse_closure", "QUOTA_REFERENCE"]

QUOTA_REFERENCE = ("C. Pfister, N. Lütkenhaus, S. Wehner, P. J. Coles, New J. Phys. 18, 053001 (2016), "
                   "arXiv:1506.07502")


class BlockClosure(enum.Enum):
    """How a block was closed (block field ``closed_by``)."""

    #: After a number of rounds (signals or pulses) fixed before the block: the rule the analyses need.
    ROUNDS = "rounds"
    #: As soon as the key and test counts reached quotas: refused, the sampling bounds do not hold for it.
    QUOTA = "quota"


def parse_closure(data: dict, unit: str = "rounds") -> BlockClosure:
    """Read the block field ``closed_by`` (default ``"rounds"`` when absent or null); refuse ``"quota"``.

    Parameters
    ----------
    data : dict
        The block mapping.
    unit : str
        What a round is called for this protocol (``"rounds"``, ``"pulses"``), used in the message.

    Returns
    -------
    BlockClosure
        Always :attr:`BlockClosure.ROUNDS` (the only closure the analyses cover).

    Raises
    ------
    InputError
        For ``"quota"`` (with the reason and what to do instead) and for any other value.
    """
    value = data.get("closed_by")
    if value is None:  # absent or null: not declared, the default (stated in every result's assumptions)
        return BlockClosure.ROUNDS
    if value == BlockClosure.ROUNDS.value:
        return BlockClosure.ROUNDS
    if value == BlockClosure.QUOTA.value:
        raise InputError(
            "closed_by", value,
            f"'rounds': a block closed when key and test quotas fill is not analysed (its test bits are not a "
            f"uniformly random sample of the sifted bits, so the phase-error bound can fail; Pfister et al. "
            f"2016); close each block after a number of {unit} fixed in advance, bases announced after the "
            f"block, and give closed_by 'rounds'")
    raise InputError("closed_by", value, "'rounds' (a number of " + unit + " fixed before the block; "
                     "'quota' is refused)")
