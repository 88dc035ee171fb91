"""The JSON Schema (draft 2020-12) of the case file, generated from the declarations.

:func:`json_schema` turns every :class:`~mesastrain.case.keys.Key` and
:class:`~mesastrain.case.keys.Table` of :mod:`mesastrain.case.schema` into JSON Schema;
the shipped copy is :data:`mesastrain.case.schema.SCHEMA_FILE`
(``python -m mesastrain.case.schema_json`` rewrites it, a test checks it is current).
"""

from __future__ import annotations

import copy
import json

from mesastrain.case import readers as rd
from mesastrain.case.keys import Key, Table
from mesastrain.case.renames import add_old_names
from mesastrain.case.schema import (
    _UNSIGNED,
    ABOUT,
    FIELD_COMPONENTS,
    LAYER,
    MATERIAL,
    PATTERN,
    SCHEMA_FILE,
    SHAPE_KEYS,
    SHAPE_REQUIRES,
    SUBSTRATE,
    TABLES,
    TITLE,
    _enum,
    _with_unit,
)
from mesastrain.physics.materials import builtin_materials
from mesastrain.units import LENGTH_UNITS, MAX_LENGTH_NM, MAX_TEMPERATURE_K, TEMPERATURE_UNITS

__all__ = ["json_schema", "json_schema_text"]

#: Shared value definitions (``$defs``) the keys refer to with ``$ref``.
_DEFS = {
    "material": {"description": "A built-in material name (`mesastrain materials`), an alloy "
                                "spelled as a formula, or the NAME of a [material.NAME] table.",
                 "type": "string", "examples": list(builtin_materials())},
    "stress": {"description": 'A stress with its unit, tensile positive, e.g. "1.5 GPa", '
                              '"-800 MPa".',
               "type": "string", "pattern": _with_unit(rd.STRESS_UNITS)},
    "length": {"description": "A length: a number in nm or a string with a unit, e.g. "
                              '"40 nm", "2 um", "0.5 mm", "3.2 A"; at most 1e9 nm (1 m, more '
                              'than twice the largest wafer) in size.',
               "anyOf": [{"type": "number", "minimum": -MAX_LENGTH_NM,
                          "maximum": MAX_LENGTH_NM},
                         {"type": "string", "pattern": _with_unit(LENGTH_UNITS)}]},
    "positiveLength": {"description": "A length > 0, at most 1e9 nm (1 m).",
                       "anyOf": [{"type": "number", "exclusiveMinimum": 0,
                                  "maximum": MAX_LENGTH_NM},
                                 {"type": "string",
                                  "pattern": _with_unit(LENGTH_UNITS, r"\+?" + _UNSIGNED)}]},
    "temperature": {"description": 'A temperature: a number in degrees Celsius or a string '
                                   'with a unit, e.g. "700 C", "973.15 K"; above 0 K and at '
                                   f'most {MAX_TEMPERATURE_K:g} K (above every melting point '
                                   'of the materials tables), and below the lowest melting '
                                   'point of the stack\'s materials.',
                    "anyOf": [{"type": "number", "exclusiveMinimum": -273.15,
                               "maximum": round(MAX_TEMPERATURE_K - 273.15, 2)},
                              {"type": "string", "pattern": _with_unit(TEMPERATURE_UNITS)}]},
    "indices": {"description": f"Miller indices [h, k, l] or Miller-Bravais [h, k, i, l], "
                               f"each from -{rd.MAX_INDEX} to {rd.MAX_INDEX}.",
                "type": "array", "items": {"type": "integer", "minimum": -rd.MAX_INDEX,
                                           "maximum": rd.MAX_INDEX},
                "minItems": 3, "maxItems": 4},
    "point": {"description": "A point [x, y, z] of three lengths.",
              "type": "array", "items": {"$ref": "#/$defs/length"}, "minItems": 3,
              "maxItems": 3},
    "components": {"description": "Field components (a repeated name is drawn once).",
                   "type": "array", "minItems": 1, "maxItems": rd.MAX_ITEMS,
                   "items": {"enum": list(FIELD_COMPONENTS)}},
}


def _key_schema(k: Key) -> dict:
    out = dict(k.kind.json)
    doc = k.doc
    if k.computed:
        doc += f" Default: {k.computed}."
    out["description"] = doc
    if k.default is not None:
        out["default"] = k.kind.echo(k.default)
    return out


def _table_schema(tab: Table) -> dict:
    out = {"type": "object", "description": tab.doc,
           "properties": {k.name: _key_schema(k) for k in tab.keys},
           "additionalProperties": False}
    required = [k.name for k in tab.keys if k.required]
    if required:
        out["required"] = required
    if tab is PATTERN:
        every = tuple(k.name for k in PATTERN.keys if not k.shapes)
        out["allOf"] = [
            {"if": {"properties": {"shape": {"const": shape}}, "required": ["shape"]},
             "then": {"propertyNames": _enum(every + allowed),
                      **({"required": [n for n, _ in SHAPE_REQUIRES[shape]]}
                         if SHAPE_REQUIRES[shape] else {})}}
            for shape, allowed in SHAPE_KEYS.items()]
    if tab.array:
        del out["description"]
        out = {"type": "array", "description": tab.doc, "items": out, "maxItems": rd.MAX_ITEMS}
        if tab is LAYER:
            out["minItems"] = 1
    return out


def json_schema() -> dict:
    """The JSON Schema (draft 2020-12) of the case file, from the declarations.

    It checks names, types and the ranges a schema can express; the checks
    that combine keys (a rectangle's width, probes inside the body, ...) are
    made by :func:`mesastrain.case.parse.parse_case` only. The shipped copy
    is ``mesastrain/case/schemas/case-1.json``.

    Returns
    -------
    dict
    """
    props = {TITLE.name: _key_schema(TITLE), ABOUT.name: _key_schema(ABOUT)}
    one = _table_schema(MATERIAL)
    one["required"] = ["system"]
    props[MATERIAL.name] = {"type": "object", "description": MATERIAL.doc,
                            "additionalProperties": one}
    props.update({t.name: _table_schema(t) for t in TABLES})
    props = copy.deepcopy(props)        # the kinds' fragments are shared
    add_old_names(props)
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "title": "mesastrain case file",
        "description": "A stack of crystalline layers on a wafer, an etched pattern, and the "
                       "mesh, solver and output settings of one mesastrain run. Lengths are "
                       "in nm unless a unit is given; z = 0 at the substrate's top surface.",
        "type": "object",
        "properties": props,
        "required": [SUBSTRATE.name, LAYER.name],
        "additionalProperties": False,
        "$defs": copy.deepcopy(_DEFS),
    }


def json_schema_text() -> str:
    """:func:`json_schema` as the text of :data:`SCHEMA_FILE` (2-space indent, final newline)."""
    return json.dumps(json_schema(), indent=2, ensure_ascii=False) + "\n"


if __name__ == "__main__":      # python -m mesastrain.case.schema_json: rewrite the shipped file
    SCHEMA_FILE.write_text(json_schema_text(), encoding="utf-8")
    print(f"wrote {SCHEMA_FILE}")
