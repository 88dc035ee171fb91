"""Registry of mesh kinds: which mesher a case uses, and its size estimate.

Each kind is registered once, in order, from :mod:`mesastrain.mesh`'s
``__init__`` (in the way meshio registers its formats)::

    register_kind(name, build, estimate, handles)

* ``build(case, mirrors) -> ModelMesh`` meshes the case (``mirrors``: the
  axes of which only the non-negative side is modelled);
* ``estimate(case) -> mesastrain.fem.cost.Estimate`` counts the unknowns and
  prices memory and time without meshing;
* ``handles(pattern) -> bool`` says whether the kind meshes a case's
  ``[pattern]``. The first registered kind that handles the pattern is used,
  so the catch-all kind comes last.

A new pattern shape touches three files: ``case/parse.py`` (its keys), a mesh
module with ``build``, ``estimate`` and ``handles``, and
``mesh/__init__.py`` (one :func:`register_kind` call).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from mesastrain.case.types import Case
from mesastrain.errors import MeshError


@dataclass(frozen=True)
class MeshKind:
    """One registered mesh kind (see the module docstring)."""

    name: str
    build: Callable
    estimate: Callable
    handles: Callable


#: Registered kinds by name, in registration order.
KINDS: dict[str, MeshKind] = {}


def register_kind(name: str, build: Callable, estimate: Callable, handles: Callable) -> None:
    """Add a mesh kind to the registry (see the module docstring)."""
    if name in KINDS:
        raise ValueError(f"mesh kind {name!r} is already registered")
    KINDS[name] = MeshKind(name, build, estimate, handles)


def kind_of(case: Case) -> MeshKind:
    """The registered kind that meshes a case's pattern."""
    for kind in KINDS.values():
        if kind.handles(case.pattern):
            return kind
    raise MeshError(f"no mesh kind handles pattern shape {case.pattern.shape!r}")


def mesh_kind(case: Case) -> str:
    """Which mesher a case uses.

    Returns
    -------
    str
        ``"structured"`` (blanket stacks and rectangles, with or without
        sloped sidewalls: graded hexahedra), ``"section"`` (a stripe: the x-z
        cross-section in generalized plane strain), ``"gmsh"`` (disks,
        polygons, rectangles with rounded corners: tetrahedra) or ``"file"``
        (an imported mesh).
    """
    return kind_of(case).name


def build_mesh(case: Case, mirrors=()):
    """Mesh a case with its kind; returns a :class:`mesastrain.mesh.base.ModelMesh`."""
    return kind_of(case).build(case, tuple(mirrors))
