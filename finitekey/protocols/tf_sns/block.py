"""The observed block of the sending-or-not-sending protocol: fields, declarations, parser.

A block is every window of one run, closed after a number of windows fixed before it (``closed_by = "rounds"``;
``"quota"`` is refused, proof note section 1a).  It reports the parameters the windows were prepared with and
the effective events (exactly one of the relay's detectors clicked) of the window classes the analysis uses.
"""

from __future__ import annotations

from dataclasses import dataclass

from ...domains import COUNT, PROBABILITY, Domain
from ...errors import InputError
from .._block_rule import parse_closure
from .._fields import SECURITY_SCHEMA_RULE, block_security_specs, check_split, read_label, security_targets
from .._spec import FieldSpec, by_name
from .scenario import (PROTOCOL_NAME, SNSParameters, _INTENSITY, _WIDTH, check_decoy_probabilities,
                       check_decoys)

__all__ = ["TFBlock", "BLOCK_SPECS", "BLOCK_SCHEMA_RULES", "SECRECY_TERMS", "COUNT_FIELDS", "parse_block"]

#: Secrecy terms a block's ``epsilon_split`` shares eps_sec between.
SECRECY_TERMS = ("count_estimation", "single_photon_smoothing", "chain_rule", "privacy_amplification")
#: The count fields, in the order the block lists them.
COUNT_FIELDS = ("key_detections", "weak_one_sided", "strong_one_sided", "vacuum", "x1_detections", "x1_errors")

_SHARE = Domain(0.0, 1.0, lower_open=True, upper_open=True)


def _count(name, description):
    return FieldSpec(name, "number", description, unit="events", domain=COUNT, required="yes")


BLOCK_SPECS = (
    FieldSpec("protocol", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,)),
    FieldSpec("signal_intensity", "number", "Z-window intensity mu_z when sending", unit="photons",
              domain=_INTENSITY, required="yes"),
    FieldSpec("sending_probability", "number", "probability of sending in a Z window", domain=PROBABILITY,
              required="yes"),
    FieldSpec("decoy_intensities", "list", "X-window decoys [mu_1, mu_2], 0 < mu_1 < mu_2 (X1 windows use mu_1)",
              unit="photons", required="yes",
              schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0}, "minItems": 2,
                      "maxItems": 2}),
    FieldSpec("decoy_probabilities", "list", "X-window probabilities [vacuum, mu_1, mu_2], summing to 1",
              required="yes", schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0,
                                                                  "exclusiveMaximum": 1},
                                      "minItems": 3, "maxItems": 3}),
    FieldSpec("key_window_probability", "number", "probability p_Z of a Z (key) window per side",
              domain=PROBABILITY, required="yes"),
    FieldSpec("acceptance_width_rad", "number", "width D_s of each accepted phase slice of the X1 windows",
              unit="rad", domain=_WIDTH, required="yes"),
    _count("key_detections", "effective events of windows where both chose Z (all of them are key bits)"),
    _count("weak_one_sided", "effective events of X windows where one side sent mu_1 and the other vacuum "
           "(both orders)"),
    _count("strong_one_sided", "effective events of X windows where one side sent mu_2 and the other vacuum "
           "(both orders)"),
    _count("vacuum", "effective events of X windows where both sent vacuum"),
    _count("x1_detections", "effective events of X1 windows (both mu_1, phases in an accepted slice)"),
    _count("x1_errors", "X1 effective events at the detector that should be dark for the slice"),
    FieldSpec("effective_events", "number", "effective events of all windows of the block, any choices "
              "(the trials of the count statistics)", unit="events", domain=COUNT, required="yes"),
    FieldSpec("ec_leak_bits", "number", "bits disclosed by error correction (at most key_detections)",
              unit="bits", domain=COUNT, required="yes"),
    *block_security_specs(),
    FieldSpec("epsilon_split", "table", "shares of eps_sec for the secrecy terms, summing to 1",
              schema={"type": "object", "properties": {t: {"type": "number", "exclusiveMinimum": 0,
                                                           "exclusiveMaximum": 1} for t in SECRECY_TERMS},
                      "required": list(SECRECY_TERMS), "additionalProperties": False}),
    FieldSpec("windows", "number", "windows sent in the block (for the record; not used by the bound)",
              unit="windows", domain=COUNT),
    FieldSpec("label", "text", "free-text identifier carried into batch output", schema={"type": ["string", "integer"]}),
    FieldSpec("closed_by", "choice", "how the block was closed (quota is refused)", choices=("rounds",),
              default="rounds", schema={"enum": ["rounds", None]}),
)
_SPEC = by_name(BLOCK_SPECS)
_REQUIRED = tuple(s.name for s in BLOCK_SPECS if s.required == "yes")
BLOCK_SCHEMA_RULES = {"": SECURITY_SCHEMA_RULE}


