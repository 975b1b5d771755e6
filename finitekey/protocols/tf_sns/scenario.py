"""Twin-field link model and scenario of the sending-or-not-sending protocol (``tf-sns``).

Alice and Bob each send one phase-randomised weak coherent pulse per *window* through their own fibre arm to an
untrusted relay (Charlie) that interferes the two pulses on a 50:50 beam splitter and announces which of its two
threshold detectors clicked; an *effective event* is a window in which exactly one detector clicked.

The model (proof note ``proofs_notes/protocols/tf_sns.md``, section 2; common practice for twin-field links, the
forms derived here and checked against a direct numerical average in the tests):

* arm transmittances :math:`\\eta_s = \\eta_{det}\\,10^{-(\\alpha L_s + \\ell_s)/10}` (``s = A, B``), with
  :math:`L_A = f_A L`, :math:`L_B = (1 - f_A) L`;
* intensities :math:`a = \\eta_A\\mu_A`, :math:`b = \\eta_B\\mu_B` arrive with relative phase :math:`\\varphi`; the
  detectors see :math:`I_{L,R} = (a + b)/2 \\pm V\\sqrt{ab}\\cos\\varphi` with visibility
  :math:`V = 1 - 2 e_{mis}` (the residual misalignment);
* a detector clicks with probability :math:`1 - (1 - p_d)e^{-I}`; one detector only:
  :math:`P_L(\\varphi) = (1 - p_d)e^{-I_R} - (1 - p_d)^2 e^{-(a+b)}`;
* a window whose relative phase is random (every window except the post-selected X1 windows) averages
  :math:`\\varphi` uniformly: :math:`\\langle e^{V\\sqrt{ab}\\cos\\varphi}\\rangle = I_0(V\\sqrt{ab})`;
* the post-selected X1 windows (both sides sent the weak decoy, prepared phases within :math:`\\pm D_s/2` of 0
  or of :math:`\\pi`) see :math:`\\varphi = \\Delta\\theta + \\delta`, :math:`\\Delta\\theta` uniform on the
  acceptance slice and :math:`\\delta \\sim N(0, \\sigma^2)` the residual phase drift of the phase reference;
  an error is a click of the detector that should be dark.

The scenario's free parameters (intensities, probabilities, sending probability) are chosen by ``design``
unless the file fixes them.
"""

from __future__ import annotations

import functools
import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from ...channel import FIELD_DOMAINS, repeaterless_bound
from ...domains import PROBABILITY, RATE_HZ, Domain
from ...errors import InputError
from .._fields import (block_security_specs, check_sections, read_label, security_fields_with,
                      security_targets)
from .._spec import FieldSpec, by_name, sections_of

__all__ = ["PROTOCOL_NAME", "SCENARIO_SPECS", "Arms", "TwinFieldLink", "SNSParameters", "TFScenario",
           "parse_scenario", "default_scenario", "scenario_fields", "with_field", "asymptotic_rate",
           "optimal_asymptotic_rate", "relay_bound", "repeaterless_bound_total", "binary_entropy"]

PROTOCOL_NAME = "tf-sns"

_NONNEG = Domain(0.0, math.inf)
_FRACTION = Domain(0.0, 1.0)
_HALF = Domain(0.0, 0.5, upper_open=True)
_WIDTH = Domain(0.0, math.pi, lower_open=True)          # acceptance width D_s of one phase slice (rad)
_SIGMA = Domain(0.0, math.pi)                           # std of the residual relative phase (rad)
_INTENSITY = Domain(0.0, 10.0, lower_open=True)
_EC_EFF = Domain(1.0, 10.0)
_WINDOWS = Domain(1, 1e15, integer=True)

# Quadrature of the X1 windows: Gauss-Legendre over the slice, Gauss-Hermite over the drift.
_GL = np.polynomial.legendre.leggauss(16)
_GH = np.polynomial.hermite_e.hermegauss(16)


