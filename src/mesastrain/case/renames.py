"""Old spellings of case-file keys: declared once, read with a one-line note.

Keys renamed so that one word means one thing keep working: a case file
written with the old name is read as if it used the new one, and a
:class:`DeprecationNote` says so (the command line prints it on stderr as
``note: ...``). Giving both the old and the new name is an error.

=========================  ===========================  ==========================================
old                        new                          why
=========================  ===========================  ==========================================
``[substrate] x``          ``composition``              ``x`` is also the x axis and coordinate
``[[layer]] x``            ``composition``              (same)
``[[dislocations]]``       ``[[dislocation]]``          every other array table is singular
``[[dislocation]]          ``relaxed``                  the same quantity as ``[[layer]] relaxed``
relaxation``                                            (the fraction of the mismatch relieved)
=========================  ===========================  ==========================================
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

from mesastrain.errors import CaseError

__all__ = ["RENAMED_KEYS", "RENAMED_TABLES", "DeprecationNote", "add_old_names", "current_path",
           "modernise"]

#: Renamed top-level tables: old name -> new name.
RENAMED_TABLES = {"dislocations": "dislocation"}
#: Renamed keys: (table, old key) -> new key (the table by its new name).
RENAMED_KEYS = {("substrate", "x"): "composition", ("layer", "x"): "composition",
                ("dislocation", "relaxation"): "relaxed"}


@dataclass(frozen=True)
class DeprecationNote:
    """One old spelling met in a case file.

    Attributes
    ----------
    old, new : str
        The key as written and its current name, e.g. ``layer[0].x`` and
        ``layer[0].composition``.
    """

    old: str
    new: str

    def __str__(self) -> str:
        return (f"{self.old} is an old name, read as {self.new}; write {self.new.split('.')[-1]}"
                f" (the old name will keep working)")


def modernise(data: dict) -> tuple[dict, tuple]:
    """A case-file dict with the old spellings replaced by the current ones.

    Parameters
    ----------
    data : dict
        As :mod:`tomllib` gave it; not modified.

    Returns
    -------
    dict, tuple of DeprecationNote
        The dict to read (a shallow copy where something was renamed) and one note
        per old spelling met (the first item of an array names it).

    Raises
    ------
    CaseError
        The old and the new name are both given (naming the old one).
    """
    if not isinstance(data, dict):
        return data, ()
    notes, out = [], dict(data)
    for old, new in RENAMED_TABLES.items():
        if old in out:
            if new in out:
                raise CaseError(old, f"give only [[{new}]] ([[{old}]] is its old name)")
            out = {(new if k == old else k): v for k, v in out.items()}
            notes.append(DeprecationNote(f"[[{old}]]", f"[[{new}]]"))
    for (tab, old), new in RENAMED_KEYS.items():
        value = out.get(tab)
        items = value if isinstance(value, list) else [value]
        if not any(isinstance(t, dict) and old in t for t in items):
            continue
        renamed, noted = [], False
        for i, t in enumerate(items):
            where = f"{tab}[{i}]" if isinstance(value, list) else tab
            if isinstance(t, dict) and old in t:
                if new in t:
                    raise CaseError(f"{where}.{old}", f"give only {new} ({old} is its old name)")
                t = {(new if k == old else k): v for k, v in t.items()}
                if not noted:       # one note per old key, naming its first use
                    notes.append(DeprecationNote(f"{where}.{old}", f"{where}.{new}"))
                    noted = True
            renamed.append(t)
        out[tab] = renamed if isinstance(value, list) else renamed[0]
    return out, tuple(notes)


def current_path(segs: tuple) -> tuple[tuple, DeprecationNote | None]:
    """A key path (``("layer", 0, "x")``) with old names replaced by the current ones.

    Returns
    -------
    tuple, DeprecationNote or None
        The path to use and a note when something was renamed.
    """
    if not segs or not isinstance(segs[0], str):
        return segs, None
    out = list(segs)
    out[0] = RENAMED_TABLES.get(out[0], out[0])
    name = next((s for s in out[1:] if isinstance(s, str)), None)
    if name is not None and (out[0], name) in RENAMED_KEYS:
        k = out.index(name, 1)
        out[k] = RENAMED_KEYS[(out[0], name)]
    out = tuple(out)
    if out == tuple(segs):
        return out, None
    return out, DeprecationNote(_text(segs), _text(out))


def _text(segs) -> str:
    return "".join(f"[{s}]" if isinstance(s, int) else (f".{s}" if i else s)
                   for i, s in enumerate(segs))


def add_old_names(props: dict) -> None:
    """Let a JSON Schema's ``properties`` accept the old spellings, marked ``deprecated``."""
    for (tab, old), new in RENAMED_KEYS.items():
        node = props[tab]
        node = node["items"] if node.get("type") == "array" else node
        item = copy.deepcopy(node["properties"][new])
        item.update({"deprecated": True, "description": f"Old name of {new}."})
        node["properties"][old] = item
    for old, new in RENAMED_TABLES.items():
        props[old] = {**copy.deepcopy(props[new]), "deprecated": True,
                      "description": f"Old name of [[{new}]]."}
