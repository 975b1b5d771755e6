"""CLI: finitekey keylength / design / blocksize for BB84 (via finitekey.cli.main and one subprocess run)."""

import json
import subprocess
import sys
from pathlib import Path

import mpmath
import pytest

from finitekey.cautions import CAUTION
from finitekey.cli import main

BLOCK = {"protocol": "bb84", "key_bits": 1000000, "test_bits": 100000, "test_errors": 2000,
         "ec_leak_bits": 160000, "eps_sec": 1e-10, "eps_cor": 1e-15}
ROOT = Path(__file__).resolve().parents[1]


def write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text)
    return str(p)


def run(capsys, argv):
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def test_keylength_json_single(tmp_path, capsys):
    path = write(tmp_path, "b.json", json.dumps(BLOCK))
    rc, out, err = run(capsys, ["keylength", path, "--json"])
    assert rc == 0 and err == ""
    d = json.loads(out)
    assert d["protocol"] == "bb84" and d["statistics"] == "exact"
    assert isinstance(d["secret_key_length"], int) and d["secret_key_length"] > 0
    assert {t["name"] for t in d["ledger"]} >= {"error_verification", "smoothing", "privacy_amplification"}
    assert d["eps_total"] <= 1e-10 + 1e-15
    # Check the value against an independent mpmath evaluation of the formula from the reported phase errors.
    E, n = d["estimates"]["phase_error_count_upper"], BLOCK["key_bits"]
    with mpmath.workdps(40):
        phi = mpmath.mpf(E) / n
        h = -phi * mpmath.log(phi, 2) - (1 - phi) * mpmath.log(1 - phi, 2)
        eps_pa = [t["epsilon"] for t in d["ledger"] if t["name"] == "privacy_amplification"][0]
        val = n * (1 - h) - 160000 - 50 - 2 * mpmath.log(1 / (2 * mpmath.mpf(eps_pa)), 2)
    assert d["secret_key_length"] == int(mpmath.floor(val))


def test_keylength_human_has_table_ledger_and_caution(tmp_path, capsys):
    path = write(tmp_path, "b.json", json.dumps(BLOCK))
    rc, out, _ = run(capsys, ["keylength", path, "--statistics", "serfling"])
    assert rc == 0
    assert "secret key length" in out and "bits" in out and "privacy_amplification" in out
    assert "serfling" in out and CAUTION in out


def test_keylength_batch_jsonl_and_csv(tmp_path, capsys):
    lines = [dict(BLOCK, label="first"), dict(BLOCK, test_errors=9000), dict(BLOCK, key_bits=2000000)]
    path = write(tmp_path, "b.jsonl", "\n".join(json.dumps(x) for x in lines) + "\n\n")
    rc, out, _ = run(capsys, ["keylength", path, "--json"])
    assert rc == 0
    rows = [json.loads(x) for x in out.strip().splitlines()]
    assert len(rows) == 3 and rows[0]["label"] == "first" and [r["line"] for r in rows] == [1, 2, 3]
    assert rows[1]["secret_key_length"] < rows[0]["secret_key_length"] < rows[2]["secret_key_length"]
    # one-by-one results equal the batch results
    single = write(tmp_path, "one.json", json.dumps(lines[1]))
    rc, out1, _ = run(capsys, ["keylength", single, "--json"])
    assert json.loads(out1)["secret_key_length"] == rows[1]["secret_key_length"]
    header = ",".join(BLOCK)
    csv_text = header + "\n" + "\n".join(",".join(str(dict(BLOCK, test_errors=e)[k]) for k in BLOCK)
                                         for e in (100, 2000)) + "\n"
    path = write(tmp_path, "b.csv", csv_text)
    rc, out, _ = run(capsys, ["keylength", path])
    assert rc == 0 and "secret key (bits)" in out and CAUTION in out


@pytest.mark.parametrize("content,name,needle", [
    ('{"protocol": "bb84", "key_bits": 10', "bad.json", "valid JSON"),
    (json.dumps(dict(BLOCK, test_errors=200000)), "e.json", "test_errors"),
    (json.dumps({k: v for k, v in BLOCK.items() if k != "protocol"}), "p.json", "protocol"),
    (json.dumps(dict(BLOCK, protocol="b92")), "u.json", "protocol"),
    (json.dumps(dict(BLOCK, eps_sec=2)), "s.json", "eps_sec"),
    (json.dumps(dict(BLOCK, key_bits=1.5)), "f.json", "key_bits"),
    (json.dumps(dict(BLOCK, key_bits="many")), "t.json", "key_bits"),
    (json.dumps(BLOCK) + "\n" + json.dumps(BLOCK) + "\n" + json.dumps(dict(BLOCK, ec_leak_bits=-1)), "b.jsonl",
     "line 3: ec_leak_bits"),
    (json.dumps(BLOCK) + "\n{oops\n", "m.jsonl", "line 2"),
])
def test_keylength_bad_input_exit_2(tmp_path, capsys, content, name, needle):
    path = write(tmp_path, name, content)
    rc, out, err = run(capsys, ["keylength", path])
    assert rc == 2 and out == ""
    assert needle in err and "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_keylength_bad_statistics_and_missing_file(tmp_path, capsys):
    path = write(tmp_path, "b.json", json.dumps(BLOCK))
    rc, _, err = run(capsys, ["keylength", path, "--statistics", "bayes"])
    assert rc == 2 and "statistics" in err
    rc, _, err = run(capsys, ["keylength", str(tmp_path / "nope.json")])
    assert rc == 2 and "file" in err


