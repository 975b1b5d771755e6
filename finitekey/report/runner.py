"""Run one picklable function over many inputs: serially, on local processes, or on a Dask cluster.

The result list is always in input order, whatever order the workers finish
in, so a sweep gives the same output on 1 process, 2 processes or a cluster.
A progress bar is drawn on stderr only when stderr is a terminal.

Dask (``dask[distributed]``, the optional extra ``cluster``) is imported only
when a cluster is asked for.  ``cluster="local"`` starts a
``distributed.LocalCluster`` bound to 127.0.0.1 with the dashboard switched
off, and its worker processes are forked (on POSIX) so that they inherit the
imported package; any other string is the address of a running scheduler, whose
workers must have the same finitekey version installed (tasks name the protocol
and carry the scenario as plain data, not code).

References
----------
.. [1] Python documentation, ``concurrent.futures.ProcessPoolExecutor``.
.. [2] Dask.distributed documentation, ``Client.map``, ``LocalCluster``.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import sys
import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed

from ..errors import InputError

__all__ = ["Progress", "default_jobs", "run_map", "single_threaded_blas"]


def default_jobs() -> int:
    """min(2, number of CPUs): the machines are shared."""
    return max(1, min(2, os.cpu_count() or 1))


class Progress:
    """A one-line progress bar on a stream, drawn only when the stream is a terminal.

    Parameters
    ----------
    total : int
    stream : file-like, default sys.stderr
    enabled : bool or None
        Force on/off; None means "when ``stream.isatty()``".
    label : str
    """

    def __init__(self, total: int, stream=None, enabled: bool | None = None, label: str = "points"):
        self.total = total
        self.done = 0
        self.stream = sys.stderr if stream is None else stream
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = enabled and total > 0
        self.label = label
        self._t0 = time.monotonic()

    def step(self, n: int = 1) -> None:
        """Count ``n`` more points done and redraw the bar (when enabled).

        Parameters
        ----------
        n : int
        """
        self.done += n
        if not self.enabled:
            return
        width = 30
        filled = int(width * self.done / self.total)
        elapsed = time.monotonic() - self._t0
        eta = elapsed / self.done * (self.total - self.done) if self.done else 0.0
        self.stream.write(f"\r[{'=' * filled}{' ' * (width - filled)}] {self.done}/{self.total} {self.label}"
                          f"  {elapsed:5.1f}s elapsed, ~{eta:5.1f}s left")
        self.stream.flush()

    def close(self) -> None:
        """End the bar's line (when enabled)."""
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()


_BLAS_NAMES = (("scipy_openblas_set_num_threads64_", "scipy_openblas_get_num_threads64_"),
               ("scipy_openblas_set_num_threads", "scipy_openblas_get_num_threads"),
               ("openblas_set_num_threads64_", "openblas_get_num_threads64_"),
               ("openblas_set_num_threads", "openblas_get_num_threads"))


def _openblas_controls() -> list:
    """(setter, getter) of every OpenBLAS build loaded in this process (those bundled with numpy and scipy)."""
    import ctypes
    try:
        with open("/proc/self/maps", encoding="utf-8") as fh:
            paths = {ln.split()[-1] for ln in fh if "openblas" in ln.lower() and ".so" in ln}
    except OSError:
        return []
    out = []
    for path in sorted(paths):
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for set_name, get_name in _BLAS_NAMES:
            setter, getter = getattr(lib, set_name, None), getattr(lib, get_name, None)
            if setter is not None and getter is not None:
                getter.restype = ctypes.c_int
                out.append((setter, getter))
                break
    return out


@contextlib.contextmanager
def single_threaded_blas():
    """Run the block with one OpenBLAS thread, then restore the previous thread counts.

    Each design point does many small linear-algebra calls; OpenBLAS's thread
    pool only adds overhead there, and with several worker processes on few
    cores it oversubscribes the machine.  Measured here: a 90-point decoy-bb84
    sweep took about half the CPU time with one BLAS thread.  Does nothing where
    ``/proc/self/maps`` or OpenBLAS is unavailable (best effort, no failure).
    """
    controls = _openblas_controls()
    before = [int(get()) for _, get in controls]
    for setter, _ in controls:
        setter(1)
    try:
        yield len(controls)
    finally:
        for (setter, _), n in zip(controls, before):
            setter(max(1, n))


