"""Command line: ``mesastrain run | check | materials``.

Every user error ends in one line on stderr (``mesastrain: error: ...``) and
exit status 2, with nothing written; so does an operating-system error (an
unwritable or full output location, an unreadable file). Ctrl-C or SIGTERM ends a
run with status 130 and nothing written.
"""

from __future__ import annotations

import argparse
import json
import logging
import signal
import sys
import threading
import time
from pathlib import Path

from mesastrain import __version__
from mesastrain.cli import raman_stress as raman_stress_command
from mesastrain.cli import verify as verify_command
from mesastrain.cli import view as view_command
from mesastrain.cli.sweep import core as sweep_command
from mesastrain.errors import MesastrainError

EXIT_USAGE = 2
EXIT_INTERRUPTED = 130

#: Modules that add a subcommand: each has ``add_command(subparsers)``, which adds a parser
#: with ``set_defaults(func=...)``; ``func(args)`` returns the exit status and raises
#: MesastrainError for user errors.
EXTRA_COMMANDS = (sweep_command, raman_stress_command, verify_command, view_command)


def _err(msg: str) -> None:
    print(f"mesastrain: error: {msg}", file=sys.stderr)


class _Progress:
    """Stage messages with elapsed time, on stderr, only when it is a terminal
    (or when forced)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.t0 = time.perf_counter()

    def __call__(self, msg: str) -> None:
        if self.enabled:
            print(f"[{time.perf_counter() - self.t0:6.1f} s] {msg}", file=sys.stderr, flush=True)


def _load(path: str):
    from mesastrain.case.parse import load_case

    return load_case(path)


# --------------------------------------------------------------------------
# run
# --------------------------------------------------------------------------
def _fmt(v: float) -> str:
    return f"{v:10.1f}"


def results_table(summary: dict) -> str:
    """Short plain-text table of the headline results of a run (MPa)."""
    lines = ["region          material        mean sxx   mean syy   mean szz  max v.Mises"]
    for lf in summary["layer_figures"]:
        s = lf["mean_stress"]
        lines.append(f"{lf['name']:<15} {lf['label']:<14}{_fmt(s[0][0])} {_fmt(s[1][1])} "
                     f"{_fmt(s[2][2])} {_fmt(lf['max_von_mises'])}")
    if summary["probes"]:
        lines.append("")
        lines.append("probe           at (nm)                       sxx        syy        szz")
        for p in summary["probes"]:
            at = ", ".join(f"{v:g}" for v in p["at"])
            s = p["stress"]
            lines.append(f"{p['name']:<15} [{at}]".ljust(40) +
                         f"{_fmt(s[0][0])} {_fmt(s[1][1])} {_fmt(s[2][2])}")
    lines.append("stress in MPa, sample frame, positive in tension; element averages for "
                 "regions, exact values at probes")
    return "\n".join(lines)


def cmd_run(args) -> int:
    from mesastrain.io.destination import claim_output

    case = _load(args.case)
    out = Path(args.out) if args.out is not None else Path(Path(args.case).stem + "-results")
    with claim_output(out, overwrite=args.overwrite, inputs=[args.case]) as dest:
        return _solve_and_write(args, case, dest)


def _solve_and_write(args, case, dest) -> int:
    from mesastrain.io.export import jsonable
    from mesastrain.io.folder import CAUTION, summary_of, write_result
    from mesastrain.derived import EIGENSTRAIN_SOURCES, PROVIDERS, solve_and_derive

    out = dest.path
    progress = _Progress(sys.stderr.isatty() or args.progress)
    progress(f"case {args.case}: {case.title}")
    study = None
    if getattr(args, "convergence", False) or getattr(case.mesh, "convergence", None):
        from mesastrain.run.convergence import study as convergence_study

        res, study = convergence_study(case, progress=progress, max_memory_gb=args.max_memory,
                                            providers=PROVIDERS,
                                            eigenstrain_sources=EIGENSTRAIN_SOURCES)
    else:
        res = solve_and_derive(case, progress=progress, max_memory_gb=args.max_memory)
    progress("writing results")
    write_result(res, dest)
    summary = jsonable(summary_of(res))
    if not args.quiet:
        print(results_table(summary))
        if study is not None:
            from mesastrain.run.convergence import table as convergence_table

            print()
            print(convergence_table(study))
        print(f"results in {out}/ (summary.json, fields.vtu)")
        print(CAUTION)
    return 0


# --------------------------------------------------------------------------
# check
# --------------------------------------------------------------------------
def cmd_check(args) -> int:
    from mesastrain.run.resources import available_memory_gb, estimate

    case = _load(args.case)
    est = estimate(case)
    avail = available_memory_gb()
    d = est.to_dict()
    d["memory_available_gb"] = round(avail, 2)
    d["fits"] = est.memory_gb <= avail
    if args.json:
        print(json.dumps(d))
    else:
        print(f"case      {args.case}: {case.title} (valid)")
        print(f"stack     {case.substrate.material} substrate + {len(case.layers)} layer(s), "
              f"{case.stack_thickness:g} nm; pattern {case.pattern.shape}")
        print(f"mesh      {est.nodes:,} nodes, {est.elements:,} hexahedra, order {est.order}")
        print(f"unknowns  {est.unknowns:,} (solver: {est.method})")
        print(f"memory    about {est.memory_gb:.2f} GB (available {avail:.1f} GB)")
        print(f"time      about {est.seconds:.0f} s on 2 cores (rough)")
    if not d["fits"]:
        _err(f"mesh: the case needs about {est.memory_gb:.1f} GB but only {avail:.1f} GB are "
             "available; coarsen mesh.size / mesh.edge_size")
        return EXIT_USAGE
    return 0


# --------------------------------------------------------------------------
# materials
# --------------------------------------------------------------------------
def cmd_materials(args) -> int:
    from mesastrain.physics.materials import materials_table

    print(materials_table())
    return 0


# --------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="mesastrain",
        description="Strain and stress in patterned lattice-mismatched film stacks "
                    "(anisotropic linear elasticity, finite elements).")
    p.add_argument("--version", action="version", version=f"mesastrain {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log solver details")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    r = sub.add_parser("run", help="solve a case and write its result folder")
    r.add_argument("case", help="case file (TOML)")
    r.add_argument("--out", help="result folder (default: <case name>-results)")
    r.add_argument("--overwrite", action="store_true",
                   help="replace an earlier result folder (only one written by mesastrain)")
    r.add_argument("--max-memory", type=float, metavar="GB",
                   help="refuse a case whose estimated memory exceeds this")
    r.add_argument("--progress", action="store_true",
                   help="show progress even when stderr is not a terminal")
    r.add_argument("-q", "--quiet", action="store_true", help="no result table")
    r.add_argument("--convergence", action="store_true",
                   help="also solve with element sizes / 1.5 and / 2.25 and report how the "
                        "headline figures move (observed order, verdict)")
    r.set_defaults(func=cmd_run)

    c = sub.add_parser("check", help="validate a case and estimate its size, memory and time")
    c.add_argument("case", help="case file (TOML)")
    c.add_argument("--json", action="store_true", help="print the estimate as JSON")
    c.set_defaults(func=cmd_check)

    m = sub.add_parser("materials", help="list the material database with sources")
    m.set_defaults(func=cmd_materials)

    for command in EXTRA_COMMANDS:
        command.add_command(sub)
    return p


def _os_error_line(exc: OSError) -> str:
    """One line for an operating-system error (unreadable input, unwritable output)."""
    what = exc.strerror or str(exc) or type(exc).__name__
    where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
    return " ".join(f"{where}{what}".split())


def _terminate(signum, frame):
    """SIGTERM ends a run like Ctrl-C: cleanly, nothing half-written."""
    raise KeyboardInterrupt


def main(argv=None) -> int:
    """Entry point; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(name)s: %(message)s")
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _terminate)
    try:
        return args.func(args)
    except MesastrainError as exc:
        _err(str(exc))
        return EXIT_USAGE
    except KeyboardInterrupt:
        _err("interrupted; nothing was written (an earlier result in --out is unchanged)")
        return EXIT_INTERRUPTED
    except OSError as exc:
        _err(_os_error_line(exc))
        return EXIT_USAGE
    except MemoryError:
        _err("ran out of memory; coarsen the mesh (mesh.size, mesh.edge_size); nothing was written")
        return EXIT_USAGE
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
