"""How a BB84 block is closed decides whether the phase-error bound holds.

Source of the attack idea: C. Pfister, N. Lütkenhaus, S. Wehner, P. J. Coles, "Sifting attacks in
finite-size quantum key distribution", New J. Phys. 18, 053001 (2016), arXiv:1506.07502 (the iterative
sifting flaw: closing a block when key and test quotas fill makes the test bits a non-uniform sample).
The checks below are our own seeded Monte Carlo simulations of that idea (proofs_notes/protocols/bb84.md,
"The block rule"):

* rounds with independent basis labels on each side (key basis X with probability 0.95), kept when equal;
* an adversary who intercept-resends, with probability ``q``, each of the first ``window`` rounds (her
  choice depends on the round's index only, never on its bases); an attacked round has a bit error and a
  phase error with probability 1/4 in either basis (intercept-resend in a random basis; common practice,
  no source), an unattacked round with a small baseline probability;
* the OLD quota rule keeps X rounds until ``n`` key bits and Z rounds until ``k`` test bits exist (rounds of
  a filled basis are dropped); the valid rule keeps every sifted round of a number of rounds fixed before.

The phase-error bound checked is finitekey's BB84 exact statistics, from the public API
(``bb84.key_length(...).estimates["phase_error_count_upper"]`` at the claimed failure probability, and
``finitekey.bounds.hypergeometric_exact.key_errors_upper_certified`` at a loose epsilon).  A failure is a
trial whose true number of phase errors among the key bits exceeds the bound.

Attack indicators and error indicators are drawn only for the rounds kept in the block: every round's are
independent of its labels and of the other rounds, so this has the same distribution as drawing them for
every round.
"""

import json
import math

import numpy as np
import pytest
from scipy import stats

from finitekey.bounds.hypergeometric_exact import key_errors_upper_certified
from finitekey.cli import main
from finitekey.errors import InputError
from finitekey.protocols import bb84, decoy_bb84

P_KEY = 0.95           # probability of the key basis X, on each side
N_KEY, K_TEST = 10**5, 10**4
WINDOW = math.ceil(N_KEY / P_KEY**2)   # the rounds in which a quota block expects to fill its key quota
ATTACKED = 0.12        # fraction of the early rounds attacked
BASELINE = 0.005       # error probability of an unattacked round
EPS_SEC = 1e-10        # gives the parameter-estimation failure probability 6.25e-22 with the default split
LOOSE_EPS = 1e-2
SIGNIFICANCE = 1e-6    # binomial margin: a valid bound exceeds it with probability below this


def _sifted(rng, rounds: int, offset: int = 0):
    """Positions (round indices) of the XX (key) and ZZ (test) rounds among ``rounds`` new rounds."""
    alice_x = rng.random(rounds) < P_KEY
    bob_x = rng.random(rounds) < P_KEY
    return np.flatnonzero(alice_x & bob_x) + offset, np.flatnonzero(~alice_x & ~bob_x) + offset


def quota_block(rng, n: int, k: int):
    """OLD rule: the first n key rounds and the first k test rounds (later rounds of a filled basis dropped)."""
    chunk = math.ceil(1.05 * max(n / P_KEY**2, k / (1 - P_KEY)**2))
    keys, tests, start = [], [], 0
    while sum(map(len, keys)) < n or sum(map(len, tests)) < k:
        xx, zz = _sifted(rng, chunk, start)
        keys.append(xx)
        tests.append(zz)
        start += chunk
    return np.concatenate(keys)[:n], np.concatenate(tests)[:k]


def rounds_block(rng, rounds: int):
    """Valid rule: every sifted round of a number of rounds fixed before the block."""
    return _sifted(rng, rounds)


def errors(rng, positions, window: int, attacked: float, p_attacked: float, baseline: float):
    """(errors, attacked rounds) among the kept rounds at ``positions``."""
    hit = (positions < window) & (rng.random(positions.size) < attacked)
    err = rng.random(positions.size) < np.where(hit, p_attacked, baseline)
    return int(np.count_nonzero(err)), int(np.count_nonzero(hit))


