"""The case-file schema: every key declared once.

Each key of the case file is one :class:`mesastrain.case.keys.Key` (name,
kind of value, doc, default or the hint given when a required key is
missing), grouped into one :class:`mesastrain.case.keys.Table` per TOML table
(``[substrate]``, ``[[layer]]``, ...). From these declarations come:

- the allowed keys of each table and the unknown-key errors, the reading of
  each value and the missing-key errors
  (:func:`mesastrain.case.keys.read_table`);
- the defaults (:meth:`~mesastrain.case.keys.Table.default`, also used by the
  dataclasses of :mod:`mesastrain.case.types`);
- the echo of a case in case-file form, :meth:`mesastrain.case.types.Case.to_dict`
  (:func:`mesastrain.case.keys.echo`);
- the JSON Schema (draft 2020-12) of the case file,
  :func:`mesastrain.case.schema_json.json_schema`, shipped as
  ``mesastrain/case/schemas/case-1.json`` (:data:`SCHEMA_FILE`;
  ``python -m mesastrain.case.schema_json`` rewrites it).

Checks that combine keys (a width for a rectangle, etch depth against the
stack, probes inside the body) are code in :mod:`mesastrain.case.parse` and
:mod:`mesastrain.case.checks`.
"""

from __future__ import annotations

import re
from pathlib import Path

from mesastrain.case import readers as rd
from mesastrain.case.keys import Key, Kind, Table
from mesastrain.physics.bands import device_parameters
from mesastrain.physics.elastic import STIFFNESS_KEYS, SYMMETRY_SYSTEMS
from mesastrain.physics.raman_data import pdp_sets
from mesastrain.units import LENGTH_UNITS

__all__ = [
    "CARRIERS", "DEFAULT_CUT_COMPONENTS", "DEFAULT_MAPS", "DEFAULT_VTU_FIELDS",
    "FEATURE_SHAPES", "FIELD_COMPONENTS", "INSIDE_RTOL", "LINER", "MATERIAL", "MATERIAL_KEYS",
    "MAX_CUT_POINTS", "MAX_SOLVER_ITERATIONS", "VTU_FIELDS",
    "PATTERN_SHAPES", "SCHEMA_FILE", "SCHEMA_VERSION", "SHAPE_KEYS",
    "SHAPE_REQUIRES", "SIDEWALL_ANGLE_RANGE", "SOLVER_METHODS", "SOLVER_PRECISIONS",
    "SYMMETRY_CHOICES", "TABLES", "TITLE", "ABOUT", "TOP_KEYS", "UNCERTAINTY",
    "UNCERTAINTY_GROUPS", "default_order", "table",
]

# --------------------------------------------------------------------------
# vocabulary
# --------------------------------------------------------------------------
#: Pattern shapes that can be modelled now.
PATTERN_SHAPES = ("none", "rectangle", "stripe", "disk", "polygon", "mesh")
#: The shapes that are an etched feature (the others: a blanket film, an imported mesh).
FEATURE_SHAPES = ("rectangle", "stripe", "disk", "polygon")
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
#: Arrays ``[output] fields`` may ask ``fields.vtu`` to hold (``layer`` is always written).
VTU_FIELDS = ("displacement", "stress", "strain", "von_mises", "element_strain", "total_strain",
              "hydrostatic", "stress_crystal", "strain_crystal", "derived")
#: What ``fields.vtu`` holds when ``[output] fields`` is not given (about 80 bytes per node).
DEFAULT_VTU_FIELDS = ("displacement", "stress", "strain", "von_mises")
#: Components a line cut plots when its ``components`` key is not given.
DEFAULT_CUT_COMPONENTS = ("stress_xx", "stress_yy", "stress_zz", "stress_xz")
#: Components drawn as plan-view and cross-section maps when ``output.maps`` is not given.
DEFAULT_MAPS = ("stress_xx", "von_mises")

