"""``mesastrain run CASE``: solve a case and write its result folder.

Prints the headline results (:func:`results_table`) and, with
``--convergence`` or ``mesh.convergence``, the mesh-convergence table.
Progress goes to stderr when it is a terminal (or with ``--progress``).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from mesastrain.case.parse import load_case
from mesastrain.cli.common import notes
from mesastrain.cli.headline_table import headline_table
from mesastrain.errors import CaseError, one_line
from mesastrain.units import fmt


class Progress:
    """Stage messages with elapsed time, on stderr, only when it is a terminal
    (or when forced)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.t0 = time.perf_counter()

    def __call__(self, msg: str) -> None:
        if self.enabled:
            print(f"[{time.perf_counter() - self.t0:6.1f} s] {msg}", file=sys.stderr, flush=True)


def _fmt(v: float) -> str:
    return fmt(v, "10.1f")


def results_table(summary: dict) -> str:
    """Short plain-text table of the headline results of a run (MPa).

    Regions by name (``layer_figures`` of ``summary.json``); a peak von Mises stress
    that sits at a singular corner or edge (``max_von_mises_singular``, the flag the
    report uses too) is marked with ``*``.
    """
    figs = summary["layer_figures"]
    wide = max([15] + [len(n) + 1 for n in figs])
    lines = [f"{'region':<{wide}} {'material':<14}  mean σxx   mean σyy   mean σzz  "
             f"max von Mises"]
    starred = False
    for name, lf in figs.items():
        s = lf["mean_stress"]
        star = "*" if lf.get("max_von_mises_singular") else ""
        starred = starred or bool(star)
        lines.append(f"{name:<{wide}} {lf['label']:<14}{_fmt(s[0][0])} {_fmt(s[1][1])} "
                     f"{_fmt(s[2][2])} {_fmt(lf['max_von_mises'])}{star}")
    if summary["probes"]:
        lines.append("")
        lines.append("probe           at (nm)                      σxx        σyy        σzz"
                     "  region")
        for p in summary["probes"]:
            at = ", ".join(fmt(v, "g") for v in p["at"])
            s = p["stress"]
            lines.append(f"{p['name']:<15} [{at}]".ljust(40) +
                         f"{_fmt(s[0][0])} {_fmt(s[1][1])} {_fmt(s[2][2])}  {p['region']}")
    lines.append("stress in MPa, sample frame, positive in tension; element averages for "
                 "regions, exact values at probes")
    if starred:
        lines.append("* at a sharp corner or edge: a singular value that grows as the mesh is "
                     "refined, not a material stress")
    return "\n".join(lines)


def cmd_run(args) -> int:
    """``mesastrain run``: 0 when the result folder is written.

    ``--out`` is claimed before anything is solved
    (:func:`mesastrain.io.destination.claim_output`): a file, the working folder,
    the case's folder or an ancestor of either, a folder that is not an earlier
    result, an unwritable place, or a folder another run is writing is refused
    with one line naming ``--out``.
    """
    from mesastrain.io.destination import claim_output

    check_memory_limit(args.max_memory)
    case = load_case(args.case)
    notes(case)
    out = Path(args.out) if args.out is not None else Path(Path(args.case).stem + "-results")
    with claim_output(out, overwrite=args.overwrite, inputs=[args.case]) as dest:
        return _solve_and_write(args, case, dest)


def _solve_and_write(args, case, dest) -> int:
    from mesastrain.derived import PROVIDERS, solve_and_derive
    from mesastrain.io.export import jsonable
    from mesastrain.io.folder import CAUTION, summary_of, write_result

    out = dest.path
    progress = Progress(sys.stderr.isatty() or args.progress)
    progress(f"case {args.case}: {case.title}")
    study = None
    if args.convergence or getattr(case.mesh, "convergence", None):
        from mesastrain.run.convergence import study as convergence_study

        res, study = convergence_study(case, progress=progress, max_memory_gb=args.max_memory,
                                            providers=PROVIDERS)
    else:
        res = solve_and_derive(case, progress=progress, max_memory_gb=args.max_memory)
    quick = getattr(args, "quick", False)
    write_result(res, dest, quick=quick, progress=progress)
    parts = [(k, res.timings[f"write_{k}"]) for k in ("fields", "tables", "pictures", "report")
             if f"write_{k}" in res.timings]
    progress(f"written in {res.timings.get('writing', sum(v for _, v in parts)):.1f} s: "
             + ", ".join(f"{k} {v:.1f} s" for k, v in parts))
    summary = jsonable(summary_of(res))
    if not args.quiet:
        print(results_table(summary))
        figures = headline_table(summary)
        if figures:
            print()
            print(figures)
        if study is not None:
            from mesastrain.run.convergence import table as convergence_table

            print()
            print(convergence_table(study))
        made = "summary.json, fields.vtu" if case.output.vtu else "summary.json"
        if not quick and case.output.pictures:
            made += ", pictures" + (", report.html" if case.output.report else "")
        print(f"results in {out}/ ({made})")
        print(CAUTION)
        warnings = summary.get("warnings", ())
        if warnings and case.about:
            print(f"about this case: {one_line(case.about)}", file=sys.stderr)
        for w in warnings:
            print(f"warning: {one_line(w)}", file=sys.stderr)
    return 0


#: Largest --max-memory accepted, GB: no machine has a petabyte of memory.
MAX_MEMORY_GB = 1.0e6


def check_memory_limit(gb) -> None:
    """Refuse a --max-memory that is not a finite number of GB > 0 (NaN and inf would turn
    the memory guard off)."""
    if gb is not None and not 0.0 < gb <= MAX_MEMORY_GB:
        raise CaseError("--max-memory", f"{gb!r} is not a memory limit; give a number of GB "
                                        f"> 0 and at most {MAX_MEMORY_GB:g}")


def add_command(subparsers) -> None:
    """Add ``mesastrain run CASE`` to the command line."""
    r = subparsers.add_parser("run", help="solve a case and write its result folder")
    r.add_argument("case", help="case file (TOML)")
    r.add_argument("--out", help="result folder (default: <case name>-results)")
    r.add_argument("--overwrite", action="store_true",
                   help="replace an earlier result folder (only one written by mesastrain)")
    r.add_argument("--max-memory", type=float, metavar="GB",
                   help="refuse a case whose estimated memory exceeds this")
    r.add_argument("--progress", action="store_true",
                   help="show progress even when stderr is not a terminal")
    r.add_argument("-q", "--quiet", action="store_true", help="no result table")
    r.add_argument("--quick", action="store_true",
                   help="write summary.json, fields.vtu and the CSV tables only: no pictures, "
                        "no report")
    r.add_argument("--convergence", action="store_true",
                   help="also solve with element sizes / 1.5 and / 2.25 and report how the "
                        "headline figures move (observed order, verdict)")
    r.set_defaults(func=cmd_run)
