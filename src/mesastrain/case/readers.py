"""Value readers of the case file: ``(value, key) -> parsed value``.

Each reader takes one value as :mod:`tomllib` produced it and the dotted key
path of that value (``substrate.thickness``, ``probe[1].at``), and returns the
value in the form the case holds (lengths in nm, tuples instead of lists), or
raises :class:`mesastrain.errors.CaseError` naming that key path. Readers
know nothing about the table they sit in; :mod:`mesastrain.case.schema`
assigns a reader to each key, and the checks that combine keys are in
:mod:`mesastrain.case.parse`.

Readers that need a list of allowed values are built by a factory
(:func:`choice`, :func:`component_list`, :func:`shape_name`,
:func:`angle_between`, :func:`int_at_least`), so the allowed values are
declared once, in the schema.
"""

from __future__ import annotations

import contextlib
import contextvars
import difflib
import math

from mesastrain.case.outline import polygon_problem
from mesastrain.errors import CaseError
from mesastrain.physics.bands import device_parameters
from mesastrain.physics.materials import builtin_materials, is_alloy
from mesastrain.physics.raman_data import pdp_sets
from mesastrain.units import (
    _split,
    finite_float,
    is_number,
    parse_length,
    parse_temperature,
    show_value,
)

__all__ = [
    "DIRECTION_NORM_RANGE", "MAX_INDEX", "MAX_ITEMS", "MAX_NAME", "MAX_VERTICES",
    "angle_between", "array_of_tables", "boolean", "channel_direction", "choice",
    "component_list", "fraction", "groups", "growth", "indices", "int_at_least", "int_between",
    "length", "length_unit", "lengths_list", "material_name", "mesh_order", "missing", "name",
    "nonnegative_length", "pitch", "point", "positive_length", "positive_number", "raman_pdp",
    "refine", "relaxation", "shape_name", "STRESS_UNITS", "stress", "string", "temperature",
    "tolerance", "unknown_key", "user_materials", "vertices",
]

#: Most items of an array of tables ([[layer]], [[probe]], [[cut]], ...) and of a list of
#: lengths: far beyond any real stack (a superlattice of a few hundred layers) and small
#: enough that validation stays well under a second.
MAX_ITEMS = 1000
#: Most vertices of a polygon outline. gmsh refines each outline edge on its own, so meshing
#: time grows faster than n (measured with the mesher's size callback in pure Python: 100
#: vertices 6 min on a loaded machine; with its one-point fast path 9.6 s quiet;
#: :data:`mesastrain.run.resources.POLYGON_SECONDS`, which ``check`` adds to its estimate).
#: A mask outline rarely needs more; bring finer geometry as a mesh file.
MAX_VERTICES = 256
#: Largest absolute Miller index: vicinal and high-index surfaces are written with indices of
#: a few tens; 999 keeps every product of indices exact in floating point.
MAX_INDEX = 999
#: Longest name of a probe, cut, channel or dislocation set: names become file names
#: (255 bytes on common file systems, with a prefix and suffix added).
MAX_NAME = 100
#: A direction's length must lie within these bounds (its square must stay a normal float,
#: IEEE 754 double: 2.2e-308 .. 1.8e308), so that normalising it is exact to rounding.
DIRECTION_NORM_RANGE = (1e-150, 1e150)

#: Stress units accepted in strings, and their size in MPa.
STRESS_UNITS = {"Pa": 1e-6, "kPa": 1e-3, "MPa": 1.0, "GPa": 1.0e3}
_STRESS_ALLOWED = "allowed units: " + ", ".join(STRESS_UNITS)

#: Names of the case's own materials ([material.NAME]) while its tables are read.
_USER_MATERIALS: contextvars.ContextVar = contextvars.ContextVar("user_materials", default=())


@contextlib.contextmanager
def user_materials(names):
    """Let :func:`material_name` accept ``names`` (a case's own materials) inside the block."""
    token = _USER_MATERIALS.set(tuple(names))
    try:
        yield
    finally:
        _USER_MATERIALS.reset(token)

