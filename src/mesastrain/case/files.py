"""Reading case and sweep files safely: a regular file, bounded size, UTF-8, sane nesting.

Split from :mod:`mesastrain.case.parse`, which re-exports :func:`read_toml` and
:func:`check_nesting`; nothing here knows the keys of a case.
"""

from __future__ import annotations

import os
import stat
import tomllib

from mesastrain.errors import CaseError

__all__ = ["MAX_FILE_BYTES", "MAX_NESTING", "check_nesting", "read_toml"]

#: Largest case or sweep file read, bytes. A case with a 1000-vertex outline is about
#: 40 kB; 4 MiB leaves room for comments and long mesh-group tables while a device
#: (``/dev/zero``) or a wrong file cannot fill the memory.
MAX_FILE_BYTES = 4 * 1024 * 1024
#: Deepest nesting of tables and arrays (a polygon's vertices are 4 deep: the file, [pattern],
#: the list, a point). Deeper structures are refused before any recursive walk can overflow.
MAX_NESTING = 8


def read_toml(path, what: str = "case file") -> dict:
    """Read a TOML file safely: a regular file of at most MAX_FILE_BYTES, UTF-8, sane nesting.

    Parameters
    ----------
    path : str or os.PathLike
    what : str
        What the file is, for the messages ("case file", "sweep file").

    Returns
    -------
    dict
        As :func:`tomllib.loads` returns it.

    Raises
    ------
    CaseError
        Carrying the file name: missing, unreadable, not a regular file (a
        directory, device or FIFO), larger than :data:`MAX_FILE_BYTES`, empty,
        not UTF-8 text, a TOML syntax error (with TOML's line and column),
        nesting deeper than :data:`MAX_NESTING`.
    """
    source = str(path)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise CaseError("", "no such file", source) from None
    except (OSError, ValueError) as err:
        raise CaseError("", f"cannot be read ({getattr(err, 'strerror', None) or err})",
                        source) from None
    if stat.S_ISDIR(st.st_mode):
        raise CaseError("", f"is a directory, not a {what}", source)
    if not stat.S_ISREG(st.st_mode):
        raise CaseError("", f"not a regular file (a device, FIFO or socket); give a {what} "
                            f"(UTF-8 TOML text)", source)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):   # replaced since the stat
                raise CaseError("", f"not a regular file; give a {what}", source)
            raw = fh.read(MAX_FILE_BYTES + 1)
    except OSError as err:
        raise CaseError("", f"cannot be read ({err.strerror or err})", source) from None
    if len(raw) > MAX_FILE_BYTES:
        raise CaseError("", f"larger than {MAX_FILE_BYTES // (1024 * 1024)} MiB; a {what} is "
                            f"a short text file (bring large geometry as a mesh file, "
                            f"[pattern] shape = \"mesh\")", source)
    if not raw.strip():
        raise CaseError("", "the file is empty; a case needs at least [substrate] and one "
                            "[[layer]]" if what == "case file" else "the file is empty", source)
    if b"\x00" in raw:
        raise CaseError("", f"not a text file (it contains NUL bytes); a {what} is UTF-8 "
                            f"TOML text", source)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = raw[:err.start].count(b"\n") + 1
        raise CaseError("", f"not UTF-8 text (invalid byte 0x{raw[err.start]:02x} on line "
                            f"{line}); save the {what} as UTF-8", source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        msg = " ".join(str(err).split())
        raise CaseError("", f"TOML syntax error: {msg}", source) from None
    except RecursionError:
        raise CaseError("", f"arrays or inline tables nested too deeply; a {what} needs at "
                            f"most {MAX_NESTING} levels", source) from None
    try:
        check_nesting(data)
    except CaseError as err:
        raise err.with_source(source) from None
    return data


def check_nesting(data, limit: int = MAX_NESTING) -> None:
    """Refuse tables and arrays nested deeper than ``limit`` (iteratively, no recursion).

    Raises
    ------
    CaseError
        Naming the key path of the first value that is too deep.
    """
    stack = [(data, "", 1)]
    while stack:
        value, key, depth = stack.pop()
        if isinstance(value, dict):
            items = ((f"{key}.{k}" if key else str(k), v) for k, v in value.items())
        elif isinstance(value, list):
            items = ((f"{key}[{i}]", v) for i, v in enumerate(value))
        else:
            continue
        if depth > limit:
            raise CaseError(key, f"nested {depth} levels deep; a case file needs at most "
                                 f"{limit} levels of tables and arrays")
        stack.extend((v, k, depth + 1) for k, v in items if isinstance(v, (dict, list)))
