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

import ctypes
import logging
import os
import signal
import threading
from dataclasses import dataclass

import numpy as np

from mesastrain.case.outline import Outline, outline_of, taper_of
from mesastrain.errors import MeshError
from mesastrain.fem.cost import Estimate, estimate_from_counts
from mesastrain.mesh.grid import GridSpacing, join_segments
from mesastrain.mesh.planning import film_reaches_side, refinement_of
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

    @property
    def top(self) -> float:
        return float(self.interfaces[-1])

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
                     periodic=periodic, mirrors=tuple(mirrors), sizes=sizes)


# --------------------------------------------------------------------------
# gmsh
# --------------------------------------------------------------------------
#: gmsh options this module sets (restored afterwards when gmsh was already running).
_OPTIONS = ("General.Terminal", "General.Verbosity", "Mesh.MeshSizeFromPoints",
            "Mesh.MeshSizeFromCurvature", "Mesh.MeshSizeExtendFromBoundary", "Mesh.MeshSizeMax",
            "Mesh.MeshSizeMin", "Mesh.ElementOrder", "Mesh.Optimize", "Mesh.Algorithm3D",
            "General.NumThreads")


_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM") if hasattr(signal, n))


class _SignalState:
    """The process's SIGINT/SIGTERM dispositions, saved so gmsh cannot keep them.

    ``gmsh.initialize()`` resets SIGTERM (and, unless ``interruptible=False``,
    SIGINT) to the default action at the C level, behind Python's back, so a later
    SIGTERM would kill the run without clean-up. The C-level actions are saved as
    opaque ``struct sigaction`` buffers (any thread may restore them); the Python
    handlers are saved too, in the main thread.
    """

    def __init__(self):
        self.python = {}
        self.native = {}
        if threading.current_thread() is threading.main_thread():
            self.python = {s: signal.getsignal(s) for s in _STOP_SIGNALS}
        libc = _libc()
        if libc is not None:
            for s in _STOP_SIGNALS:
                buf = ctypes.create_string_buffer(512)     # larger than any struct sigaction
                if libc.sigaction(int(s), None, buf) == 0:
                    self.native[s] = buf

    def restore(self) -> None:
        for s, h in self.python.items():
            if h is not None:
                signal.signal(s, h)
        libc = _libc()
        for s, buf in self.native.items():
            libc.sigaction(int(s), buf, None)


class _Blocked:
    """SIGINT and SIGTERM blocked in this thread while gmsh changes their actions: one
    arriving then waits and goes to the restored handler, not to gmsh's default."""

    def __enter__(self):
        self.mask = None
        if hasattr(signal, "pthread_sigmask"):
            self.mask = signal.pthread_sigmask(signal.SIG_BLOCK, set(_STOP_SIGNALS))

    def __exit__(self, *exc):
        if self.mask is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, self.mask)
        return False


def _libc():
    try:
        return ctypes.CDLL(None, use_errno=True) if os.name == "posix" else None
    except OSError:
        return None


class _Gmsh:
    """Context manager: a silent gmsh session with an empty model of its own.

    When the caller already runs gmsh, its session, current model and the
    options touched here are left as they were; otherwise gmsh is started and
    finalised around the block.

    Signals: gmsh is initialised without its own SIGINT handling
    (``interruptible=False``) and the process's SIGINT/SIGTERM handlers are put
    back after ``initialize`` and ``finalize``. Inside the block (main thread) a
    SIGINT or SIGTERM is held back and delivered to the caller's handler when the
    block ends, because a handler that raises inside gmsh's mesh-size callback
    would only be printed and ignored by ctypes. So Ctrl-C while gmsh meshes takes
    effect when the current gmsh call returns.
    """

    def __enter__(self):
        import gmsh

        self.gmsh = gmsh
        self.signals = _SignalState()
        self.pending = []
        for s in self.signals.python:
            if callable(self.signals.python[s]):
                signal.signal(s, self._hold)
        try:
            self._start(gmsh)
        except BaseException:
            self._end_signals()
            raise
        return gmsh

    def _hold(self, signum, frame):
        self.pending.append(signum)

    def _start(self, gmsh):
        self.owner = not gmsh.isInitialized()
        if self.owner:
            with _Blocked():
                held = _SignalState()
                try:
                    gmsh.initialize(readConfigFiles=False, interruptible=False)
                except TypeError:      # a gmsh API without the keyword
                    gmsh.initialize(readConfigFiles=False)
                finally:
                    held.restore()
            self.saved, self.previous = {}, None
        else:
            self.saved = {k: gmsh.option.getNumber(k) for k in _OPTIONS}
            try:
                self.previous = gmsh.model.getCurrent()
            except Exception:    # no current model
                self.previous = None
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.option.setNumber("General.Verbosity", 1)
        gmsh.model.add(f"mesastrain-{id(self)}")

    def _end_signals(self):
        self.signals.restore()
        if self.pending:
            signal.raise_signal(self.pending[0])   # now to the caller's handler

    def __exit__(self, *exc):
        gmsh = self.gmsh
        try:
            if self.owner:
                with _Blocked():
                    held = _SignalState()
                    try:
                        gmsh.finalize()
                    finally:
                        held.restore()
                return False
            gmsh.model.remove()
            for k, v in self.saved.items():
                gmsh.option.setNumber(k, v)
            if self.previous:
                gmsh.model.setCurrent(self.previous)
            return False
        finally:
            self._end_signals()