def binary_entropy(x):
    """Binary entropy in bits (vectorised); 0 at 0 and 1, 1 at and beyond 1/2 is NOT applied here."""
    x = np.clip(np.asarray(x, dtype=float), 1e-300, 1 - 1e-16)
    return -(x * np.log2(x) + (1 - x) * np.log2(1 - x))


@dataclass(frozen=True)
class Arms:
    """Transmittances of the two arms to the relay, detector efficiency included."""

    eta_a: float
    eta_b: float


@dataclass(frozen=True)
class TwinFieldLink:
    """Two fibre arms, the relay's detectors and the phase reference.

    Parameters
    ----------
    distance_km : float
        Total fibre length between Alice and Bob (both arms), >= 0.
    alice_fraction : float
        Share of the length on Alice's side, in [0, 1] (0.5: relay in the middle).
    fiber_loss_db_per_km : float
    alice_extra_loss_db, bob_extra_loss_db : float
        Loss independent of length in each arm (connectors, the relay's optics).
    efficiency : float
        Detection efficiency of the relay's detectors, in (0, 1].
    dark_count_probability : float
        Dark count per detector per window, in [0, 1/2).
    misalignment_error : float
        Residual misalignment ``e``: the interference visibility is ``1 - 2 e``, in [0, 1/2).
    phase_drift_std_rad : float
        Standard deviation of the residual relative phase between the two pulses at the relay after phase
        tracking (rad), in [0, pi].
    acceptance_width_rad : float
        Width ``D_s`` of each accepted phase slice of the X1 windows (prepared relative phase within
        ``D_s/2`` of 0 or of pi), in (0, pi].
    repetition_rate_hz : float or None
        Windows per second.
    """

    distance_km: float
    fiber_loss_db_per_km: float
    efficiency: float
    dark_count_probability: float
    alice_fraction: float = 0.5
    alice_extra_loss_db: float = 0.0
    bob_extra_loss_db: float = 0.0
    misalignment_error: float = 0.0
    phase_drift_std_rad: float = 0.0
    acceptance_width_rad: float = math.pi / 8
    repetition_rate_hz: float | None = None

    def arms(self) -> Arms:
        """Arm transmittances including the detector efficiency."""
        la = self.alice_fraction * self.distance_km
        lb = self.distance_km - la
        a = self.efficiency * 10.0 ** (-(self.fiber_loss_db_per_km * la + self.alice_extra_loss_db) / 10.0)
        b = self.efficiency * 10.0 ** (-(self.fiber_loss_db_per_km * lb + self.bob_extra_loss_db) / 10.0)
        return Arms(a, b)

    def fibre_transmittance(self) -> float:
        """End-to-end fibre transmittance Alice -> Bob (both arms, extra losses, no detector)."""
        loss = self.fiber_loss_db_per_km * self.distance_km + self.alice_extra_loss_db + self.bob_extra_loss_db
        return 10.0 ** (-loss / 10.0)

    @property
    def visibility(self) -> float:
        return 1.0 - 2.0 * self.misalignment_error

    def at_distance(self, distance_km: float) -> "TwinFieldLink":
        """Copy with another total fibre length (the arm split kept)."""
        return replace(self, distance_km=float(distance_km))

    # ---- click probabilities (vectorised) --------------------------------------------------------
    def one_click_random_phase(self, mu_a, mu_b):
        """Probability of an effective event (one detector only) for intensities ``mu_a``, ``mu_b`` sent with
        independent uniformly random phases: ``2 [(1-p)e^{-S/2} I_0(V sqrt(ab)) - (1-p)^2 e^{-S}]``."""
        ar = self.arms()
        a = ar.eta_a * np.asarray(mu_a, dtype=float)
        b = ar.eta_b * np.asarray(mu_b, dtype=float)
        q = 1.0 - self.dark_count_probability
        s = a + b
        c = self.visibility * np.sqrt(a * b)
        # e^{-S/2} I_0(c) = e^{c - S/2} i0e(c): no overflow
        return 2.0 * (q * np.exp(c - s / 2.0) * _i0e(c) - q * q * np.exp(-s))

    def x1_click_probabilities(self, mu):
        """``(detections, errors)`` per post-selected X1 window (both sides sent ``mu``), averaged over the
        prepared phase difference in the slice and the Gaussian drift; the pi slice is the mirror image."""
        ar = self.arms()
        mu = np.asarray(mu, dtype=float)[..., None]
        a, b = ar.eta_a * mu, ar.eta_b * mu
        q = 1.0 - self.dark_count_probability
        cosp, wts = _x1_nodes(self.acceptance_width_rad, self.phase_drift_std_rad)
        s = a + b
        c = self.visibility * np.sqrt(a * b)
        base = q * q * np.exp(-s[..., 0])
        # wrong detector R: (1-p) e^{-I_L} - (1-p)^2 e^{-S}, I_L = S/2 + c cos(phi); right detector with -c
        err = q * np.sum(np.exp(-s / 2.0 - c * cosp) * wts, axis=-1) - base
        good = q * np.sum(np.exp(-s / 2.0 + c * cosp) * wts, axis=-1) - base
        return good + err, err

    def single_photon_yield(self) -> float:
        """Effective-event probability of one photon sent by one side (the other sending vacuum), averaged
        over the two sides: ``(eta_A + eta_B)/2 (1-p) + (1 - (eta_A + eta_B)/2) 2 p (1-p)``."""
        ar = self.arms()
        h = (ar.eta_a + ar.eta_b) / 2.0
        p = self.dark_count_probability
        return h * (1 - p) + (1 - h) * 2 * p * (1 - p)

    def single_photon_x1_error_yield(self) -> float:
        """Error probability of the single-photon part of a post-selected X1 window (exact, model):
        ``(1-p)(eta_A + eta_B - 2 V sqrt(eta_A eta_B) <cos phi>)/4 + (1 - (eta_A+eta_B)/2) p (1-p)``, with
        ``<cos phi> = sinc(D_s/2) exp(-sigma^2/2)``."""
        ar = self.arms()
        p = self.dark_count_probability
        cos_mean = sinc(self.acceptance_width_rad / 2.0) * math.exp(-self.phase_drift_std_rad ** 2 / 2.0)
        h = (ar.eta_a + ar.eta_b) / 2.0
        return ((1 - p) * (ar.eta_a + ar.eta_b - 2 * self.visibility * math.sqrt(ar.eta_a * ar.eta_b) * cos_mean)
                / 4.0 + (1 - h) * p * (1 - p))


