"""Start-up: which heavy modules a command imports (checked in a fresh interpreter; not a timing test).

``finitekey --help`` should list the sub-commands without importing sympy, scipy.optimize, matplotlib or cvxpy
(each costs 0.1-2 s; measured in benchmarks/bench_startup.py).  Common practice, no source.
"""

import json
import os
import subprocess
import sys

import pytest

from finitekey import cli

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
HEAVY = ("matplotlib", "sympy", "scipy.optimize", "scipy.stats", "cvxpy", "dask")

_PROBE = """
import contextlib, io, json, sys
from finitekey.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        status = main(json.loads(sys.argv[1]))
    except SystemExit as exc:
        status = exc.code
print(json.dumps({"status": status, "loaded": sorted(m for m in json.loads(sys.argv[2]) if m in sys.modules)}))
"""


def _loaded_after(argv):
    proc = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(argv), json.dumps(HEAVY)], cwd=ROOT,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("argv", [["--help"], ["--version"], []])
def test_help_and_version_import_no_heavy_module(argv):
    out = _loaded_after(argv)
    assert out["status"] == 0
    assert out["loaded"] == []


def test_import_finitekey_is_light():
    proc = subprocess.run([sys.executable, "-c", "import json, sys, finitekey; "
                           f"print(json.dumps([m for m in {list(HEAVY) + ['numpy', 'flint']!r} if m in sys.modules]))"],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout) == []


def test_bb84_keylength_imports_neither_plotting_nor_optimisers():
    # The certified BB84 key length needs sympy (the formula is compiled from it) but no optimiser and no plots.
    out = _loaded_after(["keylength", os.path.join(ROOT, "examples", "blocks", "bb84_block.json"), "--json"])
    assert out["status"] == 0
    assert out["loaded"] == ["sympy"]


def test_every_subcommand_loads_under_its_own_name():
    names = [e.name for e in cli.SUBCOMMANDS]
    assert len(set(names)) == len(names)
    for entry in cli.SUBCOMMANDS:
        cmd = cli.load_subcommand(entry)
        assert cmd.NAME == entry.name
        assert callable(cmd.add_arguments) and callable(cmd.run)


@pytest.mark.parametrize("name", [e.name for e in cli.SUBCOMMANDS])
def test_every_subcommand_help_works(name, capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main([name, "--help"])
    assert exc.value.code == 0
    assert f"usage: finitekey {name}" in capsys.readouterr().out


def test_top_level_help_lists_every_subcommand(capsys):
    with pytest.raises(SystemExit):
        cli.main(["--help"])
    out = capsys.readouterr().out
    for entry in cli.SUBCOMMANDS:
        assert entry.name in out


def test_unknown_subcommand_is_rejected_with_the_choices(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["keylenght", "x.json"])
    assert exc.value.code == 2
    err = capsys.readouterr().err
    assert "'keylenght' is not allowed" in err and "keylength" in err and len(err.strip().splitlines()) == 1


def test_python_dash_m_finitekey_runs_the_cli():
    proc = subprocess.run([sys.executable, "-m", "finitekey", "--version"], cwd=ROOT, capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0 and proc.stdout.startswith("finitekey ")
