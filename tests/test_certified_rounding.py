"""Rounding at the two places where a float could overstate: the epsilon split and the decoy key length's floor.

Sources: exact rational arithmetic (Python's ``fractions``) for the split; for the floor, the contract in
DEVELOPERS.md ("key lengths are integers rounded down from a certified lower bound") and python-flint's
documented ``arb.lower()`` ("an exact floating-point number that has been rounded down to the current
precision"), so ``float(ball.lower())`` is a round-to-nearest conversion once the caller's precision exceeds
53 bits.
"""

from __future__ import annotations

import math
import random
from fractions import Fraction

from flint import ctx

from finitekey.budget import Role, allocate
from finitekey.protocols import decoy_bb84 as D


def _exact_secrecy(ledger) -> Fraction:
    return sum((Fraction(t.weight) * Fraction(t.epsilon) for t in ledger.terms if t.role is Role.SECRECY),
               Fraction(0))


def test_allocate_never_exceeds_eps_sec_in_exact_arithmetic():
    # Found by a seeded search: the float guard (fsum of rounded products) accepted these splits while the
    # exact sum of weight * epsilon exceeded eps_sec by a fraction of an ulp.
    cases = [(3.4357375625763584e-07, 2.1421201869397454e-08, D.term_specs(14, "two-intensity"), None),
             (8.408461727421242e-14, 3.5643352793144984e-14, D.term_specs(10, "two-intensity"),
              {"count_estimation": 0.317864314297149, "single_photon_smoothing": 0.5468618689858543,
               "chain_rule": 0.06512089202437754, "privacy_amplification": 0.07015292469261925}),
             (1.1280921754473151e-09, 4.990167700243495e-10, D.term_specs(12, "three-intensity"),
              {"count_estimation": 0.4329805563136678, "single_photon_smoothing": 0.0756910166847279,
               "chain_rule": 0.10947883070410318, "privacy_amplification": 0.38184959629750126})]
    rng = random.Random(3)
    for _ in range(3000):
        analysis = rng.choice(["three-intensity", "two-intensity", "linear-programme"])
        n = rng.choice([10, 12, 14, 16, 18, 24, 30])
        eps_sec = 10 ** rng.uniform(-15, -1) * rng.choice([1, 3, 7, 0.999999])
        eps_cor = eps_sec * rng.uniform(1e-6, 0.49)
        w = [rng.random() + 1e-3 for _ in D.SECRECY_TERMS]
        split = None if rng.random() < 0.5 else dict(zip(D.SECRECY_TERMS, [x / sum(w) for x in w]))
        cases.append((eps_sec, eps_cor, D.term_specs(n, analysis), split))
    for eps_sec, eps_cor, specs, split in cases:
        led = allocate(eps_sec, eps_cor, specs, split)
        assert _exact_secrecy(led) <= Fraction(eps_sec), (eps_sec, eps_cor, split)


# A block whose certified lower end lies about 1e-10 below an integer (eps_cor tuned to put it there).
_BLOCK = {"protocol": "decoy-bb84", "intensities": [0.5, 0.1, 0.0002], "intensity_probabilities": [0.7, 0.2, 0.1],
          "key_basis": {"detections": [70283251, 4042853, 4816], "errors": [354078, 20975, 404]},
          "test_basis": {"detections": [4392703, 252678, 301], "errors": [22130, 1311, 25]},
          "ec_leak_bits": 3949482, "eps_sec": 1e-10, "eps_cor": 6.393495656928507e-16}


def test_decoy_length_is_the_floor_of_the_certified_lower_end_at_any_caller_precision():
    block = D.parse_block(_BLOCK)
    plain = D.key_length(block, "hoeffding")
    assert plain.secret_key_length <= math.floor(plain.terms["key_length_lower_bound"])
    for prec in (64, 128, 256):
        with ctx.workprec(prec):
            raised = D.key_length(block, "hoeffding")
        assert raised.secret_key_length <= math.floor(raised.terms["key_length_lower_bound"]), prec
        assert raised.secret_key_length == plain.secret_key_length, prec
