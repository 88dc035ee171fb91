"""One sweep case on a Dask worker, and the Dask client the cases run on.

Execution
---------
Cases run as Dask tasks. Without a scheduler address an embedded
``LocalCluster`` is started on this machine (one single-threaded worker
process per core, loopback only) and stopped at the end; with ``--scheduler
tcp://host:port`` the cases go to an existing scheduler and its workers,
which need mesastrain installed. Workers return the result files to the
driver, which writes them, so the workers need no shared file system.
Dask (``distributed``) is imported only when a sweep runs.
"""

from __future__ import annotations

import os
import re
import socket
import tempfile
import time
import traceback
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

from mesastrain import __version__
from mesastrain.case.types import Case
from mesastrain.errors import CaseError, MesastrainError


def _worker_memory_gb():
    try:
        from distributed import get_worker

        limit = get_worker().memory_manager.memory_limit
        return limit / 1e9 if limit else None
    except (ImportError, ValueError, AttributeError):
        return None


def _worker_name() -> str:
    try:
        from distributed import get_worker

        return get_worker().address
    except (ImportError, ValueError):
        return f"{socket.gethostname()}:{os.getpid()}"


def one_line(text: str) -> str:
    """An error message on one line (whitespace runs joined by single spaces)."""
    return " ".join(str(text).split())


def solve_case(case: Case, case_id: str) -> dict:
    """Run one case and return its result files; never raises for a failed case.

    This is the Dask task. It solves with
    :func:`mesastrain.derived.solve_and_derive` (memory limit: the worker's,
    when run on a Dask worker), writes the folder with
    :func:`mesastrain.io.folder.write_result` into a local temporary folder and
    returns the files' bytes, so the driver can store them without a shared
    file system.

    Parameters
    ----------
    case : Case
    case_id : str
        The case hash (for the record).

    Returns
    -------
    dict
        ``status`` ("ok" or "failed"), ``seconds`` (wall time on the worker),
        ``worker``, ``started``/``finished`` (UTC, ISO 8601), ``files``
        (relative path -> bytes) when ok, ``error`` (one line) and
        ``traceback`` when failed.
    """
    from mesastrain.derived import solve_and_derive
    from mesastrain.io.folder import write_result

    started = datetime.now(UTC).isoformat(timespec="seconds")
    t0 = time.perf_counter()
    rec = {"hash": case_id, "worker": _worker_name(), "started": started,
           "mesastrain": __version__}
    try:
        limit = _worker_memory_gb()
        res = solve_and_derive(case, max_memory_gb=limit)
        with tempfile.TemporaryDirectory(prefix="mesastrain-case-") as tmp:
            # quick: summary.json, fields.vtu and the tables; the sweep draws its own plots
            folder = write_result(res, Path(tmp) / "case", quick=True)
            files = {p.relative_to(folder).as_posix(): p.read_bytes()
                     for p in sorted(folder.rglob("*")) if p.is_file()}
        rec.update(status="ok", files=files, timings={k: round(v, 3)
                                                      for k, v in res.timings.items()})
    except MesastrainError as exc:
        rec.update(status="failed", error=one_line(exc))
    except MemoryError:
        rec.update(status="failed", error="ran out of memory on the worker; coarsen the mesh "
                                          "(mesh.size, mesh.edge_size) or use bigger workers")
    except Exception as exc:   # a bug or a library failure: keep the sweep going, keep the trace
        rec.update(status="failed", error=one_line(f"{type(exc).__name__}: {exc}"),
                   traceback=traceback.format_exc())
    rec["seconds"] = round(time.perf_counter() - t0, 3)
    rec["finished"] = datetime.now(UTC).isoformat(timespec="seconds")
    return rec


def _worker_version():
    """Run on each worker by the driver: can it import mesastrain, which version?"""
    from mesastrain import __version__ as v

    return v


def _default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


_ADDRESS = re.compile(r"^(?:(?P<scheme>[A-Za-z][A-Za-z0-9+.-]*)://)?"
                      r"(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+):(?P<port>\d{1,5})$")


