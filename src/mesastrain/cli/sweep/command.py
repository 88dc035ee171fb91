"""``mesastrain sweep SWEEP``: run every case of a sweep file and tabulate the figures.

The sweep file is described in :mod:`mesastrain.cli.sweep.spec`, the folder it
writes in :mod:`mesastrain.cli.sweep.store`.
"""

from __future__ import annotations

import sys
from pathlib import Path

from mesastrain.cli.common import EXIT_FAILED, EXIT_INTERRUPTED
from mesastrain.cli.sweep.driver import run_sweep
from mesastrain.cli.sweep.expand import expand
from mesastrain.cli.sweep.spec import load_sweep
from mesastrain.cli.sweep.store import CASES_DIR, META_JSON, PLOTS_DIR, TABLE_CSV, is_complete
from mesastrain.cli.sweep.tables import summary_text


def add_command(subparsers) -> None:
    """Add ``mesastrain sweep`` to the command line."""
    p = subparsers.add_parser(
        "sweep", help="run many variants of a case in parallel (Dask) and tabulate figures",
        description="Run every case of a sweep file on Dask (an embedded local cluster, or an "
                    "existing scheduler), keep each case's result folder, and write one table, "
                    "a metadata file and plots. Re-running resumes: finished cases are skipped.")
    p.add_argument("sweep", help="sweep file (TOML)")
    p.add_argument("--out", help="sweep folder (default: <sweep name>-sweep); an earlier "
                                 "sweep folder is resumed")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="existing Dask scheduler, e.g. tcp://10.0.0.5:8786 (default: start a "
                        "local cluster on this machine)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of the local cluster (default: one per core)")
    p.add_argument("--wait", type=float, default=60.0, metavar="SECONDS",
                   help="how long to wait for the scheduler and a first worker (default 60)")
    p.add_argument("--dry-run", action="store_true",
                   help="list the cases, their hashes and what is done; run nothing")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress and no table")
    p.set_defaults(func=cmd_sweep)


def cmd_sweep(args) -> int:
    """``mesastrain sweep``: 0 all cases ok, 1 some failed, 2 bad input, 130 interrupted."""
    sweep = load_sweep(args.sweep)
    out = Path(args.out) if args.out else Path(Path(args.sweep).stem + "-sweep")
    if args.dry_run:
        for sc in expand(sweep):
            if sc.case is None:
                state = f"invalid: {sc.error}"
            elif is_complete(out / CASES_DIR / sc.hash):
                state = "done"
            else:
                state = "to run"
            print(f"{sc.index:4d}  {sc.hash}  {sc.label()}  [{state}]")
        return 0
    try:
        meta = run_sweep(sweep, out, scheduler=args.scheduler, workers=args.workers,
                         progress=not args.quiet, wait=args.wait)
    except KeyboardInterrupt:
        print(f"mesastrain: sweep interrupted; finished cases are kept in {out}/{CASES_DIR} and "
              f"listed in {out}/{TABLE_CSV}; run the same command again to finish",
              file=sys.stderr)
        return EXIT_INTERRUPTED
    if not args.quiet:
        print(summary_text(sweep, meta, meta["outcomes"]))
        plots = meta["files"]["plots"]
        print(f"table {out}/{TABLE_CSV}, metadata {out}/{META_JSON}, case folders "
              f"{out}/{CASES_DIR}/<hash>/" + (f", {len(plots)} plot(s) in {out}/{PLOTS_DIR}/"
                                              if plots else ""))
    return 0 if meta["counts"]["failed"] == 0 and not meta["figure_errors"] else EXIT_FAILED