#: Most sample points of a line cut: a cut is written as CSV and plotted; 10000 points
#: resolve a 1 mm cut to 0.1 um, far finer than any mesh the tool builds.
MAX_CUT_POINTS = 10000
#: Iteration cap of the iterative solver: more than 1e5 iterations means the solve will
#: not converge (multigrid-preconditioned CG needs tens to hundreds).
MAX_SOLVER_ITERATIONS = 100000

#: Relative tolerance of the inside-the-body test for probes and cuts.
INSIDE_RTOL = 1e-9

#: Version of the case-file format, the N of the shipped ``schemas/case-N.json``.
SCHEMA_VERSION = 1
#: The shipped copy of :func:`json_schema` (package data).
SCHEMA_FILE = Path(__file__).parent / "schemas" / f"case-{SCHEMA_VERSION}.json"


# --------------------------------------------------------------------------
# kinds of values
# --------------------------------------------------------------------------
_UNSIGNED = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_NUMBER = r"[+-]?" + _UNSIGNED


def _with_unit(units, number: str = _NUMBER) -> str:
    names = "|".join(re.escape(u) for u in sorted(units, key=len, reverse=True))
    return rf"^\s*{number}\s*(?:{names})\s*$"


def _ref(name: str) -> dict:
    return {"$ref": f"#/$defs/{name}"}


def _number(**limits) -> dict:
    return {"type": "number", **limits}


def _enum(values) -> dict:
    return {"enum": list(values)}


def _raman_pdp_json() -> dict:
    known = {m: pdp_sets(m) for m in device_parameters()["raman"]}
    return {"type": "object", "additionalProperties": False,
            "properties": {m: _enum(s) for m, s in known.items()}}


def _int_between(low: int, high: int) -> Kind:
    return Kind(rd.int_between(low, high), {"type": "integer", "minimum": low, "maximum": high})


def _choice(values) -> Kind:
    return Kind(rd.choice(values), _enum(values))


STRING = Kind(rd.string, {"type": "string"})
BOOL = Kind(rd.boolean, {"type": "boolean"})
LENGTH = Kind(rd.length, _ref("length"))
POSITIVE_LENGTH = Kind(rd.positive_length, _ref("positiveLength"))
NONNEGATIVE_LENGTH = Kind(rd.nonnegative_length, _ref("length"))
TEMPERATURE = Kind(rd.temperature, _ref("temperature"), echo=lambda kelvin: f"{kelvin!r} K")
STRESS = Kind(rd.stress, _ref("stress"), echo=lambda mpa: f"{mpa!r} MPa")
FRACTION = Kind(rd.fraction, _number(minimum=0, maximum=1))
MATERIAL = Kind(rd.material_name, _ref("material"))
INDICES = Kind(rd.indices, _ref("indices"))
POINT = Kind(rd.point, _ref("point"))
COMPONENTS = Kind(rd.component_list(FIELD_COMPONENTS), _ref("components"))
PITCH = Kind(rd.pitch, {"anyOf": [_ref("positiveLength"),
                                  {"type": "array", "items": _ref("positiveLength"),
                                   "minItems": 1, "maxItems": 2}]},
             echo=lambda p: p[0] if p[1] is None else [p[0], p[1]])
MISCUT = Kind(rd.miscut, {"type": "object", "additionalProperties": False,
                          "required": ["angle", "toward"],
                          "properties": {
                              "angle": {"description": "Degrees, 0 to 15: a number or a string "
                                                       'such as "4 deg".',
                                        "anyOf": [{"type": "number", "minimum": 0,
                                                   "maximum": 15},
                                                  {"type": "string",
                                                   "pattern": _with_unit(("deg", "°"))}]},
                              "toward": _ref("indices")}},
              echo=lambda m: {"angle": f"{m[0]:g} deg", "toward": list(m[1])})
GROUPS = Kind(rd.groups, {"type": "object", "minProperties": 1, "maxProperties": rd.MAX_ITEMS,
                          "additionalProperties": {"anyOf": [{"type": "integer", "minimum": 0,
                                                              "maximum": rd.MAX_ITEMS},
                                                             {"type": "string", "minLength": 1,
                                                              "maxLength": rd.MAX_NAME}]}},
              echo=dict)



