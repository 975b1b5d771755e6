"""MDI-BB84 link scenario: two fibre arms to an untrusted relay, its detectors, and the expected counts.

The link model
--------------
Alice and Bob each send phase-randomised weak coherent pulses (mean photon numbers ``mu_a``, ``mu_b``) through
fibre arms of transmittance ``t_a``, ``t_b`` to a relay that interferes them on a 50:50 beam splitter and
detects each output port with two threshold detectors (polarisation: H and V after a polarising beam
splitter; time-bin: early and late time bin of one detector).  The detectors are identical, of efficiency
``eta_d`` and dark-count probability ``p_d`` per detector (and per time bin) per pulse, so the efficiency is
moved into the arms: ``eta_a = eta_d t_a``, ``eta_b = eta_d t_b``.

Given the relative phase ``phi`` of the two pulses, the four detector modes hold independent Poisson photon
numbers (coherent states stay coherent through linear optics); their means follow from the encoded states
(``u``: Alice's polarisation or time-bin vector, ``v``: Bob's)::

    n_{1P} = (eta_a mu_a u_P^2 + eta_b mu_b v_P^2 + 2 sqrt(eta_a mu_a eta_b mu_b) u_P v_P cos(phi)) / 2
    n_{2P} = the same with -2 sqrt(...)

and a mode clicks with probability ``1 - (1 - p_d) e^{-n}``.  A Bell-state result is announced when exactly
two modes click, one of each polarisation (time bin): ``psi-`` for the two ports, ``psi+`` for one port.
With time-bin encoding only the ``psi-`` patterns (two different detectors) are used: the same detector
cannot click in both time bins of one pulse when its dead time is longer than the bin separation (the
two-detector set-up of Ma and Razavi 2012).  Phase randomisation makes ``phi`` uniform; the average is
computed by the trapezoid rule on ``_PHASES`` points (exact to rounding for these smooth periodic integrands,
and free of the cancellation of the closed forms at high loss).  A result is correct when it matches the
bits as BB84-MDI prescribes (Z: both results mean anti-correlated bits; X: ``psi+`` correlated, ``psi-``
anti-correlated).  Misalignment is the phenomenological model of Ma and Razavi (2012; from memory, their text
could not be read here): each announced result is flipped with probability ``e_mis`` (the relay's outcome, not a
physical rotation).

Averaged over the four bit combinations of a basis this is the closed form of Ma and Razavi 2012 (recalled from
memory, as are its section and the later use in Xu, Curty, Qi, Qian, Lo 2013; neither text could be read here),
which the tests compare with (``tests/test_mdi_model.py``).  The
photon-number yield of one photon from each side, ``Y11``, and its X-basis error rate ``e11`` are their closed
forms (checked against the derivative of this model's gain in the tests).

References
----------
.. [1] X. Ma, M. Razavi, "Alternative schemes for measurement-device-independent quantum key distribution",
   Phys. Rev. A 86, 062319 (2012).
.. [2] H.-K. Lo, M. Curty, B. Qi, "Measurement-device-independent quantum key distribution",
   Phys. Rev. Lett. 108, 130503 (2012).
.. [3] F. Xu, M. Curty, B. Qi, L. Qian, H.-K. Lo, "Practical aspects of measurement-device-independent quantum key
   distribution", New J. Phys. 15, 113007 (2013).
.. [4] S. Pirandola, R. Laurenza, C. Ottaviani, L. Banchi, Nat. Commun. 8, 15043 (2017) (the bound the
   rates are tested against).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ...channel import FIELD_DOMAINS, check_intensity_list
from ...domains import PROBABILITY, Domain
from ...errors import InputError
from .._fields import (block_security_specs, check_sections, read_label, security_fields_with,
                      security_targets)
from .._spec import FieldSpec, by_name, sections_of

__all__ = ["PROTOCOL_NAME", "ENCODINGS", "SIDES", "Arm", "RelayModel", "MdiExpectedCounts", "MdiScenario",
           "SCENARIO_SPECS", "parse_scenario", "default_scenario", "scenario_fields", "with_field",
           "asymptotic_rate", "optimal_asymptotic_rate", "y11_closed_form", "e11_closed_form"]

PROTOCOL_NAME = "mdi-bb84"
#: Encodings of the model: polarisation (four detectors, both Bell results) or time-bin (two detectors,
#: psi- only).
ENCODINGS = ("polarisation", "time-bin")
#: The two senders, in the order of every per-side list and of the intensity-pair tables.
SIDES = ("alice", "bob")
#: Points of the trapezoid rule over the relative phase (the integrands are analytic and periodic, so the
#: error falls like (z/2)^M / M! with z = sqrt(eta_a mu_a eta_b mu_b) <= 2 here: far below rounding).
_PHASES = 32

# the four bit values of a basis: (Alice's vector, Bob's vector, Alice's bit, Bob's bit)
_S = 1.0 / math.sqrt(2.0)
_VECTORS = {"Z": ((1.0, 0.0), (0.0, 1.0)), "X": ((_S, _S), (_S, -_S))}


@dataclass(frozen=True)
class Arm:
    """One fibre arm to the relay: length, attenuation and fixed extra loss (validated as the decoy link)."""

    distance_km: float
    fiber_loss_db_per_km: float = 0.2
    extra_loss_db: float = 0.0

    def __post_init__(self):
        for name in ("distance_km", "fiber_loss_db_per_km", "extra_loss_db"):
            object.__setattr__(self, name, FIELD_DOMAINS[f"link.{name}"].check_scalar(
                f"link.{name}", getattr(self, name)))

    @property
    def loss_db(self) -> float:
        """Loss of the arm in dB."""
        return self.fiber_loss_db_per_km * self.distance_km + self.extra_loss_db

    @property
    def transmittance(self) -> float:
        """``10**(-loss_db/10)`` (no detector)."""
        return 10.0 ** (-self.loss_db / 10.0)


@dataclass(frozen=True)
class MdiExpectedCounts:
    """Expected detections and errors per intensity pair ``[i, j]`` (Alice's ``i``, Bob's ``j``) and basis."""

    key_detections: np.ndarray
    key_errors: np.ndarray
    test_detections: np.ndarray
    test_errors: np.ndarray

    def as_dict(self) -> dict:
        """JSON-ready mapping keyed like a block file's tables (lists of lists, Alice's index first).

        Returns
        -------
        dict
        """
        return {"key_basis.detections": self.key_detections.tolist(), "key_basis.errors": self.key_errors.tolist(),
                "test_basis.detections": self.test_detections.tolist(),
                "test_basis.errors": self.test_errors.tolist()}


def _click(n, pd):
    """Click probability of a threshold detector, ``1 - (1 - pd) e^{-n}``, without cancellation."""
    return -np.expm1(-n) + pd * np.exp(-n)


@dataclass(frozen=True)
class RelayModel:
    """Two arms, the relay's detectors and the encoding; predicts gains, errors and counts.

    Parameters
    ----------
    alice, bob : Arm
    efficiency : float
        Detector efficiency at the relay, in (0, 1].
    dark_count_probability : float
        Per detector (per time bin) per pulse, in [0, 1/2).
    misalignment_error : float
        Probability that an announced Bell result is flipped, in [0, 1/2).
    encoding : {"polarisation", "time-bin"}
    repetition_rate_hz : float or None
        Pulse pairs per second (for rates per second).
    """

    alice: Arm
    bob: Arm
    efficiency: float
    dark_count_probability: float
    misalignment_error: float = 0.0
    encoding: str = "polarisation"
    repetition_rate_hz: float | None = None

    def __post_init__(self):
        for name, field in (("efficiency", "detector.efficiency"),
                            ("dark_count_probability", "detector.dark_count_probability"),
                            ("misalignment_error", "detector.misalignment_error")):
            object.__setattr__(self, name, FIELD_DOMAINS[field].check_scalar(field, getattr(self, name)))
        if self.encoding not in ENCODINGS:
            raise InputError("protocol.encoding", self.encoding, "one of: " + ", ".join(ENCODINGS))
        if self.repetition_rate_hz is not None:
            object.__setattr__(self, "repetition_rate_hz", FIELD_DOMAINS["source.repetition_rate_hz"].check_scalar(
                "source.repetition_rate_hz", self.repetition_rate_hz))

    # ---- transmittances ------------------------------------------------------------------------
    @property
    def eta_a(self) -> float:
        """Alice's arm with the detector efficiency."""
        return self.efficiency * self.alice.transmittance

    @property
    def eta_b(self) -> float:
        """Bob's arm with the detector efficiency."""
        return self.efficiency * self.bob.transmittance

    @property
    def end_to_end_transmittance(self) -> float:
        """Fibre transmittance from Alice to Bob through the relay position, ``t_a t_b`` (no detector): the
        channel of the repeaterless bound."""
        return self.alice.transmittance * self.bob.transmittance

    def fibre_transmittance(self) -> float:
        """:attr:`end_to_end_transmittance` (the hook the report's repeaterless-bound curve calls)."""
        return self.end_to_end_transmittance

    def with_arms(self, alice_km: float, bob_km: float) -> "RelayModel":
        """Copy with other arm lengths (validated)."""
        return replace(self, alice=replace(self.alice, distance_km=alice_km),
                       bob=replace(self.bob, distance_km=bob_km))

    # ---- gains ---------------------------------------------------------------------------------
    def gains(self, mu_a, mu_b, basis: str):
        """Probability of an announced result and of an erroneous one, per pulse pair (vectorised).

        Parameters
        ----------
        mu_a, mu_b : float or array_like
            Mean photon numbers (broadcast together).
        basis : {"Z", "X"}
            Both senders' basis (Z is the key basis).

        Returns
        -------
        (Q, EQ) : numpy.ndarray
            Gain and error gain, averaged over the bit values and the relative phase.
        """
        if basis not in _VECTORS:
            raise ValueError(basis)
        a = self.eta_a * np.asarray(mu_a, dtype=float)
        b = self.eta_b * np.asarray(mu_b, dtype=float)
        a, b = np.broadcast_arrays(a, b)
        pd = self.dark_count_probability
        cos = np.cos(np.pi * (np.arange(_PHASES) + 0.5) / _PHASES)   # midpoints on [0, pi]: even integrand
        cos = cos.reshape((_PHASES,) + (1,) * a.ndim)
        cross = np.sqrt(a * b) * cos
        vecs = _VECTORS[basis]
        q = np.zeros(a.shape)
        wrong = np.zeros(a.shape)
        for ia, u in enumerate(vecs):
            for ib, v in enumerate(vecs):
                n = {}
                for P in (0, 1):
                    base = (a * u[P] ** 2 + b * v[P] ** 2) / 2.0
                    n[1, P] = np.maximum(base + cross * u[P] * v[P], 0.0)
                    n[2, P] = np.maximum(base - cross * u[P] * v[P], 0.0)
                c = {k: _click(x, pd) for k, x in n.items()}
                o = {k: (1.0 - pd) * np.exp(-x) for k, x in n.items()}
                minus = c[1, 0] * c[2, 1] * o[1, 1] * o[2, 0] + c[1, 1] * c[2, 0] * o[1, 0] * o[2, 1]
                plus = c[1, 0] * c[1, 1] * o[2, 0] * o[2, 1] + c[2, 0] * c[2, 1] * o[1, 0] * o[1, 1]
                if self.encoding == "time-bin":
                    plus = np.zeros_like(plus)
                same = ia == ib
                if basis == "Z":          # both results mean anti-correlated bits
                    err = (minus + plus) if same else 0.0 * minus
                else:                     # psi+ correlated, psi- anti-correlated
                    err = minus if same else plus
                q = q + (minus + plus).mean(axis=0) / 4.0
                wrong = wrong + np.asarray(err).mean(axis=0) / 4.0
        e = self.misalignment_error
        return q, e * q + (1.0 - 2.0 * e) * wrong

    def y11(self) -> float:
        """Yield of one photon from each side, :func:`y11_closed_form` at this model."""
        return float(y11_closed_form(self.eta_a, self.eta_b, self.dark_count_probability, self.encoding))

    def e11(self) -> float:
        """X-basis error rate of one photon from each side (the phase-error rate of the Z key)."""
        return float(e11_closed_form(self.eta_a, self.eta_b, self.dark_count_probability, self.misalignment_error))

    # ---- counts --------------------------------------------------------------------------------
    def expected_counts(self, pulses, mu_a, p_a, mu_b, p_b, key_basis_probability) -> MdiExpectedCounts:
        """Expected counts of a block of ``pulses`` pulse pairs.

        Each side picks its intensity independently (``p_a``, ``p_b``) and the key basis Z with probability
        ``q``; rounds with different bases are discarded.  Pair ``[i, j]`` gets ``N p_a[i] p_b[j] q^2 Q_Z``
        key-basis detections and ``N p_a[i] p_b[j] (1 - q)^2 Q_X`` test-basis detections.

        Returns
        -------
        MdiExpectedCounts
        """
        ma, mb = np.meshgrid(np.asarray(mu_a, float), np.asarray(mu_b, float), indexing="ij")
        w = float(pulses) * np.outer(np.asarray(p_a, float), np.asarray(p_b, float))
        q = float(key_basis_probability)
        qz, ez = self.gains(ma, mb, "Z")
        qx, ex = self.gains(ma, mb, "X")
        return MdiExpectedCounts(w * q * q * qz, w * q * q * ez, w * (1 - q) ** 2 * qx, w * (1 - q) ** 2 * ex)

    def block_fill_time_s(self, pulses) -> float | None:
        """Seconds to send ``pulses`` pulse pairs (None without a repetition rate)."""
        f = self.repetition_rate_hz
        return None if f is None else float(pulses) / f


