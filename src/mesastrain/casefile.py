"""Case files: TOML in, validated frozen dataclasses out.

A case file describes one stack (substrate plus layers, bottom to top), its
crystal orientation, an optional etched pattern, optional growth/use
temperatures, mesh and solver settings, probe points, line cuts and output
switches. :func:`load_case` reads a file, :func:`parse_case` validates a dict
already read from TOML. Validation happens once, fully, here; nothing
downstream needs to re-check the input. No numerics beyond unit conversion and
the geometric checks below.

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

import difflib
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .crystal import direction_vector, plane_normal, sample_frame
from .errors import CaseError, MaterialError, OrientationError
from .materials import get_material, is_alloy, known_materials
from .units import is_number, parse_length, parse_temperature, show_value

__all__ = [
    "Case", "Cut", "Layer", "MeshSettings", "OutputSettings", "Pattern", "Probe",
    "SolverSettings", "Substrate", "Thermal", "load_case", "parse_case",
    "PATTERN_SHAPES", "PLANNED_SHAPES", "SOLVER_METHODS",
]

#: Pattern shapes that can be modelled now.
PATTERN_SHAPES = ("none", "rectangle")
#: Pattern shapes that are recognised but not implemented yet.
PLANNED_SHAPES = ("stripe", "disk", "polygon", "mesh")
#: Linear-solver choices.
SOLVER_METHODS = ("auto", "direct", "iterative")

#: Relative tolerance of the inside-the-body test for probes and cuts.
INSIDE_RTOL = 1e-9

_TOP_KEYS = ("title", "substrate", "layer", "pattern", "thermal", "mesh", "solver", "probe",
             "cut", "output")
_SUBSTRATE_KEYS = ("material", "x", "thickness", "normal", "x_axis")
_LAYER_KEYS = ("material", "x", "thickness", "relaxed", "normal", "x_axis")
_PATTERN_KEYS = ("shape", "width", "length", "etch_depth", "margin")
_THERMAL_KEYS = ("growth_temperature", "final_temperature")
_MESH_KEYS = ("size", "edge_size", "order", "growth", "substrate_depth")
_SOLVER_KEYS = ("method", "tolerance", "max_iterations")
_PROBE_KEYS = ("at", "name")
_CUT_KEYS = ("from", "to", "points", "name")
_OUTPUT_KEYS = ("vtu", "crystal_frame")


# --------------------------------------------------------------------------
# dataclasses
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Substrate:
    """The wafer.

    Attributes
    ----------
    material : str
        Name as in :func:`mesastrain.materials.known_materials`.
    x : float or None
        Alloy fraction of the second member; None for non-alloys.
    thickness : float
        Wafer thickness, nm.
    normal : tuple of int
        Surface plane (hkl) or (hkil); sample +z.
    x_axis : tuple of int
        Crystal direction [uvw] or [UVTW] along sample +x.
    """

    material: str
    x: float | None
    thickness: float
    normal: tuple
    x_axis: tuple


@dataclass(frozen=True)
class Layer:
    """One grown layer.

    Attributes
    ----------
    material, x
        As for :class:`Substrate`.
    thickness : float
        nm.
    relaxed : float
        0 = pseudomorphic to the layer below, 1 = fully relaxed.
    normal, x_axis : tuple of int
        The layer's crystal orientation. After :func:`parse_case` these are
        always filled: copied from the substrate when the file omits them
        (allowed only when the crystal systems agree).
    """

    material: str
    x: float | None
    thickness: float
    relaxed: float
    normal: tuple | None
    x_axis: tuple | None


@dataclass(frozen=True)
class Pattern:
    """The etched feature, centred on x = y = 0.

    Attributes
    ----------
    shape : str
        ``"none"`` (blanket film) or ``"rectangle"``.
    width, length : float or None
        Feature size along sample x and y, nm (None for ``"none"``).
    etch_depth : float or None
        Depth of the etch measured down from the top surface, nm.
    margin : float or None
        Lateral width of etched-floor substrate modelled around the feature,
        nm; None lets the mesher choose.
    """

    shape: str
    width: float | None
    length: float | None
    etch_depth: float | None
    margin: float | None

    @property
    def patterned(self) -> bool:
        """True when the stack is etched into a feature."""
        return self.shape != "none"


@dataclass(frozen=True)
class Thermal:
    """Growth and final (use) temperatures, kelvin."""

    growth_temperature: float
    final_temperature: float


@dataclass(frozen=True)
class MeshSettings:
    """Mesh requests.

    Attributes
    ----------
    size : float or None
        Target element size, nm; None lets the mesher choose.
    edge_size : float or None
        Element size at edges and interfaces, nm.
    order : int
        Polynomial order of the elements, 1 or 2.
    growth : float
        Geometric grading ratio between neighbouring elements, in (1, 3].
    substrate_depth : float or None
        Modelled depth of substrate below z = 0, nm; None lets the mesher choose.
    """

    size: float | None
    edge_size: float | None
    order: int
    growth: float
    substrate_depth: float | None


@dataclass(frozen=True)
class SolverSettings:
    """Linear solver choice: method, relative tolerance, iteration cap."""

    method: str
    tolerance: float
    max_iterations: int


@dataclass(frozen=True)
class Probe:
    """A point where tensors are reported; ``at`` = (x, y, z) in nm."""

    name: str
    at: tuple


@dataclass(frozen=True)
class Cut:
    """A straight line cut from ``start`` to ``end`` (nm) sampled at ``points`` points."""

    name: str
    start: tuple
    end: tuple
    points: int


@dataclass(frozen=True)
class OutputSettings:
    """Output switches: write fields.vtu; also report tensors in crystal axes."""

    vtu: bool
    crystal_frame: bool


@dataclass(frozen=True)
class Case:
    """A validated case.

    Attributes
    ----------
    title : str
    substrate : Substrate
    layers : tuple of Layer
        Bottom to top; at least one.
    pattern : Pattern
    thermal : Thermal or None
    mesh : MeshSettings
    solver : SolverSettings
    probes : tuple of Probe
    cuts : tuple of Cut
    output : OutputSettings
    source : str or None
        The file the case was read from.
    """

    title: str
    substrate: Substrate
    layers: tuple
    pattern: Pattern
    thermal: Thermal | None
    mesh: MeshSettings
    solver: SolverSettings
    probes: tuple
    cuts: tuple
    output: OutputSettings
    source: str | None = None

    @property
    def stack_thickness(self) -> float:
        """Total thickness of the layers, nm."""
        return math.fsum(layer.thickness for layer in self.layers)

    @property
    def top(self) -> float:
        """z of the top surface, nm (equal to :attr:`stack_thickness`)."""
        return self.stack_thickness

    @property
    def interfaces(self) -> tuple:
        """z of every layer boundary, nm: (0.0, top of layer 0, ..., top)."""
        z = [0.0]
        for layer in self.layers:
            z.append(z[-1] + layer.thickness)
        return tuple(z)

    def to_dict(self) -> dict:
        """JSON-ready echo of the resolved inputs.

        Uses the case-file keys, so ``parse_case(case.to_dict())`` rebuilds an
        equal case (apart from ``source``). Lengths are numbers in nm,
        temperatures strings in kelvin (``"973.15 K"``, since a bare number
        would be read as degrees Celsius); unset optional values are left out.

        Returns
        -------
        dict
        """
        def drop_none(d):
            return {k: v for k, v in d.items() if v is not None}

        s = self.substrate
        out = {
            "title": self.title,
            "substrate": drop_none({"material": s.material, "x": s.x, "thickness": s.thickness,
                                    "normal": list(s.normal), "x_axis": list(s.x_axis)}),
            "layer": [drop_none({"material": la.material, "x": la.x, "thickness": la.thickness,
                                 "relaxed": la.relaxed,
                                 "normal": None if la.normal is None else list(la.normal),
                                 "x_axis": None if la.x_axis is None else list(la.x_axis)})
                      for la in self.layers],
            "pattern": drop_none({"shape": self.pattern.shape, "width": self.pattern.width,
                                  "length": self.pattern.length,
                                  "etch_depth": self.pattern.etch_depth,
                                  "margin": self.pattern.margin}),
        }
        if self.thermal is not None:
            out["thermal"] = {"growth_temperature": f"{self.thermal.growth_temperature!r} K",
                              "final_temperature": f"{self.thermal.final_temperature!r} K"}
        m = self.mesh
        out["mesh"] = drop_none({"size": m.size, "edge_size": m.edge_size, "order": m.order,
                                 "growth": m.growth, "substrate_depth": m.substrate_depth})
        out["solver"] = {"method": self.solver.method, "tolerance": self.solver.tolerance,
                         "max_iterations": self.solver.max_iterations}
        if self.probes:
            out["probe"] = [{"name": p.name, "at": list(p.at)} for p in self.probes]
        if self.cuts:
            out["cut"] = [{"name": c.name, "from": list(c.start), "to": list(c.end),
                           "points": c.points} for c in self.cuts]
        out["output"] = {"vtu": self.output.vtu, "crystal_frame": self.output.crystal_frame}
        return out


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


# --------------------------------------------------------------------------
# small value readers: (value, key) -> parsed value, raising CaseError
# --------------------------------------------------------------------------
def _unknown_key(key: str, name: str, allowed) -> CaseError:
    close = difflib.get_close_matches(name, allowed, n=1)
    hint = f'did you mean "{close[0]}"? ' if close else ""
    return CaseError(key, f"unknown key; {hint}allowed: {', '.join(allowed)}")


def _read_table(value, key: str, allowed, readers: dict, table_hint: str) -> dict:
    """Check a table's keys in file order and read each with its reader."""
    if not isinstance(value, dict):
        raise CaseError(key, f"expected a table {table_hint}, got {show_value(value)}")
    out = {}
    for name, v in value.items():
        sub = f"{key}.{name}"
        if name not in allowed:
            raise _unknown_key(sub, name, allowed)
        out[name] = readers[name](v, sub)
    return out


