"""Threads for array work: how many, and independent items side by side.

numpy's array loops and scipy's compiled sparse kernels (``csr_matvec``,
``csr_matmat``) release the interpreter lock, so independent pieces of work run
side by side on threads; pyamg's Gauss-Seidel sweep keeps the lock, so two
V-cycles at once overlap only in their products. Measured on this project's
2-core machine: the three material-scatter solves of the 1M-unknown mesa took
7.5-8.5 s side by side against 8.7-8.8 s one after the other (alternating runs),
those of the 1M-unknown tetrahedral pad 10-11 s against 14-15 s end to end.
Splitting the multigrid set-up's sparse products and sums into row blocks was
tried and measured no faster (and 0.3 GB more at 1M), so it is not done; the
cycle's products with a vector are split (:class:`RowSplit`): one V-cycle and CG
product of the 1M-unknown mesa took 0.250 s against 0.299 s (medians of 8,
alternating). Timings on this virtual machine vary by 10-15 % from run to run.

The number of threads is the cores this process may use, capped by the
environment variable ``MESASTRAIN_THREADS`` (sweep workers and test processes
set it to 1 so that several processes do not oversubscribe the cores).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager

import numpy as np
import scipy.sparse as sp


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity; ``os.cpu_count()`` where unknown)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


_local = threading.local()


def thread_count() -> int:
    """Threads for array work: the usable cores, at most ``MESASTRAIN_THREADS`` when that
    environment variable is set, and at most the limit of :func:`limited` on this thread."""
    n = usable_cores()
    env = os.environ.get("MESASTRAIN_THREADS", "").strip()
    if env.isdigit():
        n = min(n, int(env))
    cap = getattr(_local, "cap", None)
    if cap is not None:
        n = min(n, cap)
    return max(1, n)


@contextmanager
def limited(threads: int):
    """Within the block, :func:`thread_count` on this thread is at most ``threads``.

    For work that already runs beside other work on its own thread (the derived
    providers of one stage): splitting it again over the same cores measured
    slower (stage 0 of the 1M-unknown mesa, 2 cores: 15.7-17.0 s with the energy
    norm's own two threads, 14.6 s without).
    """
    old = getattr(_local, "cap", None)
    _local.cap = max(1, int(threads)) if old is None else min(old, max(1, int(threads)))
    try:
        yield
    finally:
        _local.cap = old


def map_threads(fn: Callable, items: Sequence, threads: int | None = None) -> list:
    """``[fn(x) for x in items]``, on up to ``threads`` threads (default
    :func:`thread_count`); in order, the first exception raised after all have run."""
    items = list(items)
    threads = thread_count() if threads is None else max(1, int(threads))
    if threads == 1 or len(items) < 2:
        return [fn(x) for x in items]
    with ThreadPoolExecutor(min(threads, len(items))) as pool:
        futures = [pool.submit(fn, x) for x in items]
        return [f.result() for f in futures]


#: Products with fewer stored entries than this run on the calling thread (a thread hand-off
#: costs tens of microseconds; a product of 2 million entries takes a few milliseconds).
SPLIT_NNZ = 2_000_000

_pool_lock = threading.Lock()
_pool: ThreadPoolExecutor | None = None


def _shared_pool() -> ThreadPoolExecutor:
    """One process-wide pool for the halves of split products (created on first use)."""
    global _pool
    with _pool_lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(usable_cores(), thread_name_prefix="mesastrain-rows")
        return _pool


def _forget_pool() -> None:
    """In a forked child: the parent's pool threads do not exist there; make a new one."""
    global _pool, _pool_lock
    _pool, _pool_lock = None, threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_pool)


class RowSplit:
    """A CSR matrix whose products with a vector run in row blocks on threads.

    scipy's ``csr_matvec`` releases the interpreter lock, so the blocks of one product run
    side by side: the main solve's Gauss-Seidel sweeps keep one core busy and leave the
    other idle, and its products use both. Each row is computed as by ``M @ x`` (the same
    sums in the same order), so the result is bit-identical. The blocks are views of
    the matrix's arrays (no copy); products below :data:`SPLIT_NNZ` entries, or with one
    thread (:func:`thread_count`), are not split.

    Parameters
    ----------
    M : csr_matrix
    """

    def __init__(self, M):
        M = sp.csr_matrix(M)
        self.M = M
        self.shape = M.shape
        self.dtype = M.dtype
        self.nnz = M.nnz
        self._blocks = None

    def blocks(self, parts: int) -> list:
        """(first row, end row, view) of ``parts`` row blocks of about equal entries."""
        if self._blocks is None or len(self._blocks) != parts:
            M = self.M
            cuts = np.searchsorted(M.indptr, np.linspace(0, M.nnz, parts + 1)[1:-1])
            edges = [0, *sorted(set(int(c) for c in cuts) - {0, M.shape[0]}), M.shape[0]]
            out = []
            for r0, r1 in zip(edges[:-1], edges[1:]):
                a, b = M.indptr[r0], M.indptr[r1]
                # the arrays set on an empty matrix: scipy's constructor would copy slices
                # that are small parts of their base ("prune"), and upcast mixed index types
                view = sp.csr_matrix((r1 - r0, M.shape[1]), dtype=M.dtype)
                view.data = M.data[a:b]
                view.indices = M.indices[a:b]
                view.indptr = (M.indptr[r0:r1 + 1] - a).astype(M.indices.dtype)
                out.append((r0, r1, view))
            self._blocks = out
        return self._blocks

    def __matmul__(self, x: np.ndarray) -> np.ndarray:
        n = thread_count()
        if n < 2 or self.nnz < SPLIT_NNZ or np.ndim(x) != 1:
            return self.M @ x
        blocks = self.blocks(n)
        out = np.empty(self.shape[0], dtype=np.result_type(self.dtype, x.dtype))

        def part(blk):
            r0, r1, view = blk
            out[r0:r1] = view @ x

        futures = [_shared_pool().submit(part, b) for b in blocks[1:]]
        part(blocks[0])                                   # the calling thread takes one
        for f in futures:
            f.result()
        return out
