"""Figures: numbers read from a case's ``summary.json`` by a path, and their units.

Figure paths
------------
A figure is a number inside ``summary.json``, reached by a path of the same
form as a case-file key path: names select keys of a table, ``[i]`` an item
of a list (from 0). Two shorthands: in a list of tables that carry a ``name``
(``probes``, ``layer_figures``), a name selects the item with that name
(``probes.centre``); on a 3x3 tensor the components are ``xx yy zz xy yz xz``
(and ``yx zy zx``), on a 3-vector ``x y z``
(``probes.centre.displacement.z``). Units are inferred from the quantity
(stress MPa, lengths and displacements nm, strain dimensionless) or given in
``[collect] units = {"path" = "unit"}``.

Error bars
----------
A headline figure is collected by its name, ``headline.NAME.value`` (e.g.
``headline.layer 1 centre sxx.value``; the names are those of ``summary.json``
``headline``). Its error bars come with it: the table gains one column per error
contribution (``headline.NAME.material_scatter.error``,
``headline.NAME.discretisation_error.error``; empty where a run did not compute
it) and the plots draw them as bands around the curve (:func:`error_paths`).
"""

from __future__ import annotations

from mesastrain.cli.sweep.spec import parse_path, path_text
from mesastrain.errors import CaseError
from mesastrain.units import is_number, show_value

# units of summary.json quantities by name (the nearest named segment of a figure path wins)
_FIGURE_UNITS = {
    "stress": "MPa", "mean_stress": "MPa", "max_von_mises": "MPa", "von_mises": "MPa",
    "hydrostatic": "MPa", "principal_stress": "MPa", "stress_crystal": "MPa",
    "strain": "1", "strain_crystal": "1", "eigenstrain": "1", "eigenstrain_sample": "1",
    "misfit": "1", "total_strain": "1",
    "displacement": "nm", "at": "nm", "max_von_mises_at": "nm", "z_bottom": "nm", "z_top": "nm",
    "volume": "nm^3", "lattice": "Angstrom", "lattice_in_plane": "Angstrom",
    "constants": "GPa", "stiffness_sample": "GPa",
    "timings": "s", "setup_time": "s", "solve_time": "s",
}
_UNIT_SUFFIXES = (("_nm3", "nm^3"), ("_nm", "nm"), ("_um", "um"), ("_mpa", "MPa"),
                  ("_gpa", "GPa"), ("_mev", "meV"), ("_ev", "eV"), ("_k", "K"),
                  ("_seconds", "s"), ("_s", "s"), ("_percent", "%"), ("_cm-1", "cm^-1"),
                  ("_per_m", "1/m"), ("_j_m2", "J/m^2"))

#: The error contributions a headline figure may carry, as in
#: :data:`mesastrain.derived.headline.CONTRIBUTIONS` (listed here so that the sweep command
#: does not load the derived-quantity providers), with the legend text of their bands.
ERROR_CONTRIBUTIONS = {"discretisation_error": "mesh", "material_scatter": "material data"}

_TENSOR = {"xx": (0, 0), "yy": (1, 1), "zz": (2, 2), "xy": (0, 1), "yz": (1, 2), "xz": (0, 2),
           "yx": (1, 0), "zy": (2, 1), "zx": (2, 0)}
_VECTOR = {"x": 0, "y": 1, "z": 2}


