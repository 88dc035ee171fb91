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

import difflib
import math

from mesastrain.case.outline import polygon_problem
from mesastrain.errors import CaseError
from mesastrain.physics.materials import is_alloy, known_materials
from mesastrain.physics.raman import device_parameters, pdp_sets
from mesastrain.units import is_number, parse_length, parse_temperature, show_value

__all__ = [
    "angle_between", "array_of_tables", "boolean", "channel_direction", "choice",
    "component_list", "fraction", "groups", "growth", "indices", "int_at_least", "length",
    "length_unit", "lengths_list", "material_name", "mesh_order", "missing",
    "nonnegative_length", "pitch", "point", "positive_length", "positive_number", "raman_pdp",
    "refine", "relaxation", "shape_name", "string", "temperature", "tolerance", "unknown_key",
    "vertices",
]

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
                             f"{key}), got {show_value(value)}")
    return value


# --------------------------------------------------------------------------
# scalars
# --------------------------------------------------------------------------
def positive_length(value, key: str) -> float:
    """A length > 0, nm."""
    v = parse_length(value, key)
    if not v > 0:
        raise CaseError(key, f"must be > 0, got {show_value(value)} ({v:.10g} nm)")
    return v


def nonnegative_length(value, key: str) -> float:
    """A length >= 0, nm."""
    v = parse_length(value, key)
    if not v >= 0:
        raise CaseError(key, f"must be >= 0, got {show_value(value)} ({v:.10g} nm)")
    return v


def string(value, key: str) -> str:
    """Any string."""
    if not isinstance(value, str):
        raise CaseError(key, f"expected a string, got {show_value(value)}")
    return value


def boolean(value, key: str) -> bool:
    """``true`` or ``false``."""
    if not isinstance(value, bool):
        raise CaseError(key, f"expected true or false, got {show_value(value)}")
    return value


def fraction(value, key: str) -> float:
    """A number from 0 to 1."""
    if not is_number(value) or not 0.0 <= value <= 1.0:
        raise CaseError(key, f"expected a number from 0 to 1, got {show_value(value)}")
    return float(value)


def positive_number(value, key: str) -> float:
    """A finite number > 0."""
    if not is_number(value) or not value > 0 or not math.isfinite(value):
        raise CaseError(key, f"expected a number > 0, got {show_value(value)}")
    return float(value)


def relaxation(value, key: str) -> float:
    """A relaxed fraction of the mismatch, > 0 and <= 1."""
    if not is_number(value) or not 0.0 < value <= 1.0:
        raise CaseError(key, f"expected a relaxed fraction of the mismatch, > 0 and <= 1, got "
                             f"{show_value(value)}")
    return float(value)


def mesh_order(value, key: str) -> int:
    """Element order, 1 or 2."""
    if not isinstance(value, int) or isinstance(value, bool) or value not in (1, 2):
        raise CaseError(key, f"expected 1 (linear) or 2 (quadratic elements), got "
                             f"{show_value(value)}")
    return value


def growth(value, key: str) -> float:
    """A grading ratio > 1 and <= 3."""
    if not is_number(value) or not 1.0 < value <= 3.0:
        raise CaseError(key, f"expected a grading ratio > 1 and <= 3, got {show_value(value)}")
    return float(value)


def tolerance(value, key: str) -> float:
    """A relative tolerance > 0 and <= 1e-2."""
    if not is_number(value) or not 0.0 < value <= 1e-2:
        raise CaseError(key, f"expected a relative tolerance > 0 and <= 1e-2, got "
                             f"{show_value(value)}")
    return float(value)


def refine(value, key: str) -> float:
    """A refinement factor from 0.25 to 16."""
    if not is_number(value) or not 0.25 <= value <= 16:
        raise CaseError(key, f"expected a refinement factor from 0.25 to 16 (element sizes are "
                             f"divided by it), got {show_value(value)}")
    return float(value)


def length_unit(value, key: str) -> str:
    """The name of a length unit, e.g. ``"nm"``."""
    if not isinstance(value, str):
        raise CaseError(key, f'expected a length unit such as "nm" or "um", got '
                             f'{show_value(value)}')
    try:
        parse_length(f"1 {value}", key)
    except CaseError:
        raise CaseError(key, f'{show_value(value)} is not a length unit; allowed: "nm", "um", '
                             f'"mm", "A"') from None
    return value


def material_name(value, key: str) -> str:
    """A material (or alloy) name known to :mod:`mesastrain.physics.materials`."""
    name = string(value, key)
    known = list(known_materials())
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
            raise CaseError(key, f"{show_value(value)} is not allowed; allowed: {choices}")
        return value
    return read


