"""Region names: the one way the substrate, each layer and each liner is called.

Every output (terminal tables, ``summary.json``, warnings, ``fields.vtu``,
CSV files, the report) calls a region by its name, never by a number a user
could read as counted from 0 or from 1. The substrate is ``"substrate"``; a
layer's name is its ``name`` key or, by default, its material as written in
the case file, with `` 2``, `` 3`` ... appended when the material repeats
(``Si``, ``SiGe``, ``Si 2``); a liner defaults to ``"<material> liner"``.
Names are unique across the whole stack (letter case ignored) and hold no
``.``, ``[`` or ``]``, so that a sweep figure path such as
``layer_figures.SiGe.mean_stress.xx`` can reach them.
"""

from __future__ import annotations

import re

from mesastrain.errors import CaseError

__all__ = ["SUBSTRATE", "check_region_name", "default_name", "region_names"]

#: The substrate's name (reserved: no layer may take it).
SUBSTRATE = "substrate"

_FORBIDDEN = re.compile(r"[.\[\]]")


def default_name(kind: str, material: str, position: int) -> str:
    """The name of a region that has no ``name`` key.

    Parameters
    ----------
    kind : str
        ``"substrate"``, ``"layer"`` or ``"liner"``.
    material : str
        The material as written in the case file (``"SiGe"``).
    position : int
        1 for the first region of this kind and material (bottom up), 2 for
        the second ...

    Returns
    -------
    str
        ``"substrate"``; ``"SiGe"``, ``"SiGe 2"``; ``"SiN liner"``, ``"SiN liner 2"``.
    """
    if kind == SUBSTRATE:
        return SUBSTRATE
    base = _FORBIDDEN.sub("_", material) + (" liner" if kind == "liner" else "")
    return base if position <= 1 else f"{base} {position}"


def check_region_name(name: str, key: str) -> str:
    """A given region name: refuse ``.``, ``[`` and ``]`` (they break figure paths)."""
    if _FORBIDDEN.search(name):
        raise CaseError(key, f"{name!r} holds '.', '[' or ']'; a region name is used in "
                             f"figure paths such as layer_figures.NAME.mean_stress.xx, so give "
                             f"one without them, e.g. {_FORBIDDEN.sub('_', name)!r}")
    if name.strip().lower() == SUBSTRATE:
        raise CaseError(key, f"{name!r} is the substrate's name; give the region another name")
    return name


def region_names(kind: str, items, taken: dict | None = None) -> list[str]:
    """Names of one array of regions (``[[layer]]`` or ``[[liner]]``), checked unique.

    Parameters
    ----------
    kind : str
        ``"layer"`` or ``"liner"`` (also the key of the array in the case file).
    items : sequence of (str or None, str)
        Per item, bottom up: its given ``name`` (None when not given) and its
        material as written.
    taken : dict, optional
        Names already used (lower case -> key path, e.g. from the layers when
        naming liners); updated in place. The substrate's name is always taken.

    Returns
    -------
    list of str

    Raises
    ------
    CaseError
        Naming ``<kind>[i].name``: a name used twice (letter case ignored).
    """
    taken = {SUBSTRATE: "substrate"} if taken is None else taken
    taken.setdefault(SUBSTRATE, "substrate")
    given = {g.lower() for g, _ in items if g is not None}
    seen: dict = {}
    out = []
    for i, (name, material) in enumerate(items):
        key = f"{kind}[{i}].name"
        if name is None:
            seen[material] = seen.get(material, 0) + 1
            name = default_name(kind, material, seen[material])
            while name.lower() in given or name.lower() in taken:   # "Si 2" given by hand
                seen[material] += 1
                name = default_name(kind, material, seen[material])
        else:
            check_region_name(name, key)
        if name.lower() in taken:
            raise CaseError(key, f"{name!r} is already the name of {taken[name.lower()]}; give "
                                 f"each region its own name")
        taken[name.lower()] = f"{kind}[{i}]"
        out.append(name)
    return out