def figure_value(summary: dict, path: str, key: str = "figure"):
    """The number at a figure path in a ``summary.json`` dict.

    Parameters
    ----------
    summary : dict
    path : str
        See the module docstring (``probes.centre.stress.xx``).
    key : str
        Where the path was written, for the error.

    Returns
    -------
    float or None
        None where the summary holds null (a NaN); true/false give 1/0.

    Raises
    ------
    CaseError
        The path does not lead to a number; the message says what is there.
    """
    segs = parse_path(path, key)
    cur, done = summary, []
    for s in segs:
        here = path_text(done) or "summary.json"
        if isinstance(s, int):
            if not isinstance(cur, list):
                raise CaseError(key, f"{path}: {here} is not a list")
            if s >= len(cur):
                raise CaseError(key, f"{path}: {here} has {len(cur)} item(s) (from 0)")
            cur = cur[s]
        elif isinstance(cur, dict):
            if s not in cur:
                raise CaseError(key, f"{path}: {here} has no \"{s}\"; it has: "
                                     f"{', '.join(map(str, cur)) or 'nothing'}")
            cur = cur[s]
        elif isinstance(cur, list):
            if s in _TENSOR and _is_matrix(cur):
                i, j = _TENSOR[s]
                cur = cur[i][j]
            elif s in _VECTOR and len(cur) == 3 and all(_is_num_or_none(v) for v in cur):
                cur = cur[_VECTOR[s]]
            else:
                names = [it.get("name") for it in cur if isinstance(it, dict)]
                if s not in names:
                    if _is_matrix(cur):
                        hint = "a 3x3 tensor: use one of xx, yy, zz, xy, yz, xz"
                    elif names and any(n is not None for n in names):
                        hint = f"names: {', '.join(str(n) for n in names if n is not None)}"
                    else:
                        hint = f"a list of {len(cur)}: use [i]"
                    raise CaseError(key, f"{path}: {here} has no \"{s}\" ({hint})")
                cur = cur[names.index(s)]
        else:
            raise CaseError(key, f"{path}: {here} is a number, not a table")
        done.append(s)
    if cur is None:
        return None
    if isinstance(cur, bool):            # a yes/no figure: 1 or 0 in the table
        return float(cur)
    if is_number(cur):
        return float(cur)
    if _is_matrix(cur):
        raise CaseError(key, f"{path} is a 3x3 tensor; add a component, e.g. {path}.xx")
    if isinstance(cur, list) and len(cur) == 3 and all(_is_num_or_none(v) for v in cur):
        raise CaseError(key, f"{path} is a vector; add a component, e.g. {path}.z")
    if isinstance(cur, dict):
        raise CaseError(key, f"{path} is a table; continue with one of: {', '.join(cur)}")
    raise CaseError(key, f"{path} is {show_value(cur)}, not a number")


def error_paths(path: str) -> dict:
    """The error-bar paths of a headline figure's value path, by contribution.

    ``headline.NAME.value`` -> ``{"discretisation_error": "headline.NAME.discretisation_error
    .error", "material_scatter": ...}``; any other path -> ``{}``.
    """
    try:
        segs = parse_path(path, "figure")
    except CaseError:
        return {}
    if len(segs) == 3 and segs[0] == "headline" and isinstance(segs[1], str) \
            and segs[2] == "value":
        return {c: f"headline.{segs[1]}.{c}.error" for c in ERROR_CONTRIBUTIONS}
    return {}


def _is_num_or_none(v) -> bool:
    return v is None or is_number(v)


def _is_matrix(v) -> bool:
    return (isinstance(v, list) and len(v) == 3
            and all(isinstance(r, list) and len(r) == 3 and all(_is_num_or_none(x) for x in r)
                    for r in v))


def figure_unit(path: str, given: dict | None = None, summary: dict | None = None) -> str:
    """Unit of a figure.

    In order: the unit given in ``[collect] units``; a ``units`` table met on
    the way down ``summary`` that names one of the path's segments (e.g.
    ``readouts.units.length`` for ``readouts.layers.SiGe.relaxation.+x.length``,
    ``summary.json``'s own ``units.stress``); the known quantities of
    ``summary.json`` (``stress`` MPa, ``strain`` dimensionless,
    ``displacement`` nm, ...); names ending in ``_nm``, ``_mpa``, ``_mev``,
    ... or containing ``stress`` (MPa) or ``_over_`` (a ratio). The segment
    nearest the end of the path wins. "" when unknown.

    Parameters
    ----------
    path : str
    given : dict of str -> str, optional
    summary : dict, optional
        A ``summary.json`` that holds the figure.

    Returns
    -------
    str
        ``"1"`` for dimensionless quantities.
    """
    if given and path in given:
        return given[path]
    segs = parse_path(path, "figure")
    tables = []                           # unit tables met on the way, outermost first
    cur = summary
    for k, s in enumerate(segs):
        if (segs[0] == "headline" and k == 2 and isinstance(cur, dict)
                and isinstance(cur.get("unit"), str)):
            return cur["unit"]            # a headline figure and its error bars carry it
        if isinstance(cur, dict) and isinstance(cur.get("units"), dict):
            tables.append(cur["units"])
        if isinstance(cur, dict):
            cur = cur.get(s) if isinstance(s, str) else None
        elif isinstance(cur, list) and isinstance(s, int) and s < len(cur):
            cur = cur[s]
        elif isinstance(cur, list) and isinstance(s, str):
            cur = next((it for it in cur if isinstance(it, dict) and it.get("name") == s), None)
        else:
            cur = None
    for s in reversed(segs):
        if not isinstance(s, str):
            continue
        for t in reversed(tables):
            if isinstance(t.get(s), str):
                return t[s]
        if s in _FIGURE_UNITS:
            return _FIGURE_UNITS[s]
        low = s.lower()
        for suffix, unit in _UNIT_SUFFIXES:
            if low.endswith(suffix):
                return unit
        if "_over_" in low or low.endswith("_ratio"):
            return "1"
        if "stress" in low and "per" not in low:
            return "MPa"
    return ""