def y11_closed_form(eta_a, eta_b, pd, encoding: str = "polarisation"):
    """``Y11 = (1-pd)^2 [eta_a eta_b / 2 + (2 eta_a + 2 eta_b - 3 eta_a eta_b) pd + 4 (1-eta_a)(1-eta_b) pd^2]``.

    The yield of a single photon from each side with four threshold detectors (Ma and Razavi 2012; also Xu et
    al. 2013; from memory, checked against the derivative of :meth:`RelayModel.gains` in the
    tests).  Half of it with time-bin encoding (psi- patterns only).
    """
    y = (1 - pd) ** 2 * (eta_a * eta_b / 2 + (2 * eta_a + 2 * eta_b - 3 * eta_a * eta_b) * pd
                         + 4 * (1 - eta_a) * (1 - eta_b) * pd * pd)
    return y / 2 if encoding == "time-bin" else y


def e11_closed_form(eta_a, eta_b, pd, e_mis):
    """``e11 = 1/2 - (1/2 - e_mis) (1-pd)^2 eta_a eta_b / (2 Y11)``, the X-basis error rate of (1, 1) photons.

    Ma and Razavi 2012 (from memory, checked against the model in the tests); the same for both encodings.
    """
    y = y11_closed_form(eta_a, eta_b, pd)
    return 0.5 - (0.5 - e_mis) * (1 - pd) ** 2 * eta_a * eta_b / (2 * y)