# --------------------------------------------------------------------------
# the tables
# --------------------------------------------------------------------------
TITLE = Key("title", STRING, "Title of the case.", computed="the file name without extension")
ABOUT = Key("about", STRING, "A few words shown with the results: printed before the run's "
                             "warnings and at the top of the report (what the case is for, "
                             "and why a warning is expected).", default="")

SUBSTRATE = Table("substrate", "substrate", "The wafer.", (
    Key("material", MATERIAL, "Material name, as `mesastrain materials` lists them.",
        required="the substrate material"),
    Key("composition", FRACTION, "Alloy composition: the fraction of the alloy's second "
                                 "member, 0 to 1 (alloys only; Ge in SiGe). Old name: x.",
        attr="x"),
    Key("thickness", POSITIVE_LENGTH, "Wafer thickness.",
        required='the wafer thickness, e.g. "0.5 mm"'),
    Key("normal", INDICES, "Surface plane (hkl) or (hkil): sample +z.",
        required="the surface plane as Miller indices, e.g. [0, 0, 1]"),
    Key("x_axis", INDICES, "Crystal direction [uvw] or [UVTW] along sample +x, in the surface.",
        required="the crystal direction along sample x, e.g. [1, 1, 0]"),
    Key("miscut", MISCUT, "Vicinal wafer: the normal tilted from the exact (hkl) by angle "
        "(0 to 15 deg) toward a crystal direction, projected onto the surface, e.g. "
        '{ angle = "4 deg", toward = [1, 1, 0] }. Sample z is the tilted normal; the sample '
        "axes and every layer turn with it."),
))

LAYER = Table("layer", "layers", "The grown layers, bottom to top; at least one.", (
    Key("name", Kind(rd.name, {"type": "string", "minLength": 1, "maxLength": rd.MAX_NAME,
                               "pattern": r"^[^.\[\]]+$"}),
        "The layer's name in every output (tables, summary.json, warnings, fields.vtu); "
        "unique in the stack (letter case ignored), without '.', '[' or ']', not "
        '"substrate".', computed='the material, with " 2", " 3" ... appended when it repeats'),
    Key("material", MATERIAL, "Material name.", required="the layer material"),
    Key("composition", FRACTION, "Alloy composition: the fraction of the alloy's second "
                                 "member, 0 to 1 (alloys only; Ge in SiGe). Old name: x.",
        attr="x"),
    Key("thickness", POSITIVE_LENGTH, "Layer thickness.",
        required='the layer thickness, e.g. "40 nm"'),
    Key("relaxed", FRACTION, "0 = pseudomorphic to the layer below, 1 = fully relaxed.",
        default=0.0),
    Key("normal", INDICES, "The layer's surface plane; give both normal and x_axis or neither.",
        computed="the substrate's (when the crystal systems agree)"),
    Key("x_axis", INDICES, "The layer's crystal direction along sample +x.",
        computed="the substrate's (when the crystal systems agree)"),
    Key("epitaxial", BOOL, "false: a deposited film (amorphous, polycrystalline) with no "
                           "lattice mismatch to the layer below.",
        computed="true when the material has a lattice constant, else false"),
    Key("stress", STRESS, "Built-in (intrinsic) stress: the equi-biaxial in-plane stress the "
                          "layer has as a blanket film on the wafer, tensile positive, with "
                          "its unit; added to any mismatch stress."),
    Key("deposition_temperature", TEMPERATURE, "Temperature at which this layer was grown or "
                                               "deposited (needs [thermal] final_temperature).",
        computed="[thermal] growth_temperature"),
), array=True)