def _array_of_tables(value, key: str) -> list:
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise CaseError(key, f"expected an array of tables written as [[{key}]] (one per "
                             f"{key}), got {show_value(value)}")
    return value


def _missing(key: str, what: str) -> CaseError:
    return CaseError(key, f"required key is missing; give {what}")


def _positive_length(value, key: str) -> float:
    v = parse_length(value, key)
    if not v > 0:
        raise CaseError(key, f"must be > 0, got {show_value(value)} ({v:.10g} nm)")
    return v


def _string(value, key: str) -> str:
    if not isinstance(value, str):
        raise CaseError(key, f"expected a string, got {show_value(value)}")
    return value


def _bool(value, key: str) -> bool:
    if not isinstance(value, bool):
        raise CaseError(key, f"expected true or false, got {show_value(value)}")
    return value


def _fraction(value, key: str) -> float:
    if not is_number(value) or not 0.0 <= value <= 1.0:
        raise CaseError(key, f"expected a number from 0 to 1, got {show_value(value)}")
    return float(value)


def _material_name(value, key: str) -> str:
    name = _string(value, key)
    known = list(known_materials())
    if name not in known and not is_alloy(name):  # is_alloy also knows formula spellings
        lower = {k.lower(): k for k in known}
        close = ([lower[name.lower()]] if name.lower() in lower
                 else difflib.get_close_matches(name, known, n=1))
        hint = f'did you mean "{close[0]}"? ' if close else ""
        raise CaseError(key, f"unknown material {show_value(name)}; {hint}"
                             f"known: {', '.join(known)}")
    return name