def _h(x):
    x = np.clip(np.asarray(x, dtype=float), 1e-300, 0.5)
    return -(x * np.log2(x) + (1 - x) * np.log1p(-x) / math.log(2.0))


def asymptotic_rate(model: RelayModel, mu_a, mu_b, ec_efficiency: float, sifting: float = 1.0):
    """Asymptotic key rate per pulse pair with infinitely many decoys (exact ``Y11``, ``e11``).

    ``R = sifting * [mu_a mu_b e^{-mu_a-mu_b} Y11 (1 - h(e11)) - f Q_Z h(E_Z)]``, clipped at 0 (Lo, Curty, Qi
    2012, Eq. (1), from memory; key from the Z basis at the signal intensities).  Vectorised in ``mu_a``, ``mu_b``.

    Parameters
    ----------
    model : RelayModel
    mu_a, mu_b : float or array_like
        Signal intensities.
    ec_efficiency : float
        ``f >= 1``.
    sifting : float
        Fraction of pulse pairs in the key basis (1: no sifting loss).

    Returns
    -------
    float or numpy.ndarray
    """
    mu_a, mu_b = np.broadcast_arrays(np.asarray(mu_a, float), np.asarray(mu_b, float))
    q, eq = model.gains(mu_a, mu_b, "Z")
    with np.errstate(all="ignore"):
        ez = np.where(q > 0, eq / np.maximum(q, 1e-300), 0.5)
    q11 = mu_a * mu_b * np.exp(-mu_a - mu_b) * model.y11()
    r = sifting * (q11 * (1 - _h(model.e11())) - ec_efficiency * q * _h(ez))
    return np.maximum(r, 0.0)


