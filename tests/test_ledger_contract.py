"""The ledger is the contract of the proof: every protocol's ledger against the table in its proof note.

Each protocol's proof note (``proofs_notes/protocols/NAME.md``) has one table with a row per ledger term:
event, its probability, how it is charged, its multiplicity, its secrecy cost and where in the code it is
used.  These tests parse that table and check, for every analysis path of every registered protocol, that

* the ledger has exactly the terms the table lists for that path,
* each term is declared with the charge the table states (failure / smoothing / hashing / correctness),
* the multiplicity and cost columns agree with the declaration, and the costs add up to the ledger's eps_sec,
* a smoothing term's event is evaluated at the smoothing parameter squared (exact rationals),
* the code locations named in the table exist,
* and the key-length code reads epsilons only through the typed ledger readers.

Source: the accounting rules are those of the uncertainty-relation proofs (Tomamichel, Lim, Gisin, Renner,
Nat. Commun. 3, 634 (2012)): a smoothing parameter's event must have probability at most its square and costs
twice the parameter; the rest is the project's own bookkeeping, so the check is against the proof notes.
"""

from __future__ import annotations

import importlib
import json
import math
import pathlib
import re
from fractions import Fraction

import pytest
import sympy as sp

from finitekey import protocols
from finitekey.budget import Charge, Role
from finitekey.protocols import decoy_bb84 as D
from finitekey.protocols.decoy_bb84 import analysis as DA

ROOT = pathlib.Path(__file__).resolve().parents[1]
NOTES = ROOT / "proofs_notes" / "protocols"


def _note_path(name: str) -> pathlib.Path:
    return NOTES / (name.replace("-", "_") + ".md")


def ledger_table(name: str) -> list:
    """Rows of the ledger table of a protocol's proof note, as dictionaries keyed by the header."""
    text = _note_path(name).read_text(encoding="utf-8")
    lines = text.splitlines()
    start = [i for i, ln in enumerate(lines) if re.match(r"^\|\s*term\s*\|\s*applies\s*\|", ln)]
    assert len(start) == 1, f"{name}: exactly one ledger table (header '| term | applies | ...') expected"
    i = start[0]
    header = [c.strip() for c in lines[i].strip().strip("|").split("|")]
    rows = []
    for ln in lines[i + 2:]:
        if not ln.startswith("|"):
            break
        cells = [c.strip() for c in ln.strip().strip("|").split("|")]
        assert len(cells) == len(header), ln
        row = dict(zip(header, cells))
        row["term"] = row["term"].strip("`")
        rows.append(row)
    return rows


def _expr(text: str, **values):
    s = text.strip("`").replace("^", "**")
    return sp.sympify(s, locals={k: sp.Symbol(k) for k in values}).subs(values)


# ---------------------------------------------------------------------------------------------------------
# sample blocks: every analysis path of every registered protocol (a new protocol must add its own)
# ---------------------------------------------------------------------------------------------------------
_DECOY3 = json.loads((ROOT / "examples" / "blocks" / "decoy_block.json").read_text())
_DECOY2 = {"protocol": "decoy-bb84", "intensities": [0.5, 0.1], "intensity_probabilities": [0.8, 0.2],
           "key_basis": {"detections": [200000, 8000], "errors": [4000, 300]},
           "test_basis": {"detections": [50000, 2000], "errors": [1000, 80]},
           "ec_leak_bits": 30000, "eps_sec": 1e-9, "eps_cor": 1e-15}
_DECOY4 = {"protocol": "decoy-bb84", "intensities": [0.6, 0.2, 0.05, 0.0002],
           "intensity_probabilities": [0.7, 0.15, 0.1, 0.05],
           "key_basis": {"detections": [400000, 30000, 5000, 40], "errors": [8000, 900, 300, 20]},
           "test_basis": {"detections": [100000, 7000, 1200, 10], "errors": [2000, 250, 80, 5]},
           "ec_leak_bits": 60000, "eps_sec": 1e-9, "eps_cor": 1e-15}
