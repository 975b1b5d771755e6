"""Fibre link and threshold-detector model that predicts the counts of a decoy-state BB84 run.

The model is the standard one for phase-randomised weak coherent pulses sent through a lossy fibre to two
threshold detectors (see ``proofs_notes/channel.md`` for the derivation and every assumption):

* transmittance :math:`\\eta = \\eta_{det}\\,10^{-(\\alpha L + \\ell_{extra})/10}`;
* a pulse of mean photon number :math:`\\mu` gives a click with probability
  :math:`D(\\mu) = 1 - (1 - 2 p_{dc}) e^{-\\eta\\mu}` and an erroneous click with probability
  :math:`E(\\mu) = p_{dc} + e_{mis}(1 - e^{-\\eta\\mu})`;
* afterpulsing (probability :math:`p_{ap}` per click, random bit) turns these into
  :math:`D(1 + p_{ap})` and :math:`E + p_{ap} D / 2`;
* a non-paralysable dead time :math:`\\tau` after each click leaves the detector live for the fraction
  :math:`1 / (1 + f \\bar D \\tau)` of the pulses, where :math:`f` is the repetition rate and :math:`\\bar D`
  the mean click probability per pulse; clicks and errors are both scaled by it;
* Alice and Bob each choose the key basis with probability :math:`q_X`, so intensity :math:`k` contributes
  :math:`N p_k q_X^2 D_k` key-basis detections and :math:`N p_k (1-q_X)^2 D_k` test-basis detections.

Photon-number-resolved yields :math:`Y_n = 1 - (1 - 2p_{dc})(1-\\eta)^n` and error yields
:math:`p_{dc} + e_{mis}(1 - (1-\\eta)^n)` are what the channel gives to an n-photon state; averaging them over a
Poisson distribution gives exactly :math:`D(\\mu)` and :math:`E(\\mu)` above.

References
----------
.. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, "Practical decoy state for quantum key distribution",
   Phys. Rev. A 72, 012326 (2005) -- the yield and error model.
.. [2] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, "Concise security bounds for practical
   decoy-state quantum key distribution", Phys. Rev. A 89, 022307 (2014) -- the detection model with
   two threshold detectors and the biased basis choice.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from .domains import RATE_HZ, Domain
from .errors import InputError

__all__ = ["FIELD_DOMAINS", "Link", "Detector", "Source", "LinkModel", "ExpectedCounts", "transmittance",
           "repeaterless_bound"]

_NONNEG = Domain(0.0, math.inf)
_UNIT_OPEN_LOW = Domain(0.0, 1.0, lower_open=True)      # (0, 1]
_HALF_PROB = Domain(0.0, 0.5, upper_open=True)            # [0, 1/2)
_PROB_CLOSED = Domain(0.0, 1.0, upper_open=True)          # [0, 1)
_POS = Domain(0.0, math.inf, lower_open=True)
#: The allowed values of every device field, by its scenario name (the scenario declarations of the protocols
#: refer to these, so a field is validated, listed and exported with one domain).
FIELD_DOMAINS = {
    "link.distance_km": _NONNEG, "link.fiber_loss_db_per_km": _NONNEG, "link.extra_loss_db": _NONNEG,
    "detector.efficiency": _UNIT_OPEN_LOW, "detector.dark_count_probability": _HALF_PROB,
    "detector.afterpulse_probability": _PROB_CLOSED, "detector.misalignment_error": _HALF_PROB,
    "detector.dead_time_s": _NONNEG, "source.repetition_rate_hz": RATE_HZ,
}


def _checked(name: str, value):
    """``value`` checked against the domain of the device field ``name`` (errors name the field)."""
    return FIELD_DOMAINS[name].check_scalar(name, value)


@dataclass(frozen=True)
class Link:
    """Fibre link: length, attenuation and fixed extra loss.

    Parameters
    ----------
    distance_km : float
        Fibre length in km, >= 0.
    fiber_loss_db_per_km : float
        Attenuation in dB/km, >= 0.
    extra_loss_db : float
        Loss independent of length (connectors, receiver optics) in dB, >= 0.
    """

    distance_km: float
    fiber_loss_db_per_km: float = 0.2
    extra_loss_db: float = 0.0

    def __post_init__(self):
        object.__setattr__(self, "distance_km", _checked("link.distance_km", self.distance_km))
        object.__setattr__(self, "fiber_loss_db_per_km",
                           _checked("link.fiber_loss_db_per_km", self.fiber_loss_db_per_km))
        object.__setattr__(self, "extra_loss_db", _checked("link.extra_loss_db", self.extra_loss_db))

    @property
    def loss_db(self) -> float:
        """Total channel loss in dB."""
        return self.fiber_loss_db_per_km * self.distance_km + self.extra_loss_db


@dataclass(frozen=True)
class Detector:
    """Bob's pair of threshold detectors (one per bit value), identical and basis independent.

    Parameters
    ----------
    efficiency : float
        Detection efficiency in (0, 1], including Bob's optics.
    dark_count_probability : float
        Probability of a dark count per detector per gate (pulse), in [0, 1/2).
    afterpulse_probability : float
        Probability that a click is followed by an afterpulse in a later gate, in [0, 1).
    misalignment_error : float
        Probability that a photon reaches the wrong detector, in [0, 1/2).
    dead_time_s : float
        Dead time after each click in seconds, >= 0.
    """

    efficiency: float
    dark_count_probability: float
    afterpulse_probability: float = 0.0
    misalignment_error: float = 0.0
    dead_time_s: float = 0.0

    def __post_init__(self):
        object.__setattr__(self, "efficiency", _checked("detector.efficiency", self.efficiency))
        object.__setattr__(self, "dark_count_probability",
                           _checked("detector.dark_count_probability", self.dark_count_probability))
        object.__setattr__(self, "afterpulse_probability",
                           _checked("detector.afterpulse_probability", self.afterpulse_probability))
        object.__setattr__(self, "misalignment_error",
                           _checked("detector.misalignment_error", self.misalignment_error))
        object.__setattr__(self, "dead_time_s", _checked("detector.dead_time_s", self.dead_time_s))


@dataclass(frozen=True)
class Source:
    """Alice's pulsed source.

    Parameters
    ----------
    repetition_rate_hz : float or None
        Pulses per second (> 0); ``None`` when only per-pulse figures are wanted.
    """

    repetition_rate_hz: float | None = None

    def __post_init__(self):
        if self.repetition_rate_hz is not None:
            object.__setattr__(self, "repetition_rate_hz",
                               _checked("source.repetition_rate_hz", self.repetition_rate_hz))


@dataclass(frozen=True)
class ExpectedCounts:
    """Expected detections and errors per intensity in the key (X) and test (Z) bases.

    All arrays have one entry per intensity, in the order the intensities were given.
    """

    key_detections: np.ndarray
    key_errors: np.ndarray
    test_detections: np.ndarray
    test_errors: np.ndarray
    live_fraction: float

    def as_dict(self) -> dict:
        """JSON-ready mapping of the expected counts, keyed like a block file's fields.

        Returns
        -------
        dict
        """
        return {"key_basis.detections": self.key_detections.tolist(), "key_basis.errors": self.key_errors.tolist(),
                "test_basis.detections": self.test_detections.tolist(),
                "test_basis.errors": self.test_errors.tolist(), "live_fraction": float(self.live_fraction)}


def transmittance(loss_db, detector_efficiency):
    """Overall single-photon transmittance ``eta_det * 10**(-loss_db/10)`` (vectorised).

    Parameters
    ----------
    loss_db : float or array_like
        Channel loss in dB.
    detector_efficiency : float or array_like
        In [0, 1].

    Returns
    -------
    float or numpy.ndarray
    """
    return detector_efficiency * np.power(10.0, -np.asarray(loss_db, dtype=float) / 10.0)


def repeaterless_bound(eta):
    """Secret-key capacity of the pure-loss channel, ``-log2(1 - eta)`` bits per use (vectorised).

    Parameters
    ----------
    eta : float or array_like
        Channel transmittance in [0, 1).

    Returns
    -------
    float or numpy.ndarray

    References
    ----------
    .. [1] S. Pirandola, R. Laurenza, C. Ottaviani, L. Banchi, "Fundamental limits of repeaterless quantum
       communications", Nat. Commun. 8, 15043 (2017).
    """
    return -np.log1p(-np.asarray(eta, dtype=float)) / math.log(2.0)


@dataclass(frozen=True)
class LinkModel:
    """Link, detector and source together; predicts click and error probabilities and counts.

    Parameters
    ----------
    link : Link
    detector : Detector
    source : Source

    References
    ----------
    .. [1] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, Phys. Rev. A 72, 012326 (2005).
    """

    link: Link
    detector: Detector
    source: Source = Source()

    @property
    def eta(self) -> float:
        """Overall transmittance including Bob's detection efficiency."""
        return float(transmittance(self.link.loss_db, self.detector.efficiency))

    def at_distance(self, distance_km: float) -> "LinkModel":
        """Copy of this model with another fibre length (validated)."""
        return replace(self, link=replace(self.link, distance_km=distance_km))

    # ---- per pulse, before dead time ---------------------------------------------------------
    def click_probability(self, mu):
        """Probability ``D(mu)(1 + p_ap)`` of a click for a pulse of mean photon number ``mu`` (no dead time)."""
        d = self._raw_click(np.asarray(mu, dtype=float))
        return d * (1.0 + self.detector.afterpulse_probability)

    def error_probability(self, mu):
        """Probability ``E(mu) + p_ap D(mu)/2`` of an erroneous click (no dead time)."""
        mu = np.asarray(mu, dtype=float)
        det = self.detector
        e = det.dark_count_probability + det.misalignment_error * (-np.expm1(-self.eta * mu))
        return e + 0.5 * det.afterpulse_probability * self._raw_click(mu)

    def _raw_click(self, mu):
        pdc = self.detector.dark_count_probability
        # 1 - (1 - 2 pdc) e^{-eta mu}, written to keep accuracy when both terms are small.
        return -np.expm1(-self.eta * mu) + 2.0 * pdc * np.exp(-self.eta * mu)

    def photon_yield(self, n):
        """Click probability of an n-photon state, ``1 - (1 - 2 p_dc)(1 - eta)^n`` (with afterpulsing)."""
        n = np.asarray(n, dtype=float)
        pdc = self.detector.dark_count_probability
        t = np.exp(n * np.log1p(-self.eta))
        return (1.0 - t + 2.0 * pdc * t) * (1.0 + self.detector.afterpulse_probability)

    def photon_error_yield(self, n):
        """Erroneous-click probability of an n-photon state, ``p_dc + e_mis (1 - (1-eta)^n)`` (+ afterpulses)."""
        n = np.asarray(n, dtype=float)
        det = self.detector
        t = np.exp(n * np.log1p(-self.eta))
        raw = 1.0 - t + 2.0 * det.dark_count_probability * t
        return det.dark_count_probability + det.misalignment_error * (1.0 - t) + 0.5 * det.afterpulse_probability * raw

    # ---- dead time ---------------------------------------------------------------------------
    def live_fraction(self, mean_click_probability):
        """Fraction of pulses for which the detectors are live, ``1 / (1 + f Dbar tau)`` (vectorised).

        Non-paralysable dead time ``tau`` after each click; ``f`` the repetition rate.  Without a rate or
        a dead time the fraction is 1.
        """
        f = self.source.repetition_rate_hz
        tau = self.detector.dead_time_s
        if f is None or tau == 0.0:
            return 1.0 if np.ndim(mean_click_probability) == 0 else np.ones(np.shape(mean_click_probability))
        out = 1.0 / (1.0 + f * np.asarray(mean_click_probability, dtype=float) * tau)
        return float(out) if out.ndim == 0 else out

    # ---- counts ------------------------------------------------------------------------------
    def expected_counts(self, pulses, intensities, probabilities, key_basis_probability) -> ExpectedCounts:
        """Expected counts for ``pulses`` pulses sent.

        Parameters
        ----------
        pulses : float
            Number of pulses sent (> 0).
        intensities : sequence of float
            Mean photon numbers (>= 0).
        probabilities : sequence of float
            Probability of each intensity (sum 1).
        key_basis_probability : float
            ``q_X``, the probability with which each side picks the key basis, in (0, 1).

        Returns
        -------
        ExpectedCounts
            ``N p_k q_X^2 D_k`` key-basis detections, ``N p_k q_X^2 E_k`` errors, and the same with
            ``(1 - q_X)^2`` for the test basis; dead time scales all of them.
        """
        mu = np.asarray(intensities, dtype=float)
        p = np.asarray(probabilities, dtype=float)
        qx = float(key_basis_probability)
        d = self.click_probability(mu)
        e = self.error_probability(mu)
        live = self.live_fraction(float(np.dot(p, d)))
        wx = pulses * p * qx * qx * live
        wz = pulses * p * (1.0 - qx) ** 2 * live
        return ExpectedCounts(wx * d, wx * e, wz * d, wz * e, live)

    def block_fill_time_s(self, pulses) -> float | None:
        """Seconds to send ``pulses`` pulses at the source's repetition rate (None without a rate)."""
        f = self.source.repetition_rate_hz
        return None if f is None else float(pulses) / f

    def as_dict(self) -> dict:
        """JSON-ready mapping with the ``link``, ``detector`` and ``source`` tables.

        Returns
        -------
        dict
        """
        return {"link": asdict(self.link), "detector": asdict(self.detector), "source": asdict(self.source)}


def check_intensity_list(field: str, values) -> tuple:
    """Validate a list of mean photon numbers: non-negative, finite, strictly descending."""
    if not isinstance(values, (list, tuple)) or len(values) == 0:
        raise InputError(field, values, "a non-empty list of mean photon numbers in descending order")
    out = []
    for i, v in enumerate(values):
        out.append(float(_NONNEG.check_scalar(f"{field}[{i}]", v)))
    for i in range(1, len(out)):
        if not out[i] < out[i - 1]:
            raise InputError(f"{field}[{i}]", out[i], f"a value below {field}[{i-1}] = {out[i-1]!r} "
                             "(intensities strictly descending)")
    return tuple(out)
