"""Frozen result types shared by every protocol analysis.

* :class:`KeyLengthResult` -- the secret key length of one observed block, with
  its epsilon ledger, the terms of the key-length formula and the estimates
  they rest on;
* :class:`DesignResult` -- the free parameters chosen for a scenario and the
  key length expected with them;
* :class:`BlockTarget` / :class:`BlockSizeResult` -- what a block must reach,
  and the smallest block that reaches it;
* :class:`ReachResult` -- the largest distance with a key (link scenarios);
* :class:`Status` / :class:`NoKeyReason` -- whether a result gives a key, and if
  not, why (the reason the analysis found, plus a free-text detail).  Every
  result type above carries one.

Every type has ``to_dict()`` giving JSON-ready data (the command line's
``--json`` output).  Protocol modules may add optional fields with defaults.
``repr`` is one line (protocol, key length, epsilons, status); ``str`` and
``summary()`` give every field, with the caution.

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
from ..cautions import CAUTION
from ..errors import InputError

__all__ = ["KeyLengthResult", "DesignResult", "BlockTargetKind", "BlockTarget", "BlockSizeResult", "ReachResult",
           "NoKeyReason", "Status", "KEY"]


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


def _scalar(v) -> str:
    if isinstance(v, float):
        return f"{v:.12g}"
    if v is None:
        return "-"
    if isinstance(v, (list, dict)) and not v:
        return "(none)"
    return str(v)


def _lines(value, depth: int) -> list:
    """Indented ``key: value`` lines of JSON-ready data; list items of mappings take one line each."""
    pad = "  " * depth
    out = []
    if isinstance(value, dict):
        for k, v in value.items():
            if isinstance(v, (dict, list)) and v:
                out.append(f"{pad}{k}:")
                out += _lines(v, depth + 1)
            else:
                out.append(f"{pad}{k}: {_scalar(v)}")
    elif isinstance(value, list):
        for v in value:
            if isinstance(v, dict):
                out.append(f"{pad}- " + ", ".join(f"{k}={_scalar(x)}" for k, x in v.items()))
            else:
                out.append(f"{pad}- {_scalar(v)}")
    else:
        out.append(pad + _scalar(value))
    return out


def _summary(result) -> str:
    """The one-line ``repr``, then every field of ``to_dict()`` indented, then the caution."""
    return "\n".join([repr(result)] + _lines(result.to_dict(), 1) + ["", CAUTION])


def _status_short(status) -> str:
    return "key" if status is None or status.key else f"no key: {status.reason.value}"


class NoKeyReason(enum.Enum):
    """Why a result gives no key (the value is the stable JSON text; :attr:`text` the sentence shown)."""

    THRESHOLD_EXCEEDED = "threshold_exceeded"
    PHASE_ERROR_BOUND = "phase_error_bound"
    NO_SINGLE_PHOTON_BOUND = "no_single_photon_bound"
    INCONSISTENT_BLOCK = "inconsistent_block"
    PENALTIES_EXCEED_ENTROPY = "penalties_exceed_entropy"
    BELOW_ONE_BIT = "below_one_bit"
    BLOCK_TOO_SMALL = "block_too_small"
    NO_POSITIVE_DESIGN = "no_positive_design"
    ACCEPTANCE_FAILED = "acceptance_failed"

    @property
    def text(self) -> str:
        return _REASON_TEXT[self]


_REASON_TEXT = {
    NoKeyReason.ACCEPTANCE_FAILED: "the block fails the acceptance test fixed before it (fixed-length protocol: "
                                   "abort)",
    NoKeyReason.THRESHOLD_EXCEEDED: "beyond the threshold: the asymptotic key rate of this channel is zero, so no "
                                    "block size gives a key",
    NoKeyReason.PHASE_ERROR_BOUND: "the phase-error upper bound reaches 1/2 (error rate above the threshold for "
                                   "this block)",
    NoKeyReason.NO_SINGLE_PHOTON_BOUND: "the decoy bounds certify no single-photon detections in one basis",
    NoKeyReason.INCONSISTENT_BLOCK: "block inconsistent with the decoy model (its bounds contradict its own "
                                    "totals)",
    NoKeyReason.PENALTIES_EXCEED_ENTROPY: "error-correction leakage and the verification and hashing penalties "
                                          "exceed the min-entropy",
    NoKeyReason.BELOW_ONE_BIT: "the certified key-length formula is below one bit",
    NoKeyReason.BLOCK_TOO_SMALL: "block too small: the expected counts leave no key or no test bits",
    NoKeyReason.NO_POSITIVE_DESIGN: "no design with a positive key found (within the search limits, or at the "
                                    "fixed parameters given)",
}


@dataclass(frozen=True)
class Status:
    """Whether a result gives a key; if not, the reason and a free-text detail (numbers, terms).

    Attributes
    ----------
    reason : NoKeyReason or None
        ``None`` when there is a key.
    detail : str
        What the analysis found (e.g. which term made the length non-positive); may be empty.
    """

    reason: NoKeyReason | None = None
    detail: str = ""

    @property
    def key(self) -> bool:
        return self.reason is None

    @classmethod
    def no_key(cls, reason: NoKeyReason, detail: str = "") -> "Status":
        if not isinstance(reason, NoKeyReason):
            raise TypeError(f"a no-key status needs a NoKeyReason, got {reason!r}")
        return cls(reason, detail)

    def text(self) -> str:
        """``"key"``, or ``"no key: <reason>"`` with the detail after a semicolon."""
        if self.key:
            return "key" + (f" ({self.detail})" if self.detail else "")
        return f"no key: {self.reason.text}" + (f"; {self.detail}" if self.detail else "")

    def to_dict(self) -> dict:
        return {"key": self.key, "reason": None if self.reason is None else self.reason.value,
                "reason_text": None if self.reason is None else self.reason.text, "detail": self.detail}


#: The status of a result with a key.
KEY = Status()


def _check_status(status: Status, has_key: bool, what: str) -> None:
    if not isinstance(status, Status):
        raise TypeError(f"{what}: status must be a Status, got {status!r}")
    if status.key != has_key:
        raise ValueError(f"{what}: status {status.text()!r} contradicts a key length that is "
                         f"{'positive' if has_key else 'zero'}")


class _Summarised:
    """``summary()`` and ``str``: every field of a result as indented text, with the caution."""

    __slots__ = ()

    def summary(self) -> str:
        """Every field as indented text, with the caution (also what ``str`` gives).

        Returns
        -------
        str
        """
        return _summary(self)

    __str__ = summary


@dataclass(frozen=True)
class KeyLengthResult(_Summarised):
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
        Estimated quantities the terms use (e.g. ``phase_error_rate_upper``).
    formula : str
        LaTeX of the key-length formula.
    references : tuple of str
        Published sources of the analysis.
    settings : dict of str to str
        Choices the analysis made that are not assumptions (e.g. ``{"analysis": "three-intensity"}``).
    status : Status
        Key, or no key with the reason the analysis found.  When not given: key for a positive length,
        else :attr:`NoKeyReason.BELOW_ONE_BIT`.  A status that contradicts the length is refused.
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
    status: Status | None = None
    settings: dict = field(default_factory=dict)

    def __post_init__(self):
        has_key = self.secret_key_length > 0
        if self.status is None:
            object.__setattr__(self, "status", KEY if has_key else Status.no_key(NoKeyReason.BELOW_ONE_BIT))
        _check_status(self.status, has_key, "KeyLengthResult")

    @property
    def eps_total(self) -> float:
        """Sum of every epsilon in the ledger (correctness and secrecy)."""
        return self.ledger.eps_total

    @property
    def eps_sec(self) -> float:
        """Secrecy parameter: the weighted sum of the ledger's secrecy terms."""
        return self.ledger.eps_sec

    @property
    def eps_cor(self) -> float:
        """Correctness parameter: the weighted sum of the ledger's correctness terms."""
        return self.ledger.eps_cor

    def __repr__(self) -> str:
        return (f"KeyLengthResult(protocol={self.protocol!r}, secret_key_length={int(self.secret_key_length)}, "
                f"eps_sec={self.eps_sec:.3g}, eps_cor={self.eps_cor:.3g}, status={_status_short(self.status)!r})")


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
            "status": self.status.to_dict(),
            "settings": dict(self.settings),
        }


