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

from mesastrain.physics.crystal import direction_vector, plane_normal, sample_frame
from mesastrain.errors import CaseError, MaterialError, OrientationError
from mesastrain.physics.materials import get_material, is_alloy, known_materials
from mesastrain.units import is_number, parse_length, parse_temperature, show_value

__all__ = [
    "Case", "Cut", "Layer", "MeshSettings", "OutputSettings", "Pattern", "Probe",
    "SolverSettings", "Substrate", "Thermal", "load_case", "parse_case",
    "PATTERN_SHAPES", "PLANNED_SHAPES", "SOLVER_METHODS",
    "Channel", "DeviceSettings", "CARRIERS",
    "ReadoutSettings", "FIELD_COMPONENTS", "DEFAULT_MAPS", "DEFAULT_CUT_COMPONENTS",
    "DislocationSet",
]

#: Pattern shapes that can be modelled now.
PATTERN_SHAPES = ("none", "rectangle", "stripe", "disk", "polygon", "mesh")
#: Pattern shapes that are recognised but not implemented yet.
PLANNED_SHAPES = ()
#: Keys of [pattern] that each shape accepts (besides shape, symmetry).
SHAPE_KEYS = {
    "none": (),
    "rectangle": ("width", "length", "etch_depth", "margin", "corner_radius", "sidewall_angle",
                  "pitch"),
    "stripe": ("width", "etch_depth", "margin", "sidewall_angle", "pitch"),
    "disk": ("diameter", "etch_depth", "margin", "sidewall_angle", "pitch"),
    "polygon": ("vertices", "etch_depth", "margin", "sidewall_angle", "pitch"),
    "mesh": ("file", "unit", "groups"),
}
#: Model symmetry choices: "auto" uses mirror planes where geometry and crystal allow.
SYMMETRY_CHOICES = ("auto", "full")
#: Allowed sidewall angles, degrees from the substrate plane (90 = vertical).
SIDEWALL_ANGLE_RANGE = (10.0, 170.0)
#: Linear-solver choices.
SOLVER_METHODS = ("auto", "direct", "iterative")
#: Precisions of the multigrid preconditioner (the iteration itself is double).
SOLVER_PRECISIONS = ("single", "double")
#: Carrier types of a [[channel]] (piezoresistance).
CARRIERS = ("n", "p")

#: Field components that line cuts and maps can show: stress (MPa) and elastic strain tensor
#: components in the sample frame, displacement (nm), von Mises and hydrostatic stress and the
#: largest/smallest principal stress (MPa).
FIELD_COMPONENTS = tuple(f"{q}_{c}" for q in ("stress", "strain")
                         for c in ("xx", "yy", "zz", "yz", "xz", "xy")) + (
    "displacement_x", "displacement_y", "displacement_z", "von_mises", "hydrostatic",
    "principal_max", "principal_min")
#: Components a line cut plots when its ``components`` key is not given.
DEFAULT_CUT_COMPONENTS = ("stress_xx", "stress_yy", "stress_zz", "stress_xz")
#: Components drawn as plan-view and cross-section maps when ``output.maps`` is not given.
DEFAULT_MAPS = ("stress_xx", "von_mises")

#: Relative tolerance of the inside-the-body test for probes and cuts.
INSIDE_RTOL = 1e-9

_TOP_KEYS = ("title", "substrate", "layer", "pattern", "thermal", "mesh", "solver", "probe",
             "cut", "output", "channel", "device", "readouts", "dislocations")
_SUBSTRATE_KEYS = ("material", "x", "thickness", "normal", "x_axis")
_LAYER_KEYS = ("material", "x", "thickness", "relaxed", "normal", "x_axis")
_PATTERN_KEYS = ("shape", "width", "length", "etch_depth", "margin", "corner_radius",
                 "diameter", "vertices", "sidewall_angle", "pitch", "symmetry", "file", "unit",
                 "groups")
_THERMAL_KEYS = ("growth_temperature", "final_temperature")
_MESH_KEYS = ("size", "edge_size", "order", "growth", "substrate_depth", "refine",
              "convergence")
_SOLVER_KEYS = ("method", "tolerance", "max_iterations", "stress_tolerance", "precision",
                "direct_limit")
_PROBE_KEYS = ("at", "name")
_CUT_KEYS = ("from", "to", "points", "name", "components")
_OUTPUT_KEYS = ("vtu", "crystal_frame", "report", "maps")
_READOUT_KEYS = ("standoff", "wafer_diameter", "bow")
_CHANNEL_KEYS = ("direction", "carrier", "name")
_DEVICE_KEYS = ("bands", "raman", "piezo", "raman_pdp", "raman_polarisation", "maps")
_DISLOCATION_KEYS = ("name", "interface", "line", "burgers", "burgers_fraction", "positions",
                     "spacing", "relaxation", "offset")


