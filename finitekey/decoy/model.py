"""What the decoy engine is told: senders, settings, intervals on expected counts, targets, joint rows.

A *sender* emits phase-randomised coherent pulses whose intensity it draws from a finite set with fixed
probabilities.  With ``S`` senders (one for BB84, two for MDI or twin-field set-ups) a *setting* is a tuple
``k = (k_1, ..., k_S)`` of intensity indices and a *photon-number tag* a tuple ``n = (n_1, ..., n_S)``.
Settings are ordered as ``itertools.product`` of the senders' index ranges (the first sender slowest).

Everything here validates and converts; the mathematics is in :mod:`.tagging`, :mod:`.lp` and
:mod:`.closed_forms` (proof note ``proofs_notes/decoy/tagging.md``).
"""

from __future__ import annotations

import itertools
import math
import numbers
from dataclasses import dataclass
from fractions import Fraction

from flint import arb

from ..compile import to_arb
from ..errors import InputError

__all__ = ["Sender", "JointRow", "as_senders", "settings", "parse_intervals", "parse_target", "parse_joint",
           "parse_known", "joint_coefficients", "ANY"]

#: Wildcard entry of a target: every photon number of that sender.
ANY = "*"




@dataclass(frozen=True)
class Sender:
    """One sender: intensities (mean photon numbers) and the probability of choosing each.

    Parameters
    ----------
    intensities : tuple of float
        Distinct, finite, ``>= 0`` (0 is the vacuum); any order.
    probabilities : tuple of float
        Same length, each in ``(0, 1]``, summing to at most 1 (up to 1e-9; a sender may also send other states, e.g.
        another basis, that the decoy estimate does not use).
    """

    intensities: tuple
    probabilities: tuple

    def __post_init__(self):
        mu, p = tuple(self.intensities), tuple(self.probabilities)
        object.__setattr__(self, "intensities", mu)
        object.__setattr__(self, "probabilities", p)
        if len(mu) < 1:
            raise InputError("senders.intensities", mu, "at least one intensity")
        if len(p) != len(mu):
            raise InputError("senders.probabilities", p, f"{len(mu)} probabilities, one per intensity")
        for m in mu:
            if isinstance(m, bool) or not isinstance(m, numbers.Real) or not math.isfinite(m) or m < 0:
                raise InputError("senders.intensities", mu, "finite real numbers >= 0")
        if len(set(float(m) for m in mu)) != len(mu):
            raise InputError("senders.intensities", mu, "distinct intensities")
        for q in p:
            if isinstance(q, bool) or not isinstance(q, numbers.Real) or not math.isfinite(q) or not 0 < q <= 1:
                raise InputError("senders.probabilities", p, "real numbers in (0, 1]")
        if math.fsum(float(q) for q in p) > 1 + 1e-9:
            raise InputError("senders.probabilities", p, "probabilities summing to at most 1")

    @property
    def size(self) -> int:
        """Number of intensities."""
        return len(self.intensities)


def as_senders(senders) -> tuple:
    """Normalise ``senders`` to a tuple of :class:`Sender`.

    Parameters
    ----------
    senders : Sender, or a sequence of Sender or of ``(intensities, probabilities)`` pairs

    Returns
    -------
    tuple of Sender
    """
    if isinstance(senders, Sender):
        return (senders,)
    if isinstance(senders, (str, bytes)) or not hasattr(senders, "__iter__"):
        raise InputError("senders", senders, "a Sender or a sequence of senders")
    out = []
    for s in senders:
        if isinstance(s, Sender):
            out.append(s)
        elif isinstance(s, (tuple, list)) and len(s) == 2:
            out.append(Sender(tuple(s[0]), tuple(s[1])))
        else:
            raise InputError("senders", senders, "Sender objects or (intensities, probabilities) pairs")
    if not out:
        raise InputError("senders", senders, "at least one sender")
    return tuple(out)


def settings(senders) -> tuple:
    """All settings ``k`` (tuples of intensity indices, one per sender), in the engine's order.

    Parameters
    ----------
    senders : see :func:`as_senders`

    Returns
    -------
    tuple of tuple of int
    """
    ss = as_senders(senders)
    return tuple(itertools.product(*(range(s.size) for s in ss)))