def int_at_least(low: int):
    """A reader of an integer >= ``low``."""
    def read(value, key):
        if not isinstance(value, int) or isinstance(value, bool) or value < low:
            raise CaseError(key, f"expected an integer >= {low}, got {show_value(value)}")
        return value
    return read


def angle_between(low: float, high: float):
    """A reader of a sidewall angle in degrees from ``low`` to ``high``."""
    def read(value, key) -> float:
        if not is_number(value) or not low <= value <= high:
            raise CaseError(key, f"expected an angle in degrees from the substrate plane, "
                                 f"{low:g} to {high:g} (90 = vertical), got {show_value(value)}")
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
            raise CaseError(key, f"{show_value(value)} is not a pattern shape; {hint}"
                                 f"allowed: {allowed}")
        return value
    return read


def component_list(allowed: tuple, what: str = "field component",
                   example: str = '["stress_xx", "von_mises"]'):
    """A reader of a non-empty list of names out of ``allowed`` (``what`` names them)."""
    def read(value, key: str) -> tuple:
        if not isinstance(value, list) or not value or not all(isinstance(v, str)
                                                                for v in value):
            raise CaseError(key, f'expected a list of {what} names, e.g. {example}, '
                                 f'got {show_value(value)}')
        for i, v in enumerate(value):
            if v not in allowed:
                close = difflib.get_close_matches(v, allowed, n=1)
                hint = f'did you mean "{close[0]}"? ' if close else ""
                raise CaseError(f"{key}[{i}]", f"{show_value(v)} is not a {what}; "
                                               f"{hint}allowed: {', '.join(allowed)}")
        return tuple(value)
    return read


# --------------------------------------------------------------------------
# lists and tables
# --------------------------------------------------------------------------
def lengths_list(value, key: str) -> tuple:
    """A non-empty list of lengths -> tuple of nm."""
    if not isinstance(value, list) or not value:
        raise CaseError(key, f"expected a non-empty list of lengths, e.g. [-100, 0, \"0.1 um\"], "
                             f"got {show_value(value)}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


def indices(value, key: str) -> tuple:
    """Miller (-Bravais) indices [h, k, l] or [h, k, i, l], integers, not all zero."""
    if (not isinstance(value, list) or len(value) not in (3, 4)
            or not all(is_number(v) for v in value)):
        raise CaseError(key, f"expected Miller indices [h, k, l] or [h, k, i, l] (integers), "
                             f"got {show_value(value)}")
    if not all(isinstance(v, int) for v in value):
        raise CaseError(key, f"Miller indices must be integers, got {show_value(value)}")
    if not any(value):
        raise CaseError(key, f"Miller indices must not be all zero, got {show_value(value)}")
    return tuple(value)


def point(value, key: str) -> tuple:
    """A point [x, y, z] of three lengths -> (x, y, z) in nm."""
    if not isinstance(value, list) or len(value) != 3:
        raise CaseError(key, f"expected a point [x, y, z] of three lengths, got "
                             f"{show_value(value)}")
    return tuple(parse_length(v, f"{key}[{i}]") for i, v in enumerate(value))


def vertices(value, key: str) -> tuple:
    """[[x, y], ...] -> ((x, y), ...) in nm, a simple polygon."""
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


def pitch(value, key: str) -> tuple:
    """A length or [px, py] -> (px, py) in nm (py None when one length is given)."""
    if isinstance(value, list):
        if len(value) not in (1, 2):
            raise CaseError(key, f"expected a length or [px, py], got {show_value(value)}")
        vals = tuple(positive_length(v, f"{key}[{i}]") for i, v in enumerate(value))
        return vals if len(vals) == 2 else (vals[0], None)
    return (positive_length(value, key), None)


def groups(value, key: str) -> tuple:
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


def channel_direction(value, key: str) -> tuple:
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


def raman_polarisation(value, key: str) -> tuple:
    """``[[ix, iy], [sx, sy]]`` (incident, scattered; sample frame) -> two in-plane 3-tuples."""
    if not isinstance(value, list) or len(value) != 2:
        raise CaseError(key, f"expected [incident, scattered], two in-plane directions, e.g. "
                             f"[[1, 0], [0, 1]], got {show_value(value)}")
    return tuple(channel_direction(v, f"{key}[{k}]") for k, v in enumerate(value))


def raman_pdp(value, key: str) -> tuple:
    """``{ Si = "apbpc1970", ... }`` -> sorted ((material, set), ...)."""
    known = {m: pdp_sets(m) for m in device_parameters()["raman"]}
    listing = "; ".join(f"{m}: {', '.join(s)}" for m, s in known.items())
    if not isinstance(value, dict):
        raise CaseError(key, f'expected a table material = "set", e.g. raman_pdp = '
                             f'{{ Si = "{known["Si"][-1]}" }}, got {show_value(value)}; '
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