def optimal_asymptotic_rate(model: RelayModel, ec_efficiency: float, sifting: float = 1.0) -> tuple:
    """``(rate, mu_a, mu_b)`` maximising :func:`asymptotic_rate` over both signal intensities in (0, 1.5].

    Returns
    -------
    tuple of float
        ``(0.0, mu_a, mu_b)`` when no intensities give a positive rate.
    """
    grid = np.linspace(0.01, 1.5, 60)
    A, B = np.meshgrid(grid, grid, indexing="ij")
    vals = asymptotic_rate(model, A, B, ec_efficiency, sifting)
    i, j = np.unravel_index(int(np.argmax(vals)), vals.shape)
    if vals[i, j] <= 0:
        return 0.0, float(grid[i]), float(grid[j])
    from scipy import optimize as _opt  # here: scipy.optimize costs about 0.2 s at start-up

    res = _opt.minimize(lambda x: -float(asymptotic_rate(model, x[0], x[1], ec_efficiency, sifting)),
                        [grid[i], grid[j]], method="Nelder-Mead", bounds=[(1e-3, 1.5), (1e-3, 1.5)],
                        options={"xatol": 1e-6, "fatol": 1e-18})
    best = max(float(-res.fun), float(vals[i, j]))
    x = res.x if float(-res.fun) >= vals[i, j] else (grid[i], grid[j])
    return best, float(x[0]), float(x[1])