def test_design_default_and_file(tmp_path, capsys):
    rc, out, _ = run(capsys, ["design", "--json"])
    assert rc == 0
    d = json.loads(out)
    from finitekey import protocols

    # With no file, design runs the default protocol's built-in scenario.
    assert d["protocol"] == protocols.DEFAULT_PROTOCOL
    assert d["secret_key_rate_per_pulse"] == d["secret_key_rate_per_signal"]
    assert d["expected"]["secret_key_length"] > 0
    toml = write(tmp_path, "s.toml", '[protocol]\nname = "bb84"\n[channel]\nqber = 0.03\n[budget]\n'
                                     'detections = 1e6\n[security]\neps_total = 1e-9\n')
    rc, out, _ = run(capsys, ["design", toml])
    assert rc == 0 and "p_x" in out and "bits per block" in out and CAUTION in out
    rc, out, _ = run(capsys, ["design", toml, "--json"])
    d = json.loads(out)
    assert d["protocol"] == "bb84" and 0.5 < d["parameters"]["p_x"] < 1
    rc, _, err = run(capsys, ["design", toml, "--reach"])
    assert rc == 2 and "decoy-bb84" in err
    # The refusal names every protocol that has a reach (it named decoy-bb84 alone after mdi-bb84 and
    # tf-sns gained one); common practice, no source.
    with_reach = [n for n in protocols.names() if getattr(protocols.get(n), "reach", None) is not None]
    assert {"decoy-bb84", "mdi-bb84", "tf-sns"} <= set(with_reach)
    assert len(err.strip().splitlines()) == 1 and all(n in err for n in with_reach)
    bad = write(tmp_path, "bad.toml", '[protocol]\nname = "bb84"\n[channel]\nqber = 0.02\nlos = 3\n'
                                      '[budget]\ndetections = 1e6\n'
                                      '[security]\neps_total = 1e-9\n')
    rc, _, err = run(capsys, ["design", bad])
    assert rc == 2 and "channel.los" in err
    broken = write(tmp_path, "broken.toml", "[channel\nqber = \n")
    rc, _, err = run(capsys, ["design", broken])
    assert rc == 2 and "TOML" in err


def test_blocksize(tmp_path, capsys):
    toml = write(tmp_path, "s.toml", '[protocol]\nname = "bb84"\n[channel]\nqber = 0.02\n[budget]\ndetections = 1e6\n'
                                     '[security]\neps_sec = 1e-10\neps_cor = 1e-15\n')
    rc, out, _ = run(capsys, ["blocksize", toml, "--target", "bits=100000", "--json"])
    assert rc == 0
    d = json.loads(out)
    assert d["size_kind"] == "detections" and d["design"]["expected"]["secret_key_length"] >= 100000
    rc, out, _ = run(capsys, ["blocksize", toml, "--target", "positive"])
    assert rc == 0 and "smallest block" in out and CAUTION in out
    rc, _, err = run(capsys, ["blocksize", toml, "--target", "lots"])
    assert rc == 2 and "target" in err
    above = write(tmp_path, "a.toml", '[protocol]\nname = "bb84"\n[channel]\nqber = 0.2\n[budget]\ndetections = 1e6\n'
                                      '[security]\neps_sec = 1e-10\neps_cor = 1e-15\n')
    rc, _, err = run(capsys, ["blocksize", above, "--target", "positive"])
    assert rc == 2 and "channel.qber" in err


def test_subprocess_keylength(tmp_path):
    path = write(tmp_path, "b.json", json.dumps(BLOCK))
    proc = subprocess.run([sys.executable, "-m", "finitekey.cli", "keylength", path, "--json"], cwd=ROOT,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["secret_key_length"] > 0


def test_design_text_gives_leakage_in_bits(capsys):
    # ec_leak_bits is a number of bits disclosed by error correction, not a count of events (it was shown
    # with the unit "count"); common practice, no source.
    rc, out, _ = run(capsys, ["design"])
    rows = [line.split() for line in out.splitlines() if line.startswith("expected: ec_leak_bits")]
    assert rc == 0 and rows and rows[0][-1] == "bits"
    assert all(r[-1] == "count" for r in (line.split() for line in out.splitlines())
               if r and r[0] == "expected:" and r[1].endswith(("detections", "errors")))
