"""BB84 scenarios: the fields declared once (:data:`SCENARIO_SPECS`), :class:`BB84Scenario`,
:func:`parse_scenario`, the built-in scenario, :func:`with_field`, the expected counts of a block and the
asymptotic rate.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ...domains import DETECTION_PROBABILITY, POSITIVE_COUNT, PROBABILITY, RATE_HZ, Domain
from ...entropy import binary_entropy
from ...errors import InputError
from ...reconciliation import (EFFICIENCY_DOMAIN, QBER_DOMAIN, FixedEfficiency, LeakageModel,
                               SecondOrderLeakage)
from .._fields import (SECURITY_SCHEMA_RULE, block_security_specs, read_schema_sections, security_fields_with,
                      security_targets)
from .._spec import FieldSpec, by_name, sections_of
from .block import OVERLAP_DOMAIN_BB84, PROTOCOL_NAME, Statistics

__all__ = ["SCENARIO_SPECS", "SCENARIO_SCHEMA", "BB84Scenario", "parse_scenario", "DEFAULT_SCENARIO",
           "scenario_fields", "with_field", "asymptotic_rate", "expected_counts"]

_P_X_DOMAIN = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_SHARE_DOMAIN = Domain(0.0, 1.0, lower_open=True, upper_open=True)
_FRAME_DOMAIN = Domain(0.0, 0.5, lower_open=True, upper_open=True)

#: Every scenario field, declared once: the parser validates with these, ``finitekey fields bb84`` lists them and
#: ``finitekey schema bb84-scenario`` is generated from them.
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), default=PROTOCOL_NAME),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs"),
    FieldSpec("channel.qber", "number", "expected quantum bit error rate", domain=QBER_DOMAIN, required="yes"),
    FieldSpec("budget.detections", "number", "detections per block, both bases, before sifting", unit="detections",
              domain=POSITIVE_COUNT, required="one of detections, signals"),
    FieldSpec("budget.signals", "number", "signals sent per block", unit="signals", domain=POSITIVE_COUNT,
              required="one of detections, signals"),
    FieldSpec("budget.detection_probability", "number", "probability that a signal is detected",
              domain=DETECTION_PROBABILITY, required="with signals"),
    FieldSpec("budget.signal_rate_hz", "number", "signals sent per second", unit="Hz", domain=RATE_HZ),
    *block_security_specs("security."),
    FieldSpec("reconciliation.model", "choice", "leakage model of error correction",
              choices=("efficiency", "second_order"), default="efficiency"),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n h(Q))",
              domain=EFFICIENCY_DOMAIN, default=1.1),
    FieldSpec("reconciliation.frame_error_rate", "number", "frame error rate of the second-order model",
              domain=_FRAME_DOMAIN, default=0.01),
    FieldSpec("analysis.statistics", "choice", "tail bound of the phase-error estimate",
              choices=tuple(m.value for m in Statistics), default="exact"),
    FieldSpec("analysis.overlap", "number", "maximal overlap c of the two measurements", domain=OVERLAP_DOMAIN_BB84,
              default=0.5),
    FieldSpec("design.p_x", "number", "fixed key-basis probability (default: optimised)", domain=_P_X_DOMAIN),
    FieldSpec("design.optimise_split", "bool", "optimise the epsilon split", default=True),
    FieldSpec("design.smoothing_share", "number", "share of eps_sec for smoothing when the split is not optimised",
              domain=_SHARE_DOMAIN, default=0.5),
)
#: section -> field -> its declaration (the order of the sections and fields above).
SCENARIO_SCHEMA = {sec: {k: by_name(SCENARIO_SPECS)[f"{sec}.{k}"] for k in keys}
                   for sec, keys in sections_of(SCENARIO_SPECS).items()}
#: Rules across scenario fields, for the JSON Schema (the parser checks them in code below).
_SCENARIO_SCHEMA_RULES = {
    "": {"required": ["channel", "budget", "security"]},
    "budget": {"oneOf": [{"required": ["detections"], "not": {"required": ["signals"]}},
                         {"required": ["signals", "detection_probability"], "not": {"required": ["detections"]}}]},
    "security": SECURITY_SCHEMA_RULE,
}


@dataclass(frozen=True)
class BB84Scenario:
    """A validated BB84 design scenario; ``data`` is the normalised nested mapping (defaults filled in)."""

    data: dict
    qber: float
    detections: int | None
    signals: int | None
    detection_probability: float | None
    signal_rate_hz: float | None
    eps_sec: float
    eps_cor: float
    leakage: LeakageModel
    statistics: Statistics
    overlap: float
    p_x: float | None
    optimise_split: bool
    smoothing_share: float

    @property
    def detection_count(self) -> float:
        """Detections per block (float; signals x detection probability for a signal budget)."""
        if self.detections is not None:
            return float(self.detections)
        return float(self.signals) * float(self.detection_probability)

    @property
    def size_kind(self) -> str:
        return "detections" if self.detections is not None else "signals"


def parse_scenario(data) -> BB84Scenario:
    """Validate a BB84 scenario mapping (from TOML); errors name ``section.field``.

    Sections: ``[protocol]`` (name, label), ``[channel]`` (qber), ``[budget]`` (detections, or signals with
    detection_probability; optional signal_rate_hz; detections are all detections of the block, both bases,
    before sifting, read as the expected detections of a block closed after a fixed number of signals),
    ``[security]`` (eps_sec and eps_cor, or eps_total with optional eps_cor_share), ``[reconciliation]``
    (model, efficiency, frame_error_rate), ``[analysis]`` (statistics, overlap), ``[design]`` (p_x to fix the
    bias, optimise_split, smoothing_share).
    """
    norm = read_schema_sections(data, SCENARIO_SCHEMA)
    if "qber" not in norm["channel"]:
        raise InputError("channel.qber", None, f"the expected QBER, {QBER_DOMAIN.describe()} (missing field)")
    b = norm["budget"]
    if ("detections" in b) == ("signals" in b):
        raise InputError("budget.detections", b.get("detections"),
                         "exactly one of budget.detections or budget.signals (with budget.detection_probability)")
    if "signals" in b and "detection_probability" not in b:
        raise InputError("budget.detection_probability", None, f"{PROBABILITY.describe()} (required with "
                                                               "budget.signals)")
    if "detections" in b and "signal_rate_hz" in b and "detection_probability" not in b:
        raise InputError("budget.signal_rate_hz", b["signal_rate_hz"],
                         "absent with budget.detections unless budget.detection_probability is also given "
                         "(signals per block = detections / detection_probability; without it there is no "
                         "rate per second, fill time or rate per signal)")
    eps_sec, eps_cor = security_targets(norm["security"], "security.")
    r = norm["reconciliation"]
    leakage = (FixedEfficiency(r["efficiency"]) if r["model"] == "efficiency"
               else SecondOrderLeakage(r["frame_error_rate"], r["efficiency"]))
    a = norm["analysis"]
    d = norm["design"]
    return BB84Scenario(norm, norm["channel"]["qber"], b.get("detections"), b.get("signals"),
                        b.get("detection_probability"), b.get("signal_rate_hz"), eps_sec, eps_cor, leakage,
                        Statistics.parse(a["statistics"], "analysis.statistics"), a["overlap"], d.get("p_x"),
                        d["optimise_split"], d["smoothing_share"])


#: Built-in scenario: a fictional metropolitan fibre link of our own ("demo link"), not any real system.
DEFAULT_SCENARIO = {
    "protocol": {"name": PROTOCOL_NAME, "label": "demo link (fictional): 1 GHz qubit source, 2% QBER"},
    "channel": {"qber": 0.02},
    "budget": {"signals": 10_000_000_000, "detection_probability": 1e-3, "signal_rate_hz": 1e9},
    "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
    "reconciliation": {"model": "efficiency", "efficiency": 1.1},
    "analysis": {"statistics": "exact", "overlap": 0.5},
}


def scenario_fields() -> list:
    """Dotted names of every scenario field."""
    return [f"{s}.{f}" for s, fields in SCENARIO_SCHEMA.items() for f in fields]


def with_field(scenario: BB84Scenario, dotted_name: str, value) -> BB84Scenario:
    """Copy of ``scenario`` with one field replaced and the whole scenario re-validated."""
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of: " + ", ".join(scenario_fields()))
    section, name = dotted_name.split(".", 1)
    data = {s: dict(v) for s, v in scenario.data.items()}
    if section == "security":
        data["security"] = security_fields_with(data["security"], scenario.eps_sec, scenario.eps_cor, name, value)
    else:
        data[section][name] = value
    if section == "budget" and name in ("detections", "signals"):
        data["budget"].pop("signals" if name == "detections" else "detections", None)
    return parse_scenario(data)


def asymptotic_rate(scenario: BB84Scenario) -> float:
    """Key per detection for an infinite block: log2(1/c) - h(Q) - f h(Q) (p_X -> 1).

    References
    ----------
    .. [1] P. W. Shor and J. Preskill, Phys. Rev. Lett. 85, 441 (2000) (f = 1, c = 1/2: 1 - 2 h(Q)).
    """
    q = scenario.qber
    f = scenario.leakage.efficiency
    return math.log2(1 / scenario.overlap) - (1 + f) * float(binary_entropy(q))


def expected_counts(N: float, p_x: float, q: float) -> tuple:
    """Key bits, test bits and test errors expected of ``N`` detections (rounded down; errors rounded up).

    Parameters
    ----------
    N : float
        Detections of the block, both bases, before sifting.
    p_x : float
        Probability of basis X on each side.
    q : float
        Expected QBER.

    Returns
    -------
    (int, int, int)
        ``floor(N p_x^2)``, ``floor(N (1 - p_x)^2)`` and ``ceil(q k)`` (less a relative 1e-9, so that a product
        that is a whole number up to rounding is not raised by one), at most ``k``.
    """
    n = int(math.floor(N * p_x * p_x))
    k = int(math.floor(N * (1 - p_x) ** 2))
    qk = q * k
    e = min(k, int(math.ceil(qk - 1e-9 * max(1.0, qk))))
    return n, k, max(e, 0)

