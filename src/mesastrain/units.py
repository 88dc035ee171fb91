"""Lengths and temperatures as written in case files.

A case file gives a length either as a bare number, read in nanometres, or as
a string with a unit: ``"40 nm"``, ``"2 um"`` (also ``"2 µm"``), ``"0.5 mm"``
or ``"3.2 A"`` (also ``"3.2 Å"``, Angstrom). Metres are deliberately not
accepted: a wafer-scale unit in a nanometre model is almost always a typo.

A temperature is a bare number in degrees Celsius, or a string ``"700 C"``,
``"700 °C"``, ``"700 degC"`` or ``"973.15 K"``. The parsed value is always in
kelvin.

Booleans are never numbers here (TOML ``true`` is rejected), nor are NaN or
infinity, nor integers too large for a float. Lengths are bounded by
:data:`MAX_LENGTH_NM` (1 m: more than twice the largest wafer, 450 mm, SEMI
M1), temperatures by :data:`MAX_TEMPERATURE_K` (see there). Every failure raises :class:`mesastrain.errors.CaseError` naming
the case-file key it came from.
"""

from __future__ import annotations

import decimal
import math
import re
from decimal import Decimal

from mesastrain.errors import CaseError

__all__ = ["LENGTH_UNITS", "MAX_LENGTH_NM", "MAX_TEMPERATURE_K", "TEMPERATURE_UNITS",
           "as_written", "finite_float", "fmt", "is_number", "parse_length", "parse_temperature", "safe_name",
           "show_value"]

#: Length units accepted in strings, and their size in nanometres.
LENGTH_UNITS = {
    "nm": 1.0,
    "um": 1.0e3,
    "\u00b5m": 1.0e3,   # MICRO SIGN
    "\u03bcm": 1.0e3,   # GREEK SMALL LETTER MU
    "mm": 1.0e6,
    "A": 0.1,           # Angstrom
    "\u00c5": 0.1,      # LATIN CAPITAL LETTER A WITH RING ABOVE
    "\u212b": 0.1,      # ANGSTROM SIGN
}

#: Temperature units accepted in strings: name -> offset added to get kelvin.
TEMPERATURE_UNITS = {
    "C": 273.15,
    "\u00b0C": 273.15,
    "degC": 273.15,
    "K": 0.0,
}

#: Largest length (absolute value) a case may give, nm: 1 m, more than twice the diameter of
#: the largest standard wafer (450 mm, SEMI M1). Anything longer is a typo, and would
#: overflow the mesh planning.
MAX_LENGTH_NM = 1.0e9
#: Highest temperature a case may give, K. Above the melting point of every crystal in the
#: materials table (the highest, AlN, melts near 3500 K: CRC Handbook of Chemistry and
#: Physics, recalled from memory); the stack's own lowest melting point is checked with the
#: materials (:func:`mesastrain.physics.thermal.melting_point`).
MAX_TEMPERATURE_K = 3500.0

#: 0 degrees Celsius in kelvin (SI Brochure, BIPM, 9th ed. 2019: T/K = t/degC + 273.15).
ZERO_CELSIUS = 273.15

_NUMBER_WITH_UNIT = re.compile(
    r"^\s*(?P<num>[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*(?P<unit>\S.*?)?\s*$")

_LENGTH_EXAMPLES = 'give a number in nm or a string such as "40 nm", "2 um", "0.5 mm"'
_LENGTH_ALLOWED = "allowed units: nm, um (µm), mm, A (Å)"
_TEMPERATURE_EXAMPLES = 'give a number in degrees Celsius or a string such as "700 C", "973 K"'
_TEMPERATURE_ALLOWED = "allowed units: C (°C, degC), K"


#: show_value keeps error lines short: longer strings, lists and integers are summarised.
_SHOWN_CHARS, _SHOWN_ITEMS, _SHOWN_DIGITS = 80, 20, 30


