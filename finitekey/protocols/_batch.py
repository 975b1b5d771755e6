"""Batches of blocks: one function splits a list into contiguous chunks, computes them in worker processes, and
joins the results in order, so a batch gives the same results with any number of workers.

Used by every protocol's ``key_length_batch``; the protocol supplies the function that computes one chunk
(with whatever caches it shares within the chunk).
"""

from __future__ import annotations

from ..domains import POSITIVE_COUNT

__all__ = ["map_in_chunks"]


def map_in_chunks(chunk_function, items, jobs: int = 1, min_parallel: int = 2000, args: tuple = ()) -> list:
    """``chunk_function(chunk, *args)`` over contiguous chunks of ``items``, results concatenated in order.

    Parameters
    ----------
    chunk_function : callable
        ``(list, *args) -> list`` with one result per item; a module-level function (it is pickled).
    items : sequence
    jobs : int
        Worker processes.  With ``jobs > 1`` and at least ``min_parallel`` items the chunks run in that many
        processes (fork where available); otherwise everything runs here in one chunk.
    min_parallel : int
        Smallest batch worth splitting (below it, process start-up costs more than it saves).
    args : tuple
        Further arguments passed to every call.

    Returns
    -------
    list
        The results, in the order of ``items``.
    """
    jobs = POSITIVE_COUNT.check_scalar("jobs", jobs)
    items = list(items)
    if jobs > 1 and len(items) >= min_parallel:
        import concurrent.futures
        import multiprocessing

        size = -(-len(items) // jobs)
        chunks = [items[i:i + size] for i in range(0, len(items), size)]
        method = "fork" if "fork" in multiprocessing.get_all_start_methods() else None
        with concurrent.futures.ProcessPoolExecutor(max_workers=jobs,
                                                    mp_context=multiprocessing.get_context(method)) as pool:
            parts = pool.map(chunk_function, chunks, *[[a] * len(chunks) for a in args])
            return [r for part in parts for r in part]
    return chunk_function(items, *args)
