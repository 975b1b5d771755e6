"""Output files never damage anything (finitekey.outputs, used by table, plot and report).

Each case below was seen to go wrong before: a device or FIFO replaced by a regular file, a symlink replaced
instead of its target written, the input scenario overwritten, Markdown written into ``out.xlsx``, the HTML
report left behind when the LaTeX path was bad, and Python tracebacks for unwritable directories, a directory
as output and a full disk on standard output.  The expected behaviour is "common practice, no source": what
``cp``/``install``-like tools do (refuse non-regular targets, one-line errors, exit status 2 for user errors).

Tests run as root on the CI machines, where ``chmod 0o500`` does not stop writes.  The read-only directory
case therefore detects that and makes the operating system's refusal explicit by patching ``tempfile.mkstemp``
to raise the errno a read-only directory or file system gives; the immutable-directory case uses the real
kernel refusal (``chattr +i``) when the machine allows it and is skipped otherwise.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import socket
import stat
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest

from finitekey.cli import main
from scenarios import bb84_toml

BB84_TOML = bb84_toml("output-path test (fictional)")


@pytest.fixture
def scenario(tmp_path):
    p = tmp_path / "scenario.toml"
    p.write_text(BB84_TOML)
    return p


@pytest.fixture
def no_computation(monkeypatch):
    """Make any sweep or report computation fail loudly: refusals must come before it starts."""
    def forbidden(*a, **k):
        raise AssertionError("the computation started before the output paths were checked")

    for name in ("finitekey.cli.table_cmd.run_sweep", "finitekey.cli.plot_cmd.run_sweep",
                 "finitekey.cli.report_cmd.build_report"):
        monkeypatch.setattr(name, forbidden)


def _table(scenario, *extra):
    return ["table", str(scenario), "--jobs", "1", "--quiet", *extra]


def _one_error_line(capsys, *needles):
    cap = capsys.readouterr()
    lines = cap.err.strip().splitlines()
    assert len(lines) == 1, cap.err
    assert "Traceback" not in cap.err
    for n in needles:
        assert n in lines[0], lines[0]
    return lines[0]


def _listing(d: Path) -> list:
    return sorted(p.name for p in d.iterdir())


# ------------------------------------------------------------------------------------------ non-regular targets
def _fifo(p):
    os.mkfifo(p)


def _directory(p):
    p.mkdir()


def _socket(p):
    s = socket.socket(socket.AF_UNIX)
    s.bind(str(p))
    s.close()


def _char_device(p):  # a copy of /dev/full (major 1, minor 7) in tmp_path: never touch the real one
    try:
        os.mknod(p, stat.S_IFCHR | 0o666, os.makedev(1, 7))
    except (PermissionError, OSError) as exc:
        pytest.skip(f"cannot create a device node here: {exc}")


@pytest.mark.parametrize("make,word", [(_char_device, "character device"), (_fifo, "named pipe"),
                                       (_socket, "socket"), (_directory, "directory")])
def test_non_regular_output_is_refused_and_left_alone(scenario, tmp_path, capsys, no_computation, make, word):
    target = tmp_path / "out.md"
    make(target)
    kind = stat.S_IFMT(os.lstat(target).st_mode)
    assert main(_table(scenario, "-o", str(target))) == 2
    _one_error_line(capsys, "--output", str(target), word)
    assert stat.S_IFMT(os.lstat(target).st_mode) == kind  # still the same kind of thing


# ------------------------------------------------------------------------------------------------------ symlinks
def test_symlink_to_regular_file_writes_its_target(scenario, tmp_path):
    real = tmp_path / "data" / "real.md"
    real.parent.mkdir()
    real.write_text("previous content\n")
    os.chmod(real, 0o640)
    link = tmp_path / "link.md"
    link.symlink_to(Path("data") / "real.md")
    assert main(_table(scenario, "-o", str(link))) == 0
    assert link.is_symlink() and os.readlink(link) == str(Path("data") / "real.md")  # the link is kept
    text = real.read_text()
    assert text.startswith("|") and "previous content" not in text  # the target holds the table
    assert stat.S_IMODE(os.stat(real).st_mode) == 0o640  # and keeps its permissions
    assert _listing(real.parent) == ["real.md"] and _listing(tmp_path) == ["data", "link.md", "scenario.toml"]


@pytest.mark.parametrize("target,word", [("missing.md", "missing file"), ("adir", "directory")])
def test_symlink_to_nothing_or_a_directory_is_refused(scenario, tmp_path, capsys, no_computation, target, word):
    (tmp_path / "adir").mkdir()
    link = tmp_path / "link.md"
    link.symlink_to(target)
    assert main(_table(scenario, "-o", str(link))) == 2
    _one_error_line(capsys, "link.md", word)
    assert link.is_symlink() and os.readlink(link) == target and not (tmp_path / "missing.md").exists()


# ------------------------------------------------------------------------------------------ inputs are never outputs
@pytest.mark.parametrize("how", ["same", "symlink", "hardlink", "dotdot"])
def test_output_that_is_the_input_is_refused(scenario, tmp_path, capsys, no_computation, how):
    if how == "same":
        out = scenario
    elif how == "dotdot":
        out = tmp_path / ".." / tmp_path.name / "scenario.toml"
    else:
        out = tmp_path / "alias.md"
        (out.symlink_to if how == "symlink" else out.hardlink_to)(scenario)
    assert main(_table(scenario, "--format", "md", "-o", str(out))) == 2
    _one_error_line(capsys, "input", str(scenario))
    assert scenario.read_text() == BB84_TOML
    if how == "symlink":
        assert out.is_symlink()


def test_hard_linked_output_is_refused(scenario, tmp_path, capsys, no_computation):
    # Replacing one name of a file with several hard links would leave the other names on the old content.
    a, b = tmp_path / "a.md", tmp_path / "b.md"
    a.write_text("shared\n")
    b.hardlink_to(a)
    assert main(_table(scenario, "-o", str(b))) == 2
    _one_error_line(capsys, "hard links")
    assert os.stat(a).st_ino == os.stat(b).st_ino and a.read_text() == "shared\n"


def test_report_outputs_that_are_the_same_file_are_refused(scenario, tmp_path, capsys, no_computation):
    (tmp_path / "r.html").write_text("old page\n")
    (tmp_path / "r.tex").symlink_to("r.html")
    assert main(["report", str(scenario), "-o", str(tmp_path / "r.html"), "--latex", str(tmp_path / "r.tex")]) == 2
    _one_error_line(capsys, "--latex", "--output")
    assert _listing(tmp_path) == ["r.html", "r.tex", "scenario.toml"]
    assert (tmp_path / "r.html").read_text() == "old page\n"


# ------------------------------------------------------------------------------------------------- extensions
def test_extension_that_names_no_format_is_refused_unless_format_is_explicit(scenario, tmp_path, capsys):
    odd = tmp_path / "out.xlsx"
    assert main(_table(scenario, "-o", str(odd))) == 2
    _one_error_line(capsys, "out.xlsx", ".csv", "--format")
    assert not odd.exists()
    assert main(_table(scenario, "--format", "csv", "-o", str(odd))) == 0  # named explicitly: the user's call
    assert odd.read_text().startswith("status,")  # plain CSV; its provenance in the sidecar beside it
    assert json.loads((tmp_path / "out.xlsx.meta.json").read_text())["caution"].startswith("Caution")
    inferred = tmp_path / "t.JSON"
    assert main(_table(scenario, "-o", str(inferred))) == 0
    assert inferred.read_text().lstrip().startswith("{")


@pytest.mark.parametrize("argv", [
    ["table", "{s}", "-o", "{d}/out.md"],
    ["plot", "{s}", "--vary", "channel.qber=0.01,0.02", "-o", "{d}/out.png"],
    ["report", "{s}", "-o", "{d}/out.html"],
    ["report", "{s}", "-o", "{d}/ok.html", "--latex", "{d}/out.tex"],
])
def test_every_writing_command_checks_its_outputs_first(scenario, tmp_path, capsys, no_computation, argv):
    name = next(a for a in argv if "out." in a).replace("{d}/", "")
    os.mkfifo(tmp_path / name)
    assert main([a.replace("{s}", str(scenario)).replace("{d}", str(tmp_path)) for a in argv]) == 2
    _one_error_line(capsys, name, "named pipe")
    assert stat.S_ISFIFO(os.lstat(tmp_path / name).st_mode) and not (tmp_path / "ok.html").exists()


# ----------------------------------------------------------------------------------- multi-file: all or nothing
def test_report_with_bad_latex_path_writes_nothing(scenario, tmp_path, capsys, no_computation):
    page = tmp_path / "r.html"
    assert main(["report", str(scenario), "-o", str(page), "--latex", str(tmp_path / "bad" / "r.tex")]) == 2
    _one_error_line(capsys, "--latex", "existing directory")
    assert not page.exists()


def test_report_failing_on_the_second_rename_keeps_the_first_file_as_it_was(scenario, tmp_path, capsys, monkeypatch):
    page, tex = tmp_path / "r.html", tmp_path / "r.tex"
    page.write_text("old page\n")
    real_replace = os.replace
    calls = []

    def replace(src, dst, *a, **k):
        if str(dst) == str(tex):
            calls.append(dst)
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_replace(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", replace)
    assert main(["report", str(scenario), "--no-sweep", "--jobs", "1", "-o", str(page), "--latex", str(tex)]) == 2
    assert calls  # the failure happened where intended
    _one_error_line(capsys, "r.tex", "No space left on device")
    assert page.read_text() == "old page\n" and not tex.exists()
    assert _listing(tmp_path) == ["r.html", "scenario.toml"]  # no temporary or backup left


# ---------------------------------------------------------------------------------------------- OS errors
def test_disk_full_while_writing_a_file_is_one_line(scenario, tmp_path, capsys, monkeypatch):
    out = tmp_path / "t.md"
    out.write_text("old\n")

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    assert main(_table(scenario, "-o", str(out))) == 2
    _one_error_line(capsys, "t.md", "No space left on device")
    assert out.read_text() == "old\n" and _listing(tmp_path) == ["scenario.toml", "t.md"]


def _root_ignores_chmod(d: Path) -> bool:
    try:
        fd, name = tempfile.mkstemp(dir=d)
    except PermissionError:
        return False
    os.close(fd)
    os.unlink(name)
    return True


@pytest.mark.parametrize("err", [errno.EACCES, errno.EROFS])
def test_read_only_directory_is_one_line_before_computing(scenario, tmp_path, capsys, monkeypatch, no_computation,
                                                          err):
    ro = tmp_path / "ro"
    ro.mkdir()
    os.chmod(ro, 0o500)
    try:
        if _root_ignores_chmod(ro):
            # Running as root: permission bits do not stop writes, so make the refusal explicit with the errno
            # a read-only directory (EACCES) or read-only file system (EROFS) gives.
            real_mkstemp = tempfile.mkstemp

            def refusing(*a, dir=None, **k):
                if dir is not None and Path(dir) == ro:
                    raise OSError(err, os.strerror(err), str(ro))
                return real_mkstemp(*a, dir=dir, **k)

            monkeypatch.setattr(tempfile, "mkstemp", refusing)
        elif err == errno.EROFS:
            pytest.skip("EROFS is simulated only where chmod does not already refuse")
        assert main(_table(scenario, "-o", str(ro / "t.md"))) == 2
        _one_error_line(capsys, "t.md", os.strerror(err))
        assert _listing(ro) == []
    finally:
        os.chmod(ro, 0o700)


def test_immutable_directory_is_one_line(scenario, tmp_path, capsys, no_computation):
    if shutil.which("chattr") is None:
        pytest.skip("chattr not available")
    imm = tmp_path / "imm"
    imm.mkdir()
    if subprocess.run(["chattr", "+i", str(imm)], capture_output=True).returncode != 0:
        pytest.skip("this file system or user cannot set the immutable flag")
    try:
        assert main(_table(scenario, "-o", str(imm / "t.md"))) == 2
        _one_error_line(capsys, "t.md", "Operation not permitted")
    finally:
        subprocess.run(["chattr", "-i", str(imm)], check=True)
    assert _listing(imm) == []


# ---------------------------------------------------------------------------------------------- standard output
class _FullStream:
    """A text stream whose writes fail as on a full disk (no file descriptor of its own)."""

    encoding = "utf-8"

    def write(self, s):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def flush(self):
        pass


def test_table_to_a_full_standard_output_is_one_line(scenario, capsys, monkeypatch):
    capsys.readouterr()
    monkeypatch.setattr(sys, "stdout", _FullStream())
    assert main(_table(scenario)) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "standard output" in err and "No space left on device" in err


def test_standard_output_on_dev_full_is_one_line():
    # A real full device as standard output, in a separate process (as '> /dev/full' in a shell).
    with open("/dev/full", "w") as full:
        r = subprocess.run([sys.executable, "-m", "finitekey.cli", "bound", "hoeffding", "n=1e6", "--eps", "1e-10"],
                           stdout=full, stderr=subprocess.PIPE, text=True, cwd=Path(__file__).resolve().parents[1],
                           timeout=120)
    assert r.returncode == 2, r.stderr
    assert r.stderr.count("\n") == 1 and "No space left on device" in r.stderr and "Traceback" not in r.stderr


# ---------------------------------------------------------------------------------------------- the library API
def test_read_only_file_is_refused_and_errors_pickle(tmp_path, monkeypatch):
    import pickle

    from finitekey.errors import InputError, PathError
    from finitekey.outputs import plan_outputs

    locked = tmp_path / "locked.md"
    locked.write_text("keep\n")
    os.chmod(locked, 0o444)
    if os.access(locked, os.W_OK):  # root may write anything: ask as a user without that privilege would
        real_access = os.access
        monkeypatch.setattr(os, "access", lambda p, m, **k: False if Path(p) == locked else real_access(p, m, **k))
    with pytest.raises(InputError, match="read-only"):
        plan_outputs([("--output", str(locked), "md")])
    err = pickle.loads(pickle.dumps(PathError("--output", "t.md", "cannot write: No space left on device")))
    assert isinstance(err, InputError) and str(err) == "--output 't.md': cannot write: No space left on device"
