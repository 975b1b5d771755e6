"""Edge cases of the description format found in review: the declared tolerance range and absurd entries.

Sources: the declared domain of ``description.tolerance`` ((0, 1e-3], ``finitekey fields described``) is the
contract; entries of a density matrix, of a POVM element (``0 <= M <= 1``) and of a normalised ket have modulus at
most 1 (``|M_ij| <= sqrt(M_ii M_jj)``; common practice, no source).
"""

import json
from pathlib import Path

import pytest

from finitekey.errors import InputError
from finitekey.protocols.described.analysis import key_length
from finitekey.protocols.described.block import parse_block
from finitekey.protocols.described.description import parse_description

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
BLOCK = json.loads((EXAMPLES / "blocks" / "described_block.json").read_text())


def _description(tmp_path, old, new):
    text = (EXAMPLES / "described" / "bb84_qubit.toml").read_text()
    assert old in text
    path = tmp_path / "d.toml"
    path.write_text(text.replace(old, new))
    return str(path)


def test_largest_declared_tolerance_gives_a_key_not_an_internal_error(tmp_path):
    # the largest declared tolerance (1e-6) gives a key; 1e-3 (the old upper end) used to fail as "tol = 0.01 is
    # not allowed" (a field the user never wrote) because the problem was built with ten times the tolerance
    path = _description(tmp_path, "tolerance = 1e-9", "tolerance = 1e-6")
    res = key_length(parse_block({**BLOCK, "description": path}))
    assert res.secret_key_length > 0


def test_tolerance_looser_than_1e_6_is_refused_naming_the_field(tmp_path):
    # review finding: 1e-3 accepted POVM elements with eigenvalue -4e-4 (common practice, no source: a
    # certificate for a non-physical problem is not a certificate for the measured one)
    path = _description(tmp_path, "tolerance = 1e-9", "tolerance = 1e-3")
    with pytest.raises(InputError) as info:
        key_length(parse_block({**BLOCK, "description": path}))
    assert info.value.field == "description.tolerance" and "1e-06" in str(info.value)


@pytest.mark.parametrize("entry", ["1e308", "-1e300", "\"1e200j\"", "2e6"])
def test_entry_larger_than_one_is_refused_naming_the_entry(tmp_path, entry):
    # 1e308 entries overflowed inside the checks (numpy warnings on stderr, then an error about a derived
    # constraint); no entry of a state or a POVM element can exceed 1 in modulus
    path = _description(tmp_path, "povm = [[[1, 0], [0, 0]]", f"povm = [[[{entry}, 0], [0, 0]]")
    from finitekey.files import read_toml
    data = read_toml(path)
    with pytest.raises(InputError) as info:
        parse_description({k: v for k, v in data.items() if k in ("description", "alice", "bob", "sifting")})
    assert info.value.field == "bob.settings[0].povm[0][0][0]"
    assert "modulus at most 1e6" in str(info.value)


def test_mixed_signal_states_carry_the_trusted_mixture_assumption(tmp_path):
    # A mixed signal is purified into Alice's own system (source replacement): that is only sound if the
    # mixture is private to Alice's device (trusted noise); if Eve may hold the purification, Eve knows more.
    # (Source replacement of mixed states; common practice, no source.) The result must say so.
    pure = key_length(parse_block(BLOCK | {"description": str(EXAMPLES / "described" / "bb84_qubit.toml")}))
    assert not any("mixed signal" in a for a in pure.assumptions)
    path = _description(tmp_path, "states = [[1, 0], [0, 1]]", "states = [[[0.99, 0], [0, 0.01]], [0, 1]]")
    res = key_length(parse_block({**BLOCK, "description": path}))
    assert any("mixed signal" in a and "Eve" in a for a in res.assumptions)