LINER = Table("liner", "liners", "Conformal films deposited over the etched feature after the "
              "etch, bottom to top: each covers the feature's top, its sidewalls and the etch "
              "floor (only with an etched feature).", (
    Key("material", MATERIAL, "Material name (usually a dielectric such as SiN or SiO2).",
        required='the liner material, e.g. "SiN-PECVD"'),
    Key("thickness", POSITIVE_LENGTH, "Thickness on the top of the feature.",
        required='the liner thickness on the feature top, e.g. "20 nm"'),
    Key("sidewall_thickness", POSITIVE_LENGTH, "Thickness on the sidewalls, measured normal "
                                               "to the sidewall.", computed="thickness"),
    Key("floor_thickness", POSITIVE_LENGTH, "Thickness on the etch floor.",
        computed="thickness"),
    Key("stress", STRESS, "Built-in (intrinsic) stress: the equi-biaxial stress the liner has "
                          "as a blanket film on the wafer, tensile positive, with its unit; "
                          "on the sidewalls it acts in the sidewall plane."),
    Key("deposition_temperature", TEMPERATURE, "Temperature at which the liner was deposited "
                                               "(needs [thermal] final_temperature).",
        computed="[thermal] growth_temperature"),
    Key("name", Kind(rd.name, {"type": "string", "minLength": 1, "maxLength": rd.MAX_NAME}),
        f"Name of the liner's region in the results; 1 to {rd.MAX_NAME} characters.",
        computed='"<material> liner", numbered on repeats'),
), array=True)

PATTERN = Table("pattern", "pattern", "The etched feature, centred on x = y = 0.", (
    Key("shape", Kind(rd.shape_name(PATTERN_SHAPES), _enum(PATTERN_SHAPES)),
        '"none" (blanket film), a feature, or "mesh" (an imported mesh).',
        required="the pattern shape; allowed: " + ", ".join(f'"{s}"' for s in PATTERN_SHAPES)),
    Key("width", POSITIVE_LENGTH, "Feature size at its top along sample x.",
        shapes=("rectangle", "stripe"),
        required_for=(("rectangle", 'the rectangle width along sample x, e.g. "2 um"'),
                      ("stripe", 'the stripe width along sample x, e.g. "2 um"'))),
    Key("length", POSITIVE_LENGTH, "Feature size at its top along sample y.",
        computed="the width (a square)", shapes=("rectangle",)),
    Key("etch_depth", POSITIVE_LENGTH, "Depth of the etch, measured down from the top surface.",
        computed="the whole layer stack", shapes=FEATURE_SHAPES),
    Key("margin", POSITIVE_LENGTH, "Width of etched-floor substrate modelled around the "
                                   "feature (default: the mesher chooses).",
        shapes=FEATURE_SHAPES),
    Key("corner_radius", NONNEGATIVE_LENGTH, "Rounding radius of a rectangle's vertical edges, "
                                             "at most half the shorter side (then the ends are "
                                             "half-disks: a stadium, or a disk for a square).",
        shapes=("rectangle",)),
    Key("diameter", POSITIVE_LENGTH, "Disk diameter at its top.", shapes=("disk",),
        required_for=(("disk", 'the disk diameter, e.g. "1 um"'),)),
    Key("vertices", Kind(rd.vertices, {"type": "array", "minItems": 3,
                                       "maxItems": rd.MAX_VERTICES, "items": {
        "type": "array", "items": _ref("length"), "minItems": 2, "maxItems": 2}}),
        f"Polygon outline at its top, [[x, y], ...] in order (either sense); at most "
        f"{rd.MAX_VERTICES} vertices (the self-crossing check compares every pair of edges).",
        shapes=("polygon",),
        required_for=(("polygon", ('the outline as [[x, y], ...] in nm, e.g. '
                                   '[[0, 0], [500, 0], [0, 400]]')),)),
    Key("sidewall_angle", Kind(rd.angle_between(*SIDEWALL_ANGLE_RANGE),
                               _number(minimum=SIDEWALL_ANGLE_RANGE[0],
                                       maximum=SIDEWALL_ANGLE_RANGE[1])),
        "Angle between sidewall and substrate plane, degrees (90 vertical, < 90 widening "
        "toward the foot, > 90 undercut; default 90).", shapes=FEATURE_SHAPES),
    Key("pitch", PITCH, "Period of an infinite array of the feature: one length (along x; "
                        "a stripe grating, or the same along y) or [px, py].",
        shapes=FEATURE_SHAPES),
    Key("symmetry", _choice(SYMMETRY_CHOICES), '"auto" uses the mirror planes that geometry '
                                               'and crystal share (default), "full" none.'),
    Key("file", STRING, "Imported mesh file, relative to the case file.", shapes=("mesh",),
        required_for=(("mesh", 'the mesh file, e.g. "device.msh"'),)),
    Key("unit", Kind(rd.length_unit, _enum(LENGTH_UNITS)),
        "Length unit of the imported mesh coordinates (default nm).", shapes=("mesh",)),
    Key("groups", GROUPS, 'Imported mesh: physical group name (or integer tag) -> region: '
                          '"substrate" (or 0), a layer\'s name, or i = layer i counted from 1; '
                          'each group mapped once.',
        shapes=("mesh",),
        required_for=(("mesh", ('a table mapping physical groups to regions, '
                                'e.g. groups = { substrate = 0, film = 1 }')),)),
))
#: Keys of [pattern] that each shape accepts (besides those every shape takes: shape, symmetry).
SHAPE_KEYS = {s: tuple(k.name for k in PATTERN.keys if s in k.shapes) for s in PATTERN_SHAPES}
#: The [pattern] keys each shape requires, in the order they are checked, with the hint.
SHAPE_REQUIRES = {s: tuple((k.name, hint) for k in PATTERN.keys for shape, hint in k.required_for
                           if shape == s) for s in PATTERN_SHAPES}

