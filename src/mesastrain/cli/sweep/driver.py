"""Running (or resuming) a sweep into its folder: the cases not done yet go to
Dask, each finished one is stored as it arrives, and the table, metadata and
plots are written at the end (and the table every 15 s while it runs)."""

from __future__ import annotations

import shutil
import signal
import sys
import threading
import time
import uuid
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

from mesastrain.cli.sweep.expand import expand
from mesastrain.cli.sweep.spec import Sweep
from mesastrain.cli.sweep.store import (
    CASE_RECORD,
    CASES_DIR,
    LOG_JSONL,
    CaseOutcome,
    EventLog,
    is_complete,
    locked,
    prepare_out,
    read_json,
    store_case,
)
from mesastrain.cli.sweep.tables import collect_figures, write_outputs, write_table
from mesastrain.cli.sweep.worker import check_scheduler, dask_client, one_line, solve_case
from mesastrain.errors import CaseError


@contextmanager
def _sigterm_as_interrupt():
    """Turn SIGTERM into KeyboardInterrupt so a terminated sweep shuts its cluster down."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt

    old = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def _duration(seconds: float) -> str:
    """``42 s``, ``3 min``, ``1.5 h``."""
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


class _Progress:
    """One progress line on stderr: rewritten in place on a terminal, a line per case otherwise."""

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total = total
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.tty = enabled and getattr(self.stream, "isatty", lambda: False)()
        self.t0 = time.perf_counter()
        self.done = self.failed = 0
        self._width = 0
        self._last = ""

    def message(self, text: str) -> None:
        if self.enabled:
            self._clear()
            print(f"[{time.perf_counter() - self.t0:6.1f} s] {text}", file=self.stream,
                  flush=True)

    def _clear(self):
        if self.tty and self._width:
            self.stream.write("\r" + " " * self._width + "\r")
            self._width = 0

    def update(self, last: str = "") -> None:
        if not self.enabled:
            return
        self._last = last
        if not last and not self.tty:
            return
        n = self.done + self.failed
        frac = n / self.total if self.total else 1.0
        bar = "#" * int(round(24 * frac))
        elapsed = time.perf_counter() - self.t0
        line = (f"[{elapsed:6.1f} s] [{bar:<24}] {n} of {self.total} cases done "
                f"({self.failed} failed)")
        if 0 < n < self.total:      # the mean time per case so far, times the cases left
            line += f", about {_duration(elapsed / n * (self.total - n))} left"
        if last:
            line += f"  {last}"
        if self.tty:
            cols = shutil.get_terminal_size((100, 20)).columns - 1
            line = line[:cols]
            self.stream.write("\r" + line.ljust(self._width))
            self.stream.flush()
            self._width = len(line)
        else:
            print(line, file=self.stream, flush=True)

    def tick(self) -> None:
        """Redraw the bar (elapsed time) on a terminal; nothing otherwise."""
        if self.tty:
            self.update(self._last)

    def close(self) -> None:
        if self.tty and self._width:
            self.stream.write("\n")
            self.stream.flush()
            self._width = 0


#: Most worker processes of the embedded cluster: each holds a whole solve in memory, and
#: no machine this runs on has more cores than that.
MAX_WORKERS = 256


def run_sweep(sweep: Sweep, out, scheduler: str | None = None, workers: int | None = None,
              progress: bool = True, wait: float = 60.0, stream=None) -> dict:
    """Run (or resume) a sweep into a folder.

    Cases whose folder ``out/cases/<hash>/`` is complete are skipped; the
    others are solved as Dask tasks; failed cases are recorded with their
    message and the rest continue. At the end the table, metadata and plots
    are (re)written from every completed case folder.

    Parameters
    ----------
    sweep : Sweep
    out : path
        The sweep folder (created; an earlier sweep folder is resumed).
    scheduler : str, optional
        Address of an existing Dask scheduler (``tcp://host:port``); default:
        an embedded LocalCluster on this machine.
    workers : int, optional
        Worker processes of the embedded cluster (default: one per core).
    progress : bool
        Print progress lines on ``stream``.
    wait : float
        Seconds to wait for the scheduler and the first worker.
    stream : file, optional
        Where progress goes (default stderr).

    Returns
    -------
    dict
        The metadata written to ``sweep-meta.json`` (``counts``, ``failures``,
        ``files``, ...), plus ``outcomes`` (list of :class:`CaseOutcome`).

    Notes
    -----
    The embedded cluster starts worker processes with the "spawn" method:
    a script that calls this must guard its top level with
    ``if __name__ == "__main__":``.

    Raises
    ------
    CaseError
        Bad ``--out``/``--scheduler``/``--workers``; a folder in use.
    KeyboardInterrupt
        Ctrl-C or SIGTERM: the cluster is shut down, completed cases are kept
        and the table is written for them first.
    """
    if scheduler and workers:
        raise CaseError("--workers", "only for the embedded cluster; the scheduler at "
                                     f"{scheduler} has its own workers")
    if workers is not None and not 1 <= workers <= MAX_WORKERS:
        raise CaseError("--workers", f"expected an integer >= 1 and <= {MAX_WORKERS}, got "
                                     f"{workers}")
    if not 0 < wait <= 86400:           # also refuses NaN
        raise CaseError("--wait", f"expected seconds > 0 and at most 86400 (a day), got {wait}")
    if scheduler:                       # before anything is created
        scheduler = check_scheduler(scheduler, wait)
    out = prepare_out(Path(out))
    cases_dir = out / CASES_DIR
    cases = expand(sweep)
    prog = _Progress(len(cases), progress, stream)
    started = datetime.now(UTC)
    t0 = time.perf_counter()
    run_id = started.strftime("%Y%m%dT%H%M%S") + "-" + uuid.uuid4().hex[:6]
    with locked(out), _sigterm_as_interrupt():
        for stale in cases_dir.glob(".tmp-*"):     # left by a killed run
            shutil.rmtree(stale, ignore_errors=True)
        log = EventLog(out / LOG_JSONL, run_id)
        outcomes = [CaseOutcome(sc) for sc in cases]
        todo: dict[str, list[CaseOutcome]] = {}
        for oc in outcomes:
            sc = oc.case
            if sc.case is None:
                oc.status, oc.error = "failed", sc.error
            elif is_complete(cases_dir / sc.hash):
                oc.status = "ok"
                rec = read_json(cases_dir / sc.hash / CASE_RECORD)
                oc.seconds, oc.worker = rec.get("seconds"), rec.get("worker")
            else:
                todo.setdefault(sc.hash, []).append(oc)
        reused = sum(oc.status == "ok" for oc in outcomes)
        invalid = sum(oc.case.case is None for oc in outcomes)
        log("start", cases=len(cases), to_run=len(todo), reused=reused, invalid=invalid,
            sweep=sweep.source, scheduler=scheduler or "embedded")
        prog.done, prog.failed = reused, invalid
        prog.message(f"sweep \"{sweep.title}\": {len(cases)} case(s), {reused} already done, "
                     f"{invalid} invalid, {len(todo)} to run")
        for oc in outcomes:
            if oc.case.case is None:
                log("case", hash=oc.case.hash, index=oc.case.index, status="failed",
                    error=oc.error, parameters=dict(oc.case.params))
        cluster_desc, n_workers = "none needed", 0
        interrupted = False
        if todo:
            try:
                with dask_client(scheduler, workers, wait, prog.message) as (client, desc, nw):
                    cluster_desc, n_workers = desc, nw
                    prog.message(f"running on {desc} ({nw} worker(s) connected)")
                    _run_on(client, todo, cases_dir, log, prog, out, sweep, outcomes)
            except KeyboardInterrupt:
                interrupted = True
            finally:
                prog.close()
        meta = write_outputs(sweep, out, outcomes, started, time.perf_counter() - t0,
                             cluster_desc, n_workers, interrupted, run_id,
                             plots=not interrupted)
        log("end", counts=meta["counts"], interrupted=interrupted)
    if interrupted:
        raise KeyboardInterrupt
    meta["outcomes"] = outcomes
    return meta


def _run_on(client, todo, cases_dir, log, prog, out, sweep, outcomes) -> None:
    from distributed import as_completed

    token = uuid.uuid4().hex[:8]
    futures = {}
    for h, ocs in todo.items():
        sc = ocs[0].case
        fut = client.submit(solve_case, sc.case, h, key=f"mesastrain-case-{h}-{token}",
                            retries=0)
        futures[fut] = h
    last_table = last_tick = time.perf_counter()
    ac = as_completed(list(futures), loop=client.loop)
    prog.update("")
    try:
        while not ac.is_empty():
            batch = ac.next_batch(block=False)
            if not batch:                   # nothing finished: keep the clock moving
                time.sleep(0.1)
                if time.perf_counter() - last_tick > 1.0:
                    prog.tick()
                    last_tick = time.perf_counter()
                continue
            for fut in batch:
                _take(fut, futures, todo, cases_dir, log, prog)
            if time.perf_counter() - last_table > 15.0:   # a readable table while it runs
                collect_figures(sweep, out, outcomes)
                write_table(sweep, out, outcomes)
                last_table = time.perf_counter()
    except BaseException:
        client.cancel(list(futures), force=True)
        raise


def _take(fut, futures, todo, cases_dir, log, prog) -> None:
    """Record one finished (or failed) task: store its folder, log it, move the bar."""
    h = futures.pop(fut)
    ocs = todo[h]
    sc = ocs[0].case
    if fut.status == "finished":
        rec = fut.result()
    else:
        try:
            exc = fut.exception()
            msg = one_line(f"{type(exc).__name__}: {exc}")
        except Exception as err:          # cancelled
            msg = one_line(f"{type(err).__name__}: {err}")
        if "KilledWorker" in msg:
            msg = ("the worker running this case died (out of memory?) and the case "
                   f"was given up: {msg}")
        rec = {"status": "failed", "error": msg, "seconds": None, "worker": None}
    fut.release()
    if rec["status"] == "ok":
        store_case(cases_dir, rec, sc)
    for oc in ocs:
        oc.status = rec["status"]
        oc.seconds = rec.get("seconds")
        oc.worker = rec.get("worker")
        oc.ran_now = True
        oc.error = rec.get("error")
        oc.traceback = rec.get("traceback")
    if rec["status"] == "ok":
        prog.done += len(ocs)
    else:
        prog.failed += len(ocs)
    log("case", hash=h, index=[oc.case.index for oc in ocs], status=rec["status"],
        seconds=rec.get("seconds"), worker=rec.get("worker"), error=rec.get("error"),
        parameters=dict(sc.params))
    state = "ok" if rec["status"] == "ok" else "FAILED"
    secs = f" {rec['seconds']:.1f} s" if rec.get("seconds") is not None else ""
    prog.update(f"case {sc.index} ({sc.label()}) {state}{secs}")