@functools.lru_cache(maxsize=64)
def _x1_nodes(width: float, sigma: float) -> tuple:
    """Quadrature nodes ``cos(phi)`` and weights over the slice (Gauss-Legendre) and the drift (Gauss-Hermite)."""
    x, w = _GL
    y, v = _GH
    phi = ((width / 2.0 * x)[:, None] + (sigma * y)[None, :]).ravel()
    wts = ((w / 2.0)[:, None] * (v / math.sqrt(2.0 * math.pi))[None, :]).ravel()
    cosp, wts = np.cos(phi), wts
    cosp.flags.writeable = False
    wts.flags.writeable = False
    return cosp, wts


def _i0e(x):
    """Exponentially scaled modified Bessel function ``e^{-|x|} I_0(x)`` (numpy's ``i0`` overflows)."""
    from scipy import special  # here, not at module top: scipy.special adds about 0.2 s to every start-up
    return special.i0e(x)


def sinc(x: float) -> float:
    """``sin(x)/x`` (1 at 0)."""
    return 1.0 if x == 0 else math.sin(x) / x


@dataclass(frozen=True)
class SNSParameters:
    """The free parameters of the protocol.

    Attributes
    ----------
    signal_intensity : float
        ``mu_z``, the intensity a side sends in a Z window when it decides to send.
    sending_probability : float
        ``epsilon``, probability of sending in a Z window.
    decoy_intensities : tuple of float
        ``(mu_1, mu_2)``, weak and strong decoy of the X windows, ``0 < mu_1 < mu_2``; the X1 windows use mu_1.
    decoy_probabilities : tuple of float
        ``(p_0, p_1, p_2)``: vacuum, weak, strong in an X window, summing to 1.
    key_window_probability : float
        ``p_Z``, probability that a side makes a window a Z window.
    """

    signal_intensity: float
    sending_probability: float
    decoy_intensities: tuple
    decoy_probabilities: tuple
    key_window_probability: float

    def side_settings(self) -> tuple:
        """``(intensities, probabilities)`` of one side over all windows: mu_z, 0 (Z not sending or X vacuum),
        mu_1, mu_2."""
        pz, e = self.key_window_probability, self.sending_probability
        p0, p1, p2 = self.decoy_probabilities
        mu1, mu2 = self.decoy_intensities
        return ((self.signal_intensity, 0.0, mu1, mu2),
                (pz * e, pz * (1 - e) + (1 - pz) * p0, (1 - pz) * p1, (1 - pz) * p2))

    def as_dict(self) -> dict:
        """JSON-ready parameters, with every intensity one side sends and its overall probability."""
        mus, ps = self.side_settings()
        order = sorted(range(4), key=lambda i: -mus[i])
        return {"signal_intensity": self.signal_intensity, "sending_probability": self.sending_probability,
                "decoy_intensities": list(self.decoy_intensities),
                "decoy_probabilities": list(self.decoy_probabilities),
                "key_window_probability": self.key_window_probability,
                # every intensity one side sends, descending, with its overall probability (common columns)
                "intensities": [mus[i] for i in order], "intensity_probabilities": [ps[i] for i in order],
                "key_basis_probability": self.key_window_probability}


