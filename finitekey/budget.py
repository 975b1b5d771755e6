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
from dataclasses import dataclass
from typing import Mapping, Sequence

from .domains import PROBABILITY, Domain
from .errors import InputError

__all__ = ["Role", "TermSpec", "LedgerTerm", "Ledger", "allocate"]


class Role(enum.Enum):
    """Which half of the security definition a term belongs to."""

    CORRECTNESS = "correctness"
    SECRECY = "secrecy"


@dataclass(frozen=True, slots=True)
class TermSpec:
    """Declaration of a ledger term by a protocol.

    Parameters
    ----------
    name : str
        Stable machine name, e.g. ``"phase_error_estimation"``.
    role : Role
    weight : int
        How many times the term's epsilon enters the total (e.g. 2 for a
        smoothing parameter that appears as ``2 eps`` in the trace distance).
    description : str
        What failure event the term covers.
    default_fraction : float
        Default share of the secrecy budget (secrecy terms only).
    """

    name: str
    role: Role
    weight: int = 1
    description: str = ""
    default_fraction: float = 0.0


@dataclass(frozen=True, slots=True)
class LedgerTerm:
    """One spent term: its epsilon, its weight and what it pays for."""

    name: str
    epsilon: float
    role: Role
    weight: int = 1
    description: str = ""

    @property
    def contribution(self) -> float:
        """``weight * epsilon``: what the term adds to eps_sec or eps_cor."""
        return self.weight * self.epsilon

    def as_dict(self) -> dict:
        return {"name": self.name, "epsilon": self.epsilon, "role": self.role.value, "weight": self.weight,
                "contribution": self.contribution, "description": self.description}


@dataclass(frozen=True)
class Ledger:
    """All epsilon terms of one result, with their sums.

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

    def epsilon(self, name: str) -> float:
        """The epsilon of the term called ``name``."""
        return self[name].epsilon

    def as_list(self) -> list:
        return [t.as_dict() for t in self.terms]

    def fractions(self) -> dict:
        """Share of eps_sec taken by each secrecy term (the split)."""
        s = self.eps_sec
        return {t.name: t.contribution / s for t in self.terms if t.role is Role.SECRECY}

    def lines(self) -> list:
        """Human-readable rows: name, epsilon, weight, contribution."""
        rows = []
        for t in self.terms:
            rows.append(f"{t.name:<32} {t.role.value:<11} {t.weight:>2} x {t.epsilon:.3e} = {t.contribution:.3e}")
        rows.append(f"{'eps_cor (sum of correctness)':<47} {self.eps_cor:.3e}")
        rows.append(f"{'eps_sec (sum of secrecy)':<47} {self.eps_sec:.3e}")
        rows.append(f"{'eps_total = eps_cor + eps_sec':<47} {self.eps_total:.3e}")
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
        The protocol's terms.  Exactly one correctness term is expected.
    fractions : mapping, optional
        Share of eps_sec for each secrecy term (names as in ``specs``); they must
        be positive and sum to 1.  Defaults to each spec's ``default_fraction``.

    Returns
    -------
    Ledger
        Each secrecy epsilon is ``eps_sec * fraction / weight``, rounded down so
        that the weighted sum never exceeds ``eps_sec``.

    Raises
    ------
    InputError
        On targets outside (0, 1), unknown term names, or fractions that are
        not positive or do not sum to 1.
    """
    eps_sec = PROBABILITY.check("eps_sec", eps_sec)
    eps_cor = PROBABILITY.check("eps_cor", eps_cor)
    secrecy = [s for s in specs if s.role is Role.SECRECY]
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
        else:
            eps = _down(eps_sec * fr[s.name] / total / s.weight)
        terms.append(LedgerTerm(s.name, eps, s.role, s.weight, s.description))
    ledger = Ledger(tuple(terms))
    # Rounding guard: shrink until the weighted sums are within the targets.
    while ledger.eps_sec > eps_sec:
        ledger = Ledger(tuple(LedgerTerm(t.name, _down(t.epsilon) if t.role is Role.SECRECY else t.epsilon, t.role,
                                         t.weight, t.description) for t in ledger.terms))
    return ledger
