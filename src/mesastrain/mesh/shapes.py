"""Disks, polygons and rounded rectangles meshed with gmsh (tetrahedra).

The stack is built with gmsh's OpenCASCADE kernel as one solid per z slab:
every slab between two consecutive planes of {substrate bottom, layer
interfaces, etch floor} is the whole cell below the etch floor and the feature
above it (a prism of the outline, or with sloped sidewalls the ruled solid
between the outline at the top and its offset at the etch floor). The solids
are fragmented together, so layer interfaces and sidewalls are conforming
element faces. Each solid's region follows from its height.

Element sizes come from one function of position (:class:`SizeField`), used
both by gmsh (as its mesh-size callback) and by :func:`estimate_shape`:

    h = min(h_edge + (g - 1) d_side,  h_film + (g - 1) d_film,  h_max)

with d_side the distance to the sidewall surface (below the etch floor: to the
line where the sidewall meets the floor, i.e. the film/substrate edge and the
re-entrant etch corner), d_film the distance to the film (the feature above
the etch floor and any unetched layers below it) and g the grading ratio.

gmsh runs offscreen (``General.Terminal = 0``) and in-process; it is
initialised and finalised around each mesh.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass

import numpy as np

from mesastrain.case.outline import Outline, outline_of, taper_of
from mesastrain.errors import MeshError
from mesastrain.fem.cost import Estimate, estimate_from_counts
from mesastrain.mesh.gmsh_session import _Gmsh
from mesastrain.mesh.grid import GridSpacing, join_segments
from mesastrain.mesh.planning import film_reaches_side, liner_offsets, refinement_of
from mesastrain.mesh.shape_solids import region_solids, set_periodic
from mesastrain.mesh.unstructured import UnstructuredMesh, box_boundary

log = logging.getLogger(__name__)

#: Above this many expected tetrahedra gmsh meshes with its parallel 3-D algorithm (HXT,
#: Marot, Pellerin and Remacle, Int. J. Numer. Meth. Eng. 117, 2019) and with the size
#: function given as gmsh's own distance/threshold fields (evaluated in C++, not through
#: a Python callback, which cost about 0.5 ms a call and 80 % of the meshing time).
#: Below it the single-threaded Delaunay mesher and the exact callback are kept, so the
#: meshes of small cases (every demo case: at most 34k) stay what they were. At 70k
#: tetrahedra (L-shaped pad, mesh.size 11 nm) the callback path took 10.6 s of CPU time and
#: HXT with fields 3.3 s.
PARALLEL_TETS = 50_000

#: gmsh wall time per tetrahedron, including OpenCASCADE and reading the mesh back, with the
#: Python size callback and with HXT and size fields (benchmarks/tet_scaling.py, L-shaped
#: pad, 25k-170k tetrahedra, load average about 3 on 2 cores).
GMSH_S_PER_TET = 2.0e-4
GMSH_S_PER_TET_PARALLEL = 8.0e-5

#: Tetrahedra of the parallel path (HXT with size fields) per tetrahedron the size function
#: asks for: 0.83, 0.81 and 0.79 at mesh.size 11, 8 and 6.8 nm on the L-shaped pad (the
#: callback path: 1.03 and 1.01 at 14 and 11 nm).
HXT_TET_SHARE = 0.8

#: Fraction of the element volume h^3 a tetrahedron of size h occupies on average in gmsh
#: meshes (measured on this project's shapes; used by the size estimate only).
TET_VOLUME_FACTOR = 0.16


@dataclass(frozen=True)
class ShapeSpec:
    """Everything the gmsh builder needs (nm).

    Attributes
    ----------
    top_outline : Outline
        Outline at the top surface.
    taper : float
        Outward offset of the outline at the etch floor relative to the top.
    interfaces : tuple of float
        z of the layer boundaries, 0 .. top.
    floor : float
        z of the etch floor.
    depth : float
        Modelled substrate depth (the bottom is at -depth).
    box : tuple
        (x0, x1, y0, y1) of the modelled cell.
    periodic : tuple of int
        Axes whose cell faces are tied (not mirrored).
    mirrors : tuple of int
    sizes : GridSpacing
        size = film element size, edge_size = at sidewalls, lateral_cap = largest.
    liners : tuple of (top, side, floor)
        Cumulative liner thicknesses per liner, bottom to top (side: horizontal
        offset of the sidewall), nm (:func:`mesastrain.mesh.planning.liner_offsets`).
    """

    top_outline: Outline
    taper: float
    interfaces: tuple
    floor: float
    depth: float
    box: tuple
    periodic: tuple
    mirrors: tuple
    sizes: GridSpacing
    liners: tuple = ()

    @property
    def top(self) -> float:
        return float(self.interfaces[-1])

    @property
    def liner_top(self) -> float:
        """z of the top of the last liner over the feature (the top when there is none)."""
        return self.top + (self.liners[-1][0] if self.liners else 0.0)

    def liner_outlines(self, k: int) -> tuple:
        """(foot outline at the floor, outline at its top z) of liner k's outer sidewall."""
        t_top, side, _ = self.liners[k - 1]
        slope = self.taper / (self.top - self.floor)
        return (self.top_outline.offset(self.taper + side),
                self.top_outline.offset(side - slope * t_top))

    @property
    def foot_outline(self) -> Outline:
        return self.top_outline.offset(self.taper)

    def outline_at(self, z: float) -> Outline:
        rise = (self.top - z) / (self.top - self.floor)
        return self.top_outline.offset(self.taper * min(max(rise, 0.0), 1.0))