# ---------------------------------------------------------------------------------------------------------
# the scenario
# ---------------------------------------------------------------------------------------------------------
_EC_EFF = Domain(1.0, 10.0)
_PULSES = Domain(1, 1e15, integer=True)
_COUNT_K = Domain(2, 5, integer=True)
_INTENSITY_LIST = {"type": "array", "items": {"type": "number", "minimum": 0}, "minItems": 2, "maxItems": 5}
_PROB_LIST = {"type": "array", "items": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
              "minItems": 2, "maxItems": 5}


def _device(name: str, description: str, unit: str = "", default=None, required: str = "no",
            domain_of: str | None = None) -> FieldSpec:
    return FieldSpec(name, "number", description, unit=unit, domain=FIELD_DOMAINS[domain_of or name],
                     default=default, required=required)


#: Every scenario field, declared once (``finitekey fields mdi-bb84``, ``finitekey schema mdi-bb84-scenario``).
SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), required="yes"),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs",
              schema={"type": ["string", "integer"]}),
    FieldSpec("protocol.encoding", "choice", "polarisation (4 detectors, both Bell results) or time-bin "
              "(2 detectors, psi- only)", choices=ENCODINGS, default="polarisation"),
    FieldSpec("protocol.intensity_count", "number", "intensities per side (signal and decoys)", domain=_COUNT_K,
              default=3),
    FieldSpec("protocol.alice_intensities", "list", "Alice's fixed mean photon numbers, strictly descending "
              "(with bob_intensities; default: optimised)", unit="photons", schema=_INTENSITY_LIST),
    FieldSpec("protocol.alice_intensity_probabilities", "list", "Alice's fixed intensity probabilities, summing "
              "to 1 (with Bob's; default: optimised)", schema=_PROB_LIST),
    FieldSpec("protocol.bob_intensities", "list", "Bob's fixed mean photon numbers, strictly descending "
              "(with alice_intensities; default: optimised)", unit="photons", schema=_INTENSITY_LIST),
    FieldSpec("protocol.bob_intensity_probabilities", "list", "Bob's fixed intensity probabilities, summing to 1 "
              "(with Alice's; default: optimised)", schema=_PROB_LIST),
    FieldSpec("protocol.key_basis_probability", "number", "fixed key-basis (Z) probability q of each side "
              "(default: optimised)", domain=PROBABILITY),
    FieldSpec("protocol.weakest_intensity", "number", "mean photon number of both sides' weakest (fixed) "
              "intensity", unit="photons", domain=Domain(0.0, 1.0), default=2e-4),
    _device("link.distance_km", "fibre length from Alice to Bob through the relay (both arms)", "km",
            required="yes"),
    FieldSpec("link.alice_fraction", "number", "share of that fibre on Alice's side of the relay (0.5: the relay in "
              "the middle)", domain=Domain(0.0, 1.0), default=0.5),
    _device("link.fiber_loss_db_per_km", "fibre attenuation (both arms)", "dB/km", required="yes"),
    _device("link.alice_extra_loss_db", "loss of Alice's arm independent of length", "dB", 0.0,
            domain_of="link.extra_loss_db"),
    _device("link.bob_extra_loss_db", "loss of Bob's arm independent of length", "dB", 0.0,
            domain_of="link.extra_loss_db"),
    _device("detector.efficiency", "efficiency of each relay detector, with the relay's optics", required="yes"),
    _device("detector.dark_count_probability", "dark count probability per detector (per time bin) per pulse",
            "per pulse", required="yes"),
    _device("detector.misalignment_error", "probability that an announced Bell result is flipped", "", 0.0),
    _device("source.repetition_rate_hz", "pulse pairs sent per second (for rates per second)", "Hz"),
    FieldSpec("block.pulses", "number", "pulse pairs sent per block", unit="pulses", domain=_PULSES,
              required="yes"),
    *block_security_specs("security."),
    FieldSpec("reconciliation.efficiency", "number", "reconciliation efficiency f (leak f n_Z h(E_Z))",
              domain=_EC_EFF, required="yes"),
)
_SPEC = by_name(SCENARIO_SPECS)
SECTIONS = sections_of(SCENARIO_SPECS)
_REQUIRED = {sec: tuple(k for k in keys if _SPEC[f"{sec}.{k}"].required == "yes")
             for sec, keys in SECTIONS.items() if sec != "source"}