def class_probabilities(p: SNSParameters, width: float) -> dict:
    """Probabilities per window of the window classes the analysis uses (both sides' choices together).

    ``untagged_key``: both Z, exactly one sends (its untagged part is the key's single photons);
    ``weak_one_sided``/``strong_one_sided``: both X, one side sends mu_1 (mu_2), the other vacuum;
    ``vacuum``: both X, both vacuum; ``x1``: both X, both mu_1, prepared phases in an accepted slice
    (probability ``D_s/pi`` for the two slices of continuous uniform phases).
    """
    pz, e = p.key_window_probability, p.sending_probability
    p0, p1, p2 = p.decoy_probabilities
    x = (1 - pz) ** 2
    return {"untagged_key": 2 * pz * pz * e * (1 - e), "weak_one_sided": 2 * x * p0 * p1,
            "strong_one_sided": 2 * x * p0 * p2, "vacuum": x * p0 * p0, "x1": x * p1 * p1 * width / math.pi}


def expected_counts(link: TwinFieldLink, p: SNSParameters, windows: float) -> dict:
    """Expected counts of every window class the block reports, for ``windows`` windows sent.

    Returns
    -------
    dict
        ``key_detections``, ``key_errors`` (Z windows, both sides), ``weak_one_sided``, ``strong_one_sided``,
        ``vacuum`` (effective events of those X classes), ``x1_detections``, ``x1_errors``, and
        ``effective_events`` (all windows, any choices).
    """
    n = float(windows)
    pz, e = p.key_window_probability, p.sending_probability
    mu_z = p.signal_intensity
    mu1, mu2 = p.decoy_intensities
    cl = class_probabilities(p, link.acceptance_width_rad)
    one = link.one_click_random_phase
    p00 = float(one(0.0, 0.0))
    pa = float(one(mu_z, 0.0))
    pb = float(one(0.0, mu_z))
    pab = float(one(mu_z, mu_z))
    zz = pz * pz
    key = n * zz * ((1 - e) ** 2 * p00 + e * (1 - e) * (pa + pb) + e * e * pab)
    key_err = n * zz * ((1 - e) ** 2 * p00 + e * e * pab)
    x = (1 - pz) ** 2
    p0, p1, p2 = p.decoy_probabilities
    weak = n * x * p0 * p1 * (float(one(mu1, 0.0)) + float(one(0.0, mu1)))
    strong = n * x * p0 * p2 * (float(one(mu2, 0.0)) + float(one(0.0, mu2)))
    vac = n * cl["vacuum"] * p00
    det, err = link.x1_click_probabilities(mu1)
    x1d, x1e = n * cl["x1"] * float(det), n * cl["x1"] * float(err)
    mus, ps = p.side_settings()
    mus_a = np.asarray(mus)[:, None]
    mus_b = np.asarray(mus)[None, :]
    w = np.asarray(ps)[:, None] * np.asarray(ps)[None, :]
    total = n * float(np.sum(w * one(mus_a, mus_b)))
    return {"key_detections": key, "key_errors": key_err, "weak_one_sided": weak, "strong_one_sided": strong,
            "vacuum": vac, "x1_detections": x1d, "x1_errors": x1e, "effective_events": total}