#: A length: a number in nm or a string with a unit (:func:`mesastrain.units.parse_length`).
length = parse_length
#: A temperature: a number in degrees Celsius or a string with a unit, -> kelvin.
temperature = parse_temperature


# --------------------------------------------------------------------------
# errors shared by the table readers
# --------------------------------------------------------------------------
def unknown_key(key: str, name: str, allowed) -> CaseError:
    """The error for key ``name`` (path ``key``) not among ``allowed``, with a close match."""
    close = difflib.get_close_matches(name, allowed, n=1)
    hint = f'did you mean "{close[0]}"? ' if close else ""
    return CaseError(key, f"unknown key; {hint}allowed: {', '.join(allowed)}")


def missing(key: str, what: str) -> CaseError:
    """The error for a required key that is not given; ``what`` says what to give."""
    return CaseError(key, f"required key is missing; give {what}")


def array_of_tables(value, key: str) -> list:
    """Check that ``value`` is an array of tables (``[[key]]``) and return it."""
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise CaseError(key, f"expected an array of tables written as [[{key}]] (one per "
                             f"{key}), got {_brief(value)}")
    if len(value) > MAX_ITEMS:
        raise CaseError(key, f"{len(value)} [[{key}]] tables; at most {MAX_ITEMS}")
    return value


def _brief(value, limit: int = 80) -> str:
    """:func:`show_value` cut to ``limit`` characters (a huge list stays one short line)."""
    if isinstance(value, (list, tuple)) and len(value) > 20:
        return f"a list of {len(value)} items"
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 200:
        return f"an integer of {len(str(abs(value)))} digits"
    text = show_value(value)
    return text if len(text) <= limit else text[:limit - 3] + "..."


# --------------------------------------------------------------------------
# scalars
# --------------------------------------------------------------------------
def positive_length(value, key: str) -> float:
    """A length > 0, nm."""
    v = parse_length(value, key)
    if not v > 0:
        raise CaseError(key, f"must be > 0, got {_brief(value)} ({v:.10g} nm)")
    return v


def nonnegative_length(value, key: str) -> float:
    """A length >= 0, nm."""
    v = parse_length(value, key)
    if not v >= 0:
        raise CaseError(key, f"must be >= 0, got {_brief(value)} ({v:.10g} nm)")
    return v


def string(value, key: str) -> str:
    """Any string."""
    if not isinstance(value, str):
        raise CaseError(key, f"expected a string, got {_brief(value)}")
    return value


def name(value, key: str) -> str:
    """A name of an output item: a non-empty string of at most MAX_NAME characters."""
    text = string(value, key)
    if not text.strip() or len(text) > MAX_NAME:
        raise CaseError(key, f"expected a name of 1 to {MAX_NAME} characters, got "
                             f"{_brief(value)} ({len(text)} characters)")
    return text


def boolean(value, key: str) -> bool:
    """``true`` or ``false``."""
    if not isinstance(value, bool):
        raise CaseError(key, f"expected true or false, got {_brief(value)}")
    return value


def fraction(value, key: str) -> float:
    """A number from 0 to 1."""
    if not is_number(value) or not 0.0 <= value <= 1.0:
        raise CaseError(key, f"expected a number from 0 to 1, got {_brief(value)}")
    return float(value)


