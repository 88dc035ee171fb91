"""The sweep folder: its layout, finished case folders (the resume state),
the lock, the event log.

Outputs (``--out DIR``)
-----------------------
``DIR/cases/<hash>/``
    each case's full result folder (``summary.json``, ``fields.vtu``, ...)
    plus ``sweep-case.json`` (parameters, run time, worker). ``<hash>`` is a
    hash of the resolved case (:func:`mesastrain.cli.sweep.expand.case_hash`);
    a folder appears only when complete, so re-running the sweep skips the
    cases already done.
``DIR/sweep-table.csv`` (and ``.parquet`` when pyarrow is installed)
    one row per case: parameters, status, run time, figures, error.
``DIR/sweep-meta.json``
    the sweep, column units, counts, failures with their messages, cluster.
``DIR/sweep-log.jsonl``
    one line per event (run started, case finished or failed), appended.
``DIR/plots/*.png``
    each collected figure against each varied parameter.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import uuid
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from mesastrain.cli.sweep.expand import SweepCase
from mesastrain.errors import CaseError

#: File written into each completed case folder, next to the result files.
CASE_RECORD = "sweep-case.json"
#: Results table, metadata and event log in the sweep folder.
TABLE_CSV = "sweep-table.csv"
TABLE_PARQUET = "sweep-table.parquet"
META_JSON = "sweep-meta.json"
LOG_JSONL = "sweep-log.jsonl"
CASES_DIR = "cases"
PLOTS_DIR = "plots"


@dataclass
class CaseOutcome:
    """What happened to one row.

    Attributes
    ----------
    case : SweepCase
    status : str
        ``"ok"``, ``"failed"`` or ``"pending"`` (not run: interrupted).
    seconds : float or None
        Wall time of the case on its worker, s.
    error : str or None
    ran_now : bool
        Solved in this run (False: reused from an earlier run, or failed
        validation).
    figures : dict of str -> float or None
    """

    case: SweepCase
    status: str = "pending"
    seconds: float | None = None
    error: str | None = None
    ran_now: bool = False
    figures: dict = field(default_factory=dict)
    worker: str | None = None
    traceback: str | None = None


def is_complete(folder: Path) -> bool:
    """True when a case folder holds its record and summary (it was stored whole)."""
    return (folder / CASE_RECORD).is_file() and (folder / "summary.json").is_file()


def store_case(cases_dir: Path, rec: dict, sc: SweepCase) -> Path:
    """Write a finished case folder atomically (temporary folder, then rename)."""
    from mesastrain.io.export import write_json

    final = cases_dir / sc.hash
    tmp = Path(tempfile.mkdtemp(prefix=f".tmp-{sc.hash}-", dir=cases_dir))
    try:
        for rel, data in rec["files"].items():
            p = tmp / rel
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_bytes(data)
        record = {k: v for k, v in rec.items() if k not in ("files",)}
        record["parameters"] = {k: v for k, v in sc.params}
        record["resolved"] = sc.resolved()
        write_json(tmp / CASE_RECORD, record)
        if final.exists():              # an incomplete leftover (complete ones are skipped)
            shutil.rmtree(final)
        os.replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def atomic_write(path: Path, text: str | bytes) -> None:
    """Write a file through a temporary name and a rename, so it is never half-written."""
    tmp = path.with_name(f".{path.name}.tmp-{uuid.uuid4().hex[:8]}")
    try:
        if isinstance(text, bytes):
            tmp.write_bytes(text)
        else:
            tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


class EventLog:
    """Append-only JSON-lines event log."""

    def __init__(self, path: Path, run_id: str):
        self.path = path
        self.run_id = run_id

    def __call__(self, event: str, **kw) -> None:
        from mesastrain.io.export import jsonable

        line = {"time": datetime.now(UTC).isoformat(timespec="milliseconds"),
                "run": self.run_id, "event": event, **kw}
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(json.dumps(jsonable(line)) + "\n")
            fh.flush()


@contextmanager
def locked(out: Path):
    """Hold an exclusive lock on the sweep folder (released even when killed)."""
    try:
        import fcntl
    except ImportError:            # not POSIX: no lock
        yield
        return
    fh = open(out / ".sweep.lock", "a+")
    try:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise CaseError("--out", f"{out} is in use by another running sweep; wait for it "
                                     f"or choose another folder") from None
        yield
    finally:
        fh.close()


def prepare_out(out: Path) -> Path:
    """Check that ``out`` is new, empty or an earlier sweep folder; create ``out/cases``."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise CaseError("--out", f"{out} is a file; give a folder for the sweep")
    if out.is_dir() and any(out.iterdir()) and not (out / CASES_DIR).is_dir() \
            and not (out / META_JSON).exists():
        raise CaseError("--out", f"{out} exists and is not a sweep folder; choose an empty or "
                                 f"new folder (an earlier sweep folder is resumed)")
    (out / CASES_DIR).mkdir(parents=True, exist_ok=True)
    return out


def read_json(path: Path) -> dict:
    """A JSON file as a dict; {} when it is missing or unreadable."""
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