def show_value(value) -> str:
    """Render a case-file value the way it would be written in TOML, for messages.

    Strings over 80 characters are cut, lists of more than 20 items and
    integers of 30 digits or more are summarised ("a list of 100000 items"),
    so an error line stays short whatever the file holds.

    Parameters
    ----------
    value : object
        A value as produced by :mod:`tomllib`.

    Returns
    -------
    str
        Strings in double quotes, ``true``/``false`` for booleans, lists in
        brackets, ``a table`` for dicts, numbers as Python prints them.
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        escaped = value.replace("\\", "\\\\").replace('"', '\\"')
        if len(escaped) > _SHOWN_CHARS:
            return f'"{escaped[:_SHOWN_CHARS - 3]}..." ({len(value)} characters)'
        return f'"{escaped}"'
    if isinstance(value, int) and abs(value) >= 10**_SHOWN_DIGITS:
        return f"an integer of {len(str(abs(value)))} digits"
    if isinstance(value, (list, tuple)):
        if len(value) > _SHOWN_ITEMS:
            return f"a list of {len(value)} items"
        return "[" + ", ".join(show_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "a table"
    if value is None:
        return "nothing"
    return str(value)


def fmt(value: float, spec: str = ".4g") -> str:
    """A number formatted with ``spec`` and never shown as ``-0`` (the one table formatter).

    A value that rounds to zero at the requested precision is written without its
    sign (``fmt(-0.04, ".1f")`` is ``"0.0"``, not ``"-0.0"``), so that terminal tables,
    CSV files and the report show the same text for the same number.

    Parameters
    ----------
    value : float
    spec : str
        A format spec as for :func:`format` (``".1f"``, ``"10.1f"``, ``"+.3g"``).

    Returns
    -------
    str
    """
    text = format(value, spec)
    if ("-" in text and math.isfinite(value)
            and not any(c in "123456789" for c in text.lower().split("e")[0])):
        return format(0.0, spec)    # a negative that rounds to zero: no sign
    return text


#: How output text writes each accepted unit (one spelling per unit, Unicode).
_SHOWN_UNIT = {"um": "µm", "\u03bcm": "µm", "\u00b5m": "µm", "A": "Å", "\u212b": "Å",
               "\u00c5": "Å", "C": "°C", "degC": "°C", "\u00b0C": "°C"}


def as_written(value, bare_unit: str) -> str | None:
    """A quantity of the case file as its author wrote it, with the unit spelled one way.

    ``"725 um"`` -> ``"725 µm"``, ``"700 C"`` -> ``"700 °C"``, ``40`` -> ``"40 nm"`` (with
    ``bare_unit = "nm"``: the unit a bare number means). None for other values.

    Parameters
    ----------
    value : str or number
        As read from TOML.
    bare_unit : str
        The unit of a bare number (``"nm"`` for lengths, ``"°C"`` for temperatures).
    """
    if isinstance(value, bool):
        return None
    if is_number(value):
        return f"{value:g} {bare_unit}"
    if not isinstance(value, str):
        return None
    m = _NUMBER_WITH_UNIT.match(value)
    if m is None or not m.group("unit"):
        return None
    unit = m.group("unit")
    return f"{m.group('num')} {_SHOWN_UNIT.get(unit, unit)}"


def is_number(value) -> bool:
    """True for an int or float that is not a bool (TOML ``true`` is not a number)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def finite_float(value) -> float | None:
    """``value`` as a finite float; None for NaN, infinity and integers too large for a float.

    Parameters
    ----------
    value : int or float
        A number (:func:`is_number`).

    Returns
    -------
    float or None
    """
    try:
        v = float(value)
    except OverflowError:       # an integer of hundreds of digits
        return None
    return v if math.isfinite(v) else None


def _split(value: str):
    """Split ``"40 nm"`` into (Decimal("40"), "nm"); None when it does not look like that."""
    m = _NUMBER_WITH_UNIT.match(value)
    if m is None:
        return None
    return Decimal(m.group("num")), m.group("unit")


def _scaled(number: Decimal, factor: float, offset: float = 0.0) -> float:
    """number * factor + offset in exact decimal arithmetic, then rounded once to float.

    So "3.2 A" gives exactly the float 0.32 and 20 C exactly 293.15 K. An
    exponent beyond decimal's range gives +-inf or the offset (callers refuse inf).
    """
    try:
        return float(number * Decimal(repr(factor)) + Decimal(repr(offset)))
    except decimal.Overflow:
        return math.copysign(math.inf, number)
    except (decimal.Underflow, decimal.InvalidOperation):
        return math.inf