SCENARIO_SCHEMA_RULES = {
    "": {"required": list(_REQUIRED)},
    "protocol": {"dependentRequired": {
        "alice_intensities": ["bob_intensities"], "bob_intensities": ["alice_intensities"],
        "alice_intensity_probabilities": ["bob_intensity_probabilities"],
        "bob_intensity_probabilities": ["alice_intensity_probabilities"]}},
}


@dataclass(frozen=True)
class MdiScenario:
    """An MDI link scenario: relay model, block size, security targets and optional fixed choices.

    Attributes
    ----------
    model : RelayModel
    pulses : float
        Pulse pairs per block (fixed before the block).
    eps_sec, eps_cor : float
    ec_efficiency : float
    intensity_count : int
        Intensities per side.
    intensities : tuple of (tuple, tuple) or None
        Fixed per-side intensities ``(alice, bob)``, each descending; None: optimised.
    intensity_probabilities : tuple of (tuple, tuple) or None
    key_basis_probability : float or None
    weakest_intensity : float
    label : str or None
    security : tuple or None
        The ``[security]`` section as given.
    alice_fraction : float
        Share of the Alice-Bob fibre on Alice's side (kept for a total length of 0).
    """

    model: RelayModel
    pulses: float
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
    alice_fraction: float = 0.5

    size_kind = "pulses"

    @property
    def link(self) -> RelayModel:
        """The relay model, under the name the report's reference curves look for."""
        return self.model

    def with_pulses(self, pulses: float) -> "MdiScenario":
        """Copy with a block of ``pulses`` pulse pairs."""
        return replace(self, pulses=float(pulses))

    def at_total_distance(self, total_km: float) -> "MdiScenario":
        """Copy with the Alice-Bob fibre length ``total_km``, the relay at the same fraction of the way."""
        share = self.alice_fraction
        return replace(self, model=self.model.with_arms(total_km * share, total_km - total_km * share))

    def as_dict(self) -> dict:
        """JSON-ready mapping in the scenario-file layout (``parse_scenario`` reads it back).

        Returns
        -------
        dict
        """
        m = self.model
        proto = {"name": PROTOCOL_NAME, "encoding": m.encoding, "intensity_count": self.intensity_count,
                 "weakest_intensity": self.weakest_intensity}
        if self.label is not None:
            proto["label"] = self.label
        if self.intensities is not None:
            proto["alice_intensities"], proto["bob_intensities"] = (list(x) for x in self.intensities)
        if self.intensity_probabilities is not None:
            (proto["alice_intensity_probabilities"],
             proto["bob_intensity_probabilities"]) = (list(x) for x in self.intensity_probabilities)
        if self.key_basis_probability is not None:
            proto["key_basis_probability"] = self.key_basis_probability
        out = {"protocol": proto,
               "link": {"distance_km": m.alice.distance_km + m.bob.distance_km,
                        "alice_fraction": self.alice_fraction, "fiber_loss_db_per_km": m.alice.fiber_loss_db_per_km,
                        "alice_extra_loss_db": m.alice.extra_loss_db, "bob_extra_loss_db": m.bob.extra_loss_db},
               "detector": {"efficiency": m.efficiency, "dark_count_probability": m.dark_count_probability,
                            "misalignment_error": m.misalignment_error},
               "block": {"pulses": self.pulses},
               "security": dict(self.security) if self.security else {"eps_sec": self.eps_sec,
                                                                      "eps_cor": self.eps_cor},
               "reconciliation": {"efficiency": self.ec_efficiency}}
        if m.repetition_rate_hz is not None:
            out["source"] = {"repetition_rate_hz": m.repetition_rate_hz}
        return out


