"""Command line: ``mesastrain COMMAND ...``.

One module per command (:mod:`~mesastrain.cli.run`, :mod:`~mesastrain.cli.check`,
:mod:`~mesastrain.cli.materials`, :mod:`~mesastrain.cli.sweep.command`,
:mod:`~mesastrain.cli.raman_stress`, :mod:`~mesastrain.cli.verify`,
:mod:`~mesastrain.cli.view`); this module wires them together.

Every user error ends in one line on stderr (``mesastrain: error: ...``) and
exit status 2, with nothing written; so does an operating-system error (an
unwritable or full output location, an unreadable file). Ctrl-C or SIGTERM ends a
run with status 130 and nothing written.
"""

from __future__ import annotations

import argparse
import logging
import signal
import threading

from mesastrain import __version__
from mesastrain.cli import check, materials, raman_stress, run, verify, view
from mesastrain.cli.common import EXIT_INTERRUPTED, EXIT_USAGE, err
from mesastrain.cli.sweep import command as sweep
from mesastrain.errors import MesastrainError

#: The command modules, in the order ``mesastrain --help`` lists them. Each has
#: ``add_command(subparsers)``, which adds a parser with ``set_defaults(func=...)``;
#: ``func(args)`` returns the exit status and raises MesastrainError for user errors.
COMMANDS = (run, check, materials, sweep, raman_stress, verify, view)


class _Parser(argparse.ArgumentParser):
    """argparse with its usage errors in the tool's one-line form (exit status 2)."""

    def error(self, message):
        err(f"{self.prog}: {message} (see {self.prog} --help)")
        raise SystemExit(EXIT_USAGE)


def build_parser() -> argparse.ArgumentParser:
    """The ``mesastrain`` parser with every command of :data:`COMMANDS`."""
    p = _Parser(
        prog="mesastrain",
        description="Strain and stress in patterned lattice-mismatched film stacks "
                    "(anisotropic linear elasticity, finite elements).")
    p.add_argument("--version", action="version", version=f"mesastrain {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log solver details")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for command in COMMANDS:
        command.add_command(sub)
    return p


def _terminate(signum, frame):
    """SIGTERM ends a run like Ctrl-C: cleanly, nothing half-written."""
    raise KeyboardInterrupt


def _os_error_line(exc: OSError) -> str:
    """One line for an operating-system error (unreadable input, unwritable output)."""
    what = exc.strerror or str(exc) or type(exc).__name__
    where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
    return " ".join(f"{where}{what}".split())


def main(argv=None) -> int:
    """Entry point; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:       # --help, --version, or a usage error already printed
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(name)s: %(message)s")
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _terminate)
    try:
        return args.func(args)
    except MesastrainError as exc:
        err(str(exc))
        return EXIT_USAGE
    except KeyboardInterrupt:
        err("interrupted; nothing was written (an earlier result in --out is unchanged)")
        return EXIT_INTERRUPTED
    except MemoryError:
        err("ran out of memory; coarsen the mesh (mesh.size, mesh.edge_size); nothing was written")
        return EXIT_USAGE
    except OSError as exc:
        err(_os_error_line(exc))
        return EXIT_USAGE
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