def _outline_surface(occ, outline: Outline, z: float) -> int:
    """A plane surface of the outline at height z; returns its tag."""
    if outline.kind == "rectangle":
        if outline.radius > 0 and outline.radius >= min(outline.hx, outline.hy) * (1 - 1e-9):
            return _stadium_surface(occ, outline.hx, outline.hy, z)
        return occ.addRectangle(-outline.hx, -outline.hy, z, 2 * outline.hx, 2 * outline.hy,
                                roundedRadius=outline.radius if outline.radius > 0 else 0.0)
    if outline.kind == "disk":
        return occ.addDisk(0.0, 0.0, z, outline.radius, outline.radius)
    v = outline.points
    pts = [occ.addPoint(float(a), float(b), z) for a, b in v]
    lines = [occ.addLine(pts[k], pts[(k + 1) % len(pts)]) for k in range(len(pts))]
    loop = occ.addCurveLoop(lines)
    return occ.addPlaneSurface([loop])


def _stadium_surface(occ, hx: float, hy: float, z: float) -> int:
    """A rectangle rounded by half its shorter side: a stadium, or a disk when square.

    OpenCASCADE's rounded rectangle fails when the radius is exactly half a side
    (the straight edges between the arcs vanish), the largest radius the case
    allows; the stadium is built from its two straight edges and four quarter
    arcs (arcs of less than a half turn, as OpenCASCADE needs).
    """
    r = min(hx, hy)
    if abs(hx - hy) <= 1e-9 * max(hx, hy):
        return occ.addDisk(0.0, 0.0, z, r, r)
    along_x = hx > hy
    c = (hx if along_x else hy) - r          # centres of the end half-disks at +-c

    def pt(u, v):       # (along the long side, across it) -> a point
        return occ.addPoint(u, v, z) if along_x else occ.addPoint(-v, u, z)

    centre_hi, centre_lo = pt(c, 0.0), pt(-c, 0.0)
    p = [pt(-c, -r), pt(c, -r), pt(c + r, 0.0), pt(c, r), pt(-c, r), pt(-c - r, 0.0)]
    curves = [occ.addLine(p[0], p[1]),
              occ.addCircleArc(p[1], centre_hi, p[2]), occ.addCircleArc(p[2], centre_hi, p[3]),
              occ.addLine(p[3], p[4]),
              occ.addCircleArc(p[4], centre_lo, p[5]), occ.addCircleArc(p[5], centre_lo, p[0])]
    surface = occ.addPlaneSurface([occ.addCurveLoop(curves)])
    occ.remove([(0, centre_hi), (0, centre_lo)])
    return surface


def _feature_solid(gmsh, spec: ShapeSpec) -> int:
    """The feature between the etch floor and the top; returns its volume tag."""
    occ = gmsh.model.occ
    h = spec.top - spec.floor
    if not spec.taper:
        s = _outline_surface(occ, spec.top_outline, spec.floor)
        out = occ.extrude([(2, s)], 0, 0, h)
        return [t for d, t in out if d == 3][0]
    wires = []
    for ol, z in ((spec.foot_outline, spec.floor), (spec.top_outline, spec.top)):
        s = _outline_surface(occ, ol, z)
        occ.synchronize()
        curves = [t for d, t in gmsh.model.getBoundary([(2, s)], oriented=False)]
        wires.append(occ.addWire(curves))
        occ.remove([(2, s)])
    vols = occ.addThruSections(wires, makeSolid=True, makeRuled=True)
    return [t for d, t in vols if d == 3][0]