class SizeField:
    """Element size at any point (nm); see the module docstring."""

    def __init__(self, spec: ShapeSpec):
        self.spec = spec
        self.g = spec.sizes.growth - 1.0
        self.low = min(0.0, spec.floor)      # bottom of the refined film band

    def __call__(self, x, y, z) -> np.ndarray:
        s = self.spec
        x, y, z = (np.asarray(v, dtype=float) for v in (x, y, z))
        # lateral signed distance to the outline at each point's height (linear in z)
        top_d = s.top_outline.signed_distance(x, y)
        if s.taper:
            foot_d = s.foot_outline.signed_distance(x, y)
            rise = np.clip((s.top - z) / (s.top - s.floor), 0.0, 1.0)
            lat = top_d + rise * (foot_d - top_d)
            lat_foot = foot_d
        else:
            lat = lat_foot = top_d
        below = np.maximum(s.floor - z, 0.0)
        d_side = np.where(z >= s.floor, np.abs(lat), np.hypot(np.abs(lat_foot), below))
        d_feat = np.where(z >= s.floor, np.maximum(lat, 0.0),
                          np.hypot(np.maximum(lat_foot, 0.0), below))
        if s.floor > 0.0:       # unetched layers below the floor cover the whole cell
            d_feat = np.minimum(d_feat, np.maximum(-z, 0.0))
        if s.liners:            # the floor liners cover the whole cell as well
            f_top = s.floor + s.liners[-1][2]
            d_feat = np.minimum(d_feat, np.abs(np.clip(z, s.floor, f_top) - z)
                                + np.maximum(s.floor - z, 0.0))
        h_side = s.sizes.edge_size + self.g * d_side
        h_film = s.sizes.size + self.g * d_feat
        return np.minimum(np.minimum(h_side, h_film), s.sizes.lateral_cap)