def _exact(field: str, v):
    """A number as an arb ball (exact for int, float, Fraction; arb balls kept)."""
    if isinstance(v, bool):
        raise InputError(field, v, "a real number")
    if isinstance(v, arb):
        if not v.is_finite():
            raise InputError(field, v, "a finite real number")
        return v
    if isinstance(v, Fraction):
        return arb(v.numerator) / v.denominator
    if isinstance(v, numbers.Real):
        f = float(v) if not isinstance(v, int) else v
        if isinstance(f, float) and not math.isfinite(f):
            raise InputError(field, v, "a finite real number")
        return to_arb(f) if isinstance(f, float) else arb(f)
    raise InputError(field, v, "a real number (int, float, Fraction or arb)")


def _by_setting(field: str, values, keys: tuple) -> list:
    """Values listed in setting order, or a mapping setting -> value (every setting present)."""
    if isinstance(values, dict):
        out = []
        one = len(keys[0]) == 1
        for k in keys:
            if k in values:
                out.append(values[k])
            elif one and k[0] in values:
                out.append(values[k[0]])
            else:
                raise InputError(f"{field}[{k}]", None, f"a value for every setting {list(keys)}")
        extra = [key for key in values if key not in keys and not (one and (key,) in keys)]
        if extra:
            raise InputError(field, extra[0], f"settings among {list(keys)}")
        return out
    if isinstance(values, (str, bytes)) or not hasattr(values, "__len__"):
        raise InputError(field, values, f"a sequence of {len(keys)} values (settings {list(keys)}) or a mapping")
    if len(values) != len(keys):
        raise InputError(field, f"{len(values)} values", f"{len(keys)} values, one per setting {list(keys)}")
    return list(values)


def parse_intervals(senders, lo, hi) -> tuple:
    """Validate certified intervals ``[lo_k, hi_k]`` on the expected counts; return two lists of arb.

    Parameters
    ----------
    senders : tuple of Sender
    lo, hi : sequence in setting order or mapping setting -> value
        Real numbers ``lo_k <= hi_k``, ``hi_k >= 0`` (a negative lower end is a valid, weak bound); int,
        float, Fraction or arb (an arb ball's lower end is used for ``lo`` and its upper end for ``hi``).

    Returns
    -------
    (list of arb, list of arb)
    """
    keys = settings(senders)
    lo_l = _by_setting("lo", lo, keys)
    hi_l = _by_setting("hi", hi, keys)
    a = [_exact(f"lo[{k}]", v) for k, v in zip(keys, lo_l)]
    b = [_exact(f"hi[{k}]", v) for k, v in zip(keys, hi_l)]
    for k, x, y in zip(keys, a, b):
        if y.upper() < 0:
            raise InputError(f"hi[{k}]", y, "an upper bound >= 0 on an expected count")
        if x.lower() > y.upper():
            raise InputError(f"lo[{k}]", x, f"at most hi[{k}] = {y}")
    return a, b


def parse_target(senders, target) -> frozenset:
    """A target as a set of photon-number patterns.

    Parameters
    ----------
    senders : tuple of Sender
    target : tuple, or a sequence of tuples
        Each tuple has one entry per sender: a photon number ``>= 0`` or ``"*"`` (every photon number of
        that sender).  A sequence means the union, e.g. ``[(0, "*"), ("*", 0)]``.

    Returns
    -------
    frozenset of tuple
        The patterns (entries int or ``"*"``).
    """
    S = len(senders)
    allowed = f"a tuple of {S} entries (photon number >= 0 or '*'), or a list of such tuples"
    if isinstance(target, tuple) and (len(target) == 0 or not isinstance(target[0], (tuple, list))):
        pats = [target]
    elif isinstance(target, (list, tuple)) and target:
        pats = list(target)
    else:
        raise InputError("target", target, allowed)
    out = []
    for t in pats:
        if not isinstance(t, (tuple, list)) or len(t) != S:
            raise InputError("target", target, allowed)
        for e in t:
            if e == ANY:
                continue
            if isinstance(e, bool) or not isinstance(e, numbers.Integral) or e < 0:
                raise InputError("target", target, allowed)
        out.append(tuple(e if e == ANY else int(e) for e in t))
    return frozenset(out)