def tool_bound(n: int, k: int, e: int):
    """finitekey's exact phase-error bound and its claimed failure probability, through the block API."""
    res = bb84.key_length(bb84.parse_block({"key_bits": n, "test_bits": k, "test_errors": e, "ec_leak_bits": 0,
                                            "eps_sec": EPS_SEC, "eps_cor": 1e-15}))
    return res.estimates["phase_error_count_upper"], res.estimates["parameter_estimation_failure"]


def trial(rng, key_pos, test_pos, window=WINDOW, attacked=ATTACKED, baseline=BASELINE):
    """One block under the intercept-resend attack: true key phase errors, bounds at both epsilons."""
    phase_errors, _ = errors(rng, key_pos, window, attacked, 0.25, baseline)
    e, _ = errors(rng, test_pos, window, attacked, 0.25, baseline)
    n, k = key_pos.size, test_pos.size
    bound, claimed = tool_bound(n, k, e)
    loose = key_errors_upper_certified(n, k, e, LOOSE_EPS)
    return {"n": n, "k": k, "e": e, "phase_errors": phase_errors, "bound": bound, "claimed": claimed,
            "loose_bound": loose}


def binomial_margin(trials: int, eps: float) -> int:
    """Largest failure count a bound failing with probability eps reaches with probability >= SIGNIFICANCE.

    scipy.stats.binom: Pr[Binomial(trials, eps) > margin] <= SIGNIFICANCE.
    """
    return int(stats.binom.ppf(1 - SIGNIFICANCE, trials, eps))


def run_quota(seed: int, trials: int):
    rng = np.random.default_rng(seed)
    return [trial(rng, *quota_block(rng, N_KEY, K_TEST)) for _ in range(trials)]


def run_rounds(seed: int, trials: int, rounds: int, **attack):
    rng = np.random.default_rng(seed)
    return [trial(rng, *rounds_block(rng, rounds), **attack) for _ in range(trials)]


@pytest.fixture(scope="module")
def quota_trials():
    return run_quota(20160530, 20)


# ---------------------------------------------------------------------------------------------------------
# The old rule: the bound fails although it claims a tiny failure probability
# ---------------------------------------------------------------------------------------------------------
def test_quota_rule_breaks_the_phase_error_bound(quota_trials):
    claimed = quota_trials[0]["claimed"]
    assert claimed < 1e-21   # what the tool claims
    assert all(t["n"] == N_KEY and t["k"] == K_TEST for t in quota_trials)
    failures = sum(t["phase_errors"] > t["bound"] for t in quota_trials)
    # A valid bound would fail in any of 20 trials with probability <= 20 * claimed ~ 1e-20.
    assert failures >= 18, [(t["phase_errors"], t["bound"]) for t in quota_trials]
    # Not a borderline effect: the true phase errors exceed the bound by a large factor on average.
    ratio = np.mean([t["phase_errors"] / t["bound"] for t in quota_trials])
    assert ratio > 1.4, ratio


def test_quota_rule_fails_beyond_the_binomial_margin_at_a_loose_epsilon(quota_trials):
    """The margin check used for the valid rule below does reject the quota rule (so it can fail)."""
    failures = sum(t["phase_errors"] > t["loose_bound"] for t in quota_trials)
    assert failures > binomial_margin(len(quota_trials), LOOSE_EPS), failures


def test_quota_rule_key_exceeds_the_bits_unknown_to_the_attacker():
    """Intercept-resend in the key basis on the early rounds: the attacker learns every attacked key bit.

    Attacked key rounds then show no bit error; attacked test rounds an error with probability 1/2.  The
    tool's key (leakage 1.1 n h(key error rate), measured) exceeds the key bits the attacker did not attack,
    which no secure key can (its entropy given the attacker is at most that number).
    """
    rng = np.random.default_rng(1506)
    attacked, baseline, over = 0.15, 0.001, 0
    for _ in range(8):
        key_pos, test_pos = quota_block(rng, N_KEY, K_TEST)
        key_errors, hit_key = errors(rng, key_pos, WINDOW, attacked, 0.0, baseline)
        e, _ = errors(rng, test_pos, WINDOW, attacked, 0.5, baseline)
        q = max(key_errors, 1) / N_KEY
        leak = math.ceil(1.1 * N_KEY * (-q * math.log2(q) - (1 - q) * math.log2(1 - q)))
        res = bb84.key_length(bb84.parse_block({"key_bits": N_KEY, "test_bits": K_TEST, "test_errors": e,
                                                "ec_leak_bits": leak, "eps_sec": EPS_SEC, "eps_cor": 1e-15}))
        over += res.secret_key_length > N_KEY - hit_key
    assert over >= 6, over