def check_scheduler(scheduler: str, wait: float) -> str:
    """Check a ``--scheduler`` address and that something listens there, before anything is
    created; returns the address with its scheme (``tcp://host:port``).

    Raises
    ------
    CaseError
        Naming ``--scheduler``: not ``[tcp://|tls://]host:port`` with a port from 1 to
        65535, or nothing accepts a connection there within ``wait`` seconds.
    """
    m = _ADDRESS.match(scheduler.strip())
    if m is None or m["scheme"] not in (None, "tcp", "tls") or not 0 < int(m["port"]) < 65536:
        raise CaseError("--scheduler", f"{scheduler!r} is not a Dask scheduler address; give "
                                       f"tcp://HOST:PORT (PORT 1 to 65535), e.g. "
                                       f"tcp://10.0.0.5:8786")
    host = m["host"].strip("[]")
    address = f"{m['scheme'] or 'tcp'}://{m['host']}:{int(m['port'])}"
    try:
        with socket.create_connection((host, int(m["port"])), timeout=max(wait, 0.1)):
            pass
    except (OSError, ValueError) as exc:
        raise CaseError("--scheduler", f"cannot reach a Dask scheduler at {address} within "
                                       f"{wait:g} s ({one_line(exc)}); start one with "
                                       f"`dask scheduler` and give the address it prints"
                        ) from None
    return address


@contextmanager
def dask_client(scheduler: str | None, workers: int | None, wait: float, say):
    """A Dask client: on an existing scheduler, or on an embedded LocalCluster."""
    import logging

    import distributed  # noqa: F401  (its first import sets its loggers' levels)

    # distributed logs every start/stop at INFO; keep the terminal for our progress line
    dlog = logging.getLogger("distributed")
    old_level = dlog.level
    dlog.setLevel(logging.INFO if logging.getLogger().isEnabledFor(logging.DEBUG)
                  else logging.ERROR)
    try:
        with _client_on(scheduler, workers, wait, say) as got:
            yield got
    finally:
        dlog.setLevel(old_level)


@contextmanager
def _client_on(scheduler, workers, wait, say):
    import logging

    from distributed import Client, LocalCluster

    cluster = None
    if scheduler:
        address = scheduler if "://" in scheduler else f"tcp://{scheduler}"
        try:
            client = Client(address, timeout=f"{wait}s", set_as_default=False)
        except Exception as exc:            # unreachable, refused, not a Dask scheduler
            raise CaseError("--scheduler", f"cannot reach a Dask scheduler at {address} within "
                                           f"{wait:g} s ({one_line(exc)}); start one with "
                                           f"`dask scheduler` and give the address it prints"
                            ) from None
        desc = f"Dask scheduler {address}"
    else:
        n = workers or _default_workers()
        # several worker processes already share the cores: each case's derived quantities
        # then run one after the other inside its worker (run.pipeline.run_providers)
        extra = {"env": {"MESASTRAIN_THREADS": "1"}} if n > 1 else {}
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                               silence_logs=logging.ERROR, **extra)
        client = Client(cluster, set_as_default=False)
        desc = f"embedded Dask cluster, {n} worker process(es) x 1 thread, loopback"
    try:
        try:
            client.wait_for_workers(1, timeout=wait)
        except (TimeoutError, OSError):
            raise CaseError("--scheduler", f"no Dask worker joined {desc} within {wait:g} s; "
                                           f"start workers with `dask worker {scheduler}`"
                            ) from None
        try:
            versions = client.run(_worker_version)
        except Exception as exc:
            raise CaseError("--scheduler", f"the Dask workers cannot run mesastrain "
                                           f"({one_line(f'{type(exc).__name__}: {exc}')}); "
                                           f"install mesastrain {__version__} in the workers' "
                                           f"Python environment") from None
        other = sorted({v for v in versions.values() if v != __version__})
        if other:
            say(f"warning: workers run mesastrain {', '.join(other)}, this is {__version__}")
        yield client, desc, len(versions)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
