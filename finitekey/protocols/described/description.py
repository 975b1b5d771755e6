"""A protocol described by its states and measurements: the description format, its validation, its problem.

A description is a part of a TOML (or JSON) mapping with three tables:

``[description]``
    ``label`` (free text) and ``tolerance`` (how far a matrix may be from Hermitian, positive semidefinite,
    unit trace or a sum to the identity; default 1e-9).
``[alice]``
    ``settings``: a list of tables, one per preparation setting (a basis), each with ``name``,
    ``probability`` (of choosing the setting), ``states`` (the signal states, each a ket -- a list of
    entries -- or a density matrix -- a list of rows), ``state_probabilities`` (given the setting; default
    uniform) and, for a setting that makes key, ``key`` (the key value of each state, 0, 1, ...).
``[bob]``
    ``settings``: one table per measurement setting: ``name``, ``probability``, ``povm`` (the POVM
    elements of that setting, matrices summing to the identity), optional ``labels`` (outcome names) and
    ``discard`` (indices of outcomes that are announced and dropped from the key, e.g. no click).
``[sifting]``
    ``key_pairs``: the (Alice setting, Bob setting) name pairs whose rounds make key; all other pairs are
    discarded after the settings are announced.

**Complex entries** are written as a number (real) or a string such as ``"0.5-0.5j"`` or ``"0.5-0.5i"``
(Python's ``complex`` syntax, with ``i`` accepted for ``j``).

Every failure is one :class:`~finitekey.errors.InputError` naming the element, e.g.
``alice.settings[1].states[2]``.

The entanglement-based picture (source replacement): Alice prepares signal ``j`` (setting ``x``, state
``k``) with probability ``p_x p_{k|x}``; the equivalent source is ``|Psi> = sum_j sqrt(p_j) |j>_A (x)
|psi_j>_B`` (a mixed signal is purified into ``rank`` orthogonal vectors of its own block of A), Alice
measures ``{P_j}`` (projectors on the blocks), and her reduced state ``rho_A`` is fixed whatever Eve does.
Bob's overall POVM is ``{q_y M_{b|y}}`` over his settings ``y`` with probabilities ``q_y``.

References
----------
.. [1] M. Curty, M. Lewenstein, N. Lütkenhaus, Phys. Rev. Lett. 92, 217903 (2004) -- the source-replacement
   (entanglement-based) picture of a prepare-and-measure protocol (recalled from memory).
.. [2] P. J. Coles, E. M. Metodiev, N. Lütkenhaus, Nat. Commun. 7, 11712 (2016); A. Winick, N. Lütkenhaus,
   P. J. Coles, Quantum 2, 77 (2018) -- the key rate as a minimisation over states consistent with the
   statistics, with Alice's reduced state fixed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...domains import Domain
from ...errors import InputError

__all__ = ["Setting", "Description", "parse_description", "parse_matrix", "DEFAULT_TOLERANCE", "TOLERANCE_DOMAIN",
           "Picture", "picture", "honest_state", "joint_table", "problem", "picture_index", "DESCRIPTION_SECTIONS", "parse_probabilities"]

#: Default tolerance of the matrix checks (Hermitian, positive semidefinite, unit trace, POVM sum).
DEFAULT_TOLERANCE = 1e-9
#: Allowed tolerances.  The certificate charges the distance of a near-PSD element from the PSD cone only
#: through the objective's value (the Fannes term), not through its gradient, so the matrices must be close to
#: physical: a check looser than 1e-6 would let through POVM elements with eigenvalues near -1e-3, i.e. a
#: problem that is not the one measured.  Round measured matrices to physical ones before describing them.
TOLERANCE_DOMAIN = Domain(0.0, 1e-6, lower_open=True)
#: Largest signal dimension accepted (the solver's problem grows as (dim_A dim_B)^2).
MAX_DIMENSION = 16
#: The tables a description occupies in a scenario or description file.
DESCRIPTION_SECTIONS = ("description", "alice", "bob", "sifting")

#: Largest modulus of a matrix or ket entry read: valid entries are at most 1; a moderately wrong entry is left
#: to the norm, trace and positivity checks (clearer messages), a huge one would overflow inside them.
_MAX_ENTRY = 1e6
#: Largest tolerance of the derived problem's checks (finitekey.numerical.model.KeyRateProblem needs < 1e-2).
_MAX_PROBLEM_TOL = 5e-3
_SETTING_PROB = Domain(0.0, 1.0, lower_open=True)
_PROB = Domain(0.0, 1.0)


@dataclass(frozen=True)
class Setting:
    """One preparation (Alice) or measurement (Bob) setting.

    Attributes
    ----------
    name : str
    probability : float
        Probability of choosing the setting.
    elements : tuple of numpy.ndarray
        Alice: the signal states (density matrices); Bob: the POVM elements.
    labels : tuple of str
        Names of the states or outcomes.
    element_probabilities : tuple of float
        Alice: probability of each state given the setting; Bob: empty.
    key : tuple of int or None
        Alice: key value of each state (None for a setting that makes no key).
    discard : tuple of int
        Bob: outcomes announced and dropped (e.g. no click).
    """

    name: str
    probability: float
    elements: tuple
    labels: tuple
    element_probabilities: tuple = ()
    key: tuple | None = None
    discard: tuple = ()


@dataclass(frozen=True)
class Description:
    """A validated protocol description (see the module docstring).

    Attributes
    ----------
    label : str
    dim : int
        Dimension of the signal space (Bob's system).
    tolerance : float
    alice, bob : tuple of Setting
    key_pairs : tuple of (int, int)
        Indices (Alice setting, Bob setting) of the pairs that make key.
    key_size : int
        Number of key values (1 + the largest key value).
    """

    label: str
    dim: int
    tolerance: float
    alice: tuple
    bob: tuple
    key_pairs: tuple
    key_size: int

    def setting_index(self, party: str, name: str, field: str) -> int:
        """Index of the setting called ``name`` of ``party`` (``"alice"`` or ``"bob"``).

        Raises
        ------
        InputError
            Naming ``field`` when there is no such setting.
        """
        settings = self.alice if party == "alice" else self.bob
        for i, s in enumerate(settings):
            if s.name == name:
                return i
        raise InputError(field, name, f"the name of one of {party}'s settings: " + ", ".join(s.name for s in settings))

    def with_probabilities(self, alice: tuple | None = None, bob: tuple | None = None) -> "Description":
        """Copy with new setting probabilities (each tuple in setting order, validated by the caller)."""
        from dataclasses import replace
        a = self.alice if alice is None else tuple(replace(s, probability=float(p)) for s, p in zip(self.alice, alice))
        b = self.bob if bob is None else tuple(replace(s, probability=float(p)) for s, p in zip(self.bob, bob))
        return replace(self, alice=a, bob=b)

    def signal_count(self) -> int:
        """Number of Alice's signals (states over all her settings)."""
        return sum(len(s.elements) for s in self.alice)

    def to_dict(self) -> dict:
        """JSON-ready echo: names, probabilities, dimension and key pairs (not the matrices)."""
        return {"label": self.label, "dimension": self.dim, "tolerance": self.tolerance,
                "alice": [{"name": s.name, "probability": s.probability, "states": len(s.elements),
                           "key": None if s.key is None else list(s.key)} for s in self.alice],
                "bob": [{"name": s.name, "probability": s.probability, "outcomes": list(s.labels),
                         "discard": list(s.discard)} for s in self.bob],
                "key_pairs": [[self.alice[x].name, self.bob[y].name] for x, y in self.key_pairs]}


# ---------------------------------------------------------------------------------------------------------------
# Reading values
# ---------------------------------------------------------------------------------------------------------------
def _entry(value, field: str) -> complex:
    if isinstance(value, bool):
        raise InputError(field, value, "a number or a complex number written as a string, e.g. \"0.5-0.5j\"")
    if isinstance(value, (int, float)):
        z = complex(float(value), 0.0)
    elif isinstance(value, str):
        text = value.strip().replace(" ", "").replace("i", "j")
        try:
            z = complex(text)
        except ValueError:
            raise InputError(field, value, "a number or a complex number written as a string, e.g. "
                                           "\"0.5-0.5j\" (or \"0.5-0.5i\")") from None
    else:
        raise InputError(field, value, "a number or a complex number written as a string, e.g. \"0.5-0.5j\"")
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        raise InputError(field, value, "a finite number")
    if abs(z) > _MAX_ENTRY:
        # no entry of a state, a ket or a POVM element (0 <= M <= 1) exceeds 1 in modulus; huge entries would
        # only overflow inside the later checks
        raise InputError(field, value, "an entry of modulus at most 1e6 (entries of states and POVM elements are at "
                                       "most 1 in modulus)")
    return z


def parse_matrix(value, field: str, *, allow_ket: bool = False) -> tuple:
    """A square complex matrix (list of rows) or, with ``allow_ket``, a ket (list of entries).

    Returns
    -------
    (numpy.ndarray, bool)
        The matrix (complex, 2-D) or the ket (1-D), and whether it was a ket.

    Raises
    ------
    InputError
        Naming ``field`` (or ``field[i][j]`` for a bad entry).
    """
    what = "a square matrix (a list of rows)" + (" or a ket (a list of entries)" if allow_ket else "")
    if not isinstance(value, (list, tuple)) or not value:
        raise InputError(field, value, what)
    if all(not isinstance(v, (list, tuple)) for v in value):
        if not allow_ket:
            raise InputError(field, value, what)
        if len(value) > MAX_DIMENSION:
            raise InputError(field, f"a ket of dimension {len(value)}", f"dimension at most {MAX_DIMENSION}")
        return np.array([_entry(v, f"{field}[{i}]") for i, v in enumerate(value)], dtype=complex), True
    d = len(value)
    if d > MAX_DIMENSION:
        raise InputError(field, f"a {d} x {d} matrix", f"dimension at most {MAX_DIMENSION}")
    rows = []
    for i, row in enumerate(value):
        if not isinstance(row, (list, tuple)) or len(row) != d:
            raise InputError(f"{field}[{i}]", row, f"a row of {d} entries ({what}, {d} rows given)")
        rows.append([_entry(v, f"{field}[{i}][{j}]") for j, v in enumerate(row)])
    return np.array(rows, dtype=complex), False


def _check_psd(m: np.ndarray, field: str, tol: float, what: str) -> np.ndarray:
    herm = float(np.max(np.abs(m - m.conj().T)))
    if herm > tol:
        raise InputError(field, f"a matrix {herm:.3g} from Hermitian", f"{what}: Hermitian within tolerance {tol:g}")
    m = (m + m.conj().T) / 2
    low = float(np.min(np.linalg.eigvalsh(m)))
    if low < -tol:
        raise InputError(field, f"a matrix with eigenvalue {low:.6g}",
                         f"{what}: positive semidefinite within tolerance {tol:g}")
    return m


def parse_probabilities(value, count: int, field: str, tol: float, *, positive: bool = False) -> tuple:
    """``count`` probabilities summing to 1 within ``tol`` (each in [0, 1], or (0, 1] with ``positive``)."""
    if not isinstance(value, (list, tuple)) or len(value) != count:
        raise InputError(field, value, f"a list of {count} probabilities summing to 1")
    dom = _SETTING_PROB if positive else _PROB
    out = tuple(float(dom.check_scalar(f"{field}[{i}]", v)) for i, v in enumerate(value))
    total = math.fsum(out)
    if abs(total - 1.0) > tol:
        raise InputError(field, list(value), f"probabilities summing to 1 within {tol:g} (they sum to {total:.12g})")
    return out


def _table(data, name: str) -> dict:
    sec = data.get(name)
    if sec is None:
        raise InputError(name, None, f"a table [{name}] (missing)")
    if not isinstance(sec, dict):
        raise InputError(name, sec, f"a table [{name}]")
    return sec


def _keys(sec: dict, where: str, allowed: tuple) -> None:
    bad = [k for k in sec if k not in allowed]
    if bad:
        raise InputError(f"{where}.{bad[0]}", sec[bad[0]], "one of: " + ", ".join(allowed))


def _name(value, field: str) -> str:
    if not isinstance(value, str) or not value:
        raise InputError(field, value, "a non-empty name (a string)")
    return value


def _settings(sec: dict, party: str, dim: int | None, tol: float):
    field = f"{party}.settings"
    given = sec.get("settings")
    if not isinstance(given, list) or not given:
        raise InputError(field, given, "a non-empty list of settings ([[" + field + "]] tables)")
    out = []
    names = set()
    for i, s in enumerate(given):
        where = f"{field}[{i}]"
        if not isinstance(s, dict):
            raise InputError(where, s, "a table with name, probability and "
                             + ("states" if party == "alice" else "povm"))
        allowed = (("name", "probability", "states", "state_probabilities", "labels", "key") if party == "alice"
                   else ("name", "probability", "povm", "labels", "discard"))
        _keys(s, where, allowed)
        name = _name(s.get("name"), f"{where}.name")
        if name in names:
            raise InputError(f"{where}.name", name, "a name not used by another setting of " + party)
        names.add(name)
        if "probability" not in s:
            raise InputError(f"{where}.probability", None, "the probability of choosing the setting, in (0, 1]")
        prob = float(_SETTING_PROB.check_scalar(f"{where}.probability", s["probability"]))
        elems_key = "states" if party == "alice" else "povm"
        raw = s.get(elems_key)
        if not isinstance(raw, list) or not raw:
            raise InputError(f"{where}.{elems_key}", raw, "a non-empty list of "
                             + ("states (kets or density matrices)" if party == "alice" else "POVM elements (matrices)"))
        elems = []
        for j, r in enumerate(raw):
            ef = f"{where}.{elems_key}[{j}]"
            m, is_ket = parse_matrix(r, ef, allow_ket=(party == "alice"))
            d = m.shape[0]
            if dim is None:
                dim = d
            elif d != dim:
                raise InputError(ef, f"dimension {d}", f"dimension {dim}, as the first "
                                 + ("state" if party == "alice" else "matrix") + " of the description")
            if party == "alice":
                if is_ket:
                    norm = float(np.linalg.norm(m))
                    if abs(norm - 1.0) > tol:
                        raise InputError(ef, f"a ket of norm {norm:.12g}", f"a ket of norm 1 within tolerance {tol:g}")
                    m = np.outer(m, m.conj())
                else:
                    m = _check_psd(m, ef, tol, "a density matrix")
                    tr = complex(np.trace(m)).real
                    if abs(tr - 1.0) > tol:
                        raise InputError(ef, f"a matrix of trace {tr:.12g}",
                                         f"a density matrix of unit trace within tolerance {tol:g}")
            else:
                m = _check_psd(m, ef, tol, "a POVM element")
            elems.append(m)
        labels = s.get("labels")
        if labels is None:
            labels = tuple(str(j) for j in range(len(elems)))
        elif (not isinstance(labels, list) or len(labels) != len(elems)
              or not all(isinstance(x, str) and x for x in labels) or len(set(labels)) != len(labels)):
            raise InputError(f"{where}.labels", labels, f"{len(elems)} distinct names, one per "
                             + ("state" if party == "alice" else "element"))
        labels = tuple(labels)
        if party == "alice":
            n = len(elems)
            sp = s.get("state_probabilities", [1.0 / n] * n)
            sprob = parse_probabilities(sp, n, f"{where}.state_probabilities", max(tol, 1e-12))
            key = s.get("key")
            if key is not None:
                if (not isinstance(key, list) or len(key) != n
                        or not all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 64 for v in key)):
                    raise InputError(f"{where}.key", key, f"a list of {n} key values (integers 0, 1, ...), one per state")
                key = tuple(key)
            out.append(Setting(name, prob, tuple(elems), labels, sprob, key))
        else:
            total = sum(elems)
            dev = float(np.max(np.abs(total - np.eye(dim))))
            if dev > tol:
                raise InputError(f"{where}.povm", f"elements whose sum is {dev:.3g} from the identity",
                                 f"POVM elements summing to the identity within tolerance {tol:g}")
            disc = s.get("discard", [])
            if (not isinstance(disc, list) or len(set(disc)) != len(disc)
                    or not all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v < len(elems) for v in disc)):
                raise InputError(f"{where}.discard", disc, f"distinct outcome indices in [0, {len(elems) - 1}]")
            if len(disc) == len(elems):
                raise InputError(f"{where}.discard", disc, "at most all outcomes but one (a setting that keeps none "
                                                           "cannot make key)")
            out.append(Setting(name, prob, tuple(elems), labels, (), None, tuple(disc)))
    parse_probabilities([s.probability for s in out], len(out), field + "[*].probability", max(tol, 1e-12),
                        positive=True)
    return tuple(out), dim


