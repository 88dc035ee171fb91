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

import re
from pathlib import Path

from mesastrain.case import readers as rd
from mesastrain.case.checks import CrossChecks
from mesastrain.case.files import MAX_FILE_BYTES, MAX_NESTING, check_nesting, read_toml
from mesastrain.case.keys import read_table
from mesastrain.case.names import region_names
from mesastrain.case.renames import modernise
from mesastrain.case.schema import (
    ABOUT,
    MATERIAL,
    PATTERN,
    SHAPE_KEYS,
    SHAPE_REQUIRES,
    TITLE,
    TOP_KEYS,
    default_order,
    table,
)
from mesastrain.case.types import TABLE_TYPES, Case, UserMaterial
from mesastrain.case.written import written_quantities
from mesastrain.errors import CaseError, MaterialError, OrientationError
from mesastrain.physics.crystal import (
    INDEX_SYSTEMS,
    direction_vector,
    miscut_rotation,
    plane_normal,
    sample_frame,
)
from mesastrain.physics.elastic import STIFFNESS_KEYS
from mesastrain.physics.materials import builtin_materials, get_material, is_alloy
from mesastrain.units import safe_name, show_value

__all__ = ["MAX_FILE_BYTES", "MAX_NESTING", "check_nesting", "load_case", "parse_case",
           "read_toml"]


def load_case(path) -> Case:
    """Read and validate a case file.

    Parameters
    ----------
    path : str or os.PathLike
        The TOML case file: a regular file of at most :data:`MAX_FILE_BYTES`.

    Returns
    -------
    Case
        With ``source`` set to ``str(path)`` and, when the file has no
        ``title``, the file stem as title.

    Raises
    ------
    CaseError
        Carrying the file name: see :func:`read_toml`, and any invalid
        content (see :func:`parse_case`).
    """
    return parse_case(read_toml(path), str(path))


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
        try:
            return _Parser(source).run(data)
        except (OverflowError, RecursionError) as err:  # a net: the readers bound every value
            raise CaseError("", f"a value is too large to handle ({type(err).__name__}: "
                                f"{' '.join(str(err).split())}); give values of a sane size"
                            ) from None
    except CaseError as err:
        if source is not None and err.source is None:
            raise err.with_source(source) from None
        raise


def _build(name: str, t: dict):
    """The dataclass of table ``name`` from its read keys; defaults for the others."""
    tab = table(name)
    return TABLE_TYPES[name](**{k.field: t.get(k.name, k.default) for k in tab.keys})


def _material_error(key: str, table: dict, message: str) -> CaseError:
    """A MaterialError of ``material.NAME`` as a CaseError naming the offending key.

    The physics messages start with ``material.NAME.KEY`` or ``material.NAME:``; for a
    stiffness that is not positive definite the key is the last constant the failing
    condition names (``need C44 > 0 ... (C44 = -1)``).
    """
    m = re.match(re.escape(key) + r"(\.\w+)?:?\s*(.*)", message)
    if m is None:
        return CaseError(key, message)
    sub, text = m.group(1), m.group(2)
    if sub:
        return CaseError(key + sub, text)
    system = table.get("system")
    names = STIFFNESS_KEYS.get(system, ())
    missing = re.search(r"missing (\w+)", text)
    named = re.findall(r"\b(" + "|".join(map(re.escape, names)) + r") = ", text) if names else []
    if missing and missing.group(1) in names:
        return CaseError(f"{key}.{missing.group(1)}", text)
    if named:
        return CaseError(f"{key}.{named[-1]}", text)
    if system == "anisotropic" and "stiffness" in text:
        return CaseError(f"{key}.C", text)
    return CaseError(key, text)