@dataclass(frozen=True)
class DesignResult(_Summarised):
    """Free parameters chosen for a scenario and the key they are expected to give.

    Attributes
    ----------
    protocol : str
    parameters : dict
        The free parameters (JSON-ready), e.g. basis bias, test fraction, epsilon split: chosen when there is
        a key; with no key they are only the last point tried (``to_dict`` gives them as
        ``parameters_tried`` and ``parameters`` as null).
    expected : KeyLengthResult
        Key length at the expected counts.
    secret_key_rate_per_signal : float or None
        Secret bits per signal (pulse) sent; None when the number of signals is not known (a detection
        budget without a detection probability).
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
    status : Status
        Key, or no key with the reason.  When not given: key if ``expected`` has one, else
        :attr:`NoKeyReason.NO_POSITIVE_DESIGN` with the expected result's reason as detail.
    notes : tuple of str
        Statements needed to read the design correctly (e.g. how a block designed for a number of key-basis
        detections is closed); shown with the design in every output.
    warnings : tuple of str
        Defaults of the scenario that probably hide a physical effect at this design (e.g. no detector dead
        time at a detection rate above 1 MHz), each naming the field and why; shown as ``warning:`` lines.
    """

    protocol: str
    parameters: dict
    expected: KeyLengthResult
    secret_key_rate_per_signal: float | None
    secret_key_rate_bps: float | None = None
    expected_counts: dict = field(default_factory=dict)
    block_fill_time_s: float | None = None
    scenario: dict = field(default_factory=dict)
    secret_key_rate_per_detection: float | None = None
    asymptotic_rate_per_detection: float | None = None
    diagnostics: dict = field(default_factory=dict)
    status: Status | None = None
    notes: tuple = ()
    warnings: tuple = ()

    def __post_init__(self):
        has_key = self.expected.secret_key_length > 0
        if self.status is None:
            object.__setattr__(self, "status", KEY if has_key else design_no_key(self.expected.status))
        _check_status(self.status, has_key, "DesignResult")

    def __repr__(self) -> str:
        e = self.expected
        rate = self.secret_key_rate_per_signal
        return (f"DesignResult(protocol={self.protocol!r}, secret_key_length={int(e.secret_key_length)}, "
                f"secret_key_rate_per_signal={'-' if rate is None else format(float(rate), '.4g')}, "
                f"eps_sec={e.eps_sec:.3g}, eps_cor={e.eps_cor:.3g}, status={_status_short(self.status)!r})")


    def to_dict(self) -> dict:
        rate = None if self.secret_key_rate_per_signal is None else float(self.secret_key_rate_per_signal)
        out = {
            "protocol": self.protocol,
            "status": self.status.to_dict(),
            "parameters": dict(self.parameters) if self.status.key else None,
            "secret_key_length": int(self.expected.secret_key_length),
            "secret_key_rate_per_signal": rate,
            "secret_key_rate_per_pulse": rate,
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
            "notes": list(self.notes),
            "warnings": list(self.warnings),
        }
        if not self.status.key:
            out["parameters_tried"] = dict(self.parameters)
        return out


