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

import contextlib
import io

import numpy as np

from mesastrain.errors import CaseError, MeshError
from mesastrain.fem.cost import Estimate, estimate_from_counts
from mesastrain.mesh.grid import GridSpacing
from mesastrain.mesh.unstructured import UnstructuredMesh, box_boundary
from mesastrain.units import MAX_LENGTH_NM, parse_length

#: Largest mesh file read, bytes: 2 GB holds some ten million tetrahedra, more than the
#: machines this runs on can solve.
MAX_MESH_FILE_BYTES = 2_000_000_000


def read_mesh(mesh, scale: float = 1.0):
    """Points and volume cells of a mesh.

    Parameters
    ----------
    mesh : meshio.Mesh, path, or (points, cells)
    scale : float
        Multiplies the coordinates (to nm).

    Returns
    -------
    points : ndarray (n, 3)
    cells : ndarray (m, 4) or (m, 8)
    kind : str
        ``"tetra"`` or ``"hexahedron"``.
    cell_data : dict of name -> ndarray (m,)
        Integer cell data of the volume cells (e.g. ``gmsh:physical``).
    field_data : dict
        meshio's field data (physical group names -> [tag, dim]).
    """
    if isinstance(mesh, tuple):
        pts, cells = (np.asarray(a) for a in mesh)
        kind = {4: "tetra", 10: "tetra", 8: "hexahedron"}.get(cells.shape[1])
        if kind is None:
            raise MeshError(f"cells with {cells.shape[1]} nodes; give tetrahedra (4) or "
                            f"hexahedra (8)")
        return np.asarray(pts, float) * scale, cells[:, :4 if kind == "tetra" else 8], kind, {}, {}
    import meshio

    if not isinstance(mesh, meshio.Mesh):
        mesh = _read_file(meshio, mesh)
    try:
        pts = np.asarray(mesh.points, dtype=float)
    except (TypeError, ValueError):
        raise MeshError("the mesh's point coordinates are not numbers") from None
    if pts.ndim != 2 or pts.shape[1] not in (2, 3):
        raise MeshError(f"the mesh's points have shape {pts.shape}; expected (n, 3)")
    if pts.shape[1] == 2:
        raise MeshError("the mesh is two-dimensional; give a 3-D volume mesh (tetrahedra)")
    blocks = [(k, b) for k, b in enumerate(mesh.cells)
              if b.type in ("tetra", "tetra10", "hexahedron")]
    kinds = {("hexahedron" if b.type == "hexahedron" else "tetra") for _, b in blocks}
    if not blocks:
        raise MeshError("the mesh has no tetrahedra or hexahedra (volume cells)")
    if len(kinds) > 1:
        raise MeshError("the mesh mixes tetrahedra and hexahedra; use one kind")
    kind = kinds.pop()
    nv = 4 if kind == "tetra" else 8
    cells = np.concatenate([b.data[:, :nv] for _, b in blocks])
    data = {}
    for name, arrays in mesh.cell_data.items():
        try:
            data[name] = np.concatenate([np.asarray(arrays[k]).ravel() for k, _ in blocks])
        except (IndexError, ValueError):
            continue
    return pts * scale, cells, kind, data, dict(mesh.field_data)


def _read_file(meshio, path):
    """``meshio.read`` with every way it can fail (some of its readers call ``sys.exit``)
    turned into one MeshError line."""
    from pathlib import Path

    path = Path(path)
    try:
        size = path.stat().st_size
    except OSError as exc:
        raise MeshError(f"cannot read the mesh file {path} ({exc.strerror or exc})") from None
    if not path.is_file():
        raise MeshError(f"{path} is not a regular file")
    if size > MAX_MESH_FILE_BYTES:
        raise MeshError(f"the mesh file {path} is {size / 1e9:.1f} GB; at most "
                        f"{MAX_MESH_FILE_BYTES / 1e9:g} GB")
    try:
        # meshio prints warnings on stderr and some readers sys.exit(1): keep one line
        with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
            mesh = meshio.read(str(path))
    except (KeyboardInterrupt, MemoryError):
        raise
    except BaseException as exc:    # SystemExit from meshio's readers, any parse error
        what = " ".join(str(exc).split()) if not isinstance(exc, SystemExit) else ""
        what = f" ({type(exc).__name__}: {what[:200]})" if what else ""
        raise MeshError(f"cannot read the mesh file {path}: not a mesh meshio can parse "
                        f"(format from the extension {path.suffix or 'none'}){what}") from None
    if len(mesh.points) == 0:
        raise MeshError(f"cannot read the mesh file {path}: it holds no points")
    return mesh