# ---------------------------------------------------------------------------------------------------------
# asymptotic rate and physical bounds
# ---------------------------------------------------------------------------------------------------------
def exact_phase_error_rate(link: TwinFieldLink) -> float:
    """Phase-error rate of the untagged key bits from the model's exact single-photon yields:
    ``[E_1 - (1 - s)/2 y_1] / (s y_1)`` with ``s = sinc(D_s/2)`` (proof note, section 3)."""
    y1 = link.single_photon_yield()
    e1 = link.single_photon_x1_error_yield()
    s = sinc(link.acceptance_width_rad / 2.0)
    return max((e1 - (1 - s) / 2.0 * y1) / (s * y1), 0.0)


def asymptotic_rate(link: TwinFieldLink, signal_intensity, sending_probability, ec_efficiency: float):
    """Asymptotic secret bits per window with infinitely many decoys (exact yields) and ``p_Z -> 1``
    (vectorised in the intensity and the sending probability), clipped at 0:

    ``R = 2 e (1-e) mu e^{-mu} y_1 [1 - h(e_ph)] - f Q_Z h(E_Z)``.
    """
    mu = np.asarray(signal_intensity, dtype=float)
    e = np.asarray(sending_probability, dtype=float)
    y1 = link.single_photon_yield()
    eph = min(exact_phase_error_rate(link), 0.5)
    one = link.one_click_random_phase
    p00 = float(one(0.0, 0.0))
    pa, pb, pab = one(mu, 0.0), one(0.0, mu), one(mu, mu)
    q = (1 - e) ** 2 * p00 + e * (1 - e) * (pa + pb) + e * e * pab
    err = (1 - e) ** 2 * p00 + e * e * pab
    with np.errstate(all="ignore"):
        ez = np.where(q > 0, err / q, 0.5)
    r = 2 * e * (1 - e) * mu * np.exp(-mu) * y1 * (1 - binary_entropy(eph)) - ec_efficiency * q * binary_entropy(
        np.minimum(ez, 0.5))
    return np.maximum(r, 0.0)


def optimal_asymptotic_rate(link: TwinFieldLink, ec_efficiency: float) -> tuple:
    """``(rate, signal_intensity, sending_probability)`` maximising :func:`asymptotic_rate`."""
    from ...searching import maximize_box
    x, v = maximize_box(lambda m, e: asymptotic_rate(link, m, e, ec_efficiency), [(0.01, 1.5), (0.001, 0.5)],
                        [30, 40], xatol=1e-7, maxiter=400)
    return max(float(v), 0.0), float(x[0]), float(x[1])


def relay_bound(link: TwinFieldLink) -> float:
    """Key capacity with one middle node: ``-log2(1 - eta)`` of the worse arm (detector included).

    A chain of two pure-loss links through any middle node (a trusted repeater is the most powerful one) has
    end-to-end capacity ``min`` over the links of ``-log2(1 - eta_i)`` (repeater-chain capacity, Pirandola,
    Commun. Phys. 2, 51 (2019); symmetric case ``-log2(1 - sqrt(eta_total))``).  Charlie is one such node,
    so a twin-field rate per window stays below it.  The detector efficiency may be counted in the arm
    (an inefficient detector is a lossless one behind a beam splitter).
    """
    ar = link.arms()
    return float(repeaterless_bound(min(ar.eta_a, ar.eta_b)))