def stress(value, key: str) -> float:
    """A stress written with its unit, ``"1.5 GPa"`` or ``"-800 MPa"``; returns MPa.

    A bare number is refused: film stresses are quoted in MPa and GPa alike,
    and a unit-less 1.5 is ambiguous by a factor of 1000.
    """
    if is_number(value):
        raise CaseError(key, f"{show_value(value)} has no unit; write a string such as "
                             f'"{value} MPa" or "{value} GPa" (tensile positive); '
                             f"{_STRESS_ALLOWED}")
    if not isinstance(value, str):
        raise CaseError(key, f'expected a stress such as "1.5 GPa" or "-800 MPa", got '
                             f"{show_value(value)}")
    parts = _split(value)
    if parts is None:
        raise CaseError(key, f"'{value}' is not a stress; give a string such as \"1.5 GPa\" "
                             f"(tensile positive); {_STRESS_ALLOWED}")
    number, unit = parts
    if unit is None:
        raise CaseError(key, f"'{value}' has no unit; {_STRESS_ALLOWED}")
    if unit not in STRESS_UNITS:
        raise CaseError(key, f"'{value}': unit '{unit}' is not accepted; {_STRESS_ALLOWED}")
    v = float(number) * STRESS_UNITS[unit]
    if not math.isfinite(v) or abs(v) > 1e5:
        raise CaseError(key, f"'{value}' is beyond 100 GPa in magnitude; give the film stress "
                             f"in MPa or GPa")
    return v


def positive_number(value, key: str) -> float:
    """A finite number > 0 and at most 1e6 (a factor, not a size)."""
    v = finite_float(value) if is_number(value) else None
    if v is None or not 0 < v <= 1e6:
        raise CaseError(key, f"expected a number > 0 and <= 1e6, got {_brief(value)}")
    return v


def relaxation(value, key: str) -> float:
    """A relaxed fraction of the mismatch, > 0 and <= 1."""
    if not is_number(value) or not 0.0 < value <= 1.0:
        raise CaseError(key, f"expected a relaxed fraction of the mismatch, > 0 and <= 1, got "
                             f"{_brief(value)}")
    return float(value)


def mesh_order(value, key: str) -> int:
    """Element order, 1 or 2."""
    if not isinstance(value, int) or isinstance(value, bool) or value not in (1, 2):
        raise CaseError(key, f"expected 1 (linear) or 2 (quadratic elements), got "
                             f"{_brief(value)}")
    return value


def growth(value, key: str) -> float:
    """A grading ratio > 1 and <= 3."""
    if not is_number(value) or not 1.0 < value <= 3.0:
        raise CaseError(key, f"expected a grading ratio > 1 and <= 3, got {_brief(value)}")
    return float(value)


def tolerance(value, key: str) -> float:
    """A relative tolerance > 0 and <= 1e-2."""
    if not is_number(value) or not 0.0 < value <= 1e-2:
        raise CaseError(key, f"expected a relative tolerance > 0 and <= 1e-2, got "
                             f"{_brief(value)}")
    return float(value)


def refine(value, key: str) -> float:
    """A refinement factor from 0.25 to 16."""
    if not is_number(value) or not 0.25 <= value <= 16:
        raise CaseError(key, f"expected a refinement factor from 0.25 to 16 (element sizes are "
                             f"divided by it), got {_brief(value)}")
    return float(value)


def length_unit(value, key: str) -> str:
    """The name of a length unit, e.g. ``"nm"``."""
    if not isinstance(value, str):
        raise CaseError(key, f'expected a length unit such as "nm" or "um", got '
                             f'{_brief(value)}')
    try:
        parse_length(f"1 {value}", key)
    except CaseError:
        raise CaseError(key, f'{_brief(value)} is not a length unit; allowed: "nm", "um", '
                             f'"mm", "A"') from None
    return value


def material_name(value, key: str) -> str:
    """A built-in material (or alloy) name, or one of the case's own ``[material.NAME]``."""
    name = string(value, key)
    known = list(_USER_MATERIALS.get()) + builtin_materials()
    if name not in known and not is_alloy(name):  # is_alloy also knows formula spellings
        lower = {k.lower(): k for k in known}
        close = ([lower[name.lower()]] if name.lower() in lower
                 else difflib.get_close_matches(name, known, n=1))
        hint = f'did you mean "{close[0]}"? ' if close else ""
        raise CaseError(key, f"unknown material {show_value(name)}; {hint}"
                             f"known: {', '.join(known)}")
    return name


# --------------------------------------------------------------------------
# readers built from a list of allowed values
# --------------------------------------------------------------------------
def choice(allowed):
    """A reader of one string out of ``allowed``."""
    def read(value, key):
        if not isinstance(value, str) or value not in allowed:
            choices = ", ".join(f'"{a}"' for a in allowed)
            raise CaseError(key, f"{_brief(value)} is not allowed; allowed: {choices}")
        return value
    return read