def parse_description(data) -> Description:
    """Validate the description tables of a mapping (a scenario, a description file or a block's table).

    Parameters
    ----------
    data : dict
        A mapping with the tables ``[description]`` (optional), ``[alice]``, ``[bob]`` and ``[sifting]``.

    Returns
    -------
    Description

    Raises
    ------
    InputError
        One line naming the element that is wrong, e.g. ``alice.settings[0].states[2]``.
    """
    if not isinstance(data, dict):
        raise InputError("description", data, "a table with [alice], [bob] and [sifting] (and optional [description])")
    head = data.get("description", {})
    if not isinstance(head, dict):
        raise InputError("description", head, "a table [description] with label and tolerance")
    _keys(head, "description", ("label", "tolerance"))
    tol = float(TOLERANCE_DOMAIN.check_scalar("description.tolerance", head.get("tolerance", DEFAULT_TOLERANCE)))
    label = head.get("label", "")
    if not isinstance(label, str):
        raise InputError("description.label", label, "a string")
    alice_sec = _table(data, "alice")
    _keys(alice_sec, "alice", ("settings",))
    bob_sec = _table(data, "bob")
    _keys(bob_sec, "bob", ("settings",))
    alice, dim = _settings(alice_sec, "alice", None, tol)
    bob, _ = _settings(bob_sec, "bob", dim, tol)
    sift = _table(data, "sifting")
    _keys(sift, "sifting", ("key_pairs",))
    pairs = sift.get("key_pairs")
    if not isinstance(pairs, list) or not pairs:
        raise InputError("sifting.key_pairs", pairs, "a non-empty list of [alice setting, bob setting] name pairs")
    desc = Description(label, dim, tol, alice, bob, (), 0)
    kp = []
    for i, p in enumerate(pairs):
        f = f"sifting.key_pairs[{i}]"
        if not isinstance(p, list) or len(p) != 2:
            raise InputError(f, p, "a pair [alice setting name, bob setting name]")
        x = desc.setting_index("alice", p[0], f)
        y = desc.setting_index("bob", p[1], f)
        if alice[x].key is None:
            raise InputError(f, p, f"a pair whose Alice setting has a key map (alice setting {p[0]!r} has no 'key')")
        if (x, y) in kp:
            raise InputError(f, p, "a pair not listed twice")
        kp.append((x, y))
    key_size = 1 + max(max(alice[x].key) for x, _ in kp)
    if key_size < 2:
        raise InputError("sifting.key_pairs", pairs, "key settings whose key maps take at least two values")
    return Description(label, dim, tol, alice, bob, tuple(kp), key_size)


