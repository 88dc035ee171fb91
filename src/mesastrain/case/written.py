"""Quantities as the author of a case file wrote them, for outputs that echo the inputs.

A case is computed in nm, K and MPa, but a report that shows "725000 nm" for a wafer
written as "725 um", or "973.15 K" for "700 C", reads wrong. The parser keeps the text of
every quantity with a unit (:func:`written_quantities`), with each unit spelled one way
(µm, °C, Å: :func:`mesastrain.units.as_written`), in ``Case.written``.
"""

from __future__ import annotations

from mesastrain.case.keys import Kind
from mesastrain.case.schema import (
    LENGTH,
    NONNEGATIVE_LENGTH,
    PITCH,
    POSITIVE_LENGTH,
    STRESS,
    TABLES,
    TEMPERATURE,
)
from mesastrain.units import as_written

__all__ = ["bare_unit", "written_quantities"]


def bare_unit(kind: Kind) -> str | None:
    """The unit a bare number of a quantity kind means (None: not a quantity with a unit)."""
    for k, unit in ((LENGTH, "nm"), (POSITIVE_LENGTH, "nm"), (NONNEGATIVE_LENGTH, "nm"),
                    (PITCH, "nm"), (TEMPERATURE, "°C"), (STRESS, "MPa")):
        if kind is k:
            return unit
    return None


def written_quantities(data: dict) -> tuple:
    """((key path, text as written), ...) of every quantity with a unit in a case-file dict.

    ``"725 um"`` is kept as ``"725 µm"``, a bare number with the unit it means (``40`` ->
    ``"40 nm"``, a temperature ``20`` -> ``"20 °C"``); a pitch of two lengths as
    ``"1 µm, 2 µm"``. The dict uses the current key names
    (:func:`mesastrain.case.renames.modernise`).
    """
    out = []
    for tab in TABLES:
        value = data.get(tab.name)
        items = value if isinstance(value, list) else [value]
        for i, t in enumerate(items):
            if not isinstance(t, dict):
                continue
            where = f"{tab.name}[{i}]" if tab.array else tab.name
            for k in tab.keys:
                unit = bare_unit(k.kind)
                if unit is None or k.name not in t:
                    continue
                v = t[k.name]
                text = (", ".join(as_written(x, unit) or "?" for x in v)
                        if isinstance(v, list) else as_written(v, unit))
                if text:
                    out.append((f"{where}.{k.name}", text))
    return tuple(out)