def probabilities(field_name: str, values, n: int) -> tuple:
    """A list of ``n`` probabilities in (0, 1) summing to 1 (errors name the field)."""
    if not isinstance(values, (list, tuple)) or len(values) != n:
        raise InputError(field_name, values, f"a list of {n} probabilities in (0, 1) summing to 1 (one per "
                         "intensity of that side)")
    out = tuple(float(PROBABILITY.check_scalar(f"{field_name}[{i}]", v)) for i, v in enumerate(values))
    if abs(math.fsum(out) - 1.0) > 1e-9:
        raise InputError(field_name, list(values), f"probabilities summing to 1 (they sum to {math.fsum(out)!r})")
    return out


def _per_side(pr: dict, stem: str, k: int, reader):
    """Both sides' lists ``protocol.alice_<stem>`` and ``protocol.bob_<stem>``, or None; one side alone is
    refused (the model needs both senders' values, and asymmetric arms need their own per side)."""
    names = [f"{s}_{stem}" for s in SIDES]
    given = [n in pr for n in names]
    if not any(given):
        return None
    if not all(given):
        missing = names[given.index(False)]
        present = names[given.index(True)]
        raise InputError(f"protocol.{missing}", None, f"a list for each side: protocol.{present} is given, so "
                         f"give protocol.{missing} too (intensities and their probabilities are per side)")
    return tuple(reader(f"protocol.{n}", pr[n], k) for n in names)


def _intensities(field_name: str, values, k: int) -> tuple:
    mu = check_intensity_list(field_name, values)
    if len(mu) != k:
        raise InputError(field_name, values, f"a list of {k} intensities (protocol.intensity_count)")
    return mu


