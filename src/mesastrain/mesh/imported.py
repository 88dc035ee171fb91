"""Imported meshes: ``[pattern] shape = "mesh"``.

A device the built-in shapes cannot describe is meshed elsewhere (gmsh or any
tool whose output meshio reads) and mapped to the case's regions::

    [pattern]
    shape = "mesh"
    file = "device.msh"          # relative to the case file
    unit = "nm"                  # unit of the file's coordinates (default nm)
    groups = { wafer = 0, pocket = 1 }   # physical group -> region

Region 0 is the ``[substrate]``, region i the i-th ``[[layer]]``: each carries
its material, orientation and eigenstrain as in a stack (a layer's lattice is
still referred to the one below it in the case file). The layers' thickness
values are not used for the geometry. Physical groups are the volume groups
named in a gmsh file; in a file without names, the group keys are the integer
values of its ``gmsh:physical`` (or only integer) cell-data array.

The mesh must be tetrahedral (``tetra``, or ``tetra10`` read by its corners),
z up, in the case's coordinates (z = 0 at the substrate top is not required).
Boundary conditions are the stack's: the lowest plane of the bounding box
held in z, its four lateral planes held normal to themselves (rollers), every
other surface free.
"""

from __future__ import annotations

import numpy as np

from mesastrain.errors import CaseError, MeshError
from mesastrain.mesh.structured import GridSpacing, UnstructuredMesh, box_boundary
from mesastrain.units import parse_length


def _group_regions(case, cell_data: dict, field_data: dict) -> np.ndarray:
    """Region of every volume cell from the case's group mapping."""
    pat = case.pattern
    mapping = dict(pat.groups)
    tags = None
    for name in ("gmsh:physical", *cell_data):
        arr = cell_data.get(name)
        if arr is not None and np.issubdtype(np.asarray(arr).dtype, np.integer):
            tags = np.asarray(arr).astype(np.int64)
            break
    if tags is None:
        raise CaseError("pattern.file", "the mesh has no physical groups (no integer cell data "
                                        "such as gmsh:physical); tag its volumes")
    named = {n: int(v[0]) for n, v in field_data.items() if len(v) >= 2 and int(v[1]) == 3}
    region = np.full(tags.shape, -1, dtype=np.int64)
    for name, reg in mapping.items():
        if name in named:
            tag = named[name]
        else:
            try:
                tag = int(name)
            except ValueError:
                have = ", ".join(sorted(named)) or "none (use the integer tags)"
                msg = f"no volume physical group of this name in the mesh; it has: {have}"
                raise CaseError(f"pattern.groups.{name}", msg) from None
        hit = tags == tag
        if not np.any(hit):
            raise CaseError(f"pattern.groups.{name}", f"physical group {name} (tag {tag}) has "
                                                      f"no volume cells in the mesh")
        region[hit] = reg
    if np.any(region < 0):
        left = sorted(set(tags[region < 0].tolist()))
        names = {v: n for n, v in named.items()}
        shown = ", ".join(names.get(t, str(t)) for t in left)
        raise CaseError("pattern.groups", f"{int(np.sum(region < 0))} cells belong to physical "
                                          f"group(s) {shown} that are not mapped to a region")
    return region


def _sizes(skm) -> GridSpacing:
    """Element sizes of an imported mesh (for the summary): the edge of a regular
    tetrahedron of the same volume, median (size), smallest (edge_size), largest."""
    v = skm.p[:, skm.t]
    vol = np.abs(np.einsum("ij,ij->j", np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0], axis=0),
                           v[:, 3] - v[:, 0])) / 6.0
    h = np.cbrt(vol * 6.0 * np.sqrt(2.0))
    return GridSpacing(size=float(np.median(h)), edge_size=float(h.min()), growth=1.0,
                       lateral_cap=float(h.max()))


def case_mesh_from_file(case) -> UnstructuredMesh:
    """Read the mesh of a ``shape = "mesh"`` case and tag its regions.

    Raises
    ------
    CaseError
        Unreadable file, unmapped or unknown groups, a probe or cut end
        outside the mesh.
    """
    from mesastrain.run.api import read_mesh, skfem_mesh

    pat = case.pattern
    scale = parse_length(f"1 {pat.unit or 'nm'}", "pattern.unit")
    try:
        pts, cells, kind, data, fdata = read_mesh(pat.file, scale)
    except MeshError as exc:
        raise CaseError("pattern.file", str(exc)) from None
    if kind != "tetra":
        raise CaseError("pattern.file", "the mesh holds hexahedra; imported meshes must be "
                                        "tetrahedral (tetra or tetra10)")
    region = _group_regions(case, data, fdata)
    skm = skfem_mesh(pts, cells, kind)
    um = UnstructuredMesh(mesh=skm, layer=region.astype(np.int32), kind="file",
                          boundary_conditions=box_boundary(skm.p), spacing=_sizes(skm),
                          description=f"imported from {pat.file} ({len(cells)} tetrahedra)")
    checks = [(f"probe[{i}].at", p.at) for i, p in enumerate(case.probes)]
    for i, c in enumerate(case.cuts):
        checks += [(f"cut[{i}].from", c.start), (f"cut[{i}].to", c.end)]
    if checks:
        found = um.locate(np.array([pt for _, pt in checks], dtype=float))
        for (key, pt), e in zip(checks, found):
            if e < 0:
                lo, hi = skm.p.min(axis=1), skm.p.max(axis=1)
                raise CaseError(key, f"{list(pt)} nm lies outside the imported mesh (bounding "
                                     f"box x {lo[0]:g}..{hi[0]:g}, y {lo[1]:g}..{hi[1]:g}, z "
                                     f"{lo[2]:g}..{hi[2]:g} nm)")
    return um


def estimate_file(case):
    """Counts of an imported mesh (the file is read; no finite elements are built)."""
    from mesastrain.run.api import read_mesh
    from mesastrain.run.resources import estimate_from_counts

    try:
        pts, cells, kind, _, _ = read_mesh(case.pattern.file)
    except MeshError as exc:
        raise CaseError("pattern.file", str(exc)) from None
    nodes = int(np.unique(cells).size)
    if case.mesh.order == 2:
        pairs = np.concatenate([cells[:, [a, b]] for a, b in
                                ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))])
        pairs.sort(axis=1)
        scalar = nodes + int(np.unique(pairs, axis=0).shape[0])
        return estimate_from_counts(case, nodes, len(cells), scalar, 10, 90)
    return estimate_from_counts(case, nodes, len(cells), nodes, 4, 45)
