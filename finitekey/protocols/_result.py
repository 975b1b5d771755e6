"""Frozen result types shared by every protocol analysis.

* :class:`KeyLengthResult` -- the secret key length of one observed block, with
  its epsilon ledger, the terms of the key-length formula and the estimates
  they rest on;
* :class:`DesignResult` -- the free parameters chosen for a scenario and the
  key length expected with them;
* :class:`BlockTarget` / :class:`BlockSizeResult` -- what a block must reach,
  and the smallest block that reaches it.

Every type has ``to_dict()`` giving JSON-ready data (the command line's
``--json`` output).  Protocol modules may add optional fields with defaults.

References
----------
.. [1] C. Portmann and R. Renner, "Cryptographic security of quantum key
   distribution", arXiv:1409.3525 (2014) -- why the ledger's terms add.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass, field

from ..budget import Ledger
from ..errors import InputError

__all__ = ["KeyLengthResult", "DesignResult", "BlockTargetKind", "BlockTarget", "BlockSizeResult"]


def _finite(d: dict) -> dict:
    """Plain-float copy of a mapping of numbers (ints stay ints)."""
    out = {}
    for k, v in d.items():
        if isinstance(v, bool) or v is None or isinstance(v, (str, list, dict, tuple)):
            out[k] = list(v) if isinstance(v, tuple) else v
        elif isinstance(v, int):
            out[k] = v
        else:
            out[k] = float(v)
    return out


@dataclass(frozen=True)
class KeyLengthResult:
    """Secret key length of one block and everything it rests on.

    Attributes
    ----------
    protocol : str
        Registry name of the protocol.
    secret_key_length : int
        Bits of secret key that may be extracted; rounded down from a
        certified lower bound of the key-length formula, 0 if it is negative.
    ledger : Ledger
        Every epsilon term spent, with weights.
    statistics : str
        The statistics method used for parameter estimation.
    assumptions : tuple of str
        Assumptions under which the length holds.
    terms : dict of str to float
        Each term of the key-length formula, in bits.
    estimates : dict of str to float
        Estimated quantities the terms use (e.g. ``phase_error_upper``).
    formula : str
        LaTeX of the key-length formula.
    references : tuple of str
        Published sources of the analysis.
    """

    protocol: str
    secret_key_length: int
    ledger: Ledger
    statistics: str
    assumptions: tuple = ()
    terms: dict = field(default_factory=dict)
    estimates: dict = field(default_factory=dict)
    formula: str = ""
    references: tuple = ()

    @property
    def eps_total(self) -> float:
        return self.ledger.eps_total

    @property
    def eps_sec(self) -> float:
        return self.ledger.eps_sec

    @property
    def eps_cor(self) -> float:
        return self.ledger.eps_cor

    def to_dict(self) -> dict:
        """JSON-ready dictionary (see the protocol interface)."""
        return {
            "protocol": self.protocol,
            "secret_key_length": int(self.secret_key_length),
            "eps_total": self.ledger.eps_total,
            "eps_sec": self.ledger.eps_sec,
            "eps_cor": self.ledger.eps_cor,
            "ledger": self.ledger.as_list(),
            "statistics": self.statistics,
            "assumptions": list(self.assumptions),
            "terms": _finite(self.terms),
            "estimates": _finite(self.estimates),
            "formula": self.formula,
            "references": list(self.references),
        }


@dataclass(frozen=True)
class DesignResult:
    """Free parameters chosen for a scenario and the key they are expected to give.

    Attributes
    ----------
    protocol : str
    parameters : dict
        The chosen free parameters (JSON-ready), e.g. basis bias, test fraction, epsilon split.
    expected : KeyLengthResult
        Key length at the expected counts.
    secret_key_rate_per_signal : float
        Secret bits per signal (pulse) sent.
    secret_key_rate_bps : float or None
        Secret bits per second, when the scenario gives a signal rate.
    expected_counts : dict
        The expected counts the key length was computed from.
    block_fill_time_s : float or None
        Time to collect one block, when the scenario gives a signal rate.
    scenario : dict
        Echo of the validated scenario.
    diagnostics : dict
        Optimiser facts that are not free parameters (e.g. the float objective it maximised), for
        checking the optimiser; never used for a key length.
    """

    protocol: str
    parameters: dict
    expected: KeyLengthResult
    secret_key_rate_per_signal: float
    secret_key_rate_bps: float | None = None
    expected_counts: dict = field(default_factory=dict)
    block_fill_time_s: float | None = None
    scenario: dict = field(default_factory=dict)
    secret_key_rate_per_detection: float | None = None
    asymptotic_rate_per_detection: float | None = None
    diagnostics: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {
            "protocol": self.protocol,
            "parameters": dict(self.parameters),
            "secret_key_length": int(self.expected.secret_key_length),
            "secret_key_rate_per_signal": float(self.secret_key_rate_per_signal),
            "secret_key_rate_per_pulse": float(self.secret_key_rate_per_signal),
            "secret_key_rate_bps": None if self.secret_key_rate_bps is None else float(self.secret_key_rate_bps),
            "expected_counts": _finite(self.expected_counts),
            "block_fill_time_s": None if self.block_fill_time_s is None else float(self.block_fill_time_s),
            "secret_key_rate_per_detection": (None if self.secret_key_rate_per_detection is None
                                              else float(self.secret_key_rate_per_detection)),
            "asymptotic_rate_per_detection": (None if self.asymptotic_rate_per_detection is None
                                              else float(self.asymptotic_rate_per_detection)),
            "scenario": self.scenario,
            "expected": self.expected.to_dict(),
            "diagnostics": _finite(self.diagnostics),
        }


class BlockTargetKind(enum.Enum):
    """What a block-size search must reach."""

    POSITIVE_KEY = "positive"
    KEY_BITS = "bits"
    RATE_FRACTION = "fraction"


_FORMS = "'positive', 'bits=N' (or 'bits:N', N a positive integer) or 'fraction=F' (F in (0, 1))"


@dataclass(frozen=True)
class BlockTarget:
    """A block-size target: any positive key, at least ``value`` key bits, or a fraction of the asymptotic rate."""

    kind: BlockTargetKind
    value: float = 0.0

    @classmethod
    def parse(cls, text) -> "BlockTarget":
        """Parse ``"positive"``, ``"bits=N"``/``"bits:N"`` or ``"fraction=F"``.

        Raises
        ------
        InputError
            For anything else, listing the accepted forms.
        """
        if not isinstance(text, str):
            raise InputError("target", text, _FORMS)
        t = text.strip().lower()
        if t == "positive":
            return cls(BlockTargetKind.POSITIVE_KEY, 0.0)
        for sep in ("=", ":"):
            if sep in t:
                key, _, val = t.partition(sep)
                key = key.strip()
                val = val.strip()
                break
        else:
            raise InputError("target", text, _FORMS)
        try:
            x = float(val)
        except ValueError:
            raise InputError("target", text, _FORMS) from None
        if key == "bits":
            if not (math.isfinite(x) and x >= 1 and x == math.floor(x)):
                raise InputError("target", text, _FORMS)
            return cls(BlockTargetKind.KEY_BITS, float(int(x)))
        if key == "fraction":
            if not (0.0 < x < 1.0):
                raise InputError("target", text, _FORMS)
            return cls(BlockTargetKind.RATE_FRACTION, x)
        raise InputError("target", text, _FORMS)

    def __str__(self) -> str:
        if self.kind is BlockTargetKind.POSITIVE_KEY:
            return "positive"
        if self.kind is BlockTargetKind.KEY_BITS:
            return f"bits={int(self.value)}"
        return f"fraction={self.value:g}"

    def to_dict(self) -> dict:
        return {"kind": self.kind.value, "value": self.value, "text": str(self)}


@dataclass(frozen=True)
class BlockSizeResult:
    """The smallest block reaching a target, and the design at that size.

    Attributes
    ----------
    target : BlockTarget
    size : int
        Smallest block size (in ``size_kind`` units) that reaches the target.
    size_kind : str
        ``"detections"``, ``"signals"`` or ``"pulses"``.
    design : DesignResult
        The design at that size.
    resolution : int
        The search stops when the bracket is this narrow: ``size - resolution`` was not shown to fail.
    """

    target: BlockTarget
    size: int
    size_kind: str
    design: DesignResult
    resolution: int = 1

    def to_dict(self) -> dict:
        return {"target": self.target.to_dict(), "size": int(self.size), "size_kind": self.size_kind,
                "resolution": int(self.resolution), "design": self.design.to_dict()}