def repeaterless_bound_total(link: TwinFieldLink) -> float:
    """``-log2(1 - eta)`` at the end-to-end fibre transmittance (no detector): the bound TF-QKD beats."""
    return float(repeaterless_bound(link.fibre_transmittance()))


# ---------------------------------------------------------------------------------------------------------
# scenario fields
# ---------------------------------------------------------------------------------------------------------
def _num(name, description, domain, unit="", default=None, required="no"):
    return FieldSpec(name, "number", description, unit=unit, domain=domain, default=default, required=required)


SCENARIO_SPECS = (
    FieldSpec("protocol.name", "choice", "the protocol analysed", choices=(PROTOCOL_NAME,), required="yes"),
    FieldSpec("protocol.label", "text", "free-text name of the scenario, carried into outputs",
              schema={"type": ["string", "integer"]}),
    _num("protocol.signal_intensity", "fixed Z-window intensity mu_z when sending (default: optimised)",
         _INTENSITY, "photons"),
    _num("protocol.sending_probability", "fixed probability of sending in a Z window (default: optimised)",
         PROBABILITY),
    FieldSpec("protocol.decoy_intensities", "list", "fixed X-window decoys [mu_1, mu_2], 0 < mu_1 < mu_2 "
              "(default: optimised)", unit="photons",
              schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0}, "minItems": 2,
                      "maxItems": 2}),
    FieldSpec("protocol.decoy_probabilities", "list", "fixed X-window probabilities [vacuum, mu_1, mu_2], "
              "summing to 1 (default: optimised)",
              schema={"type": "array", "items": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
                      "minItems": 3, "maxItems": 3}),
    _num("protocol.key_window_probability", "fixed probability p_Z of a Z (key) window per side "
         "(default: optimised)", PROBABILITY),
    _num("link.distance_km", "total fibre length Alice-relay-Bob", FIELD_DOMAINS["link.distance_km"], "km",
         required="yes"),
    _num("link.alice_fraction", "share of the length on Alice's side (0.5: relay in the middle)", _FRACTION,
         default=0.5),
    _num("link.fiber_loss_db_per_km", "fibre attenuation", FIELD_DOMAINS["link.fiber_loss_db_per_km"], "dB/km",
         required="yes"),
    _num("link.alice_extra_loss_db", "length-independent loss of Alice's arm", _NONNEG, "dB", 0.0),
    _num("link.bob_extra_loss_db", "length-independent loss of Bob's arm", _NONNEG, "dB", 0.0),
    _num("detector.efficiency", "efficiency of the relay's detectors", FIELD_DOMAINS["detector.efficiency"],
         required="yes"),
    _num("detector.dark_count_probability", "dark count per detector per window",
         FIELD_DOMAINS["detector.dark_count_probability"], required="yes"),
    _num("detector.misalignment_error", "residual misalignment e (interference visibility 1 - 2e)", _HALF,
         default=0.0),
    _num("phase.drift_std_rad", "std of the residual relative phase at the relay after phase tracking",
         _SIGMA, "rad", required="yes"),
    _num("phase.acceptance_width_rad", "width D_s of an accepted phase slice of the X1 windows", _WIDTH, "rad",
         default=math.pi / 8),
    _num("source.repetition_rate_hz", "windows per second", RATE_HZ, "Hz"),
    _num("block.windows", "windows sent per block (fixed before the block)", _WINDOWS, "windows",
         required="yes"),
    *block_security_specs("security."),
    _num("reconciliation.efficiency", "reconciliation efficiency f >= 1 (leakage f n_Z h(E_Z))", _EC_EFF,
         required="yes"),
)
_SPEC = by_name(SCENARIO_SPECS)
_SECTIONS = sections_of(SCENARIO_SPECS)
_REQUIRED = {"protocol": ("name",), "link": ("distance_km", "fiber_loss_db_per_km"),
             "detector": ("efficiency", "dark_count_probability"), "phase": ("drift_std_rad",),
             "block": ("windows",), "security": (), "reconciliation": ("efficiency",)}