THERMAL = Table("thermal", "thermal", "Growth and final (use) temperatures.", (
    Key("growth_temperature", TEMPERATURE, "Temperature at which the layers grew; required "
                                           "unless every layer gives its own "
                                           "deposition_temperature."),
    Key("final_temperature", TEMPERATURE, "Temperature of use.",
        required='both temperatures, e.g. growth_temperature = "700 C", '
                 'final_temperature = "20 C"'),
))

MESH = Table("mesh", "mesh", "Mesh requests.", (
    Key("size", POSITIVE_LENGTH, "Target element size (default: the mesher chooses)."),
    Key("edge_size", POSITIVE_LENGTH, "Element size at edges and interfaces."),
    Key("order", Kind(rd.mesh_order, _enum((1, 2))), "Polynomial order of the elements.",
        computed="1 on structured hexahedra (blanket, rectangle without corner_radius), "
                 "else 2"),
    Key("growth", Kind(rd.growth, _number(exclusiveMinimum=1, maximum=3)),
        "Geometric grading ratio between neighbouring elements.", default=1.3),
    Key("substrate_depth", POSITIVE_LENGTH, "Modelled depth of substrate below z = 0 "
                                            "(default: the mesher chooses)."),
    Key("refine", Kind(rd.refine, _number(minimum=0.25, maximum=16)),
        "Divides every element size (default 1)."),
    Key("convergence", BOOL, "Repeat the solve on two refinements and report how the "
                             "headline figures move."),
    Key("error_estimate", BOOL, "Estimate the discretisation error of every headline "
                                "figure (recovery-based energy norm and one extra solve on "
                                "a mesh coarsened by 2).", default=True),
))

_TOLERANCE = Kind(rd.tolerance, _number(exclusiveMinimum=0, maximum=1e-2))
SOLVER = Table("solver", "solver", "Linear solver settings.", (
    Key("method", _choice(SOLVER_METHODS), "Linear solver.", default="auto"),
    Key("tolerance", _TOLERANCE, "Relative residual tolerance.", default=1e-8),
    Key("max_iterations", _int_between(1, MAX_SOLVER_ITERATIONS),
        f"Iteration cap, at most {MAX_SOLVER_ITERATIONS}.", default=2000),
    Key("stress_tolerance", _TOLERANCE, "Relative energy-norm (stress) error at which the "
                                        "iteration may stop.", default=1e-4),
    Key("precision", _choice(SOLVER_PRECISIONS), "Precision of the multigrid "
                                                 "preconditioner.", default="single"),
    Key("direct_limit", _int_between(0, 10**9), "Free unknowns up to which method = \"auto\" "
                                               "factorises directly (default: the solver's)."),
))