def int_at_least(low: int):
    """A reader of an integer >= ``low`` (no upper bound beyond a 64-bit integer)."""
    return int_between(low, 2**63 - 1)


def int_between(low: int, high: int):
    """A reader of an integer from ``low`` to ``high``."""
    def read(value, key):
        if not isinstance(value, int) or isinstance(value, bool) or not low <= value <= high:
            raise CaseError(key, f"expected an integer >= {low} and <= {high}, got "
                                 f"{_brief(value)}")
        return value
    return read


def angle_between(low: float, high: float):
    """A reader of a sidewall angle in degrees from ``low`` to ``high``."""
    def read(value, key) -> float:
        if not is_number(value) or not low <= value <= high:
            raise CaseError(key, f"expected an angle in degrees from the substrate plane, "
                                 f"{low:g} to {high:g} (90 = vertical), got {_brief(value)}")
        return float(value)
    return read


def shape_name(shapes: tuple):
    """A reader of a pattern shape out of ``shapes``."""
    allowed = ", ".join(f'"{s}"' for s in shapes)

    def read(value, key) -> str:
        if not isinstance(value, str) or value not in shapes:
            close = (difflib.get_close_matches(value, shapes, n=1)
                     if isinstance(value, str) else [])
            hint = f'did you mean "{close[0]}"? ' if close else ""
            raise CaseError(key, f"{_brief(value)} is not a pattern shape; {hint}"
                                 f"allowed: {allowed}")
        return value
    return read


def component_list(allowed: tuple, what: str = "field component",
                   example: str = '["stress_xx", "von_mises"]'):
    """A reader of a non-empty list of names out of ``allowed`` (``what`` names them).

    Repeated names are dropped (first kept); a list longer than MAX_ITEMS is refused.
    """
    def read(value, key: str) -> tuple:
        if not isinstance(value, list) or not value or not all(isinstance(v, str)
                                                                for v in value):
            raise CaseError(key, f'expected a list of {what} names, e.g. {example}, '
                                 f'got {_brief(value)}')
        if len(value) > MAX_ITEMS:
            raise CaseError(key, f"{len(value)} names; at most {MAX_ITEMS} (there are "
                                 f"{len(allowed)} different ones)")
        for i, v in enumerate(value):
            if v not in allowed:
                close = difflib.get_close_matches(v, allowed, n=1)
                hint = f'did you mean "{close[0]}"? ' if close else ""
                raise CaseError(f"{key}[{i}]", f"{_brief(v)} is not a {what}; "
                                               f"{hint}allowed: {', '.join(allowed)}")
        return tuple(dict.fromkeys(value))
    return read