_MDI = json.loads((ROOT / "examples" / "blocks" / "mdi_block.json").read_text())
# Bob without his middle intensity (the rounds where he chose it left out): the linear-programme path
_MDI32 = {**_MDI, "bob_intensities": [_MDI["bob_intensities"][0], _MDI["bob_intensities"][2]],
          "bob_intensity_probabilities": [_MDI["bob_intensity_probabilities"][0] /
                                          (1 - _MDI["bob_intensity_probabilities"][1]),
                                          _MDI["bob_intensity_probabilities"][2] /
                                          (1 - _MDI["bob_intensity_probabilities"][1])],
          **{b: {k: [[r[0], r[2]] for r in _MDI[b][k]] for k in ("detections", "errors")}
             for b in ("key_basis", "test_basis")}}
_BB84 = {"protocol": "bb84", "key_bits": 10**6, "test_bits": 5 * 10**4, "test_errors": 1250,
         "ec_leak_bits": 190000, "eps_sec": 1e-10, "eps_cor": 1e-15}

_TF = json.loads((ROOT / "examples" / "blocks" / "tf_sns_block.json").read_text())
_DESCRIBED = json.loads((ROOT / "examples" / "blocks" / "described_block.json").read_text())

SAMPLES = {
    "mdi-bb84": [(_MDI, "exact"), (_MDI, "chernoff"), (_MDI, "hoeffding"),
                 ({**_MDI, "epsilon_split": {"count_estimation": 0.6, "single_photon_smoothing": 0.3,
                                             "chain_rule": 0.05, "privacy_amplification": 0.05}}, "exact"),
                 (_MDI32, "exact"), ({**_MDI, "joint_constraints": True}, "chernoff")],
    "bb84": [(_BB84, "exact"), (_BB84, "serfling"),
             ({**_BB84, "epsilon_split": {"smoothing": 0.9, "privacy_amplification": 0.1}}, "exact")],
    "decoy-bb84": [(_DECOY3, "exact"), (_DECOY3, "chernoff"), (_DECOY3, "hoeffding"),
                   ({**_DECOY3, "pulses": 10**10}, "kato"), (_DECOY2, "exact"), (_DECOY2, "hoeffding"),
                   ({**_DECOY2, "pulses": 10**8}, "kato"), (_DECOY4, "exact"),
                   ({**_DECOY3, "acceptance": {
                       "statistics": "chernoff", "ec_leak_bits": _DECOY3["ec_leak_bits"],
                       "key_basis": {"detections": [[max(c - 10**5, 0), c + 10**5]
                                                    for c in _DECOY3["key_basis"]["detections"]]},
                       "test_basis": {"detections": [[max(c - 10**4, 0), c + 10**4]
                                                     for c in _DECOY3["test_basis"]["detections"]],
                                      "errors": [[max(c - 10**3, 0), c + 10**3]
                                                 for c in _DECOY3["test_basis"]["errors"]]}}}, "chernoff"),
                   ({**_DECOY3, "epsilon_split": {"count_estimation": 0.5, "single_photon_smoothing": 0.3,
                                                  "chain_rule": 0.1, "privacy_amplification": 0.1}}, "exact")],
    "tf-sns": [(_TF, "exact"), (_TF, "chernoff"),
               ({**_TF, "epsilon_split": {"count_estimation": 0.5, "single_photon_smoothing": 0.3,
                                          "chain_rule": 0.1, "privacy_amplification": 0.1}}, "exact")],
    "described": [(_DESCRIBED, "exact"),
                  ({**_DESCRIBED, "epsilon_split": {"statistics_intervals": 0.6, "smoothing": 0.2,
                                                   "privacy_amplification": 0.2}}, "exact")],
}


def _context(name: str, block, statistics: str) -> tuple:
    """(analysis path name, values for the table's expressions) of one sample."""
    if name == "decoy-bb84":
        analysis = D.analysis_kind(block.intensities)
        return analysis, {"N_c": D.count_events(len(block.intensities), analysis, statistics)}
    if name == "described":
        from finitekey.protocols.described.analysis import interval_count
        return "all", {"K": interval_count(block.description)}
    if name == "mdi-bb84":
        from finitekey.protocols.mdi_bb84 import analysis as MA
        kind = MA.analysis_kind(block)
        return ("joint" if block.joint_constraints else kind,
                {"N_c": MA.count_events(kind, *block.shape), "N_j": MA.joint_events(*block.shape)})
    return "all", {}


