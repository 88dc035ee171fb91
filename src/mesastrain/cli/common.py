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
