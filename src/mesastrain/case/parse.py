"""Case files: TOML in, validated frozen dataclasses out.

A case file describes one stack (substrate plus layers, bottom to top), its
crystal orientation, an optional etched pattern, optional growth/use
temperatures, mesh and solver settings, probe points, line cuts and output
switches. :func:`load_case` reads a file, :func:`parse_case` validates a dict
already read from TOML. Validation happens once, fully, here; nothing
downstream needs to re-check the input. No numerics beyond unit conversion and
the geometric checks below.

The keys, their readers and defaults are declared in
:mod:`mesastrain.case.schema`; the dataclasses are in
:mod:`mesastrain.case.types`, the value readers in
:mod:`mesastrain.case.readers` and the checks across tables in
:mod:`mesastrain.case.checks`.

Coordinates
-----------
Lengths in nm. z = 0 at the substrate's top surface (the first growth
interface), +z up through the layers; x = y = 0 at the centre of the pattern.
Sample x is the crystal direction ``x_axis``, sample z the normal of the plane
``normal``.

Key paths
---------
Every error is a :class:`mesastrain.errors.CaseError` whose ``key`` is the
dotted path of the offending key: ``substrate.thickness``, ``pattern.shape``,
``probe[1].at``. Arrays of tables are indexed from **0** in the order they
appear in the file, so ``layer[0]`` is the first (bottom) layer and
``probe[1]`` the second probe. Errors about the file as a whole have an empty
key. Errors from :func:`load_case` also carry the file name.

Order of checks
---------------
Deterministic: tables are checked in the order they appear in the file, and
the keys of each table in file order (unknown key, type, range), then the
table's missing keys and the checks that combine its own keys (alloy fraction
against material, orientation). Checks that combine tables (a layer inheriting
the substrate's orientation, etch depth against the stack, probes inside the
body) run afterwards, again in the file order of the table they concern. The
first failing check raises.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from mesastrain.case import readers as rd
from mesastrain.case.checks import CrossChecks
from mesastrain.case.keys import read_table
from mesastrain.case.schema import (
    PATTERN,
    SHAPE_KEYS,
    SHAPE_REQUIRES,
    TITLE,
    TOP_KEYS,
    default_order,
    table,
)
from mesastrain.case.types import TABLE_TYPES, Case
from mesastrain.errors import CaseError, MaterialError, OrientationError
from mesastrain.physics.crystal import direction_vector, miscut_rotation, plane_normal, sample_frame
from mesastrain.physics.materials import get_material, is_alloy
from mesastrain.units import show_value

__all__ = ["load_case", "parse_case"]


# --------------------------------------------------------------------------
# reading files
# --------------------------------------------------------------------------
def load_case(path) -> Case:
    """Read and validate a case file.

    Parameters
    ----------
    path : str or os.PathLike
        The TOML case file.

    Returns
    -------
    Case
        With ``source`` set to ``str(path)`` and, when the file has no
        ``title``, the file stem as title.

    Raises
    ------
    CaseError
        Carrying the file name: missing or unreadable file, empty file, a file
        that is not UTF-8 text, a TOML syntax error (with TOML's line and
        column), or any invalid content (see :func:`parse_case`).
    """
    p = Path(path)
    source = str(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise CaseError("", "no such file", source) from None
    except IsADirectoryError:
        raise CaseError("", "is a directory, not a case file", source) from None
    except OSError as err:
        raise CaseError("", f"cannot be read ({err.strerror or err})", source) from None
    if not raw.strip():
        raise CaseError("", "the file is empty; a case needs at least [substrate] and one "
                            "[[layer]]", source)
    if b"\x00" in raw:
        raise CaseError("", "not a text file (it contains NUL bytes); a case file is UTF-8 "
                            "TOML text", source)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = raw[:err.start].count(b"\n") + 1
        raise CaseError("", f"not UTF-8 text (invalid byte 0x{raw[err.start]:02x} on line "
                            f"{line}); save the case file as UTF-8", source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        msg = " ".join(str(err).split())
        raise CaseError("", f"TOML syntax error: {msg}", source) from None
    return parse_case(data, source)


def parse_case(data: dict, source: str | None = None) -> Case:
    """Validate a case given as a dict (as :func:`tomllib.load` returns it).

    Parameters
    ----------
    data : dict
        The case-file content. Not modified.
    source : str, optional
        Where it came from; attached to errors and to the result, and its
        file stem is the default title.

    Returns
    -------
    Case

    Raises
    ------
    CaseError
        The first problem found, in the deterministic order described in the
        module docstring, with the key path of the offending key.
    """
    try:
        return _Parser(source).run(data)
    except CaseError as err:
        if source is not None and err.source is None:
            raise err.with_source(source) from None
        raise


def _build(name: str, t: dict):
    """The dataclass of table ``name`` from its read keys; defaults for the others."""
    tab = table(name)
    return TABLE_TYPES[name](**{k.field: t.get(k.name, k.default) for k in tab.keys})


# --------------------------------------------------------------------------
# the parser
# --------------------------------------------------------------------------
class _Parser:
    """One validation run: phase 1 reads each table on its own, phase 2 checks across tables."""

    def __init__(self, source: str | None):
        self.source = source

    # ---- phase 1: each top-level key on its own, in file order -----------
    def run(self, data) -> Case:
        if not isinstance(data, dict):
            raise CaseError("", f"expected a table of case settings, got {show_value(data)}")
        special = {TITLE.name: TITLE.kind.read, "substrate": self._substrate,
                   "layer": self._layers, "pattern": self._pattern, "cut": self._cuts,
                   "dislocations": self._dislocations}
        got = {}
        for name, value in data.items():
            if name not in TOP_KEYS:
                raise rd.unknown_key(name, name, TOP_KEYS)
            if name in special:
                got[name] = special[name](value, name)
            elif table(name).named:
                got[name] = self._named_items(value, name)
            else:
                got[name] = read_table(table(name), value, name)
        if "substrate" not in got:
            raise rd.missing("substrate", "a [substrate] table with material, thickness, "
                                          "normal and x_axis")
        if "layer" not in got or not got["layer"]:
            raise CaseError("layer", "at least one [[layer]] is required (bottom to top)")

        # ---- phase 2: checks across tables, in file order of the table ---
        pattern = got.setdefault("pattern", {"shape": "none"})
        mesh = got.setdefault("mesh", {})
        checks = CrossChecks(got["substrate"], got["layer"], pattern, mesh)
        if pattern["shape"] == "rectangle":
            pattern.setdefault("length", pattern["width"])
        if pattern["shape"] not in ("none", "mesh"):
            pattern.setdefault("etch_depth", checks.stack())
        mesh.setdefault("order", default_order(pattern))
        cross = {"layer": checks.layer_orientations, "pattern": checks.pattern_fits,
                 "mesh": checks.mesh_fits,
                 "probe": lambda: checks.probes_inside(got["probe"]),
                 "cut": lambda: checks.cuts_inside(got["cut"]),
                 "dislocations": lambda: checks.dislocations(got["dislocations"])}
        for name in data:
            if name in cross:
                cross[name]()
        return self._case(got)

    def _case(self, got: dict) -> Case:
        """The Case from the checked tables; absent tables take their defaults."""
        if TITLE.name in got:
            title = got[TITLE.name]
        elif self.source is not None:
            title = Path(self.source).stem or "untitled"
        else:
            title = "untitled"
        parts = {}
        for name in TABLE_TYPES:
            tab = table(name)
            if tab.array:
                parts[tab.attr] = tuple(_build(name, t) for t in got.get(name, ()))
            elif name in got:
                parts[tab.attr] = _build(name, got[name])
            else:
                parts[tab.attr] = None if name == "thermal" else _build(name, {})
        return Case(title=title, source=self.source, **parts)

    # ---- materials and orientation shared by substrate and layers -------
    @staticmethod
    def _resolve_material(t: dict, key: str) -> dict:
        """Check x against the material; return canonical name, crystal system and c/a."""
        name, x = t["material"], t.get("x")
        try:
            mat = get_material(name, x)
        except MaterialError as err:
            if is_alloy(name) and x is None:
                raise CaseError(f"{key}.x", f"required key is missing; {err}") from None
            raise CaseError(f"{key}.x" if x is not None else f"{key}.material",
                            str(err)) from None
        return {"material": mat.name, "system": mat.system, "c_over_a": mat.c_over_a,
                "label": mat.label}

    @staticmethod
    def _check_orientation(t: dict, key: str, system: str, c_over_a) -> None:
        """Build the sample frame, mapping OrientationError to the right key."""
        steps = ((f"{key}.normal", lambda: plane_normal(t["normal"], system, c_over_a,
                                                        what="normal")),
                 (f"{key}.x_axis", lambda: direction_vector(t["x_axis"], system, c_over_a,
                                                            what="x_axis")),
                 (f"{key}.x_axis", lambda: sample_frame(t["normal"], t["x_axis"], system,
                                                        c_over_a)))
        for sub, step in steps:
            try:
                step()
            except OrientationError as err:
                text = str(err) if system in str(err) else f"{err} ({system} crystal)"
                raise CaseError(sub, text) from None

    # ---- tables ----------------------------------------------------------
    def _substrate(self, value, key: str) -> dict:
        t = read_table(table(key), value, key)
        t.update(self._resolve_material(t, key))
        self._check_orientation(t, key, t["system"], t["c_over_a"])
        if t.get("miscut") is not None:
            angle, toward = t["miscut"]
            try:
                frame = sample_frame(t["normal"], t["x_axis"], t["system"], t["c_over_a"])
                miscut_rotation(frame, angle, toward, t["c_over_a"])
            except OrientationError as err:
                raise CaseError(f"{key}.miscut", str(err)) from None
        return t

    def _layers(self, value, key: str) -> list:
        out = []
        for i, item in enumerate(rd.array_of_tables(value, key)):
            lk = f"{key}[{i}]"
            t = read_table(table(key), item, lk)
            t.update(self._resolve_material(t, lk))
            has_n, has_x = "normal" in t, "x_axis" in t
            if has_n != has_x:
                gone = "x_axis" if has_n else "normal"
                raise CaseError(f"{lk}.{gone}", "required key is missing; give both normal and "
                                                "x_axis for this layer, or neither to inherit "
                                                "the substrate's")
            if has_n:
                self._check_orientation(t, lk, t["system"], t["c_over_a"])
            else:
                t["normal"] = t["x_axis"] = None
            out.append(t)
        return out

    def _pattern(self, value, key: str) -> dict:
        t = read_table(PATTERN, value, key)
        shape = t["shape"]
        allowed = SHAPE_KEYS[shape]
        for name in t:
            if not PATTERN.key(name).shapes or name in allowed:
                continue
            if shape == "none":
                raise CaseError(f"{key}.{name}", 'only for patterned shapes; remove it or '
                                                 'set shape = "rectangle"')
            takers = [s for s, keys in SHAPE_KEYS.items() if name in keys]
            hint = ("a stripe runs along y without end; remove it" if
                    (shape, name) == ("stripe", "length") else
                    "allowed for " + ", ".join(f'"{s}"' for s in takers))
            raise CaseError(f"{key}.{name}", f'not a key of shape = "{shape}"; {hint}')
        for name, what in SHAPE_REQUIRES[shape]:
            if name not in t:
                raise rd.missing(f"{key}.{name}", what)
        if shape == "mesh":
            path = Path(t["file"])
            if not path.is_absolute() and self.source is not None:
                path = Path(self.source).parent / path
            if not path.is_file():
                raise CaseError(f"{key}.file", f"no such mesh file: {path}")
            t["file"] = str(path)
        if "corner_radius" in t and t["corner_radius"] == 0.0:
            del t["corner_radius"]
        return t

    def _named_items(self, value, key: str) -> list:
        """An array of named tables: names default to key1, key2, ... and must be unique."""
        out, seen = [], {}
        for i, item in enumerate(rd.array_of_tables(value, key)):
            ik = f"{key}[{i}]"
            t = read_table(table(key), item, ik)
            t.setdefault("name", f"{key}{i + 1}")
            if t["name"] in seen:
                raise CaseError(f"{ik}.name", f"{show_value(t['name'])} is already used by "
                                              f"{seen[t['name']]}; give each {key} its own name")
            seen[t["name"]] = f"{key}[{i}]"
            out.append(t)
        return out

    def _cuts(self, value, key: str) -> list:
        items = self._named_items(value, key)
        for i, t in enumerate(items):
            if t["from"] == t["to"]:
                raise CaseError(f"{key}[{i}].to", "the cut has zero length (from and to are "
                                                  "the same point)")
        return items

    def _dislocations(self, value, key: str) -> list:
        items = self._named_items(value, key)
        for i, t in enumerate(items):
            ik = f"{key}[{i}]"
            given = [k for k in ("positions", "spacing", "relaxation") if k in t]
            if not given:
                raise rd.missing(f"{ik}.spacing", "one of positions (a list of lengths), "
                                                  "spacing (a length) or relaxation (a "
                                                  "fraction 0..1)")
            if len(given) > 1:
                raise CaseError(f"{ik}.{given[1]}", f"give only one of positions, spacing and "
                                                    f"relaxation (also set: {given[0]})")
            if "offset" in t and "positions" in t:
                raise CaseError(f"{ik}.offset", "only with spacing or relaxation; positions "
                                                "are absolute")
        return items