def shape_spec(case, mirrors=()) -> ShapeSpec:
    """The gmsh geometry of a case with a disk, polygon or rounded rectangle."""
    pat = case.pattern
    top = case.stack_thickness
    etch = pat.etch_depth
    floor = top - etch
    outline = outline_of(pat)
    taper = taper_of(pat)
    liners = liner_offsets(case)
    foot = outline.offset(taper)
    hx = max(outline.half_extent()[0], foot.half_extent()[0])
    hy = max(outline.half_extent()[1], foot.half_extent()[1])
    feature = 2.0 * max(outline.half_extent())
    pitch = pat.pitch
    if pitch is not None:
        box = (-pitch[0] / 2, pitch[0] / 2, -pitch[1] / 2, pitch[1] / 2)
        periodic = tuple(a for a in (0, 1) if a not in mirrors)
        depth_default = max(1.5 * max(pitch), 4.0 * etch)
    else:
        margin = pat.margin if pat.margin is not None else max(0.5 * feature, 4.0 * etch)
        if liners and pat.margin is None:       # room for the sidewall liners and a floor
            margin = max(margin, 4.0 * liners[-1][1])
        box = (-(hx + margin), hx + margin, -(hy + margin), hy + margin)
        # a film layer on the cell faces: tie them so it can shear (planning.film_reaches_side)
        periodic = (tuple(a for a in (0, 1) if a not in mirrors)
                    if film_reaches_side(case) else ())
        depth_default = max(1.5 * feature, 4.0 * etch)
    box = list(box)
    if 0 in mirrors:
        box[0] = 0.0
    if 1 in mirrors:
        box[2] = 0.0
    depth = case.mesh.substrate_depth or min(case.substrate.thickness, depth_default)
    thick = [lay.thickness for lay in case.layers]
    if etch > top:
        thick.append(etch - top)
    for lin in case.liners:
        thick += [lin.thickness, lin.side, lin.floor]
    t_min = min(thick)
    order = case.mesh.order
    refine = refinement_of(case)
    # tetrahedra are isotropic: two quadratic (four linear) elements through the thinnest
    # layer keep the in-plane field of a thin film within about 1 % (tests/test_geometry_shapes)
    size = case.mesh.size or (t_min / 2.0 if order == 2 else t_min / 4.0)
    edge = min(case.mesh.edge_size or size / 2.0, size)
    cap = max(feature / 4.0, size)
    size, edge, cap = size / refine, edge / refine, cap / refine
    sizes = GridSpacing(size=float(size), edge_size=float(edge),
                        growth=1.0 + (float(case.mesh.growth) - 1.0) / refine,
                        lateral_cap=float(cap), refine=refine)
    return ShapeSpec(top_outline=outline, taper=float(taper), interfaces=tuple(case.interfaces),
                     floor=float(floor), depth=float(depth), box=tuple(float(b) for b in box),
                     periodic=periodic, mirrors=tuple(mirrors), sizes=sizes, liners=liners)


def _expected_tets(spec: ShapeSpec) -> float:
    """Tetrahedra the size field asks for: the integral of 1 / (TET_VOLUME_FACTOR h^3).

    Midpoint rule on a grid graded like the size field itself.
    """
    field = SizeField(spec)
    x0, x1, y0, y1 = spec.box
    he, g, cap = spec.sizes.edge_size, spec.sizes.growth, spec.sizes.lateral_cap
    hx, hy = spec.foot_outline.half_extent()

    def axis(lo, hi, half):
        brk = sorted({lo, hi, *[v for v in (-half, half) if lo < v < hi]})
        sizes = [he if abs(abs(b) - half) < 1e-9 * (hi - lo) else None for b in brk]
        return join_segments(brk, sizes, [cap] * (len(brk) - 1), g)

    xs, ys = axis(x0, x1, hx), axis(y0, y1, hy)
    zb = sorted({-spec.depth, *spec.interfaces, spec.floor,
                 *(z for t, _, f in spec.liners for z in (spec.top + t, spec.floor + f))})
    zs = join_segments(zb, [None] + [spec.sizes.size] * (len(zb) - 1),
                       [cap] * (len(zb) - 1), g)
    # each cell of the graded grid split in two along every axis: with the cells alone a
    # midpoint inside a thin film band could stand for a whole cell (at mesh.size 11.5 nm
    # on the L-shaped pad the count doubled from one size to the next)
    xs, ys, zs = (np.sort(np.concatenate([a, 0.5 * (a[1:] + a[:-1])])) for a in (xs, ys, zs))
    xm, ym, zm = (0.5 * (a[1:] + a[:-1]) for a in (xs, ys, zs))
    vol = np.diff(xs)[:, None] * np.diff(ys)[None, :]
    X, Y = np.meshgrid(xm, ym, indexing="ij")
    count = 0.0
    for k, z in enumerate(zm):
        h = field(X, Y, np.full_like(X, z))
        inside = np.ones_like(X, dtype=bool)
        if spec.liners and z > spec.floor + spec.liners[-1][2]:
            k = len(spec.liners)
            foot, top = spec.liner_outlines(k)
            rise = (z - spec.floor) / (spec.liner_top - spec.floor)
            inside = (z <= spec.liner_top) & (
                foot.contains(X, Y) if not spec.taper else
                top_or_foot(foot, top, rise, X, Y))
        elif z > spec.floor and not spec.liners:
            inside = spec.outline_at(z).contains(X, Y)
        dz = zs[k + 1] - zs[k]
        count += float(np.sum(vol[inside] / (TET_VOLUME_FACTOR * h[inside] ** 3))) * dz
    return count


