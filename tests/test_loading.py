"""finitekey.load_scenario / load_block / load_blocks: files to parsed protocol objects, with field-naming errors."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

import finitekey
from finitekey import protocols
from finitekey.errors import InputError

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"


def test_load_scenario_gives_the_protocols_parsed_scenario():
    sc = finitekey.load_scenario(EXAMPLES / "metro_datacentre.toml")
    assert isinstance(sc, protocols.decoy_bb84.DecoyScenario)
    sc2 = finitekey.load_scenario(str(EXAMPLES / "blocks" / "bb84_lab_link.toml"))
    assert isinstance(sc2, protocols.bb84.BB84Scenario)
    # the same object the command line designs for
    from finitekey.cli.design_cmd import load_scenario as cli_load
    proto, cli_sc = cli_load(str(EXAMPLES / "metro_datacentre.toml"))
    assert proto is protocols.get("decoy-bb84") and cli_sc == sc


@pytest.mark.parametrize("text, field", [
    ("[protocol]\nname = \"bb85\"\n", "protocol"),
    ("[link]\ndistance_km = 10\n", "protocol.name"),
    ("[protocol\nname=1", None),  # TOML syntax error names the file
])
def test_load_scenario_errors_name_the_field(tmp_path, text, field):
    path = tmp_path / "s.toml"
    path.write_text(text)
    with pytest.raises(InputError) as exc:
        finitekey.load_scenario(path)
    assert exc.value.field == (field if field is not None else str(path))


def test_load_scenario_missing_file(tmp_path):
    with pytest.raises(InputError) as exc:
        finitekey.load_scenario(tmp_path / "nope.toml")
    assert exc.value.field == "file"


def test_load_block_and_key_length_agree_with_the_cli(capsys):
    block = finitekey.load_block(EXAMPLES / "blocks" / "bb84_block.json")
    res = protocols.get("bb84").key_length(block)
    from finitekey.cli import main
    assert main(["keylength", str(EXAMPLES / "blocks" / "bb84_block.json"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["secret_key_length"] == res.secret_key_length


def test_load_blocks_reads_a_batch_and_load_block_refuses_it():
    path = EXAMPLES / "blocks" / "bb84_stream.jsonl"
    blocks = finitekey.load_blocks(path)
    assert len(blocks) == len([x for x in path.read_text().splitlines() if x.strip()]) > 1
    with pytest.raises(InputError) as exc:
        finitekey.load_block(path)
    assert "exactly one block" in exc.value.allowed and "load_blocks" in exc.value.allowed


def test_load_blocks_error_names_the_line_and_field(tmp_path):
    good = json.loads((EXAMPLES / "blocks" / "bb84_block.json").read_text())
    path = tmp_path / "b.jsonl"
    path.write_text(json.dumps(good) + "\n" + json.dumps(dict(good, test_bits=0)) + "\n")
    with pytest.raises(InputError) as exc:
        finitekey.load_blocks(path)
    assert exc.value.field == "line 2: test_bits"


def test_load_block_unknown_protocol_lists_the_names(tmp_path):
    path = tmp_path / "b.json"
    path.write_text(json.dumps({"protocol": "b92"}))
    with pytest.raises(InputError) as exc:
        finitekey.load_block(path)
    assert exc.value.field == "protocol" and "bb84" in exc.value.allowed


def test_package_attributes_are_lazy():
    code = ("import sys, finitekey; heavy = [m for m in ('sympy', 'numpy') if m in sys.modules]; "
            "f = finitekey.load_scenario; print(heavy, callable(f), 'sympy' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[] True True"
    assert "load_scenario" in dir(finitekey)
    with pytest.raises(AttributeError):
        finitekey.no_such_name
