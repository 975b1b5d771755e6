"""Output files and standard output that never damage anything.

Every command that writes files goes through this module, in two steps:

1. :func:`plan_outputs` decides, before any computation starts, about every file the command will write.
   It refuses anything that is not a regular file or a new name in an existing writable directory (devices,
   FIFOs, sockets, directories, dangling symlinks, files with several hard links, read-only files), a path
   that is one of the command's inputs (same file, also through a symlink or a hard link), and two outputs
   that are the same file.  A symlink to a regular file is followed: its target is replaced, the link stays.
   :func:`output_format` picks the format from the file name's extension and refuses an extension that does
   not match the format (unless the format was named explicitly).
2. :func:`write_outputs` writes all planned files or none: each goes to a temporary file in its target's
   directory (flushed to disk), then all are renamed into place; on any failure the temporaries are removed
   and files already renamed are put back as they were.

Standard output is wrapped by :func:`guarded_stdout`: a failed write (disk full, I/O error) becomes a
:class:`~finitekey.errors.PathError`, one line naming the stream and the reason.  A closed pipe
(``| head``) still raises :class:`BrokenPipeError`, which the command line ends quietly.

Every operating-system error becomes an :class:`~finitekey.errors.InputError` (or its subclass
:class:`~finitekey.errors.PathError`) naming the option, the path and the reason; the command line prints it
as one line and exits with status 2.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import shutil
import stat
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

from .errors import InputError, PathError

__all__ = ["STDOUT", "OutputTarget", "output_format", "plan_outputs", "write_outputs", "guarded_stdout",
           "os_reason"]

#: The path that means standard output.
STDOUT = "-"

_ALLOWED = "a regular file, or a new file in an existing writable directory"


@dataclass(frozen=True)
class OutputTarget:
    """One checked output: where it goes, in which format, with which permissions.

    Attributes
    ----------
    option : str
        The option that named it (e.g. ``"--output"``), used in error messages.
    given : str or None
        The path as the user wrote it; None for standard output.
    path : pathlib.Path or None
        The absolute file that will be created or replaced (a symlink's target); None for standard output.
    format : str
        The output format (e.g. ``"md"``, ``"png"``).
    mode : int
        Permission bits for the written file: the existing file's, else ``0o666`` less the umask.
    exists : bool
        Whether ``path`` exists now (and will be replaced).
    """

    option: str
    given: str | None
    path: Path | None
    format: str
    mode: int = 0o644
    exists: bool = False

    @property
    def is_stdout(self) -> bool:
        """True when this output goes to standard output."""
        return self.path is None


def os_reason(exc: OSError) -> str:
    """The short reason of an OSError (``"No space left on device"``), without the path."""
    if exc.errno:
        return os.strerror(exc.errno)
    return str(exc) or type(exc).__name__


def output_format(given: str | None, option: str, extensions: Mapping[str, Sequence[str]],
                  explicit: str | None = None, default: str | None = None,
                  format_option: str | None = "--format") -> str:
    """The format of an output, from ``explicit`` or else from the extension of ``given``.

    Parameters
    ----------
    given : str or None
        Output path as given (None or ``"-"`` for standard output).
    option : str
        The option naming the path, for error messages.
    extensions : mapping of str to sequence of str
        For each format, the file-name extensions (lower case, with the dot) that mean it.
    explicit : str, optional
        The format named on the command line; it wins over the extension.
    default : str, optional
        The format for standard output or a name without an extension; None refuses those.
    format_option : str or None
        The option that names a format explicitly (mentioned in the error), or None when there is none.

    Returns
    -------
    str
        One of ``extensions``' keys.

    Raises
    ------
    InputError
        For an unknown explicit format, or an extension that names no format or several.
    """
    if explicit is not None:
        if explicit not in extensions:
            raise InputError(format_option or "format", explicit, "one of: " + ", ".join(extensions))
        return explicit
    if given in (None, STDOUT):
        if default is None:
            raise InputError(option, given, "a file name")
        return default
    suffix = Path(given).suffix.lower()
    if not suffix and default is not None:
        return default
    matches = [f for f, exts in extensions.items() if suffix in exts]
    if len(matches) == 1:
        return matches[0]
    names = ", ".join(e for exts in extensions.values() for e in exts)
    hint = f" (or name the format with {format_option})" if format_option else ""
    raise InputError(option, given, f"a file name ending in {names}{hint}")


def _kind(mode: int) -> str:
    for test, name in ((stat.S_ISDIR, "a directory"), (stat.S_ISCHR, "a character device"),
                       (stat.S_ISBLK, "a block device"), (stat.S_ISFIFO, "a named pipe"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return "not a regular file"


def _umask_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


def _probe_directory(option: str, given: str, directory: Path) -> None:
    """Create and remove a file in ``directory``: the one reliable test that it is writable (EROFS,
    immutable, permissions, and root's exemption from permission bits all show up here)."""
    try:
        fd, probe = tempfile.mkstemp(prefix=".finitekey-probe.", dir=directory)
    except OSError as exc:
        raise InputError(option, given, f"{_ALLOWED} (cannot create files in {str(directory)!r}: "
                                        f"{os_reason(exc)})") from None
    os.close(fd)
    os.unlink(probe)


def _check(option: str, given: str | None, fmt: str, inputs: Sequence) -> OutputTarget:
    if given in (None, STDOUT):
        return OutputTarget(option, None, None, fmt)
    given = str(given)
    if not given:
        raise InputError(option, given, _ALLOWED)
    if given.endswith(("/", os.sep)):
        raise InputError(option, given, f"{_ALLOWED} (this names a directory)")
    try:
        lst = os.lstat(given)
    except FileNotFoundError:
        lst = None
    except OSError as exc:  # ENOTDIR (a parent is a file), ENAMETOOLONG, EACCES ...
        raise InputError(option, given, f"{_ALLOWED} ({os_reason(exc)})") from None
    if lst is None:  # a new file
        parent = Path(os.path.dirname(os.path.abspath(given)))
        try:
            pst = os.stat(parent)
        except OSError:
            raise InputError(option, given, f"a file in an existing directory (no directory "
                                            f"{os.path.dirname(given)!r})") from None
        if not stat.S_ISDIR(pst.st_mode):
            raise InputError(option, given, f"a file in an existing directory ({os.path.dirname(given)!r} "
                                            f"is {_kind(pst.st_mode)})")
        _probe_directory(option, given, parent)
        return OutputTarget(option, given, parent / os.path.basename(given), fmt, _umask_mode(), False)
    if stat.S_ISLNK(lst.st_mode):
        try:
            st = os.stat(given)
        except FileNotFoundError:
            raise InputError(option, given, f"{_ALLOWED} (this is a symlink to a missing file)") from None
        except OSError as exc:  # ELOOP ...
            raise InputError(option, given, f"{_ALLOWED} (this symlink cannot be followed: "
                                            f"{os_reason(exc)})") from None
        path = Path(os.path.realpath(given))
    else:
        st, path = lst, Path(os.path.abspath(given))
    for inp in inputs:  # before the other checks: this is the most useful thing to say
        if inp is not None and os.path.exists(inp) and _same_file(path, inp):
            raise InputError(option, given, f"a file that is not one of the command's inputs "
                                            f"(it is the input {str(inp)!r})")
    if not stat.S_ISREG(st.st_mode):
        what = _kind(st.st_mode)
        raise InputError(option, given, f"{_ALLOWED} (this is {what}"
                                        f"{' behind a symlink' if stat.S_ISLNK(lst.st_mode) else ''})")
    if st.st_nlink > 1:
        raise InputError(option, given, f"{_ALLOWED} (this file has {st.st_nlink} hard links; replacing it "
                                        "would split it from its other names)")
    if not os.access(path, os.W_OK):
        raise InputError(option, given, f"{_ALLOWED} (this file is read-only)")
    _probe_directory(option, given, path.parent)
    return OutputTarget(option, given, path, fmt, stat.S_IMODE(st.st_mode), True)


def _same_file(a: Path, b) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.realpath(a) == os.path.realpath(b)


def plan_outputs(requests: Sequence[tuple], inputs: Sequence = ()) -> tuple:
    """Check every output of a command before anything is computed or written.

    Parameters
    ----------
    requests : sequence of (option, path, format)
        Each output: the option that named it, the path as given (None or ``"-"`` for standard output) and
        its format (see :func:`output_format`).
    inputs : sequence of path-like
        The command's input files; an output may not be one of them (compared as files, so a symlink or a
        hard link to an input is refused too). None entries are ignored.

    Returns
    -------
    tuple of OutputTarget
        In the order of ``requests``.

    Raises
    ------
    InputError
        Naming the option, the path and why it cannot be written (see the module docstring).
    """
    targets = []
    for option, given, fmt in requests:
        t = _check(option, given, fmt, inputs)
        if not t.is_stdout:
            for other in targets:
                if not other.is_stdout and (other.path == t.path or _same_file(t.path, other.path)):
                    raise InputError(option, given, f"a file other than {other.option} {other.given!r}")
        targets.append(t)
    return tuple(targets)


def _write_temp(t: OutputTarget, data) -> str:
    fd, tmp = tempfile.mkstemp(prefix=f".{t.path.name}.", suffix=".part", dir=t.path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data if isinstance(data, (bytes, bytearray)) else data.encode("utf-8"))
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, t.mode)
    except BaseException:
        _remove(tmp)
        raise
    return tmp


def _backup(path: Path) -> str:
    """A second name for the current content of ``path`` (hard link, else a copy), to restore on failure."""
    while True:
        name = str(path.parent / f".{path.name}.{secrets.token_hex(4)}.bak")
        try:
            os.link(path, name)
            return name
        except FileExistsError:
            continue
        except OSError:  # no hard links on this file system
            shutil.copy2(path, name)
            return name


def _remove(name) -> None:
    try:
        os.unlink(name)
    except OSError:
        pass


def write_outputs(items: Sequence[tuple]) -> None:
    """Write every planned output, all or none.

    Parameters
    ----------
    items : sequence of (OutputTarget, str or bytes)
        Targets from :func:`plan_outputs` with their content (text is written as UTF-8).  Files are written
        first; standard output last.

    Raises
    ------
    PathError
        When the operating system refuses a write (disk full, permissions, read-only file system ...): the
        message names the option, the path and the reason. No file has then been changed.
    """
    files = [(t, d) for t, d in items if not t.is_stdout]
    temps, backups, placed = [], {}, []
    current = None
    try:
        for t, data in files:
            current = t
            temps.append((t, _write_temp(t, data)))
        if len(temps) > 1:  # several files: keep the old contents until every rename has succeeded
            for t, _ in temps:
                current = t
                if t.exists:
                    backups[t.path] = _backup(t.path)
        for t, tmp in temps:
            current = t
            os.replace(tmp, t.path)
            placed.append(t)
    except BaseException as exc:
        for t, tmp in temps:
            if t not in placed:
                _remove(tmp)
        for t in placed:
            if t.path in backups:
                try:
                    os.replace(backups.pop(t.path), t.path)
                except OSError:  # pragma: no cover - the directory accepted a rename a moment ago
                    pass
            else:
                _remove(t.path)
        for name in backups.values():
            _remove(name)
        if isinstance(exc, OSError) and current is not None:
            raise PathError(current.option, current.given,
                            f"cannot write: {os_reason(exc)} (no output file was changed)") from None
        raise
    for name in backups.values():
        _remove(name)
    for t, data in items:
        if t.is_stdout:
            if isinstance(data, (bytes, bytearray)):
                sys.stdout.buffer.write(data)
            else:
                sys.stdout.write(data)


class _GuardedStream:
    """Standard output whose write and flush errors (other than a closed pipe) become a PathError."""

    def __init__(self, stream, name: str = "standard output"):
        self._stream = stream
        self._name = name

    def _fail(self, exc: OSError):
        _discard(self._stream)
        raise PathError("output", f"<{self._name}>", f"cannot write: {os_reason(exc)}") from None

    def write(self, data):
        try:
            return self._stream.write(data)
        except BrokenPipeError:
            raise
        except OSError as exc:
            self._fail(exc)

    def flush(self):
        try:
            return self._stream.flush()
        except BrokenPipeError:
            raise
        except OSError as exc:
            self._fail(exc)

    @property
    def buffer(self):
        return _GuardedStream(self._stream.buffer, self._name)

    def __getattr__(self, name):
        return getattr(self._stream, name)


def _discard(stream) -> None:
    """Point a broken stream's descriptor at /dev/null, so the interpreter's final flush cannot fail again."""
    try:
        fd = stream.fileno()
    except (AttributeError, OSError, ValueError):
        return
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(null, fd)
    finally:
        os.close(null)


@contextlib.contextmanager
def guarded_stdout():
    """Run a block with standard output guarded, and flush it inside the block.

    A failed write or flush raises :class:`~finitekey.errors.PathError` (and the unwritable output is
    discarded, so nothing fails again at exit); :class:`BrokenPipeError` passes through for the caller to
    end quietly.
    """
    guard = _GuardedStream(sys.stdout)
    with contextlib.redirect_stdout(guard):
        yield guard
        guard.flush()