class _Failure:
    """An InputError raised in a worker, carried back as plain data.

    ``InputError`` takes three constructor arguments but pickles only its
    message, so it cannot cross a process boundary as is; the runner sends its
    fields and raises it again in the caller.
    """

    def __init__(self, exc: InputError):
        self.field, self.value, self.allowed = exc.field, exc.value, exc.allowed

    def reraise(self):
        raise InputError(self.field, self.value, self.allowed)


class _Guarded:
    """``func`` wrapped so that an InputError comes back as a :class:`_Failure` (picklable)."""

    def __init__(self, func: Callable):
        self.func = func

    def __call__(self, x):
        try:
            with single_threaded_blas():
                return self.func(x)
        except InputError as exc:
            return _Failure(exc)


def _unwrap(value):
    if isinstance(value, _Failure):
        value.reraise()
    return value


def _mp_context():
    # fork is fastest (workers inherit the imported package); it is only safe while the parent runs one thread.
    if "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1:
        return multiprocessing.get_context("fork")
    return multiprocessing.get_context("spawn")


def run_map(func: Callable, items: Sequence, jobs: int | None = None, cluster: str | None = None,
            progress: bool | None = None, stream=None, connect_timeout: float = 10.0) -> list:
    """``[func(x) for x in items]``, computed in parallel, returned in input order.

    Parameters
    ----------
    func : callable
        A module-level (picklable) function of one argument.
    items : sequence
        Picklable inputs.
    jobs : int, optional
        Local worker processes (default :func:`default_jobs`); 1 runs in this process.
        With ``cluster="local"`` it is the number of Dask workers.
    cluster : str, optional
        ``None`` for local processes, ``"local"`` for a Dask LocalCluster on
        127.0.0.1, or a scheduler address such as ``"tcp://10.0.0.5:8786"``.
    progress : bool, optional
        Force the progress bar on/off; default: on when stderr is a terminal.
    connect_timeout : float
        Seconds to wait for a remote scheduler.

    Raises
    ------
    InputError
        If ``jobs`` is not a positive integer, or a cluster is requested and
        dask.distributed is not installed.
    """
    items = list(items)
    if jobs is None:
        jobs = default_jobs()
    if isinstance(jobs, bool) or not isinstance(jobs, int) or jobs < 1:
        raise InputError("--jobs", jobs, "a positive integer")
    bar = Progress(len(items), stream=stream, enabled=progress)
    try:
        if cluster is not None:
            return _run_dask(func, items, jobs, cluster, bar, connect_timeout)
        if jobs == 1 or len(items) <= 1:
            out = []
            with single_threaded_blas():
                for x in items:
                    out.append(func(x))
                    bar.step()
            return out
        results = [None] * len(items)
        with ProcessPoolExecutor(max_workers=min(jobs, len(items)), mp_context=_mp_context()) as pool:
            guarded = _Guarded(func)
            futures = {pool.submit(guarded, x): i for i, x in enumerate(items)}
            try:
                for fut in as_completed(futures):
                    results[futures[fut]] = _unwrap(fut.result())
                    bar.step()
            except BaseException:
                for fut in futures:
                    fut.cancel()
                raise
        return results
    finally:
        bar.close()


def _run_dask(func, items, jobs, cluster, bar, connect_timeout=10.0) -> list:
    try:
        from distributed import Client, LocalCluster
        from distributed import as_completed as dask_completed
    except ImportError:
        raise InputError("--cluster", cluster,
                         "a back end that is installed: dask.distributed is missing "
                         "(pip install 'finitekey[cluster]')") from None
    if not isinstance(cluster, str) or not cluster.strip():
        raise InputError("--cluster", cluster, "'local' or a scheduler address such as tcp://HOST:8786")
    local = None
    try:
        if cluster == "local":
            import dask
            # fork: workers inherit the imported package (a spawned worker spends seconds importing it again)
            method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
            with dask.config.set({"distributed.worker.multiprocessing-method": method}):
                local = LocalCluster(n_workers=jobs, threads_per_worker=1, processes=True, host="127.0.0.1",
                                     dashboard_address=None, silence_logs=40)
            client = Client(local)
        else:
            try:
                client = Client(cluster, timeout=f"{connect_timeout}s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise InputError("--cluster", cluster, f"the address of a reachable Dask scheduler ({exc})") from None
        try:
            futures = client.map(_Guarded(func), items, pure=False)
            index = {f.key: i for i, f in enumerate(futures)}
            results = [None] * len(items)
            for fut in dask_completed(futures):
                results[index[fut.key]] = _unwrap(fut.result())
                bar.step()
            return results
        finally:
            client.close()
    finally:
        if local is not None:
            local.close()
