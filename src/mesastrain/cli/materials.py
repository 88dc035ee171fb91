"""``mesastrain materials``: the material database with its sources."""

from __future__ import annotations

from mesastrain.physics.materials import materials_table


def cmd_materials(args) -> int:
    """``mesastrain materials``: print the table; always 0."""
    print(materials_table())
    return 0


def add_command(subparsers) -> None:
    """Add ``mesastrain materials`` to the command line."""
    m = subparsers.add_parser("materials", help="list the material database with sources")
    m.set_defaults(func=cmd_materials)