def top_or_foot(foot: Outline, top: Outline, rise: float, x, y) -> np.ndarray:
    """Inside the outline interpolated between foot (rise 0) and top (rise 1), approximately
    (signed distances interpolated); for the size estimate only."""
    d = (1.0 - rise) * foot.signed_distance(x, y) + rise * top.signed_distance(x, y)
    return d <= 0.0


def _size_fields(gmsh, spec: ShapeSpec) -> None:
    """The size function of :class:`SizeField` as gmsh fields (background mesh field).

    h_edge + (g - 1) d to the sidewall surfaces and h_film + (g - 1) d to the
    film volumes are Threshold fields on Distance fields (linear growth, capped
    at h_max), h_film inside the film a Constant field; their minimum is the
    size. The distances are to points sampled on the surfaces at half the local
    size, so they agree with :class:`SizeField` to within a quarter element.
    """
    fld = gmsh.model.mesh.field
    s = spec.sizes
    g = max(s.growth - 1.0, 1e-6)
    x0, x1, y0, y1 = spec.box
    low = min(0.0, spec.floor)
    tol = 1e-6 * (spec.top + spec.depth)
    film, feature = [], []
    for _, vol in gmsh.model.getEntities(3):
        zc = gmsh.model.occ.getCenterOfMass(3, vol)[2]
        if zc > low:
            film.append(vol)
        if zc > spec.floor:
            feature.append(vol)

    def faces(vols):
        out = gmsh.model.getBoundary([(3, v) for v in vols], combined=False, oriented=False)
        return sorted({abs(t) for d, t in out if d == 2})

    sides = []
    for tag in faces(feature):
        bx0, by0, bz0, bx1, by1, bz1 = gmsh.model.getBoundingBox(2, tag)
        if bz1 - bz0 <= tol:
            continue                       # horizontal: top, interface or floor
        on_box = ((bx1 - bx0 <= tol and min(abs(bx0 - x0), abs(bx0 - x1)) <= tol)
                  or (by1 - by0 <= tol and min(abs(by0 - y0), abs(by0 - y1)) <= tol))
        if not on_box:
            sides.append(tag)
    fields = []

    def distance_threshold(tags, h):
        ext = 0.0
        for tag in tags:
            b = gmsh.model.getBoundingBox(2, tag)
            ext = max(ext, b[3] - b[0], b[4] - b[1], b[5] - b[2])
        d = fld.add("Distance")
        fld.setNumbers(d, "SurfacesList", tags)
        fld.setNumber(d, "Sampling", int(min(max(np.ceil(2.0 * ext / h), 20), 2000)))
        th = fld.add("Threshold")
        fld.setNumber(th, "InField", d)
        fld.setNumber(th, "SizeMin", h)
        fld.setNumber(th, "SizeMax", max(s.lateral_cap, h))
        fld.setNumber(th, "DistMin", 0.0)
        fld.setNumber(th, "DistMax", max((s.lateral_cap - h) / g, 1e-9))
        fields.append(th)

    if sides:
        distance_threshold(sides, s.edge_size)
    if film:
        distance_threshold(faces(film), s.size)
        c = fld.add("Constant")
        fld.setNumbers(c, "VolumesList", film)
        fld.setNumber(c, "VIn", s.size)
        fld.setNumber(c, "VOut", s.lateral_cap)
        fields.append(c)
    if not fields:
        c = fld.add("Constant")
        fld.setNumber(c, "VIn", s.lateral_cap)
        fld.setNumber(c, "VOut", s.lateral_cap)
        fields.append(c)
    m = fld.add("Min")
    fld.setNumbers(m, "FieldsList", fields)
    fld.setAsBackgroundMesh(m)


