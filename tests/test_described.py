"""The described protocol: description validation, source replacement, finite-size key length, design.

Sources beside each check: the Born rule and the definitions of density matrices and POVMs (M. A. Nielsen and
I. L. Chuang, Quantum Computation and Quantum Information (2000), sections 2.2.6 and 2.4); Shor and Preskill,
Phys. Rev. Lett. 85, 441 (2000) (BB84: 1 - 2h(Q)); H.-K. Lo, Quantum Inf. Comput. 1, 81 (2001) and G. Kato,
K. Tamaki, arXiv:1008.4663 (six-state one-way rate and its 12.62% threshold); the closed-form BB84 analysis of
finitekey.protocols.bb84 (Tomamichel et al. 2012, coherent attacks); mpmath at 50 digits for the rounding.
"""

from __future__ import annotations

import copy
import json
import math
import pathlib
import tomllib

import mpmath
import numpy as np
import pytest

from finitekey import protocols
from finitekey.cli import main
from finitekey.entropy import binary_entropy
from finitekey.errors import ComputationError, InputError
from finitekey.protocols.described import description as D
from finitekey.protocols.described import scenario as S
from finitekey.protocols.described.analysis import interval_count, key_length
from finitekey.protocols.described.design import asymptotic_rate, expected_block

ROOT = pathlib.Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples" / "described"
BLOCK = ROOT / "examples" / "blocks" / "described_block.json"
BB84_TOML = (EXAMPLES / "bb84_qubit.toml").read_text()


def h(q):
    return float(binary_entropy(q))


# ------------------------------------------------------------------------------------------------------------
# Validation: one line naming the element, exit 2 (definitions of Nielsen and Chuang, sections 2.2.6 and 2.4)
# ------------------------------------------------------------------------------------------------------------
BAD_DESCRIPTIONS = [
    # (replace this, by that, the element named, words of the expectation)
    ("states = [[1, 0], [0, 1]]", "states = [[1, 0], [0, 1.1]]", "alice.settings[0].states[1]", "norm 1"),
    ("states = [[1, 0], [0, 1]]", "states = [[1, 0], [[0, 1], [0, 1]]]", "alice.settings[0].states[1]", "Hermitian"),
    ("states = [[1, 0], [0, 1]]", "states = [[1, 0], [[0.5, 0.8], [0.8, 0.5]]]", "alice.settings[0].states[1]",
     "positive semidefinite"),
    ("states = [[1, 0], [0, 1]]", "states = [[1, 0], [[0.5, 0], [0, 0.4]]]", "alice.settings[0].states[1]",
     "unit trace"),
    ("povm = [[[1, 0], [0, 0]], [[0, 0], [0, 1]]]", "povm = [[[1, 0], [0, 0]], [[0, 0], [0, 0.9]]]",
     "bob.settings[0].povm", "summing to the identity"),
    ("povm = [[[1, 0], [0, 0]], [[0, 0], [0, 1]]]", "povm = [[[1, 0, 0], [0, 0, 0], [0, 0, 0]], "
     "[[0, 0, 0], [0, 1, 0], [0, 0, 1]]]", "bob.settings[0].povm[0]", "dimension 2"),
    ("name = \"X\"\nprobability = 0.5\nstates", "name = \"X\"\nprobability = 0.6\nstates",
     "alice.settings[*].probability", "summing to 1"),
    ("states = [[1, 0], [0, 1]]", "states = [[1, \"0.1+xj\"], [0, 1]]", "alice.settings[0].states[0][1]",
     "complex number written as a string"),
    ("key_pairs = [[\"Z\", \"Z\"]]", "key_pairs = [[\"Z\", \"W\"]]", "sifting.key_pairs[0]", "bob's settings"),
    ("key = [0, 1]", "key = [0]", "alice.settings[0].key", "key values"),
]