_NAME = Key("name", Kind(rd.name, {"type": "string", "minLength": 1, "maxLength": rd.MAX_NAME}),
            f"Name, unique among its kind also once made a file name (characters other than "
            f"letters, digits, _ . - become _, letter case ignored); 1 to {rd.MAX_NAME} "
            f"characters.", computed="the kind and its number, e.g. probe2")
PROBE = Table("probe", "probes", "Points where tensors are reported.", (
    Key("at", POINT, "The point [x, y, z].", required='the point [x, y, z], e.g. [0, 0, "20 nm"]'),
    _NAME,
), array=True)

CUT = Table("cut", "cuts", "Straight line cuts, written as CSV and plotted.", (
    Key("from", POINT, "Start point [x, y, z].", required="the start point [x, y, z]",
        attr="start"),
    Key("to", POINT, "End point [x, y, z].", required="the end point [x, y, z]", attr="end"),
    Key("points", _int_between(2, MAX_CUT_POINTS),
        f"Number of sample points, at most {MAX_CUT_POINTS}.", default=101),
    _NAME,
    Key("components", COMPONENTS, "Components plotted.", default=DEFAULT_CUT_COMPONENTS),
), array=True)

OUTPUT = Table("output", "output", "Output switches.", (
    Key("vtu", BOOL, "Write fields.vtu.", default=True),
    Key("crystal_frame", BOOL, "Also report tensors in each layer's crystal axes.",
        default=True),
    Key("report", BOOL, "Write report.html with its pictures.", default=True),
    Key("maps", COMPONENTS, "Components drawn as plan-view and cross-section maps.",
        default=DEFAULT_MAPS),
    Key("fields", Kind(rd.component_list(VTU_FIELDS, "fields.vtu array",
                                         '["displacement", "stress", "strain"]'),
                       {"type": "array", "minItems": 1, "items": {"enum": list(VTU_FIELDS)}}),
        "Arrays written to fields.vtu besides the layer ids: displacement, stress (nodal and "
        "element average), strain (nodal), von_mises (nodal), element_strain, total_strain "
        "(element averages), hydrostatic (nodal), stress_crystal and strain_crystal (element "
        "averages in each layer's crystal axes, with crystal_frame), derived (every "
        "derived-quantity field: device, dislocations ...).", default=DEFAULT_VTU_FIELDS),
    Key("precision", _choice(("single", "double")),
        "Floating-point precision of the arrays in fields.vtu (single: 4 bytes, about 7 "
        "digits).", default="single"),
    Key("pictures", BOOL, "Draw the PNG pictures (maps, plots); false with report = false "
                          "writes summary.json, fields.vtu and the CSV tables only (what "
                          "run --quick does).", default=True),
))

CHANNEL = Table("channel", "channels", "Conduction channels for the piezoresistance readout.", (
    Key("direction", Kind(rd.channel_direction, {"type": "array", "items": {"type": "number"},
                                                 "minItems": 2, "maxItems": 3}),
        "Current direction [x, y] or [x, y, 0] in the sample frame (wafer plane).",
        required="the in-plane current direction [x, y] in the sample frame, e.g. [1, 0] "
                 "along x_axis"),
    Key("carrier", _choice(CARRIERS), '"n" (electrons) or "p" (holes).',
        required='the carrier type, "n" or "p"'),
    _NAME,
), array=True)