@dataclass(frozen=True)
class JointRow:
    """A certified interval on a linear combination ``sum_k c_k E_k`` of expected counts.

    Parameters
    ----------
    coefficients : tuple of float
        One per setting (engine order), or a mapping setting -> coefficient (missing settings 0); exact
        floats.
    lo, hi : real or arb
        The interval (``lo <= hi``; ``None`` for an open side).
    """

    coefficients: object
    lo: object = None
    hi: object = None


def joint_coefficients(keys: tuple, c, i: int) -> tuple:
    """A joint row's coefficients as a tuple of floats in setting order (mapping: missing settings 0).

    Parameters
    ----------
    keys : tuple of settings
    c : sequence or mapping setting -> coefficient
    i : int
        Row index (for messages).

    Returns
    -------
    tuple of float
    """
    if isinstance(c, dict):
        one = len(keys[0]) == 1
        cm = {((k,) if one and not isinstance(k, tuple) else k): v for k, v in c.items()}
        bad = [k for k in cm if k not in keys]
        if bad:
            raise InputError(f"joint[{i}].coefficients", bad[0], f"settings among {list(keys)}")
        c = [cm.get(k, 0.0) for k in keys]
    c = _by_setting(f"joint[{i}].coefficients", c, keys)
    cf = []
    for v in c:
        if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(float(v)):
            raise InputError(f"joint[{i}].coefficients", v, "finite real numbers")
        cf.append(float(v))
    return tuple(cf)


def parse_joint(senders, joint) -> tuple:
    """Validate joint rows; return ``((coefficients tuple of float, lo arb or None, hi arb or None), ...)``.

    Parameters
    ----------
    senders : tuple of Sender
    joint : sequence of JointRow (or ``(coefficients, lo, hi)`` triples)

    Returns
    -------
    tuple
    """
    keys = settings(senders)
    out = []
    for i, row in enumerate(joint or ()):
        if isinstance(row, (tuple, list)) and len(row) == 3:
            row = JointRow(*row)
        if not isinstance(row, JointRow):
            raise InputError(f"joint[{i}]", row, "a JointRow(coefficients, lo, hi)")
        cf = joint_coefficients(keys, row.coefficients, i)
        lo = None if row.lo is None else _exact(f"joint[{i}].lo", row.lo)
        hi = None if row.hi is None else _exact(f"joint[{i}].hi", row.hi)
        if lo is None and hi is None:
            raise InputError(f"joint[{i}]", row, "at least one of lo, hi")
        if lo is not None and hi is not None and lo.lower() > hi.upper():
            raise InputError(f"joint[{i}].lo", row.lo, f"at most hi = {row.hi}")
        out.append((tuple(cf), lo, hi))
    return tuple(out)


def parse_known(senders, known) -> tuple:
    """Validate known certified bounds on photon-number counts: ``{target: (lo or None, hi or None)}``.

    Parameters
    ----------
    senders : tuple of Sender
    known : mapping target -> (lo, hi), or None
        E.g. ``{(0,): (None, s0_upper)}``: an upper bound on the vacuum detections from the errors.

    Returns
    -------
    tuple of (frozenset of patterns, arb or None, arb or None)
    """
    out = []
    for t, bounds in (known or {}).items():
        pats = parse_target(senders, t)
        if not isinstance(bounds, (tuple, list)) or len(bounds) != 2:
            raise InputError(f"known[{t}]", bounds, "a pair (lo or None, hi or None)")
        lo = None if bounds[0] is None else _exact(f"known[{t}].lo", bounds[0])
        hi = None if bounds[1] is None else _exact(f"known[{t}].hi", bounds[1])
        if lo is not None and hi is not None and lo.lower() > hi.upper():
            raise InputError(f"known[{t}].lo", bounds[0], f"at most hi = {bounds[1]}")
        out.append((pats, lo, hi))
    return tuple(out)