# --------------------------------------------------------------------------
# dataclasses
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Substrate:
    """The wafer.

    Attributes
    ----------
    material : str
        Name as in :func:`mesastrain.physics.materials.known_materials`.
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
        ``"none"`` (blanket film), ``"rectangle"``, ``"stripe"`` (infinitely
        long along y), ``"disk"``, ``"polygon"`` or ``"mesh"`` (imported).
    width, length : float or None
        Feature size at its top along sample x and y, nm (rectangle; a stripe
        has only a width). None for other shapes.
    etch_depth : float or None
        Depth of the etch measured down from the top surface, nm.
    margin : float or None
        Lateral width of etched-floor substrate modelled around the feature,
        nm; None lets the mesher choose.
    corner_radius : float or None
        Rounding radius of a rectangle's vertical edges, nm.
    diameter : float or None
        Disk diameter at its top, nm.
    vertices : tuple of (x, y) or None
        Polygon outline at its top, nm, in order (either sense).
    sidewall_angle : float or None
        Angle between sidewall and substrate plane, degrees (90 vertical,
        < 90 widening toward the foot, > 90 undercut); None = 90.
    pitch : tuple (px, py) or None
        Period of an infinite array of the feature, nm (a stripe grating has
        py = None).
    symmetry : str or None
        ``"auto"`` (default when None) or ``"full"``.
    file : str or None
        Imported mesh file (absolute, or as resolved from the case file).
    unit : str or None
        Length unit of the imported mesh coordinates (default nm).
    groups : tuple of (str, int) or None
        Imported mesh: physical group name -> region (0 substrate, i layer i).
    """

    shape: str
    width: float | None
    length: float | None
    etch_depth: float | None
    margin: float | None
    corner_radius: float | None = None
    diameter: float | None = None
    vertices: tuple | None = None
    sidewall_angle: float | None = None
    pitch: tuple | None = None
    symmetry: str | None = None
    file: str | None = None
    unit: str | None = None
    groups: tuple | None = None

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
        Polynomial order of the elements, 1 or 2 (default: :func:`default_order`).
    growth : float
        Geometric grading ratio between neighbouring elements, in (1, 3].
    substrate_depth : float or None
        Modelled depth of substrate below z = 0, nm; None lets the mesher choose.
    refine : float or None
        Divides every element size (default sizes or the ones given); None = 1.
    convergence : bool or None
        Repeat the solve on two refinements and report how the headline
        figures move (as ``mesastrain run --convergence``).
    """

    size: float | None
    edge_size: float | None
    order: int
    growth: float
    substrate_depth: float | None
    refine: float | None = None
    convergence: bool | None = None


@dataclass(frozen=True)
class SolverSettings:
    """Linear solver choice: method, relative tolerance, iteration cap.

    ``stress_tolerance`` is the relative energy-norm (stress) error at which
    the iteration may stop (besides the residual); ``precision`` that of the
    multigrid preconditioner; ``direct_limit`` the number of free unknowns up
    to which ``method = "auto"`` factorises directly (None: the solver's
    default). See :mod:`mesastrain.fem.solve`.
    """

    method: str
    tolerance: float
    max_iterations: int
    stress_tolerance: float = 1e-4
    precision: str = "single"
    direct_limit: int | None = None


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
    components: tuple = DEFAULT_CUT_COMPONENTS


@dataclass(frozen=True)
class OutputSettings:
    """Output switches.

    Attributes
    ----------
    vtu : bool
        Write ``fields.vtu``.
    crystal_frame : bool
        Also report tensors in each layer's crystal axes.
    report : bool
        Write ``report.html`` with its pictures (needs ``vtu`` for the maps).
    maps : tuple of str
        Components (:data:`FIELD_COMPONENTS`) drawn as plan-view and
        cross-section maps in the report.
    """

    vtu: bool
    crystal_frame: bool
    report: bool = True
    maps: tuple = DEFAULT_MAPS


@dataclass(frozen=True)
class ReadoutSettings:
    """Settings of the engineering readouts (``[readouts]``).

    Attributes
    ----------
    standoff : float or None
        Distance from singular corners and edges at which stresses are
        reported, nm; None: half the thinnest layer.
    wafer_diameter : float
        Wafer diameter for the bow height, nm (default 200 mm).
    bow : bool
        Solve the free-standing blanket wafer for its curvature (a small
        extra finite-element solve).
    """

    standoff: float | None = None
    wafer_diameter: float = 2.0e8
    bow: bool = True


@dataclass(frozen=True)
class Channel:
    """A conduction channel for the piezoresistance readout.

    Attributes
    ----------
    name : str
    direction : tuple of float
        (x, y, 0) in the SAMPLE frame as written (not normalised): the current
        direction on the mask, in the wafer plane (sample x = the substrate's
        ``x_axis``).
    carrier : str
        ``"n"`` (electrons) or ``"p"`` (holes).
    """

    name: str
    direction: tuple
    carrier: str


@dataclass(frozen=True)
class DeviceSettings:
    """Switches of the device-physics readouts (``[device]``).

    Attributes
    ----------
    bands, raman, piezo : bool
        Compute band-edge shifts, the Raman shift, the piezoresistance change.
    raman_pdp : tuple of (str, str)
        (material, PDP set) pairs overriding each material's default set of
        phonon deformation potentials; empty = defaults.
    maps : bool
        Draw PNG sections of the device fields into the result folder.
    raman_polarisation : tuple
        ((incident), (scattered)) in-plane sample-frame directions, or () for
        unpolarised backscattering.
    """

    bands: bool = True
    raman: bool = True
    piezo: bool = True
    raman_pdp: tuple = ()
    maps: bool = True
    raman_polarisation: tuple = ()


@dataclass(frozen=True)
class DislocationSet:
    """A family of parallel straight misfit dislocations in one interface (``[[dislocations]]``).

    Attributes
    ----------
    name : str
    interface : int
        The lines lie at the bottom of ``layer[interface]`` (0: the substrate/
        first-layer interface at z = 0).
    line : tuple of int
        Line direction [uvw] (or [UVTW]) in the crystal axes of that layer;
        it must lie in the interface.
    burgers : tuple of int
        Direction of the Burgers vector, same crystal axes.
    burgers_fraction : float
        b = burgers_fraction * a * [uvw] with a the relaxed lattice constant
        of the layer above the interface (0.5 for a/2<110>). The sign of b is
        chosen so that the lines relieve that layer's mismatch.
    positions : tuple of float or None
        Positions of the lines, nm, measured from the pattern centre along
        the in-plane direction z x line (normal to the lines).
    spacing : float or None
        Line spacing S of a periodic array, nm.
    relaxation : float or None
        Target relaxation of the layer's mismatch, 0 < r <= 1; the spacing
        is S = b_edge / (r |misfit|) with b_edge the edge component of b in
        the interface normal to the lines.
    offset : float
        Position of one line of a spacing/relaxation array, nm (default 0).

    Exactly one of ``positions``, ``spacing`` and ``relaxation`` is set.
    """

    name: str
    interface: int
    line: tuple
    burgers: tuple
    burgers_fraction: float = 1.0
    positions: tuple | None = None
    spacing: float | None = None
    relaxation: float | None = None
    offset: float = 0.0


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
    channels : tuple of Channel
        Piezoresistance channels (``[[channel]]``), possibly empty.
    device : DeviceSettings
        Device-physics switches (``[device]``).
    dislocations : tuple of DislocationSet
        Misfit dislocations (``[[dislocations]]``), possibly empty.
    readouts : ReadoutSettings
        Stand-off distance, wafer diameter and bow switch (``[readouts]``).
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
    channels: tuple = ()
    device: DeviceSettings = DeviceSettings()
    readouts: ReadoutSettings = ReadoutSettings()
    dislocations: tuple = ()

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
                                  "margin": self.pattern.margin,
                                  **_pattern_extras_dict(self.pattern)}),
        }
        if self.thermal is not None:
            out["thermal"] = {"growth_temperature": f"{self.thermal.growth_temperature!r} K",
                              "final_temperature": f"{self.thermal.final_temperature!r} K"}
        m = self.mesh
        out["mesh"] = drop_none({"size": m.size, "edge_size": m.edge_size, "order": m.order,
                                 "growth": m.growth, "substrate_depth": m.substrate_depth,
                                 "refine": m.refine, "convergence": m.convergence})
        out["solver"] = drop_none({"method": self.solver.method,
                                   "tolerance": self.solver.tolerance,
                                   "max_iterations": self.solver.max_iterations,
                                   "stress_tolerance": self.solver.stress_tolerance,
                                   "precision": self.solver.precision,
                                   "direct_limit": self.solver.direct_limit})
        if self.probes:
            out["probe"] = [{"name": p.name, "at": list(p.at)} for p in self.probes]
        if self.cuts:
            out["cut"] = [{"name": c.name, "from": list(c.start), "to": list(c.end),
                           "points": c.points, "components": list(c.components)}
                          for c in self.cuts]
        out["output"] = {"vtu": self.output.vtu, "crystal_frame": self.output.crystal_frame,
                         "report": self.output.report, "maps": list(self.output.maps)}
        ro = self.readouts
        out["readouts"] = drop_none({"standoff": ro.standoff,
                                     "wafer_diameter": ro.wafer_diameter, "bow": ro.bow})
        if self.channels:
            out["channel"] = [{"name": c.name, "direction": list(c.direction),
                               "carrier": c.carrier} for c in self.channels]
        dv = self.device
        out["device"] = {"bands": dv.bands, "raman": dv.raman, "piezo": dv.piezo,
                         "raman_pdp": dict(dv.raman_pdp), "maps": dv.maps}
        if dv.raman_polarisation:
            out["device"]["raman_polarisation"] = [list(v) for v in dv.raman_polarisation]
        if self.dislocations:
            out["dislocations"] = [drop_none({
                "name": d.name, "interface": d.interface, "line": list(d.line),
                "burgers": list(d.burgers), "burgers_fraction": d.burgers_fraction,
                "positions": None if d.positions is None else list(d.positions),
                "spacing": d.spacing, "relaxation": d.relaxation,
                "offset": d.offset if d.positions is None else None})
                for d in self.dislocations]
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


def _positive_number(value, key: str) -> float:
    if not is_number(value) or not value > 0 or not math.isfinite(value):
        raise CaseError(key, f"expected a number > 0, got {show_value(value)}")
    return float(value)


def _relaxation(value, key: str) -> float:
    if not is_number(value) or not 0.0 < value <= 1.0:
        raise CaseError(key, f"expected a relaxed fraction of the mismatch, > 0 and <= 1, got "
                             f"{show_value(value)}")
    return float(value)


def _lengths_list(value, key: str) -> tuple:
    if not isinstance(value, list) or not value:
        raise CaseError(key, f"expected a non-empty list of lengths, e.g. [-100, 0, \"0.1 um\"], "
                             f"got {show_value(value)}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


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


def _components(value, key: str) -> tuple:
    """A non-empty list of names from :data:`FIELD_COMPONENTS`."""
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise CaseError(key, f'expected a list of component names, e.g. ["stress_xx", '
                             f'"von_mises"], got {show_value(value)}')
    for i, v in enumerate(value):
        if v not in FIELD_COMPONENTS:
            close = difflib.get_close_matches(v, FIELD_COMPONENTS, n=1)
            hint = f'did you mean "{close[0]}"? ' if close else ""
            raise CaseError(f"{key}[{i}]", f"{show_value(v)} is not a field component; {hint}"
                                           f"allowed: {', '.join(FIELD_COMPONENTS)}")
    return tuple(value)


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


def default_order(pattern: dict) -> int:
    """Element order when ``[mesh] order`` is not given.

    1 (trilinear) on the structured hexahedral meshes (blanket stacks and
    rectangles without rounded corners, as :func:`mesastrain.run.resources.mesh_kind`
    decides): on the demo mesa it reaches the centre stress within 0.5 % and
    the stress 5 nm from the edge within 2 % about four times sooner than
    27-node elements (benchmarks/time_to_accuracy.py). 2 (quadratic) on
    tetrahedra and cross-sections, where linear elements are too stiff.
    """
    shape = pattern.get("shape", "none")
    if shape == "none" or (shape == "rectangle" and not pattern.get("corner_radius")):
        return 1
    return 2


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


def _nonnegative_length(value, key: str) -> float:
    v = parse_length(value, key)
    if not v >= 0:
        raise CaseError(key, f"must be >= 0, got {show_value(value)} ({v:.10g} nm)")
    return v


def _vertices(value, key: str) -> tuple:
    """[[x, y], ...] -> ((x, y), ...) in nm, a simple polygon."""
    from mesastrain.case.outline import polygon_problem

    if not isinstance(value, list) or not all(isinstance(v, list) and len(v) == 2
                                              for v in value):
        raise CaseError(key, f"expected a list of points [[x, y], ...] (lengths), got "
                             f"{show_value(value)}")
    pts = tuple(tuple(parse_length(c, f"{key}[{i}][{j}]") for j, c in enumerate(v))
                for i, v in enumerate(value))
    problem = polygon_problem(pts)
    if problem:
        raise CaseError(key, f"not a usable outline: {problem}")
    return pts


def _sidewall_angle(value, key: str) -> float:
    lo, hi = SIDEWALL_ANGLE_RANGE
    if not is_number(value) or not lo <= value <= hi:
        raise CaseError(key, f"expected an angle in degrees from the substrate plane, {lo:g} to "
                             f"{hi:g} (90 = vertical), got {show_value(value)}")
    return float(value)


def _pitch(value, key: str) -> tuple:
    """A length or [px, py] -> (px, py) in nm (py None when one length is given)."""
    if isinstance(value, list):
        if len(value) not in (1, 2):
            raise CaseError(key, f"expected a length or [px, py], got {show_value(value)}")
        vals = tuple(_positive_length(v, f"{key}[{i}]") for i, v in enumerate(value))
        return vals if len(vals) == 2 else (vals[0], None)
    return (_positive_length(value, key), None)


def _length_unit(value, key: str) -> str:
    if not isinstance(value, str):
        raise CaseError(key, f'expected a length unit such as "nm" or "um", got '
                             f'{show_value(value)}')
    try:
        parse_length(f"1 {value}", key)
    except CaseError:
        raise CaseError(key, f'{show_value(value)} is not a length unit; allowed: "nm", "um", '
                             f'"mm", "A"') from None
    return value


def _groups(value, key: str) -> tuple:
    """{name = region, ...} -> ((name, region), ...); region 0 / "substrate" or i >= 1."""
    if not isinstance(value, dict) or not value:
        raise CaseError(key, f'expected a table mapping physical group names to regions, e.g. '
                             f'{{ substrate = 0, film = 1 }}, got {show_value(value)}')
    out = []
    for name, region in value.items():
        if region == "substrate":
            region = 0
        if not isinstance(region, int) or isinstance(region, bool) or region < 0:
            raise CaseError(f"{key}.{name}", f'expected a region: 0 or "substrate", or the '
                                             f'layer number 1, 2, ... (bottom up), got '
                                             f'{show_value(region)}')
        out.append((str(name), region))
    return tuple(out)


def _refine(value, key: str) -> float:
    if not is_number(value) or not 0.25 <= value <= 16:
        raise CaseError(key, f"expected a refinement factor from 0.25 to 16 (element sizes are "
                             f"divided by it), got {show_value(value)}")
    return float(value)


def _pattern_extras_dict(p) -> dict:
    """The optional pattern keys of a Pattern as case-file values (for Case.to_dict)."""
    out = {"corner_radius": p.corner_radius, "diameter": p.diameter,
           "vertices": None if p.vertices is None else [list(v) for v in p.vertices],
           "sidewall_angle": p.sidewall_angle,
           "pitch": None if p.pitch is None else list(p.pitch),
           "symmetry": p.symmetry, "file": p.file, "unit": p.unit,
           "groups": None if p.groups is None else dict(p.groups)}
    if p.shape == "stripe" and p.pitch is not None:
        out["pitch"] = p.pitch[0]
    return {k: v for k, v in out.items() if v is not None}


class _PatternView:
    """Attribute access to a pattern table being validated (as outline.outline_of expects)."""

    def __init__(self, t: dict):
        self._t = t

    def __getattr__(self, name):
        if name.startswith("_"):
            raise AttributeError(name)
        return self._t.get(name)


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


def _channel_direction(value, key: str) -> tuple:
    """An in-plane sample-frame direction [x, y] or [x, y, 0] -> (x, y, 0) as given."""
    if (not isinstance(value, list) or len(value) not in (2, 3)
            or not all(is_number(v) and math.isfinite(v) for v in value)):
        raise CaseError(key, f"expected an in-plane direction [x, y] or [x, y, 0] in the sample "
                             f"frame (numbers), got {show_value(value)}")
    x, y = float(value[0]), float(value[1])
    norm = math.hypot(x, y)
    if norm == 0.0:
        raise CaseError(key, f"must not be a zero vector, got {show_value(value)}")
    if len(value) == 3 and abs(value[2]) > 1e-9 * norm:
        raise CaseError(key, f"must lie in the wafer plane (z component 0; sample z is the "
                             f"normal), got {show_value(value)}")
    return (x, y, 0.0)


def _raman_pdp(value, key: str) -> tuple:
    """``{ Si = "apbpc1970", ... }`` -> sorted ((material, set), ...)."""
    from mesastrain.physics.raman import device_parameters, pdp_sets

    known = {m: pdp_sets(m) for m in device_parameters()["raman"]}
    listing = "; ".join(f"{m}: {', '.join(s)}" for m, s in known.items())
    if not isinstance(value, dict):
        raise CaseError(key, f'expected a table material = "set", e.g. raman_pdp = '
                             f'{{ Si = "{known["Si"][-1]}" }}, got {show_value(value)}; '
                             f'known sets: {listing}')
    out = []
    for name, choice in value.items():
        sub = f"{key}.{name}"
        if name not in known:
            raise CaseError(sub, f"no Raman data for {show_value(name)}; materials with "
                                 f"phonon deformation potentials: {', '.join(known)}")
        if not isinstance(choice, str) or choice not in known[name]:
            allowed = ", ".join(f'"{s}"' for s in known[name])
            raise CaseError(sub, f"{show_value(choice)} is not a PDP set of {name}; "
                                 f"allowed: {allowed}")
        out.append((name, choice))
    return tuple(sorted(out))


def _raman_polarisation(value, key: str) -> tuple:
    """``[[ix, iy], [sx, sy]]`` (incident, scattered; sample frame) -> two in-plane 3-tuples."""
    if not isinstance(value, list) or len(value) != 2:
        raise CaseError(key, f"expected [incident, scattered], two in-plane directions, e.g. "
                             f"[[1, 0], [0, 1]], got {show_value(value)}")
    return tuple(_channel_direction(v, f"{key}[{k}]") for k, v in enumerate(value))


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
                   "output": self._output, "channel": self._channels, "device": self._device,
                   "readouts": self._readouts, "dislocations": self._dislocations}
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
        if self.pattern["shape"] == "rectangle":
            self.pattern.setdefault("length", self.pattern["width"])
        if self.pattern["shape"] not in ("none", "mesh"):
            self.pattern.setdefault("etch_depth", self._stack())
        cross = {"layer": self._check_layer_orientations, "pattern": self._check_pattern,
                 "mesh": self._check_mesh, "probe": self._check_probes, "cut": self._check_cuts,
                 "dislocations": lambda: self._check_dislocations(got["dislocations"])}
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
                              order=m.get("order", default_order(self.pattern)),
                              growth=m.get("growth", 1.3),
                              substrate_depth=m.get("substrate_depth"), refine=m.get("refine"),
                              convergence=m.get("convergence")),
            solver=SolverSettings(method=solver.get("method", "auto"),
                                  tolerance=solver.get("tolerance", 1e-8),
                                  max_iterations=solver.get("max_iterations", 2000),
                                  stress_tolerance=solver.get("stress_tolerance", 1e-4),
                                  precision=solver.get("precision", "single"),
                                  direct_limit=solver.get("direct_limit")),
            probes=tuple(Probe(name=p["name"], at=p["at"]) for p in self.probes),
            cuts=tuple(Cut(name=c["name"], start=c["from"], end=c["to"], points=c["points"],
                           components=c.get("components", DEFAULT_CUT_COMPONENTS))
                       for c in self.cuts),
            output=OutputSettings(vtu=output.get("vtu", True),
                                  crystal_frame=output.get("crystal_frame", True),
                                  report=output.get("report", True),
                                  maps=output.get("maps", DEFAULT_MAPS)),
            source=self.source,
            channels=tuple(got.get("channel", ())),
            device=got.get("device", DeviceSettings()),
            readouts=got.get("readouts", ReadoutSettings()),
            dislocations=tuple(got.get("dislocations", ())),
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
                         "margin": _positive_length, "corner_radius": _nonnegative_length,
                         "diameter": _positive_length, "vertices": _vertices,
                         "sidewall_angle": _sidewall_angle, "pitch": _pitch,
                         "symmetry": _choice(SYMMETRY_CHOICES), "file": _string,
                         "unit": _length_unit, "groups": _groups}, "[pattern]")
        if "shape" not in t:
            raise _missing(f"{key}.shape", 'the pattern shape; allowed: '
                                           + ", ".join(f'"{s}"' for s in PATTERN_SHAPES))
        shape = t["shape"]
        allowed = SHAPE_KEYS[shape]
        for name in t:
            if name in ("shape", "symmetry") or name in allowed:
                continue
            if shape == "none":
                raise CaseError(f"{key}.{name}", 'only for patterned shapes; remove it or '
                                                 'set shape = "rectangle"')
            takers = [s for s, keys in SHAPE_KEYS.items() if name in keys]
            hint = ("a stripe runs along y without end; remove it" if
                    (shape, name) == ("stripe", "length") else
                    "allowed for " + ", ".join(f'"{s}"' for s in takers))
            raise CaseError(f"{key}.{name}", f'not a key of shape = "{shape}"; {hint}')
        required = {"rectangle": ("width", f'the {shape} width along sample x, e.g. "2 um"'),
                    "stripe": ("width", 'the stripe width along sample x, e.g. "2 um"'),
                    "disk": ("diameter", 'the disk diameter, e.g. "1 um"'),
                    "polygon": ("vertices", 'the outline as [[x, y], ...] in nm, e.g. '
                                            '[[0, 0], [500, 0], [0, 400]]'),
                    "mesh": ("file", 'the mesh file, e.g. "device.msh"')}
        if shape in required and required[shape][0] not in t:
            raise _missing(f"{key}.{required[shape][0]}", required[shape][1])
        if shape == "mesh":
            if "groups" not in t:
                raise _missing(f"{key}.groups", 'a table mapping physical groups to regions, '
                                                'e.g. groups = { substrate = 0, film = 1 }')
            path = Path(t["file"])
            if not path.is_absolute() and self.source is not None:
                path = Path(self.source).parent / path
            if not path.is_file():
                raise CaseError(f"{key}.file", f"no such mesh file: {path}")
            t["file"] = str(path)
        if "corner_radius" in t and t["corner_radius"] == 0.0:
            del t["corner_radius"]
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
                            "substrate_depth": _positive_length, "refine": _refine,
                            "convergence": _bool}, "[mesh]")

    def _solver(self, value, key: str) -> dict:
        return _read_table(value, key, _SOLVER_KEYS,
                           {"method": _choice(SOLVER_METHODS), "tolerance": _tolerance,
                            "max_iterations": _int_at_least(1), "stress_tolerance": _tolerance,
                            "precision": _choice(SOLVER_PRECISIONS),
                            "direct_limit": _int_at_least(0)}, "[solver]")

    def _output(self, value, key: str) -> dict:
        return _read_table(value, key, _OUTPUT_KEYS, {"vtu": _bool, "crystal_frame": _bool,
                                                      "report": _bool, "maps": _components},
                           "[output]")

    def _readouts(self, value, key: str) -> ReadoutSettings:
        t = _read_table(value, key, _READOUT_KEYS,
                        {"standoff": _positive_length, "wafer_diameter": _positive_length,
                         "bow": _bool}, "[readouts]")
        return ReadoutSettings(**t)

    def _device(self, value, key: str) -> DeviceSettings:
        t = _read_table(value, key, _DEVICE_KEYS,
                        {"bands": _bool, "raman": _bool, "piezo": _bool,
                         "raman_pdp": _raman_pdp, "maps": _bool,
                         "raman_polarisation": _raman_polarisation}, "[device]")
        return DeviceSettings(**t)

    def _channels(self, value, key: str) -> list:
        items = self._named_items(value, key, _CHANNEL_KEYS,
                                  {"direction": _channel_direction,
                                   "carrier": _choice(CARRIERS), "name": _string},
                                  (("direction", "the in-plane current direction [x, y] in the "
                                                 "sample frame, e.g. [1, 0] along x_axis"),
                                   ("carrier", 'the carrier type, "n" or "p"')))
        return [Channel(name=t["name"], direction=t["direction"], carrier=t["carrier"])
                for t in items]

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
                                   "name": _string, "components": _components},
                                  (("from", "the start point [x, y, z]"),
                                   ("to", "the end point [x, y, z]")))
        for i, t in enumerate(items):
            t.setdefault("points", 101)
            if t["from"] == t["to"]:
                raise CaseError(f"{key}[{i}].to", "the cut has zero length (from and to are "
                                                  "the same point)")
        return items

    def _dislocations(self, value, key: str) -> list:
        items = self._named_items(value, key, _DISLOCATION_KEYS,
                                  {"name": _string, "interface": _int_at_least(0),
                                   "line": _indices, "burgers": _indices,
                                   "burgers_fraction": _positive_number,
                                   "positions": _lengths_list, "spacing": _positive_length,
                                   "relaxation": _relaxation, "offset": parse_length},
                                  (("interface", "the interface index: the lines lie at the "
                                                 "bottom of layer[interface]"),
                                   ("line", "the line direction [u, v, w] (crystal axes of "
                                            "the layer above)"),
                                   ("burgers", "the Burgers vector direction [u, v, w], e.g. "
                                               "[1, 0, 1] with burgers_fraction = 0.5")))
        for i, t in enumerate(items):
            ik = f"{key}[{i}]"
            given = [k for k in ("positions", "spacing", "relaxation") if k in t]
            if not given:
                raise _missing(f"{ik}.spacing", "one of positions (a list of lengths), spacing "
                                                "(a length) or relaxation (a fraction 0..1)")
            if len(given) > 1:
                raise CaseError(f"{ik}.{given[1]}", f"give only one of positions, spacing and "
                                                    f"relaxation (also set: {given[0]})")
            if "offset" in t and "positions" in t:
                raise CaseError(f"{ik}.offset", "only with spacing or relaxation; positions "
                                                "are absolute")
        return [DislocationSet(name=t["name"], interface=t["interface"], line=t["line"],
                               burgers=t["burgers"],
                               burgers_fraction=t.get("burgers_fraction", 1.0),
                               positions=t.get("positions"), spacing=t.get("spacing"),
                               relaxation=t.get("relaxation"), offset=t.get("offset", 0.0))
                for t in items]

    # ---- phase 2 ---------------------------------------------------------
    def _check_dislocations(self, sets) -> None:
        """Interface index in range, line in the interface, a pattern the lines fit."""
        shape = self.pattern["shape"]
        for i, ds in enumerate(sets):
            ik = f"dislocations[{i}]"
            if ds.interface >= len(self.layers):
                raise CaseError(f"{ik}.interface", f"{ds.interface} is not a layer's bottom "
                                                   f"interface; allowed: 0 to "
                                                   f"{len(self.layers) - 1}")
            if shape not in ("none", "rectangle", "stripe") or self.pattern.get(
                    "corner_radius") or self.pattern.get("sidewall_angle") not in (None, 90.0):
                raise CaseError(ik, "dislocations need a model of axis-aligned bricks: "
                                    "pattern shape \"none\", \"rectangle\" (no corner_radius, "
                                    "vertical sidewalls) or \"stripe\"")
            lay = self.layers[ds.interface]
            normal = lay["normal"] if lay["normal"] is not None else self.substrate["normal"]
            x_axis = lay["x_axis"] if lay["x_axis"] is not None else self.substrate["x_axis"]
            try:
                R = sample_frame(normal, x_axis, lay["system"], lay["c_over_a"]).R
                xi = R @ direction_vector(ds.line, lay["system"], lay["c_over_a"],
                                          what="line direction")
            except OrientationError as err:
                raise CaseError(f"{ik}.line", str(err)) from None
            xi = xi / math.sqrt(float(xi @ xi))
            if abs(xi[2]) > 1e-6:
                ang = math.degrees(math.asin(min(1.0, abs(float(xi[2])))))
                raise CaseError(f"{ik}.line", f"{list(ds.line)} makes {ang:.3g} deg with the "
                                              f"interface; misfit dislocations lie in the "
                                              f"interface plane")
            if shape == "stripe" and abs(xi[1]) < 1 - 1e-9:
                raise CaseError(f"{ik}.line", "a stripe is modelled as its x-z cross-section: "
                                              "only lines along the stripe (sample y) fit")
            if shape == "none" and ds.positions is not None:
                raise CaseError(f"{ik}.positions", "a blanket film is modelled as a periodic "
                                                   "cell: give spacing or relaxation")

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
        if p["shape"] in ("none", "mesh"):
            if p["shape"] == "mesh":
                n = len(self.layers)
                for name, region in p["groups"]:
                    if region > n:
                        raise CaseError(f"pattern.groups.{name}",
                                        f"region {region} does not exist; the case has the "
                                        f"substrate (0) and {n} layer(s) (1..{n})")
            return
        limit = self._stack() + self.substrate["thickness"]
        if p["etch_depth"] > limit:
            raise CaseError("pattern.etch_depth",
                            f"{p['etch_depth']:.10g} nm is deeper than the layers plus the "
                            f"substrate ({limit:.10g} nm); give at most {limit:.10g} nm")
        from mesastrain.case.outline import outline_of, taper_of

        if p["shape"] == "rectangle" and p.get("corner_radius"):
            most = min(p["width"], p["length"]) / 2.0
            if p["corner_radius"] > most:
                raise CaseError("pattern.corner_radius",
                                f"{p['corner_radius']:.10g} nm is more than half the shorter "
                                f"side; give at most {most:.10g} nm")
        view = _PatternView(p)
        top = outline_of(view)
        taper = taper_of(view)
        foot = top.offset(taper)
        problem = foot.problem()
        if problem:
            raise CaseError("pattern.sidewall_angle",
                            f"{p['sidewall_angle']:.10g} degrees over the etch depth of "
                            f"{p['etch_depth']:.10g} nm moves the sidewall by {abs(taper):.10g} "
                            f"nm, which leaves no valid outline at the "
                            f"{'foot' if taper < 0 else 'etch floor'} ({problem}); use a "
                            f"steeper sidewall")
        if p.get("pitch") is None:
            return
        if p["shape"] == "stripe":
            if p["pitch"][1] is not None:
                raise CaseError("pattern.pitch", "a stripe grating repeats along x only; give "
                                                 "the pitch as one length")
        elif p["pitch"][1] is None:
            p["pitch"] = (p["pitch"][0], p["pitch"][0])
        if p.get("margin") is not None:
            raise CaseError("pattern.margin", "the pitch sets the modelled cell of an array; "
                                              "remove margin or pitch")
        hx = max(top.half_extent()[0], foot.half_extent()[0])
        hy = max(top.half_extent()[1], foot.half_extent()[1])
        px, py = p["pitch"]
        sharp = p["shape"] in ("rectangle", "stripe") and not taper and not p.get("corner_radius")
        for name, h, period in (("x", hx, px), ("y", hy, py)):
            if period is None:
                continue
            too_big = 2 * h > period * (1 + INSIDE_RTOL) if sharp else 2 * h >= period
            if too_big:
                need = "at least" if sharp else "more than"
                raise CaseError("pattern.pitch",
                                f"{period:.10g} nm along {name} is shorter than the feature "
                                f"({2 * h:.10g} nm across, sidewall slope included); give "
                                f"{need} {2 * h:.10g} nm")

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
        if p["shape"] in ("none", "mesh"):    # an imported mesh is checked when it is read
            return
        from mesastrain.case.outline import outline_at

        view = _PatternView(p)
        floor = top - p["etch_depth"]
        if z > floor + INSIDE_RTOL * max(top, p["etch_depth"]):
            ol = outline_at(view, top, z)
            hx, hy = ol.half_extent()
            tol = INSIDE_RTOL * max(hx, hy if math.isfinite(hy) else hx)
            if not bool(ol.contains(x, y, tol)):
                if p["shape"] == "rectangle" and ol.radius == 0:
                    raise CaseError(key, f"{where} is outside the {p['shape']} (|x| <= "
                                         f"{hx:.10g}, |y| <= {hy:.10g} nm above the etch "
                                         f"floor at z = {floor:.10g} nm)")
                if p["shape"] == "stripe":
                    raise CaseError(key, f"{where} is outside the stripe (|x| <= {hx:.10g} nm "
                                         f"at this height, above the etch floor at z = "
                                         f"{floor:.10g} nm)")
                raise CaseError(key, f"{where} is outside the {p['shape']} (at this height its "
                                     f"outline is a {ol.describe()}; the etch floor is at z = "
                                     f"{floor:.10g} nm)")
        elif p.get("pitch") is not None:
            px, py = p["pitch"]
            if abs(x) > px / 2 * rel or (py is not None and abs(y) > py / 2 * rel):
                ylim = f", |y| <= {py / 2:.10g}" if py is not None else ""
                raise CaseError(key, f"{where} is outside the periodic cell (|x| <= "
                                     f"{px / 2:.10g}{ylim} nm)")
        elif p.get("margin") is not None:
            foot = outline_at(view, top, floor)
            half_w, half_l = foot.half_extent()
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
            if p["shape"] in ("none", "mesh"):
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
                from mesastrain.case.outline import outline_at

                foot = outline_at(_PatternView(p), self._stack(), floor)
                hx, hy = foot.half_extent()
                tol = INSIDE_RTOL * max(hx, hy if math.isfinite(hy) else hx)
                if not bool(foot.contains(xc, yc, tol)):
                    raise CaseError(f"cut[{i}]", f"the line leaves the body: it crosses the "
                                                 f"etch floor z = {floor:.10g} nm at ({xc:.10g}, "
                                                 f"{yc:.10g}) nm, outside the {p['shape']}")
