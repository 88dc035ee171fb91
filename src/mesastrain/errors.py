"""Exceptions raised by mesastrain.

Every error a user can cause carries a one-line message that names what was
wrong and what is allowed. The command line prints that line and exits with
status 2; nothing else in the package prints tracebacks for user errors.
"""

from __future__ import annotations

import re

__all__ = ["CaseError", "MaterialError", "MesastrainError", "MeshError", "OrientationError",
           "ResourceError", "SolverError", "one_line"]

#: Control characters (C0, DEL, C1) and the Unicode line and paragraph separators: anything
#: that could break the one-line error or forge a following line on a terminal.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u0085]")


def one_line(text: str) -> str:
    """``text`` with every control character escaped, so it prints as one line.

    A newline becomes ``\\n``, a tab ``\\t``, any other control character
    ``\\xNN`` (or ``\\uNNNN``), as Python writes them in a string literal.
    Used where error messages are built (:class:`CaseError`) and printed
    (:func:`mesastrain.cli.common.err`), so a key or value taken from a file
    can never make an error span lines or forge the next line.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    return _CONTROL.sub(lambda m: repr(m.group())[1:-1], str(text))


class MesastrainError(Exception):
    """Base class of every error raised on purpose by mesastrain."""


class CaseError(MesastrainError):
    """An invalid case file or case value.

    Parameters
    ----------
    key : str
        Dotted/indexed path of the offending key, e.g. ``"layer[2].thickness"``.
        Empty for errors about the file as a whole.
    message : str
        What is wrong and what is allowed.
    source : str, optional
        The file the case came from, prefixed to the message when given.
    """

    def __init__(self, key: str, message: str, source: str | None = None):
        self.key = one_line(key)            # a key or value from a file may hold a newline
        self.message = one_line(message)
        self.source = None if source is None else one_line(source)
        super().__init__(self._line())

    def _line(self) -> str:
        where = f"{self.source}: " if self.source else ""
        what = f"{self.key}: " if self.key else ""
        return one_line(f"{where}{what}{self.message}")

    def with_source(self, source: str) -> CaseError:
        """Return a copy that names the case file."""
        return type(self)(self.key, self.message, source)


class MaterialError(MesastrainError):
    """An unknown material name or an alloy fraction that is not allowed."""


class OrientationError(MesastrainError):
    """Miller indices that do not define a valid sample frame."""


class MeshError(MesastrainError):
    """A geometry or mesh request that cannot be meshed."""


class SolverError(MesastrainError):
    """The linear solve failed (no convergence, singular system, NaN/Inf)."""


class ResourceError(MesastrainError):
    """A case that would need more memory or time than allowed."""