# ---------------------------------------------------------------------------------------------------------------
# Source replacement and the key-rate problem
# ---------------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Picture:
    """The entanglement-based picture of a description at its setting probabilities.

    Attributes
    ----------
    dim_a, dim_b : int
    rho_a : numpy.ndarray
        Alice's reduced state (fixed by the source).
    povm_a : tuple of numpy.ndarray
        ``P_j``, one per signal ``j`` (setting, state) in order.
    povm_b : tuple of numpy.ndarray
        ``q_y M_{b|y}`` for every Bob setting and outcome, in order.
    signals : tuple of (int, int)
        ``(x, k)`` of each Alice index ``j``.
    outcomes : tuple of (int, int)
        ``(y, b)`` of each Bob index.
    signal_probabilities : numpy.ndarray
        ``p_x p_{k|x}`` of each signal.
    psi : numpy.ndarray
        Coefficients ``psi[a, b]`` of the source's pure state ``sum psi[a, b] |a>_A |b>_B`` (unreduced A).
    """

    dim_a: int
    dim_b: int
    rho_a: np.ndarray
    povm_a: tuple
    povm_b: tuple
    signals: tuple
    outcomes: tuple
    signal_probabilities: np.ndarray
    psi: np.ndarray
    reduction: np.ndarray


def picture(desc: Description) -> Picture:
    """The entanglement-based picture of ``desc`` (see the module docstring).

    A signal of rank ``r`` takes ``r`` dimensions of Alice's system (a pure signal one).  Alice's system is
    then restricted to the support of ``rho_A`` (facial reduction, as in
    :func:`finitekey.numerical.model.source_replacement`, which handles the pure case the same way): every
    admissible joint state lives on ``supp(rho_A) (x) B``.
    """
    signals, probs, comps = [], [], []
    for x, s in enumerate(desc.alice):
        for k, rho in enumerate(s.elements):
            w, v = np.linalg.eigh(rho)
            keep = np.nonzero(w > desc.tolerance)[0]
            signals.append((x, k))
            probs.append(s.probability * s.element_probabilities[k])
            comps.append([(float(w[i]), v[:, i]) for i in keep])
    full = sum(len(c) for c in comps)
    psi = np.zeros((full, desc.dim), dtype=complex)
    povm_full = []
    row = 0
    for j, cs in enumerate(comps):
        proj = np.zeros((full, full), dtype=complex)
        for lam, vec in cs:
            psi[row, :] = math.sqrt(probs[j] * lam) * vec
            proj[row, row] = 1.0
            row += 1
        povm_full.append(proj)
    rho_full = psi @ psi.conj().T          # Tr_B |Psi><Psi|, |Psi> = sum_{a,b} psi[a,b] |a>|b>
    rho_full = (rho_full + rho_full.conj().T) / 2
    w, u = np.linalg.eigh(rho_full)
    v = u[:, w > max(desc.tolerance, 1e-12) * max(1.0, float(w[-1]))]
    rho_a = v.conj().T @ rho_full @ v
    rho_a = (rho_a + rho_a.conj().T) / 2
    rho_a = rho_a / np.trace(rho_a).real
    povm_a = tuple(_real_if_exact((v.conj().T @ m @ v + (v.conj().T @ m @ v).conj().T) / 2) for m in povm_full)
    povm_b, outcomes = [], []
    for y, s in enumerate(desc.bob):
        for b, m in enumerate(s.elements):
            povm_b.append(_real_if_exact(s.probability * m))
            outcomes.append((y, b))
    return Picture(v.shape[1], desc.dim, _real_if_exact(rho_a), povm_a, tuple(povm_b), tuple(signals),
                   tuple(outcomes), np.array(probs), psi, v)