def design_no_key(expected_status: Status, reason: NoKeyReason = NoKeyReason.NO_POSITIVE_DESIGN) -> Status:
    """No-key status of a design whose best point tried has ``expected_status``."""
    return Status.no_key(reason, "at the best point tried: " + expected_status.text().removeprefix("no key: "))


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
class BlockSizeResult(_Summarised):
    """The smallest block reaching a target, and the design at that size.

    Attributes
    ----------
    target : BlockTarget
    size : int
        Smallest block size (in ``size_kind`` units) that reaches the target.
    size_kind : str
        ``"detections"``, ``"signals"`` (BB84), ``"pulses"`` or ``"key_detections"`` (decoy-state BB84: the
        expected key-basis detections of the smallest block, which is still closed after a number of pulses).
    design : DesignResult
        The design at that size.
    resolution : int
        The search stops when the bracket is this narrow: ``size - resolution`` was not shown to fail.
    status : Status
        The design's status (a block-size search that finds no size raises instead).
    """

    target: BlockTarget
    size: int
    size_kind: str
    design: DesignResult
    resolution: int = 1
    status: Status | None = None

    def __post_init__(self):
        if self.status is None:
            object.__setattr__(self, "status", self.design.status)
        _check_status(self.status, self.design.expected.secret_key_length > 0, "BlockSizeResult")

    def __repr__(self) -> str:
        e = self.design.expected
        return (f"BlockSizeResult(protocol={self.design.protocol!r}, target={str(self.target)!r}, "
                f"size={int(self.size)}, size_kind={self.size_kind!r}, secret_key_length={int(e.secret_key_length)}, "
                f"eps_sec={e.eps_sec:.3g}, eps_cor={e.eps_cor:.3g}, status={_status_short(self.status)!r})")


    def to_dict(self) -> dict:
        return {"target": self.target.to_dict(), "size": int(self.size), "size_kind": self.size_kind,
                "resolution": int(self.resolution), "status": self.status.to_dict(),
                "design": self.design.to_dict()}