def parse_length(value, key: str) -> float:
    """Read a case-file length.

    Parameters
    ----------
    value : int, float or str
        A number (nm) or a string with a unit: ``"40 nm"``, ``"2 um"``,
        ``"2 µm"``, ``"0.5 mm"``, ``"3.2 A"``, ``"3.2 Å"``. The sign is kept;
        callers check positivity.
    key : str
        Case-file key path, used in the error.

    Returns
    -------
    float
        The length in nm.

    Raises
    ------
    CaseError
        Booleans, non-finite numbers, strings without a unit or with a unit
        not in :data:`LENGTH_UNITS`, and any other type.
    """
    if is_number(value):
        nm = finite_float(value)
        if nm is None:
            raise CaseError(key, f"{_short(value)} is not a finite length; {_LENGTH_EXAMPLES}")
        return _bounded_length(nm, value, key)
    if isinstance(value, str):
        parts = _split(value)
        if parts is None:
            raise CaseError(key, f"'{value}' is not a length; {_LENGTH_EXAMPLES}")
        number, unit = parts
        if unit is None:
            raise CaseError(key, f"'{value}' has no unit; write {value.strip()} (a number, nm) "
                                 f"or a string with a unit, {_LENGTH_ALLOWED}")
        if unit not in LENGTH_UNITS:
            if unit in ("m", "cm", "pm", "km", "in", "ft"):
                raise CaseError(key, f"'{value}': unit '{unit}' is not accepted; {_LENGTH_ALLOWED}")
            raise CaseError(key, f"'{value}' is not a length; {_LENGTH_EXAMPLES}")
        nm = _scaled(number, LENGTH_UNITS[unit])
        if not math.isfinite(nm):
            raise CaseError(key, f"{_short(value)} is not a finite length; {_LENGTH_EXAMPLES}")
        return _bounded_length(nm, value, key)
    raise CaseError(key, f"{_short(value)} is not a length; {_LENGTH_EXAMPLES}")


def _short(value, limit: int = 60) -> str:
    """:func:`show_value`, cut to ``limit`` characters (a 400-digit number stays readable)."""
    text = show_value(value) if not isinstance(value, int) or value.bit_length() < 200 else (
        f"an integer of {len(str(abs(value)))} digits")
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _bounded_length(nm: float, value, key: str) -> float:
    if abs(nm) > MAX_LENGTH_NM:
        raise CaseError(key, f"{_short(value)} is {nm:.3g} nm, longer than any wafer; give at "
                             f"most {MAX_LENGTH_NM:.0e} nm (1 m) in size")
    return nm


def parse_temperature(value, key: str) -> float:
    """Read a case-file temperature.

    Parameters
    ----------
    value : int, float or str
        A number in degrees Celsius, or a string ``"700 C"``, ``"700 °C"``,
        ``"700 degC"`` or ``"973.15 K"``.
    key : str
        Case-file key path, used in the error.

    Returns
    -------
    float
        The absolute temperature in kelvin (> 0).

    Raises
    ------
    CaseError
        Booleans, non-finite numbers, strings without an accepted unit, other
        types, and temperatures at or below absolute zero.
    """
    if is_number(value):
        celsius = finite_float(value)
        if celsius is None:
            raise CaseError(key, f"{_short(value)} is not a finite temperature; "
                                 f"{_TEMPERATURE_EXAMPLES}")
        kelvin = _scaled(Decimal(repr(celsius)), 1.0, ZERO_CELSIUS)
    elif isinstance(value, str):
        parts = _split(value)
        if parts is None:
            raise CaseError(key, f"'{value}' is not a temperature; {_TEMPERATURE_EXAMPLES}")
        number, unit = parts
        if unit is None:
            raise CaseError(key, f"'{value}' has no unit; write {value.strip()} (a number, "
                                 f"degrees Celsius) or a string with a unit, "
                                 f"{_TEMPERATURE_ALLOWED}")
        if unit not in TEMPERATURE_UNITS:
            raise CaseError(key, f"'{value}': unit '{unit}' is not accepted; "
                                 f"{_TEMPERATURE_ALLOWED}")
        kelvin = _scaled(number, 1.0, TEMPERATURE_UNITS[unit])
        if not math.isfinite(kelvin):
            raise CaseError(key, f"'{value}' is not a finite temperature; {_TEMPERATURE_EXAMPLES}")
    else:
        raise CaseError(key, f"{show_value(value)} is not a temperature; {_TEMPERATURE_EXAMPLES}")
    if not kelvin > 0.0:
        raise CaseError(key, f"{_short(value)} is {kelvin:g} K, at or below absolute zero; "
                             f"give a temperature above 0 K (-273.15 C)")
    if kelvin > MAX_TEMPERATURE_K:
        raise CaseError(key, f"{_short(value)} is {kelvin:.4g} K, above the melting point of "
                             f"every material in the tables; give at most "
                             f"{MAX_TEMPERATURE_K:g} K ({MAX_TEMPERATURE_K - ZERO_CELSIUS:g} C)")
    return kelvin


def safe_name(name: str, default: str = "cut") -> str:
    """A user-given name (of a cut, a channel) made safe for file and field names.

    Every run of characters other than ASCII letters, digits, ``_``, ``.``
    and ``-`` becomes one ``_``; leading and trailing ``.`` and ``_`` are
    dropped, so that the result is never hidden or empty.

    Parameters
    ----------
    name : str
    default : str, default: "cut"
        Returned when nothing is left.

    Returns
    -------
    str
        E.g. ``"through the stack"`` -> ``"through_the_stack"``.
    """
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("._") or default