# --------------------------------------------------------------------------
# the parser
# --------------------------------------------------------------------------
class _Parser:
    """One validation run: phase 1 reads each table on its own, phase 2 checks across tables."""

    def __init__(self, source: str | None):
        self.source = source
        self.materials = {}
        self.notes = ()
        self.data = {}

    # ---- phase 1: each top-level key on its own, in file order -----------
    def run(self, data) -> Case:
        if not isinstance(data, dict):
            raise CaseError("", f"expected a table of case settings, got {show_value(data)}")
        check_nesting(data)
        data, self.notes = modernise(data)
        self.data = data
        special = {TITLE.name: TITLE.kind.read, ABOUT.name: ABOUT.kind.read,
                   "substrate": self._substrate,
                   "layer": self._layers, "pattern": self._pattern, "cut": self._cuts,
                   "dislocation": self._dislocations, "liner": self._liners}
        for name in data:
            if name not in TOP_KEYS:
                raise rd.unknown_key(name, name, TOP_KEYS)
        # the case's own materials first: layers and substrate may name them anywhere
        self.materials = self._materials(data.get(MATERIAL.name, {}), MATERIAL.name)
        with rd.user_materials(self.materials):
            return self._run(data, special)

    def _run(self, data: dict, special: dict) -> Case:
        got = {}
        for name, value in data.items():
            if name == MATERIAL.name:
                continue
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
        checks = CrossChecks(got["substrate"], got["layer"], pattern, mesh, got.get("liner", []))
        if pattern["shape"] == "rectangle":
            pattern.setdefault("length", pattern["width"])
        if pattern["shape"] not in ("none", "mesh"):
            pattern.setdefault("etch_depth", checks.stack())
        mesh.setdefault("order", default_order(pattern))
        self._thermal_history(got)
        cross = {"layer": checks.layer_orientations, "pattern": checks.pattern_fits,
                 "mesh": checks.mesh_fits,
                 "thermal": lambda: checks.temperatures(got["thermal"]),
                 "probe": lambda: checks.probes_inside(got["probe"]),
                 "cut": lambda: checks.cuts_inside(got["cut"]),
                 "dislocation": lambda: checks.dislocations(got["dislocation"]),
                 "liner": lambda: checks.liners_fit(got["liner"])}
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
        return Case(title=title, about=got.get(ABOUT.name, ABOUT.default),
                    source=self.source, materials=tuple(self.materials.values()),
                    notes=tuple(str(n) for n in self.notes),
                    written=written_quantities(self.data), **parts)

    # ---- the case's own materials ----------------------------------------
    @staticmethod
    def _materials(value, key: str) -> dict:
        """``[material.NAME]`` tables -> {NAME: UserMaterial}, each checked in full."""
        if not isinstance(value, dict):
            raise CaseError(key, f"expected tables written as [material.NAME], got "
                                 f"{show_value(value)}")
        out = {}
        builtin = set(builtin_materials())
        for name, t in value.items():
            mk = f"{key}.{name}"
            if not isinstance(t, dict):
                raise CaseError(mk, f"expected a table [material.{name}] of constants, got "
                                    f"{show_value(t)}")
            for k in t:
                if k not in MATERIAL.names:
                    raise rd.unknown_key(f"{mk}.{k}", k, MATERIAL.names)
            flag = t.get("replace_builtin", False)
            rd.boolean(flag, f"{mk}.replace_builtin")
            if (name in builtin or is_alloy(name)) and not flag:
                raise CaseError(mk, f"shadows the built-in material {name!r}; choose another "
                                    f"name, or set replace_builtin = true if the replacement "
                                    f"is meant")
            um = UserMaterial.from_table(name, t)
            try:
                um.material()
            except MaterialError as err:
                raise _material_error(mk, t, str(err)) from None
            out[name] = um
        return out

    def _thermal_history(self, got: dict) -> None:
        """Per-layer deposition temperatures against [thermal]; growth_temperature when needed."""
        thermal = got.get("thermal")
        films = ([(f"layer[{i}]", t) for i, t in enumerate(got["layer"])]
                 + [(f"liner[{i}]", t) for i, t in enumerate(got.get("liner", ()))])
        for key, t in films:
            if "deposition_temperature" in t and thermal is None:
                raise CaseError(f"{key}.deposition_temperature",
                                'needs a [thermal] table with final_temperature, e.g. '
                                'final_temperature = "20 C"')
        if thermal is not None and "growth_temperature" not in thermal:
            lacking = [key for key, t in films if "deposition_temperature" not in t]
            if lacking:
                raise rd.missing("thermal.growth_temperature",
                                 f'the growth temperature ({lacking[0]} has no '
                                 f'deposition_temperature of its own), e.g. '
                                 f'growth_temperature = "700 C"')

    # ---- materials and orientation shared by substrate and layers -------
    def _resolve_material(self, t: dict, key: str) -> dict:
        """Check x against the material; return canonical name, index system, c/a, lattice."""
        name, x = t["material"], t.get("composition")
        if name in self.materials:
            if x is not None:
                raise CaseError(f"{key}.composition", f"{name} is not an alloy: do not give "
                                                      f"composition")
            mat = self.materials[name].material()
            return {"material": name, "system": INDEX_SYSTEMS[mat.system],
                    "c_over_a": mat.c_over_a, "label": mat.label,
                    "has_lattice": mat.has_lattice}
        try:
            mat = get_material(name, x)
        except MaterialError as err:
            if is_alloy(name) and x is None:
                raise CaseError(f"{key}.composition", f"required key is missing; {err}"
                                ) from None
            raise CaseError(f"{key}.composition" if x is not None else f"{key}.material",
                            str(err)) from None
        return {"material": mat.name, "system": INDEX_SYSTEMS[mat.system],
                "c_over_a": mat.c_over_a, "label": mat.label, "has_lattice": mat.has_lattice}

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
        t["grows_on"] = t["has_lattice"]    # what a first layer may grow on
        return t

    def _layers(self, value, key: str) -> list:
        out = []
        for i, item in enumerate(rd.array_of_tables(value, key)):
            lk = f"{key}[{i}]"
            t = read_table(table(key), item, lk)
            written = t["material"]
            t.update(self._resolve_material(t, lk))
            t["written_material"] = written
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
            self._epitaxy(t, lk, out[-1] if out else None)
            out.append(t)
        names = region_names(key, [(t.get("name"), t.pop("written_material")) for t in out])
        for t, name in zip(out, names):
            t["name"] = name
        return out

    def _epitaxy(self, t: dict, key: str, below: dict | None) -> None:
        """``epitaxial``: default from the lattice; an epitaxial layer needs a lattice below."""
        t["grows_on"] = t.get("epitaxial", t["has_lattice"])   # None in the Layer: default
        if t.get("epitaxial") and not t["has_lattice"]:
            raise CaseError(f"{key}.epitaxial", f"true needs a lattice constant, and "
                                                f"{t['label']} has none (a deposited film); "
                                                f"remove it or set epitaxial = false")
        if not t["grows_on"] or t.get("relaxed", 0.0) >= 1.0:
            return
        if below is not None and not below["grows_on"]:
            raise CaseError(f"{key}.epitaxial", f"the layer below ({below['label']}) is a "
                                                f"deposited film with no lattice to grow on; "
                                                f"set epitaxial = false or relaxed = 1")

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
        files = {}      # names become file and field names: refuse two that become one
        for i, t in enumerate(out):
            stem = safe_name(t["name"], default=key).lower()
            if stem in files:
                j = files[stem]
                raise CaseError(f"{key}[{i}].name",
                                f"{show_value(t['name'])} and {show_value(out[j]['name'])} "
                                f"({key}[{j}]) both become the file name \"{stem}\" (characters "
                                f"other than letters, digits, _ . - become _, letter case is "
                                f"ignored); give names that differ in letters or digits")
            files[stem] = i
        return out

    def _liners(self, value, key: str) -> list:
        """``[[liner]]``: materials resolved (no alloy fraction), named as
        :func:`mesastrain.case.names.region_names` says ("SiN liner", ...)."""
        items, written = [], []
        for i, item in enumerate(rd.array_of_tables(value, key)):
            t = read_table(table(key), item, f"{key}[{i}]")
            written.append(t["material"])
            t["material"] = self._resolve_material(t, f"{key}[{i}]")["material"]
            items.append(t)
        names = region_names(key, [(t.get("name"), w) for t, w in zip(items, written)])
        for t, name in zip(items, names):
            t["name"] = name
        return items

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
            given = [k for k in ("positions", "spacing", "relaxed") if k in t]
            if not given:
                raise rd.missing(f"{ik}.spacing", "one of positions (a list of lengths), "
                                                  "spacing (a length) or relaxed (a "
                                                  "fraction 0..1)")
            if len(given) > 1:
                raise CaseError(f"{ik}.{given[1]}", f"give only one of positions, spacing and "
                                                    f"relaxed (also set: {given[0]})")
            if "offset" in t and "positions" in t:
                raise CaseError(f"{ik}.offset", "only with spacing or relaxed; positions "
                                                "are absolute")
        return items