def check_geometry(points: np.ndarray, cells: np.ndarray) -> None:
    """Refuse what cannot be solved: bad node numbers, non-finite or absurd coordinates,
    flat cells, and pieces that are not joined to the rest through faces.

    Parameters
    ----------
    points : ndarray (n, 3)
        Coordinates in nm.
    cells : ndarray (m, 4)
        Tetrahedra (corner nodes).

    Raises
    ------
    MeshError
        One line saying what is wrong and how much of the mesh it concerns.
    """
    if cells.size == 0:
        raise MeshError("the mesh has no volume cells")
    if not np.issubdtype(cells.dtype, np.integer) or cells.min() < 0 or \
            cells.max() >= len(points):
        raise MeshError(f"cells refer to nodes that do not exist (the file has {len(points)} "
                        f"points)")
    used = np.unique(cells)
    p = points[used]
    bad = ~np.all(np.isfinite(p), axis=1)
    if np.any(bad):
        raise MeshError(f"{int(bad.sum())} node(s) have NaN or infinite coordinates (first: "
                        f"node {int(used[np.flatnonzero(bad)[0]])}); fix the mesh file")
    if np.max(np.abs(p)) > MAX_LENGTH_NM:
        raise MeshError(f"coordinates reach {np.max(np.abs(p)):.3g} nm, more than any wafer "
                        f"(at most {MAX_LENGTH_NM:.0e} nm); check pattern.unit")
    if cells.shape[1] == 4:
        v = points[cells]
        vol = np.einsum("ij,ij->i", np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]),
                        v[:, 3] - v[:, 0])
        span = float(np.max(np.ptp(p, axis=0)))
        flat = np.abs(vol) <= 1e-15 * span ** 3
        if np.any(flat):
            raise MeshError(f"{int(flat.sum())} tetrahedra have no volume (first: cell "
                            f"{int(np.flatnonzero(flat)[0])}); fix the mesh file")
    n_pieces, label = face_connected_pieces(cells)
    if n_pieces > 1:
        sizes = np.bincount(label)
        raise MeshError(f"the mesh falls apart into {n_pieces} pieces not joined through faces "
                        f"(cells per piece: {', '.join(str(int(n)) for n in sizes[:5])}"
                        f"{', ...' if n_pieces > 5 else ''}); a piece not joined to the held "
                        f"body would move freely. Join or remove it")


def face_connected_pieces(cells: np.ndarray) -> tuple[int, np.ndarray]:
    """Pieces of a tetrahedral (or hexahedral) mesh whose cells share whole faces.

    Two cells that touch only at a node or an edge can turn about it, so they
    count as separate pieces.

    Parameters
    ----------
    cells : ndarray (m, 4) or (m, 8)

    Returns
    -------
    n : int
        Number of pieces.
    label : ndarray (m,)
        The piece of each cell.
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    m = len(cells)
    if cells.shape[1] == 4:
        local = np.array([[0, 1, 2], [0, 1, 3], [0, 2, 3], [1, 2, 3]])
    else:       # VTK hexahedron faces
        local = np.array([[0, 1, 2, 3], [4, 5, 6, 7], [0, 1, 5, 4], [1, 2, 6, 5],
                          [2, 3, 7, 6], [3, 0, 4, 7]])
    faces = np.sort(cells[:, local], axis=2).reshape(-1, local.shape[1])
    owner = np.repeat(np.arange(m), len(local))
    _, face_id = np.unique(faces, axis=0, return_inverse=True)
    face_id = face_id.ravel()
    order = np.argsort(face_id, kind="stable")
    fid, own = face_id[order], owner[order]
    same = fid[1:] == fid[:-1]
    a, b = own[:-1][same], own[1:][same]
    graph = coo_matrix((np.ones(a.size), (a, b)), shape=(m, m))
    return connected_components(graph, directed=False)


def skfem_mesh(points: np.ndarray, cells: np.ndarray, kind: str):
    """A scikit-fem mesh from meshio-ordered points and cells (unused points dropped)."""
    from skfem import MeshHex, MeshTet

    used = np.unique(cells)
    remap = np.full(len(points), -1, dtype=np.int64)
    remap[used] = np.arange(len(used))
    p = np.ascontiguousarray(points[used].T)
    t = np.ascontiguousarray(remap[cells].T)
    if kind == "tetra":
        return MeshTet(p, t)
    # meshio (VTK) hexahedron order -> scikit-fem's
    from skfem.io.meshio import INV_HEX_MAPPING

    return MeshHex(p, np.ascontiguousarray(t[np.asarray(INV_HEX_MAPPING)[:8]]))


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
    mapped_by = {}
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
        if tag in mapped_by:
            raise CaseError(f"pattern.groups.{name}", f"names tag {tag}, already mapped by "
                                                      f"pattern.groups.{mapped_by[tag]}; map "
                                                      f"each physical group once")
        mapped_by[tag] = name
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
    pat = case.pattern
    pts, cells, kind, data, fdata = _checked_file(case)
    region = _group_regions(case, data, fdata)
    skm = skfem_mesh(pts, cells, kind)
    um = UnstructuredMesh(mesh=skm, region=region.astype(np.int32), kind="file",
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


def _checked_file(case):
    """Read the case's mesh file (scaled to nm) and check it; errors name ``pattern.file``."""
    pat = case.pattern
    scale = parse_length(f"1 {pat.unit or 'nm'}", "pattern.unit")
    try:
        pts, cells, kind, data, fdata = read_mesh(pat.file, scale)
        if kind != "tetra":
            raise MeshError("the mesh holds hexahedra; imported meshes must be tetrahedral "
                            "(tetra or tetra10)")
        check_geometry(pts, cells)
    except MeshError as exc:
        raise CaseError("pattern.file", str(exc)) from None
    return pts, cells, kind, data, fdata


def handles(pattern) -> bool:
    """``shape = "mesh"``: the case brings its own mesh file."""
    return pattern.shape == "mesh"


def build_file_mesh(case, mirrors=()) -> UnstructuredMesh:
    """The registry's ``build``: an imported mesh is always whole (``mirrors`` unused)."""
    return case_mesh_from_file(case)


def estimate_file(case) -> Estimate:
    """Counts of an imported mesh (the file is read and checked as for a run; no finite
    elements are built)."""
    pts, cells, kind, data, fdata = _checked_file(case)
    _group_regions(case, data, fdata)
    nodes = int(np.unique(cells).size)
    if case.mesh.order == 2:
        pairs = np.concatenate([cells[:, [a, b]] for a, b in
                                ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))])
        pairs.sort(axis=1)
        scalar = nodes + int(np.unique(pairs, axis=0).shape[0])
        return estimate_from_counts(case, nodes, len(cells), scalar, 10, 90)
    return estimate_from_counts(case, nodes, len(cells), nodes, 4, 45)