def _cases():
    for name, samples in SAMPLES.items():
        for i, (data, stats) in enumerate(samples):
            yield pytest.param(name, data, stats, id=f"{name}-{stats}-{i}")


def test_every_registered_protocol_has_samples_and_a_ledger_table():
    assert sorted(SAMPLES) == protocols.names()
    for name in protocols.names():
        assert ledger_table(name), name


@pytest.mark.parametrize("name,data,statistics", list(_cases()))
def test_ledger_matches_proof_note_table(name, data, statistics):
    proto = protocols.get(name)
    block = proto.parse_block(data)
    result = proto.key_length(block, statistics)
    led = result.ledger
    analysis, values = _context(name, block, statistics)
    rows = [r for r in ledger_table(name) if r["applies"] in ("all", analysis)]
    assert sorted(r["term"] for r in rows) == sorted(t.name for t in led.terms), "terms differ from the note"
    secrecy_sum = []
    for r in rows:
        t = led[r["term"]]
        charged = r["charged as"]
        if charged == "correctness":
            assert t.role is Role.CORRECTNESS and t.charge is Charge.FAILURE
        else:
            assert t.role is Role.SECRECY
            assert t.charge is Charge(charged), (t.name, t.charge, charged)
        assert int(_expr(r["multiplicity"], **values)) == t.multiplicity, t.name
        # probability column: what the guarded event may fail with
        prob = r["probability"].strip("`")
        if t.charge is Charge.FAILURE:
            assert prob == "eps", t.name
            assert led.failure_probability(t.name) == t.epsilon
        elif t.charge is Charge.SMOOTHING:
            assert prob in ("eps^2", "none"), t.name
            if prob == "eps^2":
                assert Fraction(led.failure_probability(t.name)) <= Fraction(t.epsilon) ** 2
                assert led.failure_probability(t.name) >= math.nextafter(t.epsilon ** 2, 0) * (1 - 1e-15)
        else:
            assert prob == "none", t.name
            with pytest.raises(TypeError):
                led.failure_probability(t.name)
        cost = _expr(r["cost"], eps=Fraction(t.epsilon), **values)
        if t.role is Role.SECRECY:
            assert float(cost) == pytest.approx(t.contribution, rel=1e-15), t.name
            secrecy_sum.append(float(cost))
        else:
            assert cost == 0
        # where in the code: the named object exists, defined in the module named (a re-export by a package
        # does not count: the table points at the code, e.g. finitekey.protocols.bb84.analysis, not bb84)
        where = r["where in the code"].strip("`")
        mod, _, attr = where.rpartition(".")
        obj = getattr(importlib.import_module(mod), attr, None)
        assert obj is not None, where
        assert getattr(obj, "__module__", mod) == mod, f"{where} is defined in {obj.__module__}"
    assert math.fsum(secrecy_sum) == pytest.approx(led.eps_sec, rel=1e-14)
    assert led.eps_sec <= block.eps_sec


def test_decoy_phase_error_bound_is_evaluated_at_the_smoothing_squared(monkeypatch):
    """The review's finding: the phase-error bound must fail with probability at most eps_1^2 (it was eps_1)."""
    seen = []
    original = DA._phase_error

    def spy(method, est, eps_p, prec):
        seen.append(eps_p)
        return original(method, est, eps_p, prec)

    monkeypatch.setattr(DA, "_phase_error", spy)
    for data, stats in SAMPLES["decoy-bb84"]:
        block = D.parse_block(data)
        res = D.key_length(block, stats)
        if res.estimates.get("note_block_inconsistent_with_decoy_model"):
            continue
        eps1 = res.ledger.smoothing("single_photon_smoothing")
        assert Fraction(seen[-1]) <= Fraction(eps1) ** 2
        assert seen[-1] < eps1 * 1e-3     # far below the old (linear) value


