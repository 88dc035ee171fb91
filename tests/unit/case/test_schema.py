"""The case-file schema: declarations, the shipped JSON Schema, and the demo cases against it.

The JSON Schema is generated from the declarations in mesastrain.case.schema and shipped as
package data. After changing a declaration, regenerate the shipped file with

    PYTHONPATH=src python -m mesastrain.case.schema_json

and commit src/mesastrain/case/schemas/case-1.json with the change.
"""

from __future__ import annotations

import dataclasses
import importlib.resources
import json
import tomllib
from pathlib import Path

import jsonschema
import pytest

from mesastrain.case import types
from mesastrain.case.parse import load_case, parse_case
from mesastrain.case.renames import RENAMED_TABLES
from mesastrain.case.schema import SCHEMA_FILE, TABLES, TOP_KEYS
from mesastrain.case.schema_json import json_schema, json_schema_text
from mesastrain.errors import CaseError

ROOT = Path(__file__).resolve().parents[3]
DATA = ROOT / "tests" / "data"
SWEEP_FILES = {"sweep_mesa_width.toml"}     # a sweep file, not a case file
CASE_FILES = sorted([p for p in (ROOT / "cases").glob("*.toml") if p.name not in SWEEP_FILES]
                    + list(DATA.glob("good_*.toml")))


def _shipped() -> dict:
    text = importlib.resources.files("mesastrain.case").joinpath(
        "schemas", SCHEMA_FILE.name).read_text(encoding="utf-8")
    return json.loads(text)


def test_shipped_schema_is_the_generated_one():
    # regenerate with: PYTHONPATH=src python -m mesastrain.case.schema_json
    assert SCHEMA_FILE.read_text(encoding="utf-8") == json_schema_text()
    assert _shipped() == json_schema()


def test_schema_is_valid_draft_2020_12():
    schema = _shipped()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)


def test_case_files_found():
    names = {p.name for p in CASE_FILES}
    assert {"good_mesa.toml", "good_blanket.toml", "mesa_width_base.toml"} <= names


@pytest.mark.parametrize("path", CASE_FILES, ids=lambda p: p.name)
def test_case_file_is_valid_against_the_schema(path):
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(_shipped()).validate(data)
    load_case(path)                  # and the parser agrees


@pytest.mark.parametrize("path", CASE_FILES, ids=lambda p: p.name)
def test_echo_is_valid_against_the_schema(path):
    # Case.to_dict() writes case-file keys, so the echo is a case file too
    echoed = json.loads(json.dumps(load_case(path).to_dict()))
    jsonschema.Draft202012Validator(_shipped()).validate(echoed)


@pytest.mark.parametrize("change, where", [
    ({"layers": []}, "layers"),                                        # unknown top-level key
    ({"mesh": {"refinement": 2}}, "refinement"),                       # unknown key
    ({"mesh": {"order": 3}}, "order"),                                 # value not allowed
    ({"pattern": {"shape": "disk", "width": 100}}, "width"),           # key of another shape
    ({"pattern": {"shape": "disk"}}, "diameter"),                      # missing for the shape
    ({"substrate": {"material": "Si"}}, "thickness"),                  # required key
    ({"layer": [{"material": "Si", "thickness": "40 m"}]}, "40 m"),    # not a length unit
])
def test_schema_rejects_what_the_parser_rejects(change, where):
    data = {"substrate": {"material": "Si", "thickness": "0.5 mm", "normal": [0, 0, 1],
                          "x_axis": [1, 1, 0]},
            "layer": [{"material": "SiGe", "x": 0.2, "thickness": 40}]}
    data.update(change)
    with pytest.raises(CaseError):
        parse_case(data)
    errors = list(jsonschema.Draft202012Validator(_shipped()).iter_errors(data))
    assert errors and any(where in (str(e.message) + str(list(e.path))) for e in errors)


def test_every_table_is_declared_once_with_its_dataclass():
    # each table's dataclass has exactly the declared keys as fields
    for tab in TABLES:
        cls = types.TABLE_TYPES[tab.name]
        assert {f.name for f in dataclasses.fields(cls)} == {k.field for k in tab.keys}
        assert tab.attr in {f.name for f in dataclasses.fields(types.Case)}
    # the schema also accepts the old table names, marked deprecated
    props = json_schema()["properties"]
    assert set(TOP_KEYS) == {k for k, v in props.items() if not v.get("deprecated")}
    assert {k for k, v in props.items() if v.get("deprecated")} == set(RENAMED_TABLES)


def test_dataclass_defaults_are_the_declared_ones():
    for tab in TABLES:
        cls = types.TABLE_TYPES[tab.name]
        for f in dataclasses.fields(cls):
            if f.default is not dataclasses.MISSING:
                key = next(k for k in tab.keys if k.field == f.name)
                assert f.default == key.default