DEVICE = Table("device", "device", "Switches of the device-physics readouts.", (
    Key("bands", BOOL, "Band-edge shifts.", default=True),
    Key("raman", BOOL, "Raman shift.", default=True),
    Key("piezo", BOOL, "Piezoresistance change.", default=True),
    Key("raman_pdp", Kind(rd.raman_pdp, _raman_pdp_json(), echo=dict),
        'Phonon deformation potential set per material, e.g. { Si = "..." } '
        '(default: each material\'s own).', default=()),
    Key("maps", BOOL, "Draw PNG sections of the device fields.", default=True),
    Key("raman_polarisation",
        Kind(rd.raman_polarisation,
             {"type": "array", "minItems": 2, "maxItems": 2,
              "items": {"type": "array", "items": {"type": "number"}, "minItems": 2,
                        "maxItems": 3}},
             echo=lambda v: [list(d) for d in v]),
        "Incident and scattered polarisation directions [[ix, iy], [sx, sy]] in the sample "
        "frame (wafer plane) for the Raman readout (default: unpolarised backscattering).",
        default=(), echo_if=lambda d: bool(d.raman_polarisation)),
))

READOUTS = Table("readouts", "readouts", "Settings of the engineering readouts.", (
    Key("standoff", POSITIVE_LENGTH, "Distance from singular corners and edges at which "
                                     "stresses are reported (default: half the thinnest "
                                     "layer)."),
    Key("wafer_diameter", POSITIVE_LENGTH, "Wafer diameter for the bow height.", default=2.0e8),
    Key("bow", BOOL, "Solve the free-standing blanket wafer for its curvature.", default=True),
))

#: Constant groups the material-data scatter can vary (``[uncertainty] groups``): every
#: material's stiffness constants, its lattice constant or lattice law, its thermal
#: expansion (only with ``[thermal]``), the Raman phonon deformation potential set and the
#: band deformation potentials that have a second published value.
UNCERTAINTY_GROUPS = ("stiffness", "lattice", "alpha", "raman", "bands")

UNCERTAINTY = Table("uncertainty", "uncertainty", "Material-data scatter propagated to the "
                    "headline figures by first-order sensitivities.", (
    Key("enabled", BOOL, "Compute the band of each headline figure from the published spread "
                         "of the material data (one extra solve per constant group that has "
                         "a spread, reusing the main solve's preconditioner).", default=True),
    Key("groups", Kind(rd.component_list(UNCERTAINTY_GROUPS, "constant group",
                                         '["stiffness", "lattice"]'),
                       {"type": "array", "items": _enum(UNCERTAINTY_GROUPS), "minItems": 1,
                        "maxItems": len(UNCERTAINTY_GROUPS)}, echo=list),
        "Which kinds of constants vary: " + ", ".join(UNCERTAINTY_GROUPS) + " (per material; "
        "alpha only with [thermal]).", default=UNCERTAINTY_GROUPS),
))

DISLOCATIONS = Table("dislocation", "dislocations", "Families of parallel straight misfit "
                     "dislocations; each gives one of positions, spacing and relaxed. Old "
                     "name of the table: [[dislocations]].", (
    _NAME,
    Key("interface", _int_between(0, rd.MAX_ITEMS),
        "The lines lie at the bottom of layer[interface].",
        required="the interface index: the lines lie at the bottom of layer[interface]"),
    Key("line", INDICES, "Line direction [uvw] in the crystal axes of the layer above.",
        required="the line direction [u, v, w] (crystal axes of the layer above)"),
    Key("burgers", INDICES, "Direction of the Burgers vector, same axes.",
        required="the Burgers vector direction [u, v, w], e.g. [1, 0, 1] with "
                 "burgers_fraction = 0.5"),
    Key("burgers_fraction", Kind(rd.positive_number, _number(exclusiveMinimum=0, maximum=1e6)),
        "b = burgers_fraction * a * [uvw].", default=1.0),
    Key("positions", Kind(rd.lengths_list, {"type": "array", "items": _ref("length"),
                                            "minItems": 1, "maxItems": rd.MAX_ITEMS}),
        "Positions of the lines from the pattern centre, normal to the lines."),
    Key("spacing", POSITIVE_LENGTH, "Line spacing of a periodic array."),
    Key("relaxed", Kind(rd.relaxation, _number(exclusiveMinimum=0, maximum=1)),
        "Fraction of the layer's mismatch the lines relieve (as [[layer]] relaxed); sets the "
        "spacing. Old name: relaxation.", attr="relaxation"),
    Key("offset", LENGTH, "Position of one line of a spacing/relaxation array.", default=0.0,
        echo_if=lambda d: d.positions is None),
), array=True)