def test_key_length_code_reads_epsilons_only_through_typed_readers():
    """No protocol or design module reads a raw epsilon (Ledger.epsilon is for reports only)."""
    pkg = ROOT / "finitekey"
    offenders = []
    files = [f for sub in ("protocols", "optimize") for f in sorted((pkg / sub).rglob("*.py"))]
    assert any(f.parent.name == "decoy_bb84" and f.name == "analysis.py" for f in files)  # the walk sees packages
    for f in files:
        for no, line in enumerate(f.read_text().splitlines(), 1):
            if re.search(r"\.epsilon\(", line):
                offenders.append(f"{f.relative_to(pkg)}:{no}")
    assert offenders == []


def test_review_small_block_is_not_overstated():
    """The independent review's small block: the old accounting gave 2,011 bits; the corrected one allows at
    most about 157 with the best split.  Every split we try stays at or below that."""
    data = {"protocol": "decoy-bb84", "intensities": [0.5519094547858361, 0.05526850988146294, 0.0],
            "intensity_probabilities": [0.9007566006784329, 0.06628114120980062, 0.03296225811176649],
            "key_basis": {"detections": [200126, 1478, 0], "errors": [6185, 47, 0]},
            "test_basis": {"detections": [55201, 439, 0], "errors": [1659, 20, 0]},
            "ec_leak_bits": 44308, "eps_sec": 2.7650764500113305e-09, "eps_cor": 2.221394315733005e-15}
    best = 0
    for c in (0.3, 0.5, 0.7, 0.9):
        for s in (0.05, 0.2, 0.4, 0.6):
            rest = 1.0 - c - s
            if rest <= 0.002:
                continue
            chain = min(rest * 0.6, s)     # a chain-rule share above the smoothing share is refused
            split = {"count_estimation": c, "single_photon_smoothing": s, "chain_rule": chain,
                     "privacy_amplification": rest - chain}
            for stats in ("exact", "chernoff"):
                r = D.key_length(D.parse_block({**data, "epsilon_split": split}), stats)
                best = max(best, r.secret_key_length)
    assert best <= 157


def test_split_giving_the_chain_rule_more_than_the_single_photon_smoothing_is_refused():
    """Second review: the ledger is valid under either reading of which chain-rule slot doubles its smoothing
    only when eps_ch <= eps_1 (both weight 4); a split breaking that is refused, naming the field."""
    from finitekey.errors import InputError
    split = {"count_estimation": 0.5, "single_photon_smoothing": 0.1, "chain_rule": 0.3,
             "privacy_amplification": 0.1}
    with pytest.raises(InputError, match="epsilon_split.chain_rule"):
        D.key_length(D.parse_block({**_DECOY3, "epsilon_split": split}))


def test_design_split_can_be_given_back_to_a_block():
    """Second review: a two-intensity design reported the pinned eps_cor term among its split shares, which a
    block's epsilon_split refuses.  The reported split covers the split terms only and is accepted back;
    the block rebuilt from the design's rounded expected counts gets the design's certified key (same
    ledger).  Reference: the design's own certified result."""
    from finitekey.protocols.decoy_bb84 import design as DD
    sc = D.with_field(D.default_scenario(), "protocol.intensity_count", 2)
    res = DD.design(sc, "exact")
    split = res.parameters["epsilon_split"]
    assert sorted(split) == sorted(D.SECRECY_TERMS)
    assert split["chain_rule"] <= split["single_photon_smoothing"]
    c = res.expected_counts
    rnd = lambda xs: [int(round(x)) for x in xs]
    kd, td = rnd(c["key_basis.detections"]), rnd(c["test_basis.detections"])
    data = {"protocol": "decoy-bb84", "intensities": res.parameters["intensities"],
            "intensity_probabilities": res.parameters["intensity_probabilities"],
            "key_basis": {"detections": kd, "errors": [min(e, d) for e, d in zip(rnd(c["key_basis.errors"]), kd)]},
            "test_basis": {"detections": td, "errors": [min(e, d) for e, d in zip(rnd(c["test_basis.errors"]), td)]},
            "ec_leak_bits": int(c["ec_leak_bits"]), "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor,
            "epsilon_split": split}
    again = D.key_length(D.parse_block(data))
    assert "undetected_correction_failure" in again.ledger
    assert again.secret_key_length == res.expected.secret_key_length > 0