SCENARIO_SCHEMA_RULES = {"security": {"oneOf": [
    {"required": ["eps_sec", "eps_cor"],
     "not": {"anyOf": [{"required": ["eps_total"]}, {"required": ["eps_cor_share"]}]}},
    {"required": ["eps_total"], "not": {"anyOf": [{"required": ["eps_sec"]}, {"required": ["eps_cor"]}]}}]}}


@dataclass(frozen=True)
class TFScenario:
    """A twin-field link scenario: link model, block size, security targets, optional fixed parameters.

    Attributes
    ----------
    link : TwinFieldLink
    windows : float
        Windows per block ``N``.
    eps_sec, eps_cor : float
    ec_efficiency : float
    fixed : dict
        The free parameters the file fixes (names of :class:`SNSParameters`).
    label : str or None
    security : tuple or None
        The ``[security]`` section as given.
    """

    link: TwinFieldLink
    windows: float
    eps_sec: float
    eps_cor: float
    ec_efficiency: float
    fixed: tuple = ()
    label: str | None = None
    security: tuple | None = None

    @property
    def size_kind(self) -> str:
        return "windows"

    @property
    def fixed_parameters(self) -> dict:
        return dict(self.fixed)

    def with_windows(self, windows: float) -> "TFScenario":
        """Copy with a block of ``windows`` windows."""
        return replace(self, windows=float(windows))

    def at_distance(self, km: float) -> "TFScenario":
        """Copy with another total fibre length."""
        return replace(self, link=self.link.at_distance(km))

    def as_dict(self) -> dict:
        """JSON-ready mapping in the scenario-file layout (``parse_scenario`` reads it back)."""
        ln = self.link
        proto = {"name": PROTOCOL_NAME}
        if self.label is not None:
            proto["label"] = self.label
        for k, v in self.fixed:
            proto[k] = list(v) if isinstance(v, tuple) else v
        out = {"protocol": proto,
               "link": {"distance_km": ln.distance_km, "alice_fraction": ln.alice_fraction,
                        "fiber_loss_db_per_km": ln.fiber_loss_db_per_km, "alice_extra_loss_db": ln.alice_extra_loss_db,
                        "bob_extra_loss_db": ln.bob_extra_loss_db},
               "detector": {"efficiency": ln.efficiency, "dark_count_probability": ln.dark_count_probability,
                            "misalignment_error": ln.misalignment_error},
               "phase": {"drift_std_rad": ln.phase_drift_std_rad, "acceptance_width_rad": ln.acceptance_width_rad},
               "block": {"windows": self.windows},
               "security": dict(self.security) if self.security else {"eps_sec": self.eps_sec,
                                                                       "eps_cor": self.eps_cor},
               "reconciliation": {"efficiency": self.ec_efficiency}}
        if ln.repetition_rate_hz is not None:
            out["source"] = {"repetition_rate_hz": ln.repetition_rate_hz}
        return out


def _float_list(field, values, n, domain):
    if not isinstance(values, (list, tuple)) or len(values) != n:
        raise InputError(field, values, f"a list of {n} numbers")
    return tuple(float(domain.check_scalar(f"{field}[{i}]", v)) for i, v in enumerate(values))


def check_decoys(field: str, values) -> tuple:
    """``[mu_1, mu_2]`` with ``0 < mu_1 < mu_2`` (the weak decoy first)."""
    mu = _float_list(field, values, 2, _INTENSITY)
    if not mu[0] < mu[1]:
        raise InputError(f"{field}[1]", mu[1], f"a value above {field}[0] = {mu[0]!r} (weak decoy first, "
                         "0 < mu_1 < mu_2)")
    return mu


def check_decoy_probabilities(field: str, values) -> tuple:
    """``[p_0, p_1, p_2]``, each in (0, 1), summing to 1."""
    p = _float_list(field, values, 3, PROBABILITY)
    if abs(math.fsum(p) - 1.0) > 1e-9:
        raise InputError(field, list(values), f"probabilities summing to 1 (they sum to {math.fsum(p)!r})")
    return p