# [material.NAME]: materials of one's own, in the general format of the built-in database
# (read and checked by mesastrain.physics.materials.material_from_table; every error names
# material.NAME.KEY). Declared here for the key list and the JSON Schema.
_CONST = Kind(lambda v, k: v, _number())
_STIFFNESS_DOC = {"E": "Young's modulus, GPa (isotropic).", "nu": "Poisson's ratio (isotropic).",
                  "C": "Full symmetric 6x6 Voigt stiffness in crystal axes, GPa (anisotropic)."}
MATERIAL_KEYS = (
    Key("system", _choice(SYMMETRY_SYSTEMS), "Symmetry system; it sets which constants are "
                                             "given.", required="the symmetry system"),
    *(Key(name, Kind(lambda v, k: v, {"type": "array", "minItems": 6, "maxItems": 6, "items": {
        "type": "array", "items": {"type": "number"}, "minItems": 6, "maxItems": 6}})
                     if name == "C" else _CONST,
          _STIFFNESS_DOC.get(name, f"Stiffness constant {name}, GPa, crystal axes."))
      for name in dict.fromkeys(k for keys in STIFFNESS_KEYS.values() for k in keys)),
    Key("a", _CONST, "Lattice constant a, Angstrom (none: a deposited film without a lattice "
                     "to match)."),
    Key("b", _CONST, "Lattice constant b, Angstrom (orthorhombic, anisotropic)."),
    Key("c", _CONST, "Lattice constant c, Angstrom."),
    Key("alpha", Kind(lambda v, k: v, {"anyOf": [_number(), {
        "type": "array", "items": {"type": "number"}, "minItems": 1, "maxItems": 3}]}),
        "Thermal expansion, 1e-6/K: one value, or per crystal axis (a, c) or (x, y, z)."),
    Key("source", Kind(lambda v, k: v, {"anyOf": [{"type": "string"}, {
        "type": "object", "additionalProperties": {"type": "string"}}]}),
        "Where the numbers come from: a string, or a table of strings per quantity."),
    Key("structure", STRING, 'E.g. "wurtzite", "amorphous".'),
    Key("spread", Kind(lambda v, k: v, {"type": "object", "additionalProperties": False,
                                        "properties": {q: {"type": "object"} for q in
                                                       ("stiffness", "lattice", "alpha")}}),
        "Published scatter per quantity (stiffness, lattice, alpha): a table of the second "
        "source's values (or [low, high] ranges) with a source string, e.g. { C11 = 118.8, "
        "C12 = 53.7, source = \"...\" }; [uncertainty] propagates it."),
    Key("replace_builtin", BOOL, "true: the NAME is meant to replace the built-in material of "
                                 "that name.", default=False),
)
MATERIAL = Table("material", "materials", "Materials of one's own, [material.NAME], used by "
                 "layers and substrate by NAME.", MATERIAL_KEYS)

#: Every table, in the order the unknown-key error lists them (after ``title``).
TABLES = (SUBSTRATE, LAYER, LINER, PATTERN, THERMAL, MESH, SOLVER, PROBE, CUT, OUTPUT, CHANNEL,
          DEVICE, READOUTS, DISLOCATIONS, UNCERTAINTY)
#: The allowed top-level keys.
TOP_KEYS = (TITLE.name, ABOUT.name, MATERIAL.name) + tuple(t.name for t in TABLES)
_BY_NAME = {t.name: t for t in TABLES}


def table(name: str) -> Table:
    """The declaration of table ``name`` (``"mesh"``, ``"layer"``, ...)."""
    return _BY_NAME[name]


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