@dataclass(frozen=True)
class TFBlock:
    """One observed block of ``tf-sns`` (validated by :func:`parse_block`)."""

    parameters: SNSParameters
    acceptance_width_rad: float
    key_detections: int
    weak_one_sided: int
    strong_one_sided: int
    vacuum: int
    x1_detections: int
    x1_errors: int
    effective_events: int
    ec_leak_bits: int
    eps_sec: float
    eps_cor: float
    epsilon_split: dict | None = None
    windows: int | None = None
    label: str | None = None

    def as_dict(self) -> dict:
        """JSON-ready mapping in the block-file layout (``parse_block`` reads it back)."""
        p = self.parameters
        d = {"protocol": PROTOCOL_NAME, "signal_intensity": p.signal_intensity,
             "sending_probability": p.sending_probability, "decoy_intensities": list(p.decoy_intensities),
             "decoy_probabilities": list(p.decoy_probabilities), "key_window_probability": p.key_window_probability,
             "acceptance_width_rad": self.acceptance_width_rad,
             **{k: getattr(self, k) for k in COUNT_FIELDS}, "effective_events": self.effective_events,
             "ec_leak_bits": self.ec_leak_bits, "eps_sec": self.eps_sec, "eps_cor": self.eps_cor}
        if self.epsilon_split is not None:
            d["epsilon_split"] = dict(self.epsilon_split)
        if self.windows is not None:
            d["windows"] = self.windows
        if self.label is not None:
            d["label"] = self.label
        return d


def parse_block(data: dict) -> TFBlock:
    """Validate a block mapping (JSON) and return a :class:`TFBlock`.

    Raises
    ------
    InputError
        Naming the field for anything missing, unknown, of the wrong type or out of range; for errors above
        detections, counts above ``effective_events``, a leakage above the key detections, and
        ``closed_by = "quota"``.
    """
    if not isinstance(data, dict):
        raise InputError("block", data, f"a JSON object with the {PROTOCOL_NAME} block fields")
    unknown = sorted(set(data) - set(_SPEC))
    if unknown:
        raise InputError(unknown[0], data[unknown[0]], "one of the block fields " + ", ".join(_SPEC))
    if "protocol" in data and data["protocol"] != PROTOCOL_NAME:
        raise InputError("protocol", data["protocol"], f"'{PROTOCOL_NAME}'")
    parse_closure(data, "windows")
    for key in _REQUIRED:
        if key not in data:
            raise InputError(key, None, "a value (required field)")
    params = SNSParameters(
        float(_SPEC["signal_intensity"].check(data["signal_intensity"])),
        float(_SPEC["sending_probability"].check(data["sending_probability"])),
        check_decoys("decoy_intensities", data["decoy_intensities"]),
        check_decoy_probabilities("decoy_probabilities", data["decoy_probabilities"]),
        float(_SPEC["key_window_probability"].check(data["key_window_probability"])))
    width = float(_SPEC["acceptance_width_rad"].check(data["acceptance_width_rad"]))
    counts = {k: int(_SPEC[k].check(data[k])) for k in COUNT_FIELDS}
    if counts["x1_errors"] > counts["x1_detections"]:
        raise InputError("x1_errors", counts["x1_errors"], f"an integer in [0, {counts['x1_detections']}] (errors "
                         f"cannot exceed x1_detections = {counts['x1_detections']})")
    total = int(_SPEC["effective_events"].check(data["effective_events"]))
    listed = sum(counts[k] for k in COUNT_FIELDS if k != "x1_errors")
    if total < listed:
        raise InputError("effective_events", total, f"an integer >= {listed}, the effective events of the listed "
                         "classes (all windows of the block are counted)")
    if total > 2 ** 50:
        raise InputError("effective_events", total, "at most 2**50 (exact tails)")
    leak = int(Domain(0, counts["key_detections"], integer=True).check_scalar("ec_leak_bits", data["ec_leak_bits"]))
    eps_sec, eps_cor = security_targets(data)
    split = check_split(data["epsilon_split"], SECRECY_TERMS, _SHARE) if data.get("epsilon_split") is not None else None
    windows = None
    if data.get("windows") is not None:
        windows = int(_SPEC["windows"].check(data["windows"]))
        if windows < total:
            raise InputError("windows", windows, f"an integer >= effective_events = {total}")
    return TFBlock(params, width, counts["key_detections"], counts["weak_one_sided"], counts["strong_one_sided"],
                   counts["vacuum"], counts["x1_detections"], counts["x1_errors"], total, leak, eps_sec, eps_cor,
                   split, windows, read_label(data))
