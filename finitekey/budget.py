"""The epsilon ledger: named failure-probability terms and how they add up.

A QKD protocol is called epsilon-secure when it is ``eps_cor``-correct and
``eps_sec``-secret with ``eps_cor + eps_sec <= eps``; composability of this
definition is what lets the terms of a proof simply add.  Each proof spends its
secrecy budget on several named events (parameter estimation failing, the
smoothing of the min-entropy, privacy amplification, ...), some of which enter
the sum more than once.  :class:`Ledger` records every term with its weight so
that a reader can check the sum, and every result object carries one.

References
----------
.. [1] C. Portmann and R. Renner, "Cryptographic security of quantum key
   distribution", arXiv:1409.3525 (2014) -- the composable definition and the
   additivity of correctness and secrecy.
.. [2] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, "Tight finite-key
   analysis for quantum cryptography", Nat. Commun. 3, 634 (2012).
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import Mapping, Sequence

from .domains import PROBABILITY, Domain
from .errors import InputError

__all__ = ["Role", "Charge", "TermSpec", "LedgerTerm", "Ledger", "allocate", "squared_down"]


class Role(enum.Enum):
    """Which half of the security definition a term belongs to."""

    CORRECTNESS = "correctness"
    SECRECY = "secrecy"


class Charge(enum.Enum):
    """How a term's epsilon enters the security claim.

    ``FAILURE``
        A failure probability charged once per event: the bound it guards is evaluated at failure
        probability ``eps`` and each of the ``multiplicity`` events adds ``eps`` (trace-distance argument
        on the classical split "all bounds hold / some bound fails").
    ``SMOOTHING``
        A smoothing parameter of a smooth entropy.  Where an estimation event is attached to it (for
        example the phase-error bound of the uncertainty relation), that event must fail with probability
        at most ``eps**2`` (removing an event of probability ``delta`` moves the state by ``sqrt(delta)`` in
        purified distance), and every appearance of ``eps`` in the smoothing parameter of the final smooth
        min-entropy costs ``2 eps`` of secrecy (the leftover hash lemma with smoothing charges twice the
        smoothing parameter).  ``multiplicity`` counts how often ``eps`` enters that smoothing parameter (a
        chain rule can double it).
    ``HASHING``
        The leftover-hash term of privacy amplification, charged once.
    """

    FAILURE = "failure"
    SMOOTHING = "smoothing"
    HASHING = "hashing"

    @property
    def factor(self) -> int:
        """Secrecy cost of one appearance of the epsilon: 2 for a smoothing parameter, else 1."""
        return 2 if self is Charge.SMOOTHING else 1

    @property
    def meaning(self) -> str:
        return {Charge.FAILURE: "failure probability, charged once per event",
                Charge.SMOOTHING: "smoothing parameter: attached event at probability eps^2, costs 2 eps "
                                  "per appearance",
                Charge.HASHING: "leftover hash lemma term, charged once"}[self]


@dataclass(frozen=True, slots=True)
class TermSpec:
    """Declaration of a ledger term by a protocol.

    Parameters
    ----------
    name : str
        Stable machine name, e.g. ``"count_estimation"``.
    role : Role
    charge : Charge
        How the epsilon enters the security claim (see :class:`Charge`).
    multiplicity : int
        Number of events (``FAILURE``) or of appearances in the final smoothing (``SMOOTHING``).  The
        term's weight (what ``eps`` is multiplied by in eps_sec or eps_cor) is
        ``multiplicity * charge.factor``.
    description : str
        What failure event the term covers.
    default_fraction : float
        Default share of the secrecy budget that is split (secrecy terms only, not pinned ones).
    pinned : str or None
        ``"eps_cor"``: the epsilon is not split from eps_sec but equals the correctness parameter (an event
        whose probability the correctness argument already bounds, and which also breaks secrecy); its
        contribution is taken from eps_sec before the split.
    """

    name: str
    role: Role
    charge: Charge = Charge.FAILURE
    multiplicity: int = 1
    description: str = ""
    default_fraction: float = 0.0
    pinned: str | None = None

    @property
    def weight(self) -> int:
        return self.multiplicity * self.charge.factor


@dataclass(frozen=True, slots=True)
class LedgerTerm:
    """One spent term: its epsilon, how it is charged and what it pays for."""

    name: str
    epsilon: float
    role: Role
    charge: Charge = Charge.FAILURE
    multiplicity: int = 1
    description: str = ""

    @property
    def weight(self) -> int:
        """``multiplicity * charge.factor``: how many times ``epsilon`` enters the sum."""
        return self.multiplicity * self.charge.factor

    @property
    def contribution(self) -> float:
        """``weight * epsilon``: what the term adds to eps_sec or eps_cor."""
        return self.weight * self.epsilon

    def as_dict(self) -> dict:
        """JSON-ready mapping: name, epsilon, role, charge, multiplicity, weight, contribution, description.

        Returns
        -------
        dict
        """
        return {"name": self.name, "epsilon": self.epsilon, "role": self.role.value, "charge": self.charge.value,
                "multiplicity": self.multiplicity, "weight": self.weight, "contribution": self.contribution,
                "description": self.description}


def squared_down(eps: float) -> float:
    """``eps**2`` rounded down (exactly: the float never exceeds the real square).

    Raises
    ------
    InputError
        When the square underflows to 0 (a budget below about 1e-154).
    """
    sq = eps * eps
    while Fraction(sq) > Fraction(eps) ** 2:
        sq = math.nextafter(sq, 0.0)
    if not sq > 0.0:
        raise InputError("eps_sec", eps, "a budget whose smoothing term squared is a positive float "
                         "(smoothing epsilon above ~1e-154)")
    return sq


@dataclass(frozen=True)
class Ledger:
    """All epsilon terms of one result, with their sums.

    The key-length code reads epsilons only through :meth:`failure_probability` (the probability at which
    an estimation bound is evaluated), :meth:`smoothing` and :meth:`hashing`; each checks the term's
    declared :class:`Charge`, so a term cannot be used in a way its declaration does not pay for.

    Attributes
    ----------
    terms : tuple of LedgerTerm
    eps_cor : float
        Sum of the correctness contributions.
    eps_sec : float
        Sum of the secrecy contributions.
    eps_total : float
        ``eps_cor + eps_sec``, the composable security parameter.
    """

    terms: tuple

    @property
    def eps_cor(self) -> float:
        return math.fsum(t.contribution for t in self.terms if t.role is Role.CORRECTNESS)

    @property
    def eps_sec(self) -> float:
        return math.fsum(t.contribution for t in self.terms if t.role is Role.SECRECY)

    @property
    def eps_total(self) -> float:
        return math.fsum(t.contribution for t in self.terms)

    def __getitem__(self, name: str) -> LedgerTerm:
        for t in self.terms:
            if t.name == name:
                return t
        raise KeyError(name)

    def __contains__(self, name: str) -> bool:
        return any(t.name == name for t in self.terms)

    def epsilon(self, name: str) -> float:
        """The epsilon of the term called ``name`` (for reports; key-length code uses the typed readers)."""
        return self[name].epsilon

    def failure_probability(self, name: str) -> float:
        """Probability at which the bound guarded by term ``name`` must be evaluated.

        ``eps`` for a ``FAILURE`` term, ``eps**2`` (rounded down) for a ``SMOOTHING`` term whose event it
        guards.  A ``HASHING`` term guards no estimation event.
        """
        t = self[name]
        if t.charge is Charge.FAILURE:
            return t.epsilon
        if t.charge is Charge.SMOOTHING:
            return squared_down(t.epsilon)
        raise TypeError(f"ledger term {name!r} is charged as {t.charge.value}: it guards no estimation event")

    def smoothing(self, name: str) -> float:
        """The smoothing parameter of term ``name`` (must be declared ``SMOOTHING``)."""
        return self._typed(name, Charge.SMOOTHING)

    def hashing(self, name: str) -> float:
        """The leftover-hash epsilon of term ``name`` (must be declared ``HASHING``)."""
        return self._typed(name, Charge.HASHING)

    def _typed(self, name: str, charge: Charge) -> float:
        t = self[name]
        if t.charge is not charge:
            raise TypeError(f"ledger term {name!r} is charged as {t.charge.value}, not {charge.value}")
        return t.epsilon

    def as_list(self) -> list:
        """Every term as :meth:`LedgerTerm.as_dict`, in ledger order.

        Returns
        -------
        list of dict
        """
        return [t.as_dict() for t in self.terms]

    def fractions(self) -> dict:
        """Share of eps_sec taken by each secrecy term (the split)."""
        s = self.eps_sec
        return {t.name: t.contribution / s for t in self.terms if t.role is Role.SECRECY}

    def lines(self) -> list:
        """Human-readable rows: name, charge, weight, epsilon, contribution."""
        rows = []
        for t in self.terms:
            rows.append(f"{t.name:<32} {t.role.value:<11} {t.charge.value:<9} {t.weight:>2} x {t.epsilon:.3e} "
                        f"= {t.contribution:.3e}")
        rows.append(f"{'eps_cor (sum of correctness)':<57} {self.eps_cor:.3e}")
        rows.append(f"{'eps_sec (sum of secrecy)':<57} {self.eps_sec:.3e}")
        rows.append(f"{'eps_total = eps_cor + eps_sec':<57} {self.eps_total:.3e}")
        return rows


def _down(x: float) -> float:
    return math.nextafter(x, 0.0)


def allocate(eps_sec: float, eps_cor: float, specs: Sequence[TermSpec],
             fractions: Mapping[str, float] | None = None) -> Ledger:
    """Split ``eps_sec`` over the secrecy terms of ``specs`` and give ``eps_cor`` to the correctness term.

    Parameters
    ----------
    eps_sec, eps_cor : float
        Targets, each in (0, 1).
    specs : sequence of TermSpec
        The protocol's terms.  Exactly one correctness term is expected.  Secrecy terms with
        ``pinned="eps_cor"`` take ``eps_cor`` as their epsilon; the rest of eps_sec is split.
    fractions : mapping, optional
        Share of the split part of eps_sec for each split secrecy term (names as in ``specs``); they must
        be positive and sum to 1.  Defaults to each spec's ``default_fraction``.

    Returns
    -------
    Ledger
        Each split secrecy epsilon is ``(eps_sec - pinned) * fraction / weight``, rounded down so that the
        weighted sum never exceeds ``eps_sec`` (checked in exact rational arithmetic).

    Raises
    ------
    InputError
        On targets outside (0, 1), unknown term names, fractions that are not positive or do not sum to 1,
        or pinned terms that leave nothing of eps_sec to split.
    """
    eps_sec = PROBABILITY.check("eps_sec", eps_sec)
    eps_cor = PROBABILITY.check("eps_cor", eps_cor)
    secrecy = [s for s in specs if s.role is Role.SECRECY and s.pinned is None]
    pinned = [s for s in specs if s.role is Role.SECRECY and s.pinned is not None]
    for s in pinned:
        if s.pinned != "eps_cor":
            raise ValueError(f"term {s.name}: unknown pin {s.pinned!r}")
    pinned_cost = math.fsum(s.weight * eps_cor for s in pinned)
    budget = eps_sec - pinned_cost
    if pinned and not budget > 0.5 * eps_sec:
        raise InputError("eps_cor", eps_cor, f"at most half of eps_sec = {eps_sec!r} divided by "
                         f"{sum(s.weight for s in pinned)} for this analysis (its secrecy also pays for an "
                         "undetected error-correction failure: " + ", ".join(s.name for s in pinned) + ")")
    names = [s.name for s in secrecy]
    if fractions is None:
        fractions = {s.name: s.default_fraction for s in secrecy}
    unknown = sorted(set(fractions) - set(names))
    if unknown:
        raise InputError(f"epsilon_split.{unknown[0]}", fractions[unknown[0]], "one of the terms " + ", ".join(names))
    missing = [n for n in names if n not in fractions]
    if missing:
        raise InputError(f"epsilon_split.{missing[0]}", None,
                         "a share in (0, 1) for every secrecy term: " + ", ".join(names))
    share = Domain(0.0, 1.0, lower_open=True)
    fr = {n: share.check(f"epsilon_split.{n}", fractions[n]) for n in names}
    total = math.fsum(fr.values())
    if abs(total - 1.0) > 1e-9:
        raise InputError("epsilon_split", dict(fractions), "shares that sum to 1 (they sum to %.12g)" % total)
    terms = []
    for s in specs:
        if s.role is Role.CORRECTNESS:
            eps = _down(eps_cor / s.weight) if s.weight > 1 else eps_cor
        elif s.pinned is not None:
            eps = eps_cor
        else:
            eps = _down(budget * fr[s.name] / total / s.weight)
        terms.append(LedgerTerm(s.name, eps, s.role, s.charge, s.multiplicity, s.description))
    ledger = Ledger(tuple(terms))
    # Rounding guard: shrink the split terms until the weighted sum is within the target, compared in exact
    # rationals (the float sum of the rounded products weight * epsilon can sit below an exact sum that
    # exceeds eps_sec by a fraction of an ulp).
    split_names = set(names)
    while _exact_secrecy(ledger) > Fraction(eps_sec):
        ledger = Ledger(tuple(replace(t, epsilon=_down(t.epsilon)) if t.name in split_names else t
                              for t in ledger.terms))
    return ledger


def _exact_secrecy(ledger: Ledger) -> Fraction:
    """The secrecy sum ``sum weight * epsilon`` in exact rational arithmetic."""
    return sum((Fraction(t.weight) * Fraction(t.epsilon) for t in ledger.terms if t.role is Role.SECRECY),
               Fraction(0))