def parse_scenario(data: dict) -> MdiScenario:
    """Validate a scenario mapping (from TOML) and return an :class:`MdiScenario`.

    Raises
    ------
    InputError
        Naming ``section`` or ``section.field`` for unknown or missing sections or fields, bad values, and a
        per-side list given for one side only.
    """
    check_sections(data, SECTIONS, _REQUIRED)
    pr = data["protocol"]
    if pr["name"] != PROTOCOL_NAME:
        raise InputError("protocol.name", pr["name"], f"'{PROTOCOL_NAME}'")
    label = read_label(pr, "protocol.label")
    encoding = _SPEC["protocol.encoding"].check(pr.get("encoding", "polarisation"))
    k = int(_SPEC["protocol.intensity_count"].check(pr.get("intensity_count", 3)))
    mu = _per_side(pr, "intensities", k, _intensities)
    probs = _per_side(pr, "intensity_probabilities", k, probabilities)
    qz = None
    if "key_basis_probability" in pr:
        qz = float(_SPEC["protocol.key_basis_probability"].check(pr["key_basis_probability"]))
    weakest = float(_SPEC["protocol.weakest_intensity"].check(pr.get("weakest_intensity", 2e-4)))
    if mu is not None:
        weakest = min(mu[0][-1], mu[1][-1])
    ln = {k: _SPEC[f"link.{k}"].check(v) for k, v in data["link"].items()}   # errors name each field
    loss, total = ln["fiber_loss_db_per_km"], float(ln["distance_km"])
    share = float(ln.get("alice_fraction", 0.5))
    alice = Arm(total * share, loss, ln.get("alice_extra_loss_db", 0.0))
    bob = Arm(total - total * share, loss, ln.get("bob_extra_loss_db", 0.0))
    dt = data["detector"]
    model = RelayModel(alice, bob, dt["efficiency"], dt["dark_count_probability"],
                       dt.get("misalignment_error", 0.0), encoding,
                       data.get("source", {}).get("repetition_rate_hz"))
    pulses = float(_SPEC["block.pulses"].check(data["block"]["pulses"]))
    eps_sec, eps_cor = security_targets(data["security"], "security.")
    f = float(_SPEC["reconciliation.efficiency"].check(data["reconciliation"]["efficiency"]))
    return MdiScenario(model, pulses, eps_sec, eps_cor, f, k, mu, probs, qz, weakest, label,
                       tuple(data["security"].items()), share)


def default_scenario() -> MdiScenario:
    """Built-in fictional link: 2 x 25 km of 0.2 dB/km fibre to a relay with 60% detectors, 1e12 pulse pairs
    (common practice, no source)."""
    return parse_scenario({
        "protocol": {"name": PROTOCOL_NAME, "encoding": "polarisation", "intensity_count": 3},
        "link": {"distance_km": 50.0, "alice_fraction": 0.5, "fiber_loss_db_per_km": 0.2},
        "detector": {"efficiency": 0.6, "dark_count_probability": 1e-7, "misalignment_error": 0.01},
        "source": {"repetition_rate_hz": 1e9},
        "block": {"pulses": 1e12},
        "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
        "reconciliation": {"efficiency": 1.16},
    })


def scenario_fields() -> list:
    """The dotted scenario fields a sweep may vary.

    Returns
    -------
    list of str
    """
    return [f"{s}.{k}" for s, keys in SECTIONS.items() for k in keys if (s, k) != ("protocol", "name")]


def with_field(scenario: MdiScenario, dotted_name: str, value) -> MdiScenario:
    """A copy of ``scenario`` with one dotted field changed (validated by :func:`parse_scenario`).

    Changing ``protocol.intensity_count`` or ``protocol.weakest_intensity`` drops fixed intensities.
    """
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of " + ", ".join(scenario_fields()))
    sec, key = dotted_name.split(".", 1)
    d = scenario.as_dict()
    if sec == "security":
        d["security"] = security_fields_with(d["security"], scenario.eps_sec, scenario.eps_cor, key, value)
    else:
        d.setdefault(sec, {})[key] = value
    if sec == "protocol" and key in ("weakest_intensity", "intensity_count"):
        for s in SIDES:
            d["protocol"].pop(f"{s}_intensities", None)
            if key == "intensity_count":
                d["protocol"].pop(f"{s}_intensity_probabilities", None)
    return parse_scenario(d)
