"""The case file: schema (each key declared once), readers, dataclasses, parser, checks.

:func:`mesastrain.case.parse.load_case` reads a TOML case file into a validated
:class:`mesastrain.case.types.Case`; :mod:`mesastrain.case.schema` declares its keys and
generates the shipped JSON Schema; :mod:`mesastrain.case.outline` holds the plan-view
outlines that the checks (and the meshers) use.
"""
