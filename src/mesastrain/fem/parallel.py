"""Threads for array work: how many, independent items side by side, sparse results
computed in row blocks.

numpy's array loops and scipy's compiled sparse kernels (``csr_matmat``,
``csr_matvec``, ``csr_plus_csr``, ``csr_tocsc``) release the interpreter lock,
so independent pieces of them run side by side on threads. Measured on this
project's 2-core machine: two small CSR products at once took 0.54 of the time
of one after the other, two matrix-vector products 0.69 (memory bound); but the
large products of the multigrid set-up (tens of millions of entries) measured
no faster in row blocks, while the sums did (1.07 -> 0.81 s at 1M unknowns).
pyamg's Gauss-Seidel sweep keeps the lock, so two V-cycles at once overlap only
in their products. Timings on this virtual machine vary by 10-15 % from run to
run; each use here was measured in alternating runs.

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

#: Below this many stored entries a sparse operation is not split (threads cost ~0.1 ms).
SPLIT_MIN_NNZ = 2_000_000


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


def row_blocks(A: sp.csr_matrix, parts: int) -> list[tuple[int, int]]:
    """``parts`` contiguous row ranges of a CSR matrix with about equal stored entries."""
    n = A.shape[0]
    cuts = np.searchsorted(A.indptr, np.linspace(0, A.indptr[-1], parts + 1)[1:-1])
    edges = np.unique(np.concatenate([[0], np.clip(cuts, 0, n), [n]]))
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]


def stack_rows(blocks: Sequence[sp.csr_matrix]) -> sp.csr_matrix:
    """Row blocks (CSR, equal column counts) stacked in order, by concatenating their
    arrays (scipy's ``vstack`` goes through COO)."""
    blocks = [sp.csr_matrix(b) for b in blocks]
    if len(blocks) == 1:
        return blocks[0]
    nnz = np.cumsum([0] + [b.nnz for b in blocks])
    big = max(int(nnz[-1]), sum(b.shape[0] for b in blocks)) >= 2**31 - 1
    itype = np.int64 if big else np.int32
    indptr = np.concatenate([blocks[0].indptr[:1].astype(itype)]
                            + [b.indptr[1:].astype(itype) + itype(o)
                               for b, o in zip(blocks, nnz[:-1])])
    out = sp.csr_matrix((np.concatenate([b.data for b in blocks]),
                         np.concatenate([b.indices.astype(itype, copy=False) for b in blocks]),
                         indptr), shape=(sum(b.shape[0] for b in blocks), blocks[0].shape[1]))
    out.has_sorted_indices = all(b.has_sorted_indices for b in blocks)
    return out


def by_rows(fn: Callable[[int, int], sp.csr_matrix], A: sp.csr_matrix,
            threads: int | None = None) -> sp.csr_matrix:
    """A sparse result computed in row blocks of ``A`` on threads and stacked.

    Parameters
    ----------
    fn : callable (r0, r1) -> csr_matrix
        The rows r0..r1-1 of the result (it may read any other matrix whole).
    A : csr_matrix
        Sets the row count and balances the blocks by its stored entries.
    threads : int, optional
        Default :func:`thread_count`. Small matrices (under :data:`SPLIT_MIN_NNZ`
        entries) and one thread give ``fn(0, n)`` unsplit.

    Returns
    -------
    csr_matrix
        The same matrix, entry for entry, as ``fn(0, n)`` (each row is computed by
        the same kernel either way).
    """
    threads = thread_count() if threads is None else max(1, int(threads))
    if threads == 1 or A.nnz < SPLIT_MIN_NNZ:
        return sp.csr_matrix(fn(0, A.shape[0]))
    return stack_rows(map_threads(lambda ab: fn(*ab), row_blocks(A, threads), threads))
