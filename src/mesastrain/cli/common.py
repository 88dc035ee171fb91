"""What the commands of :mod:`mesastrain.cli` share: exit statuses and the error line."""

from __future__ import annotations

import sys

from mesastrain.errors import one_line

#: Some rows failed (``verify``: a check; ``sweep``: a case or a figure).
EXIT_FAILED = 1
#: A user error: bad case, bad option, not enough memory; nothing was written.
EXIT_USAGE = 2
#: Ctrl-C or SIGTERM (128 + SIGINT).
EXIT_INTERRUPTED = 130


def err(msg: str) -> None:
    """Print ``mesastrain: error: <msg>`` on stderr, control characters escaped (one line)."""
    print(f"mesastrain: error: {one_line(msg)}", file=sys.stderr)


def notes(case) -> None:
    """Print the case's notes (old key names read under their new ones) on stderr."""
    for n in getattr(case, "notes", ()):
        print(f"note: {one_line(n)}", file=sys.stderr)