def _indices(value, key: str) -> tuple:
    if (not isinstance(value, list) or len(value) not in (3, 4)
            or not all(is_number(v) for v in value)):
        raise CaseError(key, f"expected Miller indices [h, k, l] or [h, k, i, l] (integers), "
                             f"got {show_value(value)}")
    if not all(isinstance(v, int) for v in value):
        raise CaseError(key, f"Miller indices must be integers, got {show_value(value)}")
    if not any(value):
        raise CaseError(key, f"Miller indices must not be all zero, got {show_value(value)}")
    return tuple(value)


def _point(value, key: str) -> tuple:
    if not isinstance(value, list) or len(value) != 3:
        raise CaseError(key, f"expected a point [x, y, z] of three lengths, got "
                             f"{show_value(value)}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


def _choice(allowed):
    def read(value, key):
        if not isinstance(value, str) or value not in allowed:
            choices = ", ".join(f'"{a}"' for a in allowed)
            raise CaseError(key, f"{show_value(value)} is not allowed; allowed: {choices}")
        return value
    return read


def _int_at_least(low: int):
    def read(value, key):
        if not isinstance(value, int) or isinstance(value, bool) or value < low:
            raise CaseError(key, f"expected an integer >= {low}, got {show_value(value)}")
        return value
    return read


def _mesh_order(value, key: str) -> int:
    if not isinstance(value, int) or isinstance(value, bool) or value not in (1, 2):
        raise CaseError(key, f"expected 1 (linear) or 2 (quadratic elements), got "
                             f"{show_value(value)}")
    return value


def _growth(value, key: str) -> float:
    if not is_number(value) or not 1.0 < value <= 3.0:
        raise CaseError(key, f"expected a grading ratio > 1 and <= 3, got {show_value(value)}")
    return float(value)


def _tolerance(value, key: str) -> float:
    if not is_number(value) or not 0.0 < value <= 1e-2:
        raise CaseError(key, f"expected a relative tolerance > 0 and <= 1e-2, got "
                             f"{show_value(value)}")
    return float(value)


def _pattern_shape(value, key: str) -> str:
    allowed = ", ".join(f'"{s}"' for s in PATTERN_SHAPES)
    if isinstance(value, str) and value in PLANNED_SHAPES:
        raise CaseError(key, f"{show_value(value)} is not supported yet; allowed: {allowed}")
    if not isinstance(value, str) or value not in PATTERN_SHAPES:
        close = (difflib.get_close_matches(value, PATTERN_SHAPES + PLANNED_SHAPES, n=1)
                 if isinstance(value, str) else [])
        hint = f'did you mean "{close[0]}"? ' if close else ""
        raise CaseError(key, f"{show_value(value)} is not a pattern shape; {hint}"
                             f"allowed: {allowed}")
    return value


# --------------------------------------------------------------------------
# the parser
# --------------------------------------------------------------------------
class _Parser:
    """One validation run. Holds the partial results between the two phases."""

    def __init__(self, source: str | None):
        self.source = source

    # ---- phase 1: each top-level key on its own, in file order -----------
    def run(self, data) -> Case:
        if not isinstance(data, dict):
            raise CaseError("", f"expected a table of case settings, got {show_value(data)}")
        readers = {"title": _string, "substrate": self._substrate, "layer": self._layers,
                   "pattern": self._pattern, "thermal": self._thermal, "mesh": self._mesh,
                   "solver": self._solver, "probe": self._probes, "cut": self._cuts,
                   "output": self._output}
        got = {}
        for name, value in data.items():
            if name not in _TOP_KEYS:
                raise _unknown_key(name, name, _TOP_KEYS)
            got[name] = readers[name](value, name)
        if "substrate" not in got:
            raise _missing("substrate", "a [substrate] table with material, thickness, normal "
                                        "and x_axis")
        if "layer" not in got or not got["layer"]:
            raise CaseError("layer", "at least one [[layer]] is required (bottom to top)")

        self.substrate = got["substrate"]
        self.layers = got["layer"]
        self.pattern = got.get("pattern", {"shape": "none"})
        self.mesh = got.get("mesh", {})
        self.probes = got.get("probe", [])
        self.cuts = got.get("cut", [])

        # ---- phase 2: checks across tables, in file order of the table ---
        if self.pattern["shape"] != "none":
            self.pattern.setdefault("length", self.pattern["width"])
            self.pattern.setdefault("etch_depth", self._stack())
        cross = {"layer": self._check_layer_orientations, "pattern": self._check_pattern,
                 "mesh": self._check_mesh, "probe": self._check_probes, "cut": self._check_cuts}
        for name in got:
            if name in cross:
                cross[name]()

        if self.source is not None:
            default_title = Path(self.source).stem or "untitled"
        else:
            default_title = "untitled"
        m = self.mesh
        solver = got.get("solver", {})
        output = got.get("output", {})
        return Case(
            title=got.get("title", default_title),
            substrate=Substrate(**{k: self.substrate[k] for k in _SUBSTRATE_KEYS}),
            layers=tuple(Layer(**{k: la[k] for k in _LAYER_KEYS}) for la in self.layers),
            pattern=Pattern(**{k: self.pattern.get(k) for k in _PATTERN_KEYS}),
            thermal=got.get("thermal"),
            mesh=MeshSettings(size=m.get("size"), edge_size=m.get("edge_size"),
                              order=m.get("order", 2), growth=m.get("growth", 1.3),
                              substrate_depth=m.get("substrate_depth")),
            solver=SolverSettings(method=solver.get("method", "auto"),
                                  tolerance=solver.get("tolerance", 1e-8),
                                  max_iterations=solver.get("max_iterations", 2000)),
            probes=tuple(Probe(name=p["name"], at=p["at"]) for p in self.probes),
            cuts=tuple(Cut(name=c["name"], start=c["from"], end=c["to"], points=c["points"])
                       for c in self.cuts),
            output=OutputSettings(vtu=output.get("vtu", True),
                                  crystal_frame=output.get("crystal_frame", True)),
            source=self.source,
        )

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
        t = _read_table(value, key, _SUBSTRATE_KEYS,
                        {"material": _material_name, "x": _fraction,
                         "thickness": _positive_length, "normal": _indices, "x_axis": _indices},
                        "[substrate]")
        for name, what in (("material", "the substrate material"),
                           ("thickness", 'the wafer thickness, e.g. "0.5 mm"'),
                           ("normal", "the surface plane as Miller indices, e.g. [0, 0, 1]"),
                           ("x_axis", "the crystal direction along sample x, e.g. [1, 1, 0]")):
            if name not in t:
                raise _missing(f"{key}.{name}", what)
        t.update(self._resolve_material(t, key))
        t.setdefault("x", None)
        self._check_orientation(t, key, t["system"], t["c_over_a"])
        return t

    def _layers(self, value, key: str) -> list:
        out = []
        for i, item in enumerate(_array_of_tables(value, key)):
            lk = f"{key}[{i}]"
            t = _read_table(item, lk, _LAYER_KEYS,
                            {"material": _material_name, "x": _fraction,
                             "thickness": _positive_length, "relaxed": _fraction,
                             "normal": _indices, "x_axis": _indices}, "[[layer]]")
            for name, what in (("material", "the layer material"),
                               ("thickness", 'the layer thickness, e.g. "40 nm"')):
                if name not in t:
                    raise _missing(f"{lk}.{name}", what)
            t.update(self._resolve_material(t, lk))
            t.setdefault("x", None)
            t.setdefault("relaxed", 0.0)
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
        t = _read_table(value, key, _PATTERN_KEYS,
                        {"shape": _pattern_shape, "width": _positive_length,
                         "length": _positive_length, "etch_depth": _positive_length,
                         "margin": _positive_length}, "[pattern]")
        if "shape" not in t:
            raise _missing(f"{key}.shape", 'the pattern shape; allowed: "none", "rectangle"')
        if t["shape"] == "none":
            for name in ("width", "length", "etch_depth", "margin"):
                if name in t:
                    raise CaseError(f"{key}.{name}", 'only for patterned shapes; remove it or '
                                                     'set shape = "rectangle"')
        elif "width" not in t:
            raise _missing(f"{key}.width", f'the {t["shape"]} width along sample x, '
                                           f'e.g. "2 um"')
        return t

    def _thermal(self, value, key: str) -> Thermal:
        t = _read_table(value, key, _THERMAL_KEYS,
                        {k: parse_temperature for k in _THERMAL_KEYS}, "[thermal]")
        for name in _THERMAL_KEYS:
            if name not in t:
                raise _missing(f"{key}.{name}", 'both temperatures, e.g. growth_temperature = '
                                                '"700 C", final_temperature = "20 C"')
        return Thermal(**t)

    def _mesh(self, value, key: str) -> dict:
        return _read_table(value, key, _MESH_KEYS,
                           {"size": _positive_length, "edge_size": _positive_length,
                            "order": _mesh_order, "growth": _growth,
                            "substrate_depth": _positive_length}, "[mesh]")

    def _solver(self, value, key: str) -> dict:
        return _read_table(value, key, _SOLVER_KEYS,
                           {"method": _choice(SOLVER_METHODS), "tolerance": _tolerance,
                            "max_iterations": _int_at_least(1)}, "[solver]")

    def _output(self, value, key: str) -> dict:
        return _read_table(value, key, _OUTPUT_KEYS, {"vtu": _bool, "crystal_frame": _bool},
                           "[output]")

    def _named_items(self, value, key: str, allowed, readers, required) -> list:
        out, seen = [], {}
        items = _array_of_tables(value, key)
        for i, item in enumerate(items):
            ik = f"{key}[{i}]"
            t = _read_table(item, ik, allowed, readers, f"[[{key}]]")
            for name, what in required:
                if name not in t:
                    raise _missing(f"{ik}.{name}", what)
            t.setdefault("name", f"{key}{i + 1}")
            if t["name"] in seen:
                raise CaseError(f"{ik}.name", f"{show_value(t['name'])} is already used by "
                                              f"{seen[t['name']]}; give each {key} its own name")
            seen[t["name"]] = f"{key}[{i}]"
            out.append(t)
        return out

    def _probes(self, value, key: str) -> list:
        return self._named_items(value, key, _PROBE_KEYS, {"at": _point, "name": _string},
                                 (("at", "the point [x, y, z], e.g. [0, 0, \"20 nm\"]"),))

    def _cuts(self, value, key: str) -> list:
        items = self._named_items(value, key, _CUT_KEYS,
                                  {"from": _point, "to": _point, "points": _int_at_least(2),
                                   "name": _string},
                                  (("from", "the start point [x, y, z]"),
                                   ("to", "the end point [x, y, z]")))
        for i, t in enumerate(items):
            t.setdefault("points", 101)
            if t["from"] == t["to"]:
                raise CaseError(f"{key}[{i}].to", "the cut has zero length (from and to are "
                                                  "the same point)")
        return items

    # ---- phase 2 ---------------------------------------------------------
    def _check_layer_orientations(self) -> None:
        s = self.substrate
        for i, t in enumerate(self.layers):
            if t["normal"] is not None:
                continue
            if t["system"] != s["system"]:
                raise CaseError(f"layer[{i}].normal",
                                f"required key is missing; {t['label']} is {t['system']} but "
                                f"the substrate {s['label']} is {s['system']}, so this layer "
                                f"needs its own normal and x_axis")
            t["normal"], t["x_axis"] = s["normal"], s["x_axis"]

    def _stack(self) -> float:
        return math.fsum(t["thickness"] for t in self.layers)

    def _check_pattern(self) -> None:
        p = self.pattern
        if p["shape"] == "none":
            return
        limit = self._stack() + self.substrate["thickness"]
        if p["etch_depth"] > limit:
            raise CaseError("pattern.etch_depth",
                            f"{p['etch_depth']:.10g} nm is deeper than the layers plus the "
                            f"substrate ({limit:.10g} nm); give at most {limit:.10g} nm")

    def _check_mesh(self) -> None:
        depth = self.mesh.get("substrate_depth")
        if depth is None:
            return
        thickness = self.substrate["thickness"]
        if depth > thickness:
            raise CaseError("mesh.substrate_depth",
                            f"{depth:.10g} nm is more than the substrate thickness "
                            f"({thickness:.10g} nm); give at most {thickness:.10g} nm")
        p = self.pattern
        if p["shape"] != "none" and p["etch_depth"] >= self._stack() + depth:
            raise CaseError("mesh.substrate_depth",
                            f"{depth:.10g} nm does not reach below the etch floor at z = "
                            f"{self._stack() - p['etch_depth']:.10g} nm; model a deeper substrate "
                            f"or etch less deep")

    def _inside(self, point: tuple, key: str) -> None:
        """Raise unless ``point`` lies in the modelled body (surface included).

        Each bound is compared with a relative tolerance of INSIDE_RTOL of
        that bound (of the layer stack for the etch floor).
        """
        x, y, z = point
        rel = 1.0 + INSIDE_RTOL
        top = self._stack()
        depth = self.mesh.get("substrate_depth") or self.substrate["thickness"]
        p = self.pattern
        where = f"({x:.10g}, {y:.10g}, {z:.10g}) nm"
        span = f"allowed: {-depth:.10g} <= z <= {top:.10g}"
        if z > top * rel:
            raise CaseError(key, f"{where} is above the top surface at z = {top:.10g} nm; {span}")
        if z < -depth * rel:
            raise CaseError(key, f"{where} is below the modelled substrate bottom at z = "
                                 f"{-depth:.10g} nm; {span}")
        if p["shape"] == "none":
            return
        half_w, half_l = p["width"] / 2.0, p["length"] / 2.0
        floor = top - p["etch_depth"]
        if z > floor + INSIDE_RTOL * max(top, p["etch_depth"]):
            if abs(x) > half_w * rel or abs(y) > half_l * rel:
                raise CaseError(key, f"{where} is outside the {p['shape']} (|x| <= "
                                     f"{half_w:.10g}, |y| <= {half_l:.10g} nm above the etch "
                                     f"floor at z = {floor:.10g} nm)")
        elif p.get("margin") is not None:
            mx, my = half_w + p["margin"], half_l + p["margin"]
            if abs(x) > mx * rel or abs(y) > my * rel:
                raise CaseError(key, f"{where} is outside the modelled region (|x| <= "
                                     f"{mx:.10g}, |y| <= {my:.10g} nm: feature plus margin)")

    def _check_probes(self) -> None:
        for i, t in enumerate(self.probes):
            self._inside(t["at"], f"probe[{i}].at")

    def _check_cuts(self) -> None:
        p = self.pattern
        for i, t in enumerate(self.cuts):
            self._inside(t["from"], f"cut[{i}].from")
            self._inside(t["to"], f"cut[{i}].to")
            if p["shape"] == "none":
                continue
            # Both ends inside, but a cut from the feature down to the etched
            # floor beside it would pass through the etched-away gap: check
            # where the segment crosses the plane of the etch floor.
            floor = self._stack() - p["etch_depth"]
            level = floor + INSIDE_RTOL * max(self._stack(), p["etch_depth"])
            (x0, y0, z0), (x1, y1, z1) = t["from"], t["to"]
            if (z0 > level) != (z1 > level):     # one end beside the feature, one in it
                s = (floor - z0) / (z1 - z0)
                xc, yc = x0 + s * (x1 - x0), y0 + s * (y1 - y0)
                rel = 1.0 + INSIDE_RTOL
                if abs(xc) > p["width"] / 2 * rel or abs(yc) > p["length"] / 2 * rel:
                    raise CaseError(f"cut[{i}]", f"the line leaves the body: it crosses the "
                                                 f"etch floor z = {floor:.10g} nm at ({xc:.10g}, "
                                                 f"{yc:.10g}) nm, outside the {p['shape']}")