@pytest.mark.parametrize("old,new,field,words", BAD_DESCRIPTIONS)
def test_bad_description_is_one_line_naming_the_element_exit_2(tmp_path, capsys, old, new, field, words):
    assert old in BB84_TOML
    path = tmp_path / "bad.toml"
    path.write_text(BB84_TOML.replace(old, new, 1))
    assert main(["design", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0, err
    assert err.startswith(field + " ") or f"{field} " in err, err
    assert words in err, err
    with pytest.raises(InputError) as exc:   # the API raises the same error
        protocols.load_scenario(str(path))
    assert exc.value.field == field


def test_complex_entries_written_as_strings_are_read():
    sc = protocols.load_scenario(str(EXAMPLES / "six_state.toml"))
    y = sc.description.bob[2].elements[0]
    assert y[0, 1] == pytest.approx(-0.5j) and y[1, 0] == pytest.approx(0.5j)
    assert D._entry("0.5-0.5i", "x") == 0.5 - 0.5j


def test_bad_block_counts_are_one_line_exit_2(tmp_path, capsys):
    data = json.loads(BLOCK.read_text())
    bad = copy.deepcopy(data)
    bad["test_counts"][0]["counts"][1] = [1, 2, 3]
    path = tmp_path / "b.json"
    path.write_text(json.dumps(bad))
    assert main(["keylength", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "test_counts[0].counts[1]" in err
    bad = copy.deepcopy(data)
    del bad["test_counts"][3]
    with pytest.raises(InputError, match="one entry per pair of settings"):
        protocols.get("described").parse_block(bad)
    with pytest.raises(InputError, match="rounds"):
        protocols.get("described").parse_block({**data, "rounds": 1000})
    with pytest.raises(InputError) as exc:
        protocols.get("described").parse_block({**data, "alice_probabilities": [0.9, 0.2]})
    assert exc.value.field == "alice_probabilities"
    with pytest.raises(InputError) as exc:
        protocols.get("described").parse_block({**data, "description": str(ROOT / "no_such_file.toml")})
    assert exc.value.field.startswith("description") or "no_such_file" in str(exc.value)


def test_modelled_leakage_is_flagged_and_never_below_the_entropy_of_the_test_data():
    # leak = ceil(f n H(K|B)) with H(K|B) from the test frequencies of the key pair (binary entropy of the ZZ
    # error rate, Shannon 1948), and the result says the leakage is modelled.
    data = json.loads(BLOCK.read_text())
    del data["ec_leak_bits"]
    data["ec_efficiency"] = 1.2
    proto = protocols.get("described")
    blk = proto.parse_block(data)
    res = proto.key_length(blk)
    zz = data["test_counts"][0]["counts"]
    tot = sum(map(sum, zz))
    per_round = 0.81 * h((zz[0][1] + zz[1][0]) / tot)     # P(ZZ) = 0.9^2 in this block
    assert res.terms["ec_leakage"] >= 1.2 * blk.key_rounds * per_round * (1 - 1e-9)
    assert res.terms["ec_leakage"] <= 1.2 * blk.key_rounds * per_round * (1 + 1e-6) + 1
    assert any("MODELLED" in a for a in res.assumptions)


# ------------------------------------------------------------------------------------------------------------
# Source replacement: the entanglement-based picture gives the prepare-and-measure statistics (Born rule)
# ------------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", ["bb84_qubit", "six_state", "three_state", "bb84_mismatch"])
def test_source_replacement_reproduces_the_born_rule(name):
    sc = protocols.load_scenario(str(EXAMPLES / f"{name}.toml"))
    desc = S.biased(sc.description, 0.7)
    pic = D.picture(desc)
    st = sc.data["statistics"]
    p, t, v = st["depolarising"], st["transmittance"], st.get("vacuum")
    d = desc.dim
    pi, vac = np.eye(d), np.zeros((d, d))
    if v is not None:
        vac[v, v] = 1
        pi = pi - vac

    def channel(s):
        tr = np.trace(s)
        return t * ((1 - p) * s + p * tr * pi / np.trace(pi).real) + (1 - t) * tr * vac

    rho = D.honest_state(desc, pic, channel)
    table = D.joint_table(pic, rho)
    sig, out, _, _ = D.picture_index(desc)
    for (x, k), j in sig.items():
        a = desc.alice[x]
        for (y, b), o in out.items():
            direct = (a.probability * a.element_probabilities[k] * desc.bob[y].probability
                      * np.trace(channel(a.elements[k]) @ desc.bob[y].elements[b]).real)
            assert table[j, o] == pytest.approx(direct, abs=1e-12)
    # Alice's marginal is untouched by the channel, and the expected table of the scenario is the same
    da, db = pic.dim_a, pic.dim_b
    rho_a = np.einsum("ibjb->ij", rho.reshape(da, db, da, db))
    assert np.allclose(rho_a, pic.rho_a, atol=1e-12)
    assert np.allclose(S.joint_expected(desc, sc.conditional), table, atol=1e-12)


# ------------------------------------------------------------------------------------------------------------
# Asymptotic rates and thresholds against published values
# ------------------------------------------------------------------------------------------------------------
def _with(name, **fields):
    sc = protocols.load_scenario(str(EXAMPLES / f"{name}.toml"))
    for k, v in fields.items():
        sc = S.with_field(sc, k, v)
    return sc


def test_qubit_bb84_asymptotic_rate_is_shor_preskill():
    # Shor and Preskill 2000: 1 - 2h(Q) per sifted bit with f = 1; here per round, key only from ZZ rounds.
    for q in (0.01, 0.05):
        sc = _with("bb84_qubit", **{"statistics.depolarising": 2 * q, "reconciliation.efficiency": 1.0})
        kp = 0.8
        assert asymptotic_rate(sc, kp) == pytest.approx(kp * kp * (1 - 2 * h(q)), abs=1e-4)


def test_three_state_protocol_has_the_bb84_rate_and_threshold():
    # With |0>, |1>, |+> and Bob measuring Z and X, linearity fixes the channel's action on |-> (|-><-| =
    # |0><0| + |1><1| - |+><+|), so the phase-error rate is known and the rate is BB84's, threshold Q = 11.0%
    # (Shor-Preskill's 1 - 2h(Q) = 0 at Q = 0.1100). Published form of this statement: the loss-tolerant protocol of
    # K. Tamaki, M. Curty, G. Kato, H.-K. Lo, K. Azuma, Phys. Rev. A 90, 052314 (2014) (from memory).
    kp = 0.5
    for q, sign in ((0.105, 1), (0.115, -1)):
        sc = _with("three_state", **{"statistics.depolarising": 2 * q, "reconciliation.efficiency": 1.0})
        r = asymptotic_rate(sc, kp)
        assert r == pytest.approx(kp * kp * (1 - 2 * h(q)), abs=2e-4)
        assert math.copysign(1, r) == sign


def test_six_state_one_way_rate_and_threshold():
    # Six-state one-way rate 1 - H(1 - 3Q/2, Q/2, Q/2, Q/2) with f = 1 (the standard form; H.-K. Lo, Quantum Inf.
    # Comput. 1, 81 (2001), from memory); its root 12.62% is the qubit threshold stated in the abstract of
    # G. Kato and K. Tamaki, arXiv:1008.4663 (read by the project's paper reader; Lo's abstract says 12.7%).
    def H(ps):
        return -sum(p * math.log2(p) for p in ps if p > 0)

    kp = 0.5
    for q in (0.05, 0.1255, 0.127):
        sc = _with("six_state", **{"statistics.depolarising": 2 * q, "reconciliation.efficiency": 1.0})
        r = asymptotic_rate(sc, kp)
        assert r == pytest.approx(kp * kp * (1 - H([1 - 1.5 * q, q / 2, q / 2, q / 2])), abs=1e-4)
        assert (r > 0) == (q < 0.1262)


def test_detector_mismatch_costs_key_and_more_with_more_mismatch():
    # Issue 11's physical check: unequal detector efficiencies leak information to Eve; the matched case
    # (both 0.9) gives the most key, and the loss grows with the mismatch (no outside number).
    text = (EXAMPLES / "bb84_mismatch.toml").read_text()
    rates = []
    for eta1 in (0.9, 0.8, 0.7):
        t = text.replace("[0, 0, 0.7]", f"[0, 0, {eta1}]").replace("[0, 0, 0.3]", f"[0, 0, {1 - eta1:.12g}]")
        t = t.replace("[[0, 0, 0], [0, 0.35, -0.35], [0, -0.35, 0.35]]",
                      f"[[0, 0, 0], [0, {eta1 / 2}, {-eta1 / 2}], [0, {-eta1 / 2}, {eta1 / 2}]]")
        off = (eta1 - 0.9) / 2
        t = t.replace("[[1, 0, 0], [0, 0.2, -0.1], [0, -0.1, 0.2]]",
                      f"[[1, 0, 0], [0, {1 - 0.45 - eta1 / 2:.12g}, {off:.12g}], [0, {off:.12g}, "
                      f"{1 - 0.45 - eta1 / 2:.12g}]]")
        sc = protocols.get("described").parse_scenario(tomllib.loads(t))
        assert S.joint_expected(sc.description, sc.conditional).sum() == pytest.approx(1.0)
        rates.append(asymptotic_rate(sc, 0.5))
    assert rates[0] > rates[1] > rates[2] > 0


# ------------------------------------------------------------------------------------------------------------
# Finite size
# ------------------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("q,rounds", [(0.01, 10**8), (0.03, 10**9), (0.05, 10**10)])
def test_finite_rate_never_above_the_closed_form_bb84_analysis_of_the_same_block(q, rounds):
    # The same observed data read by the closed-form analysis (Tomamichel et al. 2012, coherent attacks): key
    # bits = the expected ZZ key rounds, test bits and errors = the XX test rounds. The numerical length may
    # exceed it only by the solver's stated gap (times the key rounds); it also pays the AEP penalty.
    sc = _with("bb84_qubit", **{"statistics.depolarising": 2 * q})
    kp, gamma = 0.9, 0.01
    blk = expected_block(sc, rounds, kp, gamma)
    res = key_length(blk)
    n = blk.key_rounds
    sig, out, _, _ = D.picture_index(blk.description)
    xx = [[blk.counts[sig[(1, k)], out[(1, b)]] for b in range(2)] for k in range(2)]
    bb = protocols.get("bb84")
    closed = bb.key_length(bb.parse_block({
        "key_bits": int(n * kp * kp), "test_bits": int(sum(map(sum, xx))), "test_errors": int(xx[0][1] + xx[1][0]),
        "ec_leak_bits": int(blk.ec_leak_bits), "eps_sec": blk.eps_sec, "eps_cor": blk.eps_cor}))
    assert res.secret_key_length > 0
    assert res.secret_key_length <= closed.secret_key_length + n * res.terms["solver_gap"] + 1


def test_finite_rate_increases_with_the_block_towards_the_asymptotic_rate():
    # Common practice, no source: with the parameters fixed, the finite-size penalties shrink as the block grows.
    sc = protocols.load_scenario(str(EXAMPLES / "bb84_qubit.toml"))
    kp, gamma = 0.9, 0.01
    r_inf = asymptotic_rate(sc, kp)
    rates = [key_length(expected_block(sc, N, kp, gamma)).secret_key_length / N for N in (10**7, 10**8, 10**10)]
    assert 0 < rates[0] < rates[1] < rates[2] < (1 - gamma) * r_inf
    assert rates[2] > 0.9 * (1 - gamma) * r_inf


def test_key_length_is_the_certified_floor_of_the_formula():
    # mpmath at 50 digits recomputes the formula from the terms the result reports (beta is the solver's
    # certified lower bound, an exact float); the reported length is its floor, never above.
    proto = protocols.get("described")
    res = proto.key_length(proto.parse_block(json.loads(BLOCK.read_text())))
    t, e = res.terms, res.estimates
    led = res.ledger
    with mpmath.workdps(50):
        n = mpmath.mpf(e["key_rounds"])
        eps_bar = mpmath.mpf(led.smoothing("smoothing"))
        aep = 4 * mpmath.sqrt(n) * mpmath.log(2 + mpmath.sqrt(3), 2) * mpmath.sqrt(mpmath.log(2 / eps_bar ** 2, 2))
        val = (n * mpmath.mpf(t["entropy_per_round_certified"]) - aep - t["ec_leakage"] - t["verification_tag"]
               - 2 * mpmath.log(1 / (2 * mpmath.mpf(led.hashing("privacy_amplification"))), 2))
    assert res.secret_key_length == int(mpmath.floor(val))
    assert t["solver_gap"] >= 0 and e["solver_iterations"] >= 1
    assert res.status.key and 2 * interval_count(proto.parse_block(json.loads(BLOCK.read_text())).description) == \
        led["statistics_intervals"].multiplicity


def test_keylength_cli_gives_rate_gap_iterations_and_ledger(capsys):
    assert main(["keylength", str(BLOCK), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    doc = doc[0] if isinstance(doc, list) else doc
    assert {"solver_gap", "entropy_per_round_certified", "entropy_per_round_primal"} <= set(doc["terms"])
    assert {"solver_iterations", "key_rate_per_round"} <= set(doc["estimates"])
    assert [t["name"] for t in doc["ledger"]] == ["error_verification", "statistics_intervals", "smoothing",
                                                  "privacy_amplification"]


def test_statistics_that_fit_no_state_give_no_key_not_an_error():
    # Counts impossible for the described source (linearity of the channel): with perfect Z correlations,
    # p(Bob Z = 0 | +) + p(Bob Z = 0 | -) = p(0 | 0) + p(0 | 1) = 1, since |+><+| + |-><-| = |0><0| + |1><1|;
    # the counts below say 2.
    data = json.loads(BLOCK.read_text())
    bad = copy.deepcopy(data)
    for e in bad["test_counts"]:
        if e["alice"] == "X" and e["bob"] == "Z":
            e["counts"] = [[450000, 0], [450000, 0]]
        if e["alice"] == "Z" and e["bob"] == "Z":
            e["counts"] = [[4050000, 0], [0, 4050000]]
    proto = protocols.get("described")
    res = proto.key_length(proto.parse_block(bad))
    assert res.secret_key_length == 0 and res.status.reason.value == "inconsistent_block"


def test_verification_tag_is_the_exact_ceiling_of_log2_one_over_eps_cor():
    # exact rational check (Python's fractions): 2^-t <= eps_cor < 2^-(t-1)
    from fractions import Fraction

    from finitekey.protocols.described.analysis import verification_tag_bits
    for eps in (1e-15, 2.0 ** -40, 0.3, 1e-100, 0.5):
        t = verification_tag_bits(eps)
        assert Fraction(1, 2 ** t) <= Fraction(eps) < Fraction(2, 2 ** t)


def test_a_solver_failure_is_a_computation_error_not_a_traceback(monkeypatch, capsys):
    # No certified bound, no key length: a failure inside the solver becomes one ComputationError line.
    import finitekey.numerical.solver as solver

    def broken(problem, **kw):
        raise np.linalg.LinAlgError("Eigenvalues did not converge")
    monkeypatch.setattr(solver, "solve", broken)
    proto = protocols.get("described")
    with pytest.raises(ComputationError, match="numerical solver failed"):
        proto.key_length(proto.parse_block(json.loads(BLOCK.read_text())))
    rc = main(["keylength", str(BLOCK)])
    err = capsys.readouterr().err.strip()
    assert rc != 0 and err.count("\n") == 0 and "numerical solver failed" in err


def test_certificate_with_rounded_factors_is_stated_as_an_assumption(monkeypatch):
    # When the solver's certificate falls back to float factors of the key map (exact_factors False; see
    # proofs_notes/numerical/solver.md section 4, an open assumption there), the result must say so; with
    # exact factors it must not. The fallback is forced here on the qubit example (it arises from POVM
    # elements PSD only within the tolerance, covered in tests/test_numerical_solver.py).
    import dataclasses
    from finitekey.protocols.described import analysis as A
    sc = protocols.get("described").parse_scenario(tomllib.loads((EXAMPLES / "bb84_qubit.toml").read_text()))
    blk = expected_block(sc, 10**9, 0.9, 0.02)
    assert not [a for a in key_length(blk).assumptions if "float factors" in a]
    solve = A.solve_problem

    def rounded(*args, **kwargs):
        res = solve(*args, **kwargs)
        return dataclasses.replace(res, details={**res.details, "exact_factors": False})
    monkeypatch.setattr(A, "solve_problem", rounded)
    flagged = [a for a in key_length(blk).assumptions if "float factors" in a]
    assert len(flagged) == 1 and "open assumption" in flagged[0]


def test_missing_description_file_names_the_description_field(tmp_path):
    # A block naming a description file that does not exist: the one-line error names the block's field
    # (description), not a generic "file"; common practice, no source.
    from finitekey.errors import InputError
    from finitekey.protocols.described.block import load_description
    missing = str(tmp_path / "nope.toml")
    with pytest.raises(InputError) as info:
        load_description(missing)
    assert info.value.field == "description" and info.value.value == missing
    assert "existing" in info.value.allowed
