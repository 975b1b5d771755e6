"""Decoy-state BB84 scenarios: the link and device fields declared once (:data:`SCENARIO_SPECS`),
:class:`DecoyScenario`, :func:`parse_scenario`, the built-in scenario, :func:`with_field`, the warnings about
defaults (:data:`DEFAULT_WARNINGS`) and the asymptotic rates of the link (:func:`gllp_rate`,
:func:`optimal_gllp_rate`).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from ...channel import FIELD_DOMAINS, Detector, Link, LinkModel, Source, check_intensity_list
from ...domains import PROBABILITY, Domain
from ...errors import InputError
from .. import _phase_error as PE
from .._fields import (SECURITY_SCHEMA_RULE, block_security_specs, check_sections, one_of, read_label,
                      security_fields_with, security_targets)
from .._spec import DefaultWarning, FieldSpec, by_name, sections_of
from .block import PROTOCOL_NAME, _probabilities

__all__ = ["gllp_rate", "optimal_gllp_rate", "BLOCK_UNITS", "SCENARIO_SPECS", "DEFAULT_WARNINGS", "default_warnings",
           "DecoyScenario", "parse_scenario", "default_scenario", "scenario_fields", "with_field"]

# ---------------------------------------------------------------------------------------------------------
# asymptotic rates
# ---------------------------------------------------------------------------------------------------------
def gllp_rate(model: LinkModel, mu, ec_efficiency: float, sifting: float = 0.5):
    """Asymptotic rate per pulse with infinitely many decoys (exact single-photon yield and error).

    ``R = sifting * [Q1 (1 - h(e1)) - f Q_mu h(E_mu)]`` with ``Q1 = Y1 mu e^{-mu}`` (GLLP with the decoy
    method, Lo-Ma-Chen 2005, Ma-Qi-Zhao-Lo 2005), clipped at 0.  Vectorised in ``mu``.

    Parameters
    ----------
    model : LinkModel
    mu : float or array_like
        Signal intensity.
    ec_efficiency : float
    sifting : float

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005).
    """
    mu = np.asarray(mu, dtype=float)
    q = model.click_probability(mu)
    eq = model.error_probability(mu) / q
    y1 = float(model.photon_yield(1))
    e1 = float(model.photon_error_yield(1)) / y1
    q1 = y1 * mu * np.exp(-mu)
    r = sifting * (q1 * (1 - PE.binary_entropy_float(e1)) - ec_efficiency * q * PE.binary_entropy_float(eq))
    return np.maximum(r, 0.0)


def optimal_gllp_rate(model: LinkModel, ec_efficiency: float, sifting: float = 0.5) -> tuple:
    """``(rate, mu)`` maximising :func:`gllp_rate` over the signal intensity in (0, 2).

    Parameters
    ----------
    model : LinkModel
    ec_efficiency : float
    sifting : float

    Returns
    -------
    tuple of float
        ``(rate, mu)``; ``(0.0, mu)`` when no intensity gives a positive rate.
    """
    grid = np.linspace(0.01, 2.0, 200)
    vals = gllp_rate(model, grid, ec_efficiency, sifting)
    i = int(np.argmax(vals))
    if vals[i] <= 0:
        return 0.0, float(grid[i])
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    from scipy import optimize as _opt  # here, not at module top: it adds about 0.2 s to every start-up

    res = _opt.minimize_scalar(lambda m: -float(gllp_rate(model, m, ec_efficiency, sifting)), bounds=(lo, hi),
                               method="bounded", options={"xatol": 1e-7})
    return float(-res.fun), float(res.x)


# ---------------------------------------------------------------------------------------------------------
# scenario
# ---------------------------------------------------------------------------------------------------------
_EC_EFF = Domain(1.0, 10.0)
_PULSES = Domain(1, 1e15, integer=True)   # a count; must stay below 2**50 for the exact tails
#: Key-basis detections per block (a design target; the block is still closed after a number of pulses).
_KEY_DETECTIONS = Domain(1, 1e15, integer=True)
#: The units a decoy block size is given in (scenario field names; ``size_kind`` of a block-size result).
BLOCK_UNITS = ("pulses", "key_detections")
_COUNT_K = Domain(2, 8, integer=True)


def _device(name: str, description: str, unit: str = "", default=None, required: str = "no") -> FieldSpec:
    """A device field, with the domain :class:`~finitekey.channel.Link`/``Detector``/``Source`` check it by."""
    return FieldSpec(name, "number", description, unit=unit, domain=FIELD_DOMAINS[name], default=default,
                     required=required)


#: Every scenario field, declared once: the parser validates with these, ``finitekey fields decoy-bb84`` lists
#: them and ``finitekey schema decoy-bb84-scenario`` is generated from them.
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), required="yes"),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs",
              schema={"type": ["string", "integer"]}),
    FieldSpec("protocol.intensity_count", "number", "number of intensities (signal and decoys)", domain=_COUNT_K,
              default=3),
    FieldSpec("protocol.intensities", "list", "fixed mean photon numbers, strictly descending (default: optimised)",
              unit="photons", schema={"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2,
                                      "maxItems": 8}),
    FieldSpec("protocol.intensity_probabilities", "list", "fixed probability of each intensity, summing to 1 "
              "(default: optimised)", schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0,
                                                                          "exclusiveMaximum": 1},
                                              "minItems": 2, "maxItems": 8}),
    FieldSpec("protocol.key_basis_probability", "number", "fixed key-basis probability q_X (default: optimised)",
              domain=PROBABILITY),
    FieldSpec("protocol.weakest_intensity", "number", "mean photon number of the weakest (fixed) intensity",
              unit="photons", domain=Domain(0.0, 1.0), default=2e-4),
    _device("link.distance_km", "fibre length", "km", required="yes"),
    _device("link.fiber_loss_db_per_km", "fibre attenuation", "dB/km", required="yes"),
    _device("link.extra_loss_db", "loss independent of length (connectors, receiver optics)", "dB", 0.0),
    _device("detector.efficiency", "detection efficiency, including Bob's optics", required="yes"),
    _device("detector.dark_count_probability", "dark count probability per detector per gate", "per gate",
            required="yes"),
    _device("detector.afterpulse_probability", "probability that a click is followed by an afterpulse", "per click",
            0.0),
    _device("detector.misalignment_error", "probability that a photon reaches the wrong detector", "", 0.0),
    _device("detector.dead_time_s", "dead time after each click", "s", 0.0),
    _device("source.repetition_rate_hz", "pulses sent per second (for rates per second)", "Hz"),
    FieldSpec("block.pulses", "number", "pulses sent per block", unit="pulses", domain=_PULSES,
              required="one of pulses, key_detections"),
    FieldSpec("block.key_detections", "number", "expected key-basis detections per block", unit="detections",
              domain=_KEY_DETECTIONS, required="one of pulses, key_detections"),
    *block_security_specs("security."),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n_X h(E_X))",
              domain=_EC_EFF, required="yes"),
)
_SCENARIO_SPEC = by_name(SCENARIO_SPECS)
_SCENARIO_SECTIONS = sections_of(SCENARIO_SPECS)
#: Sections a scenario must have, with their required fields (alternatives are checked by one_of and
#: security_targets).
_REQUIRED = {sec: tuple(k for k in keys if _SCENARIO_SPEC[f"{sec}.{k}"].required == "yes")
             for sec, keys in _SCENARIO_SECTIONS.items() if sec != "source"}
_SCENARIO_SCHEMA_RULES = {
    "": {"required": list(_REQUIRED)},
    "block": {"oneOf": [{"required": ["pulses"], "not": {"required": ["key_detections"]}},
                        {"required": ["key_detections"], "not": {"required": ["pulses"]}}]},
    "security": SECURITY_SCHEMA_RULE,
}
#: Fields whose default leaves out an effect a detector probably has at a high detection rate.  The rate at
#: which 1 MHz becomes noticeable is common practice, no source: gated InGaAs detectors have dead times of
#: about 10 ns to 10 us and afterpulse probabilities of about 1e-3 to 1e-1 (from memory), so that above about a
#: million clicks per second both change the counts.
DEFAULT_WARNINGS = (
    DefaultWarning("detector.dead_time_s", 0.0, "detection_rate_hz", 1e6, "detections per second",
                   "a dead time of 10 ns to 10 us, usual for gated detectors, would remove a noticeable share "
                   "of these clicks; give detector.dead_time_s"),
    DefaultWarning("detector.afterpulse_probability", 0.0, "detection_rate_hz", 1e6, "detections per second",
                   "afterpulses, usual for gated detectors at this rate, would add errors; give "
                   "detector.afterpulse_probability"),
)


def default_warnings(scenario: "DecoyScenario", design) -> tuple:
    """The :data:`DEFAULT_WARNINGS` that fire for ``scenario`` at ``design`` (a DesignResult).

    Returns
    -------
    tuple of str
        One text per rule that fires, naming the field and why.
    """
    counts = design.expected_counts
    fill = design.block_fill_time_s
    figures = {}
    if fill and fill > 0 and "key_basis.detections" in counts:
        total = math.fsum(counts["key_basis.detections"]) + math.fsum(counts.get("test_basis.detections", ()))
        figures["detection_rate_hz"] = total / fill
    det = scenario.model.detector
    values = {"detector.dead_time_s": det.dead_time_s, "detector.afterpulse_probability": det.afterpulse_probability}
    out = (rule.check(values[rule.field], figures) for rule in DEFAULT_WARNINGS)
    return tuple(w for w in out if w)


@dataclass(frozen=True)
class DecoyScenario:
    """A decoy-state link scenario: device model, block size, security targets and optional fixed choices.

    Attributes
    ----------
    model : LinkModel
    pulses : float or None
        Pulses sent per block ``N``; None when the scenario gives ``key_detections`` instead.
    eps_sec, eps_cor : float
    ec_efficiency : float
        Reconciliation efficiency ``f >= 1``: leakage ``f n_X h(E_X)``.
    intensity_count : int
    intensities, intensity_probabilities : tuple or None
        Fixed values (not optimised) when given.
    key_basis_probability : float or None
        Fixed ``q_X`` when given.
    weakest_intensity : float
        Value of the weakest intensity (fixed; e.g. a near-vacuum decoy), default 2e-4.
    label : str or None
        Free-text name of the scenario (``[protocol] label``), carried into outputs.
    security : tuple of (str, float) or None
        The ``[security]`` section as given (eps_sec and eps_cor, or eps_total with eps_cor_share), so that
        a copy with one field changed keeps the form the user chose.
    key_detections : int or None
        Expected key-basis detections per block (the post-processing frame) instead of ``pulses``.  The block
        is still closed after a number of pulses fixed before it (the block rule); the design chooses that
        number together with the free parameters so that about this many key-basis detections are expected.
    """

    model: LinkModel
    pulses: float | None
    eps_sec: float
    eps_cor: float
    ec_efficiency: float
    intensity_count: int = 3
    intensities: tuple | None = None
    intensity_probabilities: tuple | None = None
    key_basis_probability: float | None = None
    weakest_intensity: float = 2e-4
    label: str | None = None
    security: tuple | None = None
    key_detections: int | None = None

    def __post_init__(self):
        if (self.pulses is None) == (self.key_detections is None):
            raise ValueError("DecoyScenario: give exactly one of pulses and key_detections")

    @property
    def size_kind(self) -> str:
        """The unit the scenario gives its block size in: ``"pulses"`` or ``"key_detections"``."""
        return "pulses" if self.pulses is not None else "key_detections"

    def with_pulses(self, pulses: float) -> "DecoyScenario":
        """Copy with a block of ``pulses`` pulses (and no key-detection target)."""
        return replace(self, pulses=float(pulses), key_detections=None)

    def as_dict(self) -> dict:
        """JSON-ready mapping in the scenario-file layout (``parse_scenario`` reads it back).

        Returns
        -------
        dict
        """
        proto = {"name": PROTOCOL_NAME, "intensity_count": self.intensity_count,
                 "weakest_intensity": self.weakest_intensity}
        if self.label is not None:
            proto["label"] = self.label
        if self.intensities is not None:
            proto["intensities"] = list(self.intensities)
        if self.intensity_probabilities is not None:
            proto["intensity_probabilities"] = list(self.intensity_probabilities)
        if self.key_basis_probability is not None:
            proto["key_basis_probability"] = self.key_basis_probability
        src = {} if self.model.source.repetition_rate_hz is None else {
            "repetition_rate_hz": self.model.source.repetition_rate_hz}
        out = {"protocol": proto, "link": asdict(self.model.link), "detector": asdict(self.model.detector),
               "block": ({"pulses": self.pulses} if self.pulses is not None
                         else {"key_detections": int(self.key_detections)}),
               "security": dict(self.security) if self.security else {"eps_sec": self.eps_sec, "eps_cor": self.eps_cor},
               "reconciliation": {"efficiency": self.ec_efficiency}}
        if src:
            out["source"] = src
        return out


def parse_scenario(data: dict) -> DecoyScenario:
    """Validate a scenario dictionary (from TOML) and return a :class:`DecoyScenario`.

    Raises
    ------
    InputError
        Naming ``section`` or ``section.field`` for unknown or missing sections/fields and bad values.
    """
    check_sections(data, _SCENARIO_SECTIONS, _REQUIRED)
    pr = data["protocol"]
    if not isinstance(pr["name"], str) or pr["name"] != PROTOCOL_NAME:
        raise InputError("protocol.name", pr["name"], f"'{PROTOCOL_NAME}'")
    label = read_label(pr, "protocol.label")
    spec = _SCENARIO_SPEC
    count = spec["protocol.intensity_count"]
    k = int(count.check(pr.get("intensity_count", count.default)))
    mu = None
    if "intensities" in pr:
        mu = check_intensity_list("protocol.intensities", pr["intensities"])
        if len(mu) != k:
            raise InputError("protocol.intensities", pr["intensities"], f"a list of {k} intensities "
                             "(protocol.intensity_count)")
    probs = None
    if "intensity_probabilities" in pr:
        probs = _probabilities("protocol.intensity_probabilities", pr["intensity_probabilities"], k)
    qx = None
    if "key_basis_probability" in pr:
        qx = float(spec["protocol.key_basis_probability"].check(pr["key_basis_probability"]))
    weakest = float(spec["protocol.weakest_intensity"].check(pr.get("weakest_intensity",
                                                                    spec["protocol.weakest_intensity"].default)))
    if mu is not None:
        weakest = mu[-1]
    ln = data["link"]
    link = Link(ln["distance_km"], ln["fiber_loss_db_per_km"],
                ln.get("extra_loss_db", spec["link.extra_loss_db"].default))
    dt = data["detector"]
    det = Detector(dt["efficiency"], dt["dark_count_probability"],
                   *(dt.get(k, spec[f"detector.{k}"].default)
                     for k in ("afterpulse_probability", "misalignment_error", "dead_time_s")))
    src = Source(data.get("source", {}).get("repetition_rate_hz"))
    bl = data["block"]
    pulses = key_detections = None
    if one_of(bl, BLOCK_UNITS, "block.", "pulses sent per block, " + _PULSES.describe()) == "pulses":
        pulses = float(spec["block.pulses"].check(bl["pulses"]))
    else:
        key_detections = int(spec["block.key_detections"].check(bl["key_detections"]))
    eps_sec, eps_cor = security_targets(data["security"], "security.")
    f = float(spec["reconciliation.efficiency"].check(data["reconciliation"]["efficiency"]))
    return DecoyScenario(LinkModel(link, det, src), pulses, eps_sec, eps_cor, f, k, mu, probs, qx, weakest, label,
                         tuple(data["security"].items()), key_detections)


def default_scenario() -> DecoyScenario:
    """Built-in scenario: 50 km of 0.2 dB/km fibre, 10% detector, 1e10 pulses (common practice, no source)."""
    return parse_scenario({
        "protocol": {"name": PROTOCOL_NAME, "intensity_count": 3, "weakest_intensity": 2e-4},
        "link": {"distance_km": 50.0, "fiber_loss_db_per_km": 0.2, "extra_loss_db": 0.0},
        "detector": {"efficiency": 0.1, "dark_count_probability": 6e-7, "afterpulse_probability": 0.0,
                     "misalignment_error": 0.005, "dead_time_s": 0.0},
        "source": {"repetition_rate_hz": 1e9},
        "block": {"pulses": 1e10},
        "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
        "reconciliation": {"efficiency": 1.16},
    })


def scenario_fields() -> list:
    """Dotted names of the scenario fields a sweep may vary (every field but ``protocol.name``).

    Returns
    -------
    list of str
    """
    return [f"{s}.{k}" for s, keys in _SCENARIO_SECTIONS.items() for k in keys if (s, k) != ("protocol", "name")]


def with_field(scenario: DecoyScenario, dotted_name: str, value) -> DecoyScenario:
    """Copy of ``scenario`` with one dotted field replaced and the whole scenario re-validated.

    Setting ``block.pulses`` or ``block.key_detections`` drops the other; setting
    ``protocol.weakest_intensity`` drops fixed ``protocol.intensities``.

    Raises
    ------
    InputError
        For an unknown field or a value the scenario refuses.
    """
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of " + ", ".join(scenario_fields()))
    sec, key = dotted_name.split(".", 1)
    d = scenario.as_dict()
    if sec == "security":  # the same rules as BB84 (security_fields_with)
        d["security"] = security_fields_with(d["security"], scenario.eps_sec, scenario.eps_cor, key, value)
    else:
        d.setdefault(sec, {})[key] = value
    if sec == "block":   # pulses and key_detections are alternatives: setting one drops the other
        d["block"] = {key: value}
    if sec == "protocol" and key == "weakest_intensity":
        d["protocol"].pop("intensities", None)
    return parse_scenario(d)