def parse_scenario(data: dict) -> TFScenario:
    """Validate a scenario mapping (from TOML) and return a :class:`TFScenario`.

    Raises
    ------
    InputError
        Naming ``section`` or ``section.field`` for unknown or missing sections/fields and bad values.
    """
    check_sections(data, _SECTIONS, _REQUIRED)
    pr = data["protocol"]
    if pr["name"] != PROTOCOL_NAME:
        raise InputError("protocol.name", pr["name"], f"'{PROTOCOL_NAME}'")
    label = read_label(pr, "protocol.label")
    fixed = []
    for key in ("signal_intensity", "sending_probability", "key_window_probability"):
        if key in pr:
            fixed.append((key, float(_SPEC[f"protocol.{key}"].check(pr[key]))))
    if "decoy_intensities" in pr:
        fixed.append(("decoy_intensities", check_decoys("protocol.decoy_intensities", pr["decoy_intensities"])))
    if "decoy_probabilities" in pr:
        fixed.append(("decoy_probabilities", check_decoy_probabilities("protocol.decoy_probabilities",
                                                                       pr["decoy_probabilities"])))

    def get(sec, key):
        spec = _SPEC[f"{sec}.{key}"]
        value = data.get(sec, {}).get(key, spec.default)
        return None if value is None else float(spec.check(value))

    link = TwinFieldLink(
        distance_km=get("link", "distance_km"), fiber_loss_db_per_km=get("link", "fiber_loss_db_per_km"),
        efficiency=get("detector", "efficiency"), dark_count_probability=get("detector", "dark_count_probability"),
        alice_fraction=get("link", "alice_fraction"), alice_extra_loss_db=get("link", "alice_extra_loss_db"),
        bob_extra_loss_db=get("link", "bob_extra_loss_db"), misalignment_error=get("detector", "misalignment_error"),
        phase_drift_std_rad=get("phase", "drift_std_rad"), acceptance_width_rad=get("phase", "acceptance_width_rad"),
        repetition_rate_hz=get("source", "repetition_rate_hz"))
    bl = data["block"]
    windows = float(_SPEC["block.windows"].check(bl["windows"]))
    eps_sec, eps_cor = security_targets(data["security"], "security.")
    f = float(_SPEC["reconciliation.efficiency"].check(data["reconciliation"]["efficiency"]))
    return TFScenario(link, windows, eps_sec, eps_cor, f, tuple(fixed), label, tuple(data["security"].items()))


def default_scenario() -> TFScenario:
    """Built-in fictional scenario: 300 km of 0.16 dB/km fibre with the relay in the middle, 50% detectors,
    1e-8 dark counts, 0.1 rad residual phase drift, 1e12 windows (common practice, no source)."""
    return parse_scenario({
        "protocol": {"name": PROTOCOL_NAME},
        "link": {"distance_km": 300.0, "fiber_loss_db_per_km": 0.16},
        "detector": {"efficiency": 0.5, "dark_count_probability": 1e-8, "misalignment_error": 0.02},
        "phase": {"drift_std_rad": 0.1, "acceptance_width_rad": math.pi / 8},
        "source": {"repetition_rate_hz": 1e9},
        "block": {"windows": 1e12},
        "security": {"eps_sec": 1e-10, "eps_cor": 1e-15},
        "reconciliation": {"efficiency": 1.1},
    })


def scenario_fields() -> list:
    """The dotted scenario fields a sweep may vary."""
    return [s.name for s in SCENARIO_SPECS if s.name != "protocol.name"]


def with_field(scenario: TFScenario, dotted_name: str, value) -> TFScenario:
    """A copy of ``scenario`` with one dotted field changed (validated)."""
    if dotted_name not in scenario_fields():
        raise InputError("field", dotted_name, "one of " + ", ".join(scenario_fields()))
    sec, key = dotted_name.split(".", 1)
    d = scenario.as_dict()
    if sec == "security":
        d["security"] = security_fields_with(d["security"], scenario.eps_sec, scenario.eps_cor, key, value)
    else:
        d.setdefault(sec, {})[key] = value
    return parse_scenario(d)


def link_as_dict(link: TwinFieldLink) -> dict:
    return asdict(link)