# ---------------------------------------------------------------------------------------------------------
# The valid rule: a number of rounds fixed before the block, the same attack
# ---------------------------------------------------------------------------------------------------------
def test_fixed_rounds_bound_holds_under_the_same_attack():
    """Same attack on the same early rounds, block of WINDOW rounds (about the same n as the quota block)."""
    results = run_rounds(20160531, 20, WINDOW)
    assert all(t["phase_errors"] <= t["bound"] for t in results), \
        [(t["phase_errors"], t["bound"]) for t in results if t["phase_errors"] > t["bound"]]
    # the attack is real: the key bits do carry its phase errors (about 0.12/4 + 0.005 of them)
    rate = np.mean([t["phase_errors"] / t["n"] for t in results])
    assert 0.03 < rate < 0.04, rate


def test_fixed_rounds_failures_within_the_binomial_margin_at_a_loose_epsilon():
    """At eps = 1e-2 the bound may fail, at most at that rate (scipy.stats.binom margin, significance 1e-6).

    A block of 2e5 rounds (k about 500 test bits) with the attack on the first half of its rounds.
    """
    rng = np.random.default_rng(2018)
    rounds, trials, failures = 200_000, 300, 0
    for _ in range(trials):
        key_pos, test_pos = rounds_block(rng, rounds)
        phase_errors, _ = errors(rng, key_pos, rounds // 2, ATTACKED, 0.25, BASELINE)
        e, _ = errors(rng, test_pos, rounds // 2, ATTACKED, 0.25, BASELINE)
        failures += phase_errors > key_errors_upper_certified(key_pos.size, test_pos.size, e, LOOSE_EPS)
    assert failures <= binomial_margin(trials, LOOSE_EPS), failures


def test_tool_bound_is_the_exact_hypergeometric_bound():
    """The two entry points used above agree at the claimed epsilon (so both test the same bound)."""
    bound, claimed = tool_bound(N_KEY, K_TEST, 60)
    assert bound == key_errors_upper_certified(N_KEY, K_TEST, 60, claimed)


@pytest.mark.slow
def test_slow_quota_rule_fails_and_fixed_rounds_hold():
    quota = run_quota(7, 100)
    assert sum(t["phase_errors"] > t["bound"] for t in quota) >= 95
    # fixed rounds sized for the same test count k (about 4e6 rounds), the same attack on the same rounds
    same_k = run_rounds(8, 30, math.ceil(K_TEST / (1 - P_KEY)**2))
    assert all(t["phase_errors"] <= t["bound"] for t in same_k)
    # the attack on every round of the block (WINDOW rounds), many trials
    everywhere = run_rounds(9, 200, WINDOW)
    assert all(t["phase_errors"] <= t["bound"] for t in everywhere)
    loose = sum(t["phase_errors"] > t["loose_bound"] for t in everywhere)
    assert loose <= binomial_margin(len(everywhere), LOOSE_EPS), loose
    # loose epsilon with more test bits: blocks of 4e5 rounds (k about 1000), attack on the first half
    big = run_rounds(10, 1000, 400_000, window=200_000)
    loose = sum(t["phase_errors"] > t["loose_bound"] for t in big)
    assert loose <= binomial_margin(len(big), LOOSE_EPS), loose


# ---------------------------------------------------------------------------------------------------------
# The block field: closed_by (and rounds)
# ---------------------------------------------------------------------------------------------------------
BLOCK = {"protocol": "bb84", "key_bits": N_KEY, "test_bits": K_TEST, "test_errors": 100, "ec_leak_bits": 10000,
         "eps_sec": EPS_SEC, "eps_cor": 1e-15}


def test_closed_by_defaults_to_rounds_and_every_result_states_the_rule():
    res = bb84.key_length(bb84.parse_block(BLOCK))
    assert bb84.BLOCK_RULE_ASSUMPTION in res.assumptions
    assert "closed_by = rounds" in bb84.BLOCK_RULE_ASSUMPTION
    explicit = bb84.key_length(bb84.parse_block(dict(BLOCK, closed_by="rounds")))
    assert explicit.secret_key_length == res.secret_key_length
    design = bb84.BB84_PROTOCOL.design(bb84.BB84_PROTOCOL.default_scenario())
    assert bb84.BLOCK_RULE_ASSUMPTION in design.expected.assumptions


def test_rounds_field_is_checked_and_echoed():
    res = bb84.key_length(bb84.parse_block(dict(BLOCK, rounds=4_000_000)))
    assert any("rounds = 4000000" in a for a in res.assumptions)
    for bad in (N_KEY + K_TEST - 1, 1.5e6 + 0.5, "many", True, [4_000_000]):
        with pytest.raises(InputError) as info:
            bb84.parse_block(dict(BLOCK, rounds=bad))
        assert info.value.field == "rounds"


def test_null_closed_by_is_the_default():
    assert bb84.parse_block(dict(BLOCK, closed_by=None)) == bb84.parse_block(BLOCK)


@pytest.mark.parametrize("value", ["quota", "detections", "Rounds", 1, ["quota"]])
def test_quota_and_unknown_closures_are_refused(value):
    with pytest.raises(InputError) as info:
        bb84.parse_block(dict(BLOCK, closed_by=value))
    assert info.value.field == "closed_by" and "'rounds'" in info.value.allowed


DECOY = {"protocol": "decoy-bb84", "intensities": [0.6, 0.1, 0.0002], "intensity_probabilities": [0.9, 0.09, 0.01],
         "key_basis": {"detections": [170000000, 2700000, 560], "errors": [2900000, 46000, 42]},
         "test_basis": {"detections": [1070000, 16700, 3], "errors": [18000, 285, 0]},
         "ec_leak_bits": 24000000, "eps_sec": 1e-10, "eps_cor": 1e-15}


def test_decoy_blocks_declare_closure_too():
    block = decoy_bb84.DECOY_BB84.parse_block(dict(DECOY, closed_by="rounds"))
    res = decoy_bb84.DECOY_BB84.key_length(block)
    assert decoy_bb84.BLOCK_RULE_ASSUMPTION in res.assumptions
    assert "pulses" in decoy_bb84.BLOCK_RULE_ASSUMPTION
    design = decoy_bb84.DECOY_BB84.design(decoy_bb84.DECOY_BB84.default_scenario())
    assert decoy_bb84.BLOCK_RULE_ASSUMPTION in design.expected.assumptions   # so reports carry it
    with pytest.raises(InputError) as info:
        decoy_bb84.DECOY_BB84.parse_block(dict(DECOY, closed_by="quota"))
    assert info.value.field == "closed_by" and "pulses" in info.value.allowed


@pytest.mark.parametrize("block,name", [(dict(BLOCK, closed_by="quota"), "b.json"),
                                        (dict(DECOY, closed_by="quota"), "d.json")])
def test_cli_refuses_quota_closed_blocks_with_exit_2(tmp_path, capsys, block, name):
    path = tmp_path / name
    path.write_text(json.dumps(block))
    rc = main(["keylength", str(path)])
    out, err = capsys.readouterr()
    assert rc == 2 and out == ""
    assert "closed_by" in err and "quota" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1


def test_cli_batch_names_the_quota_line(tmp_path, capsys):
    path = tmp_path / "b.jsonl"
    path.write_text(json.dumps(BLOCK) + "\n" + json.dumps(dict(BLOCK, closed_by="quota")) + "\n")
    rc = main(["keylength", str(path), "--json"])
    out, err = capsys.readouterr()
    assert rc == 2 and out == "" and "line 2: closed_by" in err