@dataclass(frozen=True)
class ReachResult(_Summarised):
    """The largest distance with a positive certified key, found by a search in distance.

    Attributes
    ----------
    reach_km : float or None
        Largest distance shown to give a key, to within ``tolerance_km``; None when the search found a key
        at every distance up to its limit (the reach lies beyond ``search_limit_km`` and is not known)
        or no key even at 0 km.
    statistics : str
    tolerance_km : float
    search_limit_km : float
        Largest distance the search tries.
    limit_reached : bool
        True when a key exists at ``search_limit_km`` itself.
    status : Status
        Key (at the distance reported, or at the search limit) or no key at 0 km, with the reason.
    at_reach : DesignResult or None
        The design at ``reach_km`` (or at the search limit when ``limit_reached``).
    """

    reach_km: float | None
    statistics: str
    tolerance_km: float
    search_limit_km: float
    status: Status
    limit_reached: bool = False
    at_reach: DesignResult | None = None

    def __post_init__(self):
        if self.limit_reached and self.reach_km is not None:
            raise ValueError("ReachResult: a search that reached its limit has no reach distance")
        if self.status.key != (self.at_reach is not None):
            raise ValueError("ReachResult: the status must match whether a design with a key is attached")

    def __repr__(self) -> str:
        best = self.at_reach
        tail = ("" if best is None else f", protocol={best.protocol!r}, "
                f"secret_key_length_at_reach={int(best.expected.secret_key_length)}, "
                f"eps_sec={best.expected.eps_sec:.3g}, eps_cor={best.expected.eps_cor:.3g}")
        km = "None" if self.reach_km is None else f"{float(self.reach_km):.4g}"
        return (f"ReachResult(reach_km={km}, limit_reached={self.limit_reached}, statistics={self.statistics!r}"
                f"{tail}, status={_status_short(self.status)!r})")


    def to_dict(self) -> dict:
        out = {"reach_km": None if self.reach_km is None else float(self.reach_km), "status": self.status.to_dict(),
               "statistics": self.statistics, "tolerance_km": float(self.tolerance_km),
               "search_limit_km": float(self.search_limit_km), "limit_reached": bool(self.limit_reached)}
        if self.at_reach is not None:
            best = self.at_reach
            p = best.parameters
            out.update({"secret_key_length_at_reach": int(best.expected.secret_key_length),
                        "secret_key_rate_per_pulse_at_reach": float(best.secret_key_rate_per_signal),
                        "intensities_at_reach": list(p["intensities"]),
                        "intensity_probabilities_at_reach": list(p["intensity_probabilities"]),
                        "key_basis_probability_at_reach": float(p["key_basis_probability"])})
        return out
