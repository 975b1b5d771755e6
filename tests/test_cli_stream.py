"""``finitekey keylength -`` (blocks streamed on standard input) and ``--compact`` JSON.

The stream test talks to one process the way a post-processing stack would: it sends one line, waits for the
answer, and only then sends the next.  Expected key lengths come from the library call on the same block.
"""

import io
import json
import os
import select
import subprocess
import sys
from pathlib import Path

import pytest

from finitekey import protocols
from finitekey.cautions import CAUTION
from finitekey.cli import main
from finitekey.cli.keylength_cmd import COMPACT_OMITS, compact, stream

ROOT = Path(__file__).resolve().parents[1]
BLOCK = {"protocol": "bb84", "key_bits": 1000000, "test_bits": 50000, "test_errors": 1250,
         "ec_leak_bits": 190000, "eps_sec": 1e-10, "eps_cor": 1e-15}
DECOY = json.loads((ROOT / "examples" / "blocks" / "decoy_block.json").read_text())


def _expected(block: dict) -> int:
    proto = protocols.get(block["protocol"])
    return proto.key_length(proto.parse_block(block)).secret_key_length


def _answer(proc, line: str, timeout: float = 120.0) -> dict:
    proc.stdin.write(line + "\n")
    proc.stdin.flush()
    ready, _, _ = select.select([proc.stdout], [], [], timeout)
    assert ready, f"no answer within {timeout} s to {line!r} (output not flushed?)"
    return json.loads(proc.stdout.readline())


@pytest.mark.skipif(os.name != "posix", reason="select on a pipe needs POSIX")
def test_stream_answers_each_line_before_the_next_is_sent():
    proc = subprocess.Popen([sys.executable, "-m", "finitekey", "keylength", "-", "--compact"], cwd=ROOT,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            bufsize=1)
    try:
        first = _answer(proc, json.dumps(BLOCK))
        assert first["line"] == 1 and first["secret_key_length"] == _expected(BLOCK)
        assert proc.poll() is None  # still running, waiting for more
        bad = dict(BLOCK, test_errors=-3)
        err = _answer(proc, json.dumps(bad))
        assert err["line"] == 2 and err["field"] == "test_errors" and "line 2" in err["error"]
        assert "secret_key_length" not in err
        broken = _answer(proc, '{"protocol": "bb84", ')
        assert broken["line"] == 3 and broken["field"] == "block"
        proc.stdin.write("\n")  # a blank line is skipped without an answer; numbering follows the input lines
        decoy = _answer(proc, json.dumps(dict(DECOY, label="metro")))
        assert decoy["line"] == 5 and decoy["label"] == "metro"
        assert decoy["secret_key_length"] == _expected(DECOY)
        last = _answer(proc, json.dumps(dict(BLOCK, test_errors=1630, ec_leak_bits=240200)))
        assert last["line"] == 6 and last["secret_key_length"] == _expected(dict(BLOCK, test_errors=1630,
                                                                                      ec_leak_bits=240200))
        proc.stdin.close()
        assert proc.wait(timeout=60) == 2  # some lines were bad input
        errors = proc.stderr.read().strip().splitlines()
        assert len(errors) == 2 and errors[0].startswith("finitekey keylength: error: line 2: test_errors")
        assert "Traceback" not in "".join(errors)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_stream_function_status_and_one_answer_per_nonblank_line():
    out, err = io.StringIO(), io.StringIO()
    lines = [json.dumps(BLOCK) + "\n", "   \n", json.dumps(dict(BLOCK, eps_sec=2.0)) + "\n"]
    assert stream(lines, out, err) == 2
    answers = [json.loads(x) for x in out.getvalue().splitlines()]
    assert [a["line"] for a in answers] == [1, 3]
    assert answers[0]["secret_key_length"] == _expected(BLOCK)
    assert "assumptions" in answers[0]  # full form unless compact
    assert answers[1]["field"] == "eps_sec"
    assert len(err.getvalue().splitlines()) == 1
    out2 = io.StringIO()
    assert stream([json.dumps(BLOCK)], out2, io.StringIO()) == 0


def test_stream_rejects_jobs(capsys):
    assert main(["keylength", "-", "--jobs", "2"]) == 2
    assert "--jobs" in capsys.readouterr().err


def test_compact_keeps_the_numbers_and_drops_the_repeated_text():
    full = protocols.get("bb84").key_length(protocols.get("bb84").parse_block(BLOCK)).to_dict()
    small = compact(full)
    for k in COMPACT_OMITS:
        assert k in full and k not in small
    for k in ("secret_key_length", "eps_total", "eps_sec", "eps_cor", "statistics", "terms", "estimates"):
        assert small[k] == full[k]
    assert [{k: v for k, v in t.items() if k != "description"} for t in full["ledger"]] == small["ledger"]
    assert all("description" not in t for t in small["ledger"])
    n_full = len(json.dumps(full, separators=(",", ":")))
    n_small = len(json.dumps(small, separators=(",", ":")))
    assert n_small < n_full / 2, (n_small, n_full)
    assert compact(dict(full, status="ok"))["status"] == "ok"  # fields outside the omitted list are kept


def test_batch_compact_lines(capsys):
    path = str(ROOT / "examples" / "blocks" / "bb84_stream.jsonl")
    assert main(["keylength", path, "--json"]) == 0
    full = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert main(["keylength", path, "--compact"]) == 0  # --compact implies --json
    small = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert [d["secret_key_length"] for d in small] == [d["secret_key_length"] for d in full]
    assert [d["line"] for d in small] == [d["line"] for d in full]
    assert all("assumptions" not in d and "formula" not in d for d in small)
    # every record, compact or not, carries the caution (house rule: every output does)
    assert all(d["caution"] == CAUTION for d in full + small)


def test_single_json_and_stream_records_carry_the_caution(capsys):
    path = str(ROOT / "examples" / "blocks" / "bb84_block.json")
    for flag in ("--json", "--compact"):
        assert main(["keylength", path, flag]) == 0
        assert json.loads(capsys.readouterr().out)["caution"] == CAUTION
    out = io.StringIO()
    stream([json.dumps(BLOCK)], out, io.StringIO(), compact_output=True)
    assert json.loads(out.getvalue())["caution"] == CAUTION