#: Smallest signed inverse condition number (gmsh "minSICN", 1 for the regular tetrahedron)
#: accepted without a second optimisation pass. One sliver (0.0002) in 25k tetrahedra of the
#: L-shaped pad at mesh.size 19 nm made the multigrid smoother fail (145 instead of about
#: 20 iterations); meshes without slivers are left exactly as gmsh made them.
SLIVER_QUALITY = 0.02


#: Longest edge of a surface triangle over the requested size at its centre, above which the
#: surfaces are meshed again with gmsh's MeshAdapt algorithm. Sound surface meshes of the demo
#: shapes (disks and L-shaped polygons, whole and quarter, mesh.size 15-60 nm) stay at
#: 1.2-1.5; the quarter disks whose sidewall band was cut into reached 3.1-4.5.
SURFACE_STRETCH = 2.5


def _surface_stretch(gmsh, field) -> float:
    """Largest (longest edge / requested size at the centroid) over the surface triangles."""
    _, nodes = gmsh.model.mesh.getElementsByType(2)
    if len(nodes) == 0:
        return 0.0
    tags, coords, _ = gmsh.model.mesh.getNodes()
    index = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
    index[tags.astype(np.int64)] = np.arange(len(tags))
    xyz = coords.reshape(-1, 3)[index[nodes.astype(np.int64)]].reshape(-1, 3, 3)
    longest = np.linalg.norm(xyz - np.roll(xyz, 1, axis=1), axis=2).max(axis=1)
    c = xyz.mean(axis=1)
    return float(np.max(longest / field(c[:, 0], c[:, 1], c[:, 2])))


def _remove_slivers(gmsh) -> None:
    """Run gmsh's Netgen optimiser when the mesh holds a sliver (see :data:`SLIVER_QUALITY`)."""
    tags, _ = gmsh.model.mesh.getElementsByType(4)
    if len(tags) == 0:
        return
    q = np.asarray(gmsh.model.mesh.getElementQualities(tags, "minSICN"))
    if q.min() >= SLIVER_QUALITY:
        return
    log.info("gmsh: %d tetrahedra below quality %g; optimising with Netgen",
             int((q < SLIVER_QUALITY).sum()), SLIVER_QUALITY)
    gmsh.model.mesh.optimize("Netgen")