def _real_if_exact(m: np.ndarray) -> np.ndarray:
    return m.real.copy() if not np.any(m.imag) else m


def honest_state(desc: Description, pic: Picture, channel) -> np.ndarray:
    """The joint state ``(id (x) Lambda)(|Psi><Psi|)`` on the reduced ``A (x) B`` for a channel ``Lambda``.

    Parameters
    ----------
    channel : callable
        ``channel(sigma) -> Lambda(sigma)`` on Bob's space, linear.
    """
    da_full = pic.psi.shape[0]
    db = pic.dim_b
    out = np.zeros((da_full * db, da_full * db), dtype=complex)
    for a1 in range(da_full):
        for a2 in range(da_full):
            block = channel(np.outer(pic.psi[a1], pic.psi[a2].conj()))
            out[a1 * db:(a1 + 1) * db, a2 * db:(a2 + 1) * db] = block
    v = np.kron(pic.reduction, np.eye(db))
    rho = v.conj().T @ out @ v
    return (rho + rho.conj().T) / 2


def joint_table(pic: Picture, rho: np.ndarray) -> np.ndarray:
    """``Tr(rho (P_j (x) N_o))`` for every signal ``j`` and Bob outcome ``o``."""
    return np.array([[float(np.trace(rho @ np.kron(m, n)).real) for n in pic.povm_b] for m in pic.povm_a])