def _set_periodic(gmsh, spec: ShapeSpec, zlo: float, zhi: float) -> None:
    """Tie the cell faces of periodic axes (translation affine maps)."""
    eps = 1e-6 * max(spec.box[1] - spec.box[0], spec.box[3] - spec.box[2], zhi - zlo)
    x0, x1, y0, y1 = spec.box
    for axis in spec.periodic:
        lo, hi = (x0, x1) if axis == 0 else (y0, y1)
        shift = [0.0, 0.0, 0.0]
        shift[axis] = hi - lo

        def faces(v, axis=axis):
            b = [x0 - eps, y0 - eps, zlo - eps, x1 + eps, y1 + eps, zhi + eps]
            b[axis], b[axis + 3] = v - eps, v + eps
            return gmsh.model.getEntitiesInBoundingBox(*b, dim=2)

        for _, slave in faces(hi):
            sb = np.array(gmsh.model.getBoundingBox(2, slave))
            target = sb - np.array(shift + shift)
            match = None
            for _, master in faces(lo):
                mb = np.array(gmsh.model.getBoundingBox(2, master))
                if np.max(np.abs(mb - target)) < 10 * eps:
                    match = master
                    break
            if match is None:
                raise MeshError(f"gmsh: no periodic partner for a cell face at "
                                f"{'xy'[axis]} = {hi:g} nm")
            affine = [1, 0, 0, shift[0], 0, 1, 0, shift[1], 0, 0, 1, shift[2], 0, 0, 0, 1]
            gmsh.model.mesh.setPeriodic(2, [slave], [match], affine)


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
    zb = sorted({-spec.depth, *spec.interfaces, spec.floor})
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
        if z > spec.floor:
            inside = spec.outline_at(z).contains(X, Y)
        dz = zs[k + 1] - zs[k]
        count += float(np.sum(vol[inside] / (TET_VOLUME_FACTOR * h[inside] ** 3))) * dz
    return count


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
    zb = sorted({-spec.depth, *spec.interfaces, spec.floor})
    zb = [z for z in zb if -spec.depth - 1e-9 <= z <= spec.top + 1e-9]
    tol = 1e-9 * (spec.top + spec.depth)
    zb = [z for k, z in enumerate(zb) if k == 0 or z - zb[k - 1] > tol]
    field = SizeField(spec)
    with _Gmsh() as gmsh:
        occ = gmsh.model.occ
        vols = []
        feature = None
        for za, zc in zip(zb[:-1], zb[1:]):
            box = occ.addBox(x0, y0, za, x1 - x0, y1 - y0, zc - za)
            if zc <= spec.floor + tol:
                vols.append(box)
                continue
            if feature is None:
                feature = _feature_solid(gmsh, spec)
            copy = occ.copy([(3, feature)])
            out, _ = occ.intersect(copy, [(3, box)], removeObject=True, removeTool=True)
            vols += [t for d, t in out if d == 3]
        if feature is not None:
            occ.remove([(3, feature)], recursive=True)
        out, _ = occ.fragment([(3, v) for v in vols], [])
        occ.synchronize()
        if spec.periodic:
            _set_periodic(gmsh, spec, -spec.depth, spec.top)
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
            _remove_slivers(gmsh)
        except Exception as exc:    # gmsh raises plain Exceptions
            raise MeshError(f"gmsh could not mesh the shape: {exc}") from None
        tags, coords, _ = gmsh.model.mesh.getNodes()
        coords = coords.reshape(-1, 3)
        index = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
        index[tags.astype(np.int64)] = np.arange(len(tags))
        ts, regs = [], []
        interfaces = np.asarray(spec.interfaces[:-1])
        for _, vol in gmsh.model.getEntities(3):
            types, _, nodes = gmsh.model.mesh.getElements(3, vol)
            for et, nd in zip(types, nodes):
                if et != 4:
                    raise MeshError(f"gmsh produced element type {et}, expected tetrahedra")
                tt = index[nd.astype(np.int64)].reshape(-1, 4).T
                ts.append(tt)
                zc = gmsh.model.occ.getCenterOfMass(3, vol)[2]
                regs.append(np.full(tt.shape[1], np.searchsorted(interfaces, zc, side="right"),
                                    dtype=np.int32))
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