def mesh_shape(spec: ShapeSpec) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Run gmsh on a shape specification.

    Returns
    -------
    p : ndarray (3, nverts), nm
    t : ndarray (4, ntets)
    region : ndarray (ntets,)
    """
    x0, x1, y0, y1 = spec.box
    liner_z = [z for t_top, _, t_floor in spec.liners
               for z in (spec.top + t_top, spec.floor + t_floor)]
    zb = sorted({-spec.depth, *spec.interfaces, spec.floor, *liner_z})
    zb = [z for z in zb if -spec.depth - 1e-9 <= z <= spec.liner_top + 1e-9]
    tol = 1e-9 * (spec.liner_top + spec.depth)
    zb = [z for k, z in enumerate(zb) if k == 0 or z - zb[k - 1] > tol]
    interfaces = np.asarray(spec.interfaces[:-1])
    nlayers = len(spec.interfaces) - 1
    field = SizeField(spec)
    with _Gmsh() as gmsh:
        occ = gmsh.model.occ
        vols, vol_region = [], []
        pieces = None           # feature, then each liner alone: (tag, region)
        for za, zc in zip(zb[:-1], zb[1:]):
            box = occ.addBox(x0, y0, za, x1 - x0, y1 - y0, zc - za)
            if zc <= spec.floor + tol:
                vols.append(box)
                vol_region.append(int(np.searchsorted(interfaces, 0.5 * (za + zc),
                                                      side="right")))
                continue
            if pieces is None:
                pieces = region_solids(gmsh, spec, nlayers, interfaces)
            for tag, region in pieces:
                if region <= nlayers and za >= spec.top - tol:
                    continue
                copy = occ.copy([(3, tag)])
                out, _ = occ.intersect(copy, [(3, box)], removeObject=True, removeTool=False)
                if region < 0:
                    region = int(np.searchsorted(interfaces, 0.5 * (za + zc), side="right"))
                for d, t in out:
                    if d == 3:
                        vols.append(t)
                        vol_region.append(region)
            occ.remove([(3, box)], recursive=True)
        if pieces is not None:
            occ.remove([(3, t) for t, _ in pieces], recursive=True)
        out, children = occ.fragment([(3, v) for v in vols], [])
        region_of = {}
        for region, kids in zip(vol_region, children):
            for d, t in kids:
                if d == 3:
                    region_of[t] = region
        occ.synchronize()
        if spec.periodic:
            set_periodic(gmsh, spec, -spec.depth, spec.liner_top)
        opt = gmsh.option
        opt.setNumber("Mesh.MeshSizeFromPoints", 0)
        opt.setNumber("Mesh.MeshSizeFromCurvature", 0)
        opt.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
        opt.setNumber("Mesh.MeshSizeMax", spec.sizes.lateral_cap)
        opt.setNumber("Mesh.MeshSizeMin", 0.5 * spec.sizes.edge_size)
        opt.setNumber("Mesh.ElementOrder", 1)
        opt.setNumber("Mesh.Optimize", 1)
        parallel = _expected_tets(spec) > PARALLEL_TETS
        if parallel:
            _size_fields(gmsh, spec)
            opt.setNumber("Mesh.Algorithm3D", 10)
            opt.setNumber("General.NumThreads", max(1, min(os.cpu_count() or 1, 8)))
        else:
            gmsh.model.mesh.setSizeCallback(
                lambda dim, tag, x, y, z, lc: float(field(x, y, z)))
        try:
            gmsh.model.mesh.generate(3)
            stretch = _surface_stretch(gmsh, field)
            if stretch > SURFACE_STRETCH:
                # gmsh's default surface mesher, working in the parameters of a curved face,
                # joined far-apart boundary nodes across a thin curved band (the film's
                # sidewall of a quarter disk): flat facets cut into the body (7 % of the film
                # gone at mesh.size 40 nm on a 200 nm disk). MeshAdapt follows the surface.
                # The check reads the finished mesh, so that a sound one is exactly what gmsh
                # makes in one go (meshing the surfaces alone first gave other tetrahedra).
                log.info("gmsh: a surface triangle %.1f times the requested size; meshing the "
                         "surfaces again with MeshAdapt", stretch)
                gmsh.model.mesh.clear()
                opt.setNumber("Mesh.Algorithm", 1)
                gmsh.model.mesh.generate(3)
                stretch = _surface_stretch(gmsh, field)
                if stretch > SURFACE_STRETCH:
                    log.warning("gmsh: surface triangles up to %.1f times the requested size "
                                "remain; the meshed sidewall may cut into the feature", stretch)
            _remove_slivers(gmsh)
        except Exception as exc:    # gmsh raises plain Exceptions
            raise MeshError(f"gmsh could not mesh the shape: {exc}") from None
        tags, coords, _ = gmsh.model.mesh.getNodes()
        coords = coords.reshape(-1, 3)
        index = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
        index[tags.astype(np.int64)] = np.arange(len(tags))
        ts, regs = [], []
        for _, vol in gmsh.model.getEntities(3):
            types, _, nodes = gmsh.model.mesh.getElements(3, vol)
            for et, nd in zip(types, nodes):
                if et != 4:
                    raise MeshError(f"gmsh produced element type {et}, expected tetrahedra")
                tt = index[nd.astype(np.int64)].reshape(-1, 4).T
                ts.append(tt)
                if vol in region_of:
                    region = region_of[vol]
                else:       # not traced through the fragment: a layer, found by its height
                    zc = gmsh.model.occ.getCenterOfMass(3, vol)[2]
                    region = int(np.searchsorted(interfaces, zc, side="right"))
                regs.append(np.full(tt.shape[1], region, dtype=np.int32))
    if not ts:
        raise MeshError("gmsh produced no tetrahedra")
    t = np.concatenate(ts, axis=1)
    used = np.unique(t)
    remap = np.full(len(coords), -1, dtype=np.int64)
    remap[used] = np.arange(len(used))
    return (np.ascontiguousarray(coords[used].T), np.ascontiguousarray(remap[t]),
            np.concatenate(regs))


def build_shape_mesh(case, mirrors=()) -> UnstructuredMesh:
    """Tetrahedral mesh of a disk, polygon or rounded rectangle case.

    Parameters
    ----------
    case : Case
    mirrors : tuple of int
        Mirror axes to model only x >= 0 / y >= 0.
    """
    from skfem import MeshTet

    spec = shape_spec(case, mirrors)
    p, t, region = mesh_shape(spec)
    mesh = MeshTet(p, t)
    desc = (f"{spec.top_outline.describe()}, gmsh tetrahedra; element size {spec.sizes.size:.4g} "
            f"nm in the film, {spec.sizes.edge_size:.4g} nm at sidewalls, up to "
            f"{spec.sizes.lateral_cap:.4g} nm")
    um = UnstructuredMesh(mesh=mesh, region=region, kind="gmsh",
                          boundary_conditions=box_boundary(p, spec.periodic, mirrors),
                          spacing=spec.sizes, mirrors=tuple(mirrors), description=desc)
    log.info("meshed %r", um)
    return um


def handles(pattern) -> bool:
    """Disks, polygons and rectangles with rounded corners are meshed with gmsh."""
    return (pattern.shape in ("disk", "polygon")
            or (pattern.shape == "rectangle" and bool(pattern.corner_radius)))


def estimate_shape(case) -> Estimate:
    """Expected tetrahedra and unknowns of a gmsh shape, from its size field (no meshing).

    Integrates 1 / (TET_VOLUME_FACTOR h^3) over the body with a midpoint rule
    on a grid graded like the size field itself; a P2 mesh has about 1.4
    scalar dofs per tetrahedron, a P1 mesh about 0.18.
    """
    spec = shape_spec(case, ())
    count = _expected_tets(spec)
    parallel = count > PARALLEL_TETS
    nel = max(int(count * (HXT_TET_SHARE if parallel else 1.0)), 1)
    gmsh_s = nel * (GMSH_S_PER_TET_PARALLEL if parallel else GMSH_S_PER_TET)
    order = case.mesh.order
    scalar = int(nel * (1.4 if order == 2 else 0.18)) + 1
    return estimate_from_counts(case, int(nel * 0.18) + 1, nel, scalar, 10 if order == 2 else 4,
                                90 if order == 2 else 45, mesh_seconds=gmsh_s)