def problem(desc: Description, pic: Picture, lower: np.ndarray, upper: np.ndarray):
    """The :class:`~finitekey.numerical.model.KeyRateProblem` with ``lower <= Tr(rho (P_j (x) N_o)) <= upper``.

    Entries that are NaN in ``lower`` are not constrained.  Kept announcements: for every key pair (x, y),
    Alice's signals of setting x and Bob's outcomes of setting y that are not discarded.
    """
    from ...numerical.model import Announcement, Constraint, KeyRateProblem
    cons = []
    for j, m in enumerate(pic.povm_a):
        x, k = pic.signals[j]
        for o, n in enumerate(pic.povm_b):
            if np.isnan(lower[j, o]):
                continue
            y, b = pic.outcomes[o]
            label = (f"p({desc.alice[x].name}:{desc.alice[x].labels[k]},"
                     f"{desc.bob[y].name}:{desc.bob[y].labels[b]})")
            cons.append(Constraint(np.kron(m, n), float(lower[j, o]), float(upper[j, o]), label))
    anns = []
    for x, y in desc.key_pairs:
        a_set = tuple(j for j, (xx, _) in enumerate(pic.signals) if xx == x)
        b_set = tuple(o for o, (yy, b) in enumerate(pic.outcomes) if yy == y and b not in desc.bob[y].discard)
        anns.append(Announcement(a_set, b_set))
    key_map = []
    for x, k in pic.signals:
        km = desc.alice[x].key
        key_map.append(km[k] if km is not None and any(x == kx for kx, _ in desc.key_pairs) else -1)
    return KeyRateProblem(pic.dim_a, pic.dim_b, pic.rho_a, pic.povm_a, pic.povm_b, tuple(anns), tuple(key_map),
                          tuple(cons), tol=min(max(desc.tolerance, 1e-10) * 10, _MAX_PROBLEM_TOL))


def picture_index(desc: Description) -> tuple:
    """``({(x, k): j}, {(y, b): o}, signal count, outcome count)`` in the order of :func:`picture`."""
    sig = {}
    for x, s in enumerate(desc.alice):
        for k in range(len(s.elements)):
            sig[(x, k)] = len(sig)
    out = {}
    for y, s in enumerate(desc.bob):
        for b in range(len(s.elements)):
            out[(y, b)] = len(out)
    return sig, out, len(sig), len(out)