# --------------------------------------------------------------------------
# lists and tables
# --------------------------------------------------------------------------
def lengths_list(value, key: str) -> tuple:
    """A non-empty list of lengths -> tuple of nm."""
    if not isinstance(value, list) or not value:
        raise CaseError(key, f"expected a non-empty list of lengths, e.g. [-100, 0, \"0.1 um\"], "
                             f"got {_brief(value)}")
    if len(value) > MAX_ITEMS:
        raise CaseError(key, f"{len(value)} lengths; at most {MAX_ITEMS}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


def indices(value, key: str) -> tuple:
    """Miller (-Bravais) indices [h, k, l] or [h, k, i, l], integers, not all zero."""
    if (not isinstance(value, list) or len(value) not in (3, 4)
            or not all(is_number(v) for v in value)):
        raise CaseError(key, f"expected Miller indices [h, k, l] or [h, k, i, l] (integers), "
                             f"got {_brief(value)}")
    if not all(isinstance(v, int) for v in value):
        raise CaseError(key, f"Miller indices must be integers, got {_brief(value)}")
    if any(abs(v) > MAX_INDEX for v in value):
        raise CaseError(key, f"Miller indices must lie from -{MAX_INDEX} to {MAX_INDEX}, got "
                             f"{_brief(value)}")
    if not any(value):
        raise CaseError(key, f"Miller indices must not be all zero, got {_brief(value)}")
    return tuple(value)


#: Units a miscut angle may carry (degrees only).
ANGLE_UNITS = ("deg", "°")


def miscut(value, key: str) -> tuple:
    """{ angle = "4 deg", toward = [1, 1, 0] } -> (angle in degrees, toward indices).

    The angle is a number in degrees or a string with ``deg``/``°``; its range
    and the direction against the wafer normal are checked with the
    orientation (:func:`mesastrain.physics.crystal.miscut_rotation`).
    """
    example = 'e.g. { angle = "4 deg", toward = [1, 1, 0] }'
    if not isinstance(value, dict) or set(value) != {"angle", "toward"}:
        raise CaseError(key, f"expected a table with angle and toward, {example}, got "
                             f"{show_value(value)}")
    angle = value["angle"]
    if isinstance(angle, str):
        text = angle.strip()
        for unit in ANGLE_UNITS:
            if text.endswith(unit):
                text = text[: -len(unit)].strip()
                break
        else:
            raise CaseError(f"{key}.angle", f"expected degrees, a number or a string such as "
                                            f'"4 deg", got {show_value(angle)}')
        try:
            angle = float(text)
        except ValueError:
            raise CaseError(f"{key}.angle", f"expected degrees, a number or a string such as "
                                            f'"4 deg", got {show_value(value["angle"])}') from None
    if not is_number(angle) or not math.isfinite(angle):
        raise CaseError(f"{key}.angle", f"expected degrees, got {show_value(value['angle'])}")
    return (float(angle), indices(value["toward"], f"{key}.toward"))


def point(value, key: str) -> tuple:
    """A point [x, y, z] of three lengths -> (x, y, z) in nm."""
    if not isinstance(value, list) or len(value) != 3:
        raise CaseError(key, f"expected a point [x, y, z] of three lengths, got "
                             f"{_brief(value)}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


def vertices(value, key: str) -> tuple:
    """[[x, y], ...] -> ((x, y), ...) in nm, a simple polygon."""
    if not isinstance(value, list) or not all(isinstance(v, list) and len(v) == 2
                                              for v in value):
        raise CaseError(key, f"expected a list of points [[x, y], ...] (lengths), got "
                             f"{_brief(value)}")
    if len(value) > MAX_VERTICES:
        raise CaseError(key, f"{len(value)} vertices; at most {MAX_VERTICES} (bring a finer "
                             f"outline as a mesh file, shape = \"mesh\")")
    pts = tuple(tuple(parse_length(c, f"{key}[{i}][{j}]") for j, c in enumerate(v))
                for i, v in enumerate(value))
    problem = polygon_problem(pts)
    if problem:
        raise CaseError(key, f"not a usable outline: {problem}")
    return pts


def pitch(value, key: str) -> tuple:
    """A length or [px, py] -> (px, py) in nm (py None when one length is given)."""
    if isinstance(value, list):
        if len(value) not in (1, 2):
            raise CaseError(key, f"expected a length or [px, py], got {_brief(value)}")
        vals = tuple(positive_length(v, f"{key}[{i}]") for i, v in enumerate(value))
        return vals if len(vals) == 2 else (vals[0], None)
    return (positive_length(value, key), None)


def groups(value, key: str) -> tuple:
    """{name = region, ...} -> ((name, region), ...); region 0 / "substrate", i >= 1 or a name.

    A region given by a layer's name stays a string here; the cross-table checks
    (:meth:`mesastrain.case.checks.CrossChecks.pattern_fits`) turn it into its number.
    """
    if not isinstance(value, dict) or not value:
        raise CaseError(key, f'expected a table mapping physical group names to regions, e.g. '
                             f'{{ substrate = 0, film = 1 }}, got {_brief(value)}')
    if len(value) > MAX_ITEMS:
        raise CaseError(key, f"{len(value)} groups; at most {MAX_ITEMS}")
    out, tags = [], {}
    for group, region in value.items():
        if region == "substrate":
            region = 0
        named = isinstance(region, str) and 0 < len(region.strip()) <= MAX_NAME
        if not named and (not isinstance(region, int) or isinstance(region, bool) or region < 0
                          or region > MAX_ITEMS):
            raise CaseError(f"{key}.{group}", f'expected a region: "substrate" or 0, a layer\'s '
                                              f'name, or its number 1, 2, ... (bottom up), got '
                                              f'{_brief(region)}')
        tag = _integer_tag(group)
        if tag is not None:
            if tag in tags:
                raise CaseError(f"{key}.{group}", f"tag {tag} is already mapped by "
                                                  f"{key}.{tags[tag]}; map each group once")
            tags[tag] = group
        out.append((str(group), region))
    return tuple(out)


def _integer_tag(group: str) -> int | None:
    """The integer tag a group key names (``"2"``, ``"+2"``, ``"02"``), None for a name."""
    text = str(group).strip()
    if not text.lstrip("+-").isdigit() or len(text) > 18:
        return None
    return int(text)


def channel_direction(value, key: str) -> tuple:
    """An in-plane sample-frame direction [x, y] or [x, y, 0] -> (x, y, 0) as given."""
    if (not isinstance(value, list) or len(value) not in (2, 3)
            or not all(is_number(v) and finite_float(v) is not None for v in value)):
        raise CaseError(key, f"expected an in-plane direction [x, y] or [x, y, 0] in the sample "
                             f"frame (finite numbers), got {_brief(value)}")
    x, y = float(value[0]), float(value[1])
    norm = math.hypot(x, y)
    if norm == 0.0:
        raise CaseError(key, f"must not be a zero vector, got {_brief(value)}")
    low, high = DIRECTION_NORM_RANGE
    if not low <= norm <= high:
        raise CaseError(key, f"{_brief(value)} has length {norm:.3g}; give a direction of "
                             f"length {low:g} to {high:g} (e.g. [1, 0]); its square must stay "
                             f"a normal floating-point number")
    if len(value) == 3 and abs(float(value[2])) > 1e-9 * norm:
        raise CaseError(key, f"must lie in the wafer plane (z component 0; sample z is the "
                             f"normal), got {_brief(value)}")
    return (x, y, 0.0)


def raman_polarisation(value, key: str) -> tuple:
    """``[[ix, iy], [sx, sy]]`` (incident, scattered; sample frame) -> two in-plane 3-tuples."""
    if not isinstance(value, list) or len(value) != 2:
        raise CaseError(key, f"expected [incident, scattered], two in-plane directions, e.g. "
                             f"[[1, 0], [0, 1]], got {_brief(value)}")
    return tuple(channel_direction(v, f"{key}[{k}]") for k, v in enumerate(value))


def raman_pdp(value, key: str) -> tuple:
    """``{ Si = "apbpc1970", ... }`` -> sorted ((material, set), ...)."""
    known = {m: pdp_sets(m) for m in device_parameters()["raman"]}
    listing = "; ".join(f"{m}: {', '.join(s)}" for m, s in known.items())
    if not isinstance(value, dict):
        raise CaseError(key, f'expected a table material = "set", e.g. raman_pdp = '
                             f'{{ Si = "{known["Si"][-1]}" }}, got {_brief(value)}; '
                             f'known sets: {listing}')
    out = []
    for name, set_name in value.items():
        sub = f"{key}.{name}"
        if name not in known:
            raise CaseError(sub, f"no Raman data for {show_value(name)}; materials with "
                                 f"phonon deformation potentials: {', '.join(known)}")
        if not isinstance(set_name, str) or set_name not in known[name]:
            allowed = ", ".join(f'"{s}"' for s in known[name])
            raise CaseError(sub, f"{show_value(set_name)} is not a PDP set of {name}; "
                                 f"allowed: {allowed}")
        out.append((name, set_name))
    return tuple(sorted(out))
