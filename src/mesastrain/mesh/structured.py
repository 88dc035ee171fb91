"""Meshes of film stacks: structured hexahedra, and the common unstructured container.

Structured hexahedral meshes of film stacks, blanket or etched into a mesa.

The body is a tensor-product grid of axis-aligned bricks whose planes include
every layer interface, the etch floor and the mesa sidewalls, so that material
boundaries and free surfaces are element faces. Grid lines are graded toward
those planes. Elements outside the body (etched away) are removed.

Coordinates are in nm: z = 0 at the substrate's top surface, +z up through the
layers, x = y = 0 at the centre of the pattern.

:class:`UnstructuredMesh` holds tetrahedral meshes (gmsh shapes, imported files,
the Python API) with the same interface, and :class:`Boundary` says how any
model is held (supports, periodic ties, pinned translations).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from mesastrain.errors import MeshError

log = logging.getLogger(__name__)

#: Shortest allowed grid spacing relative to the model's overall size.
MIN_RELATIVE_SPACING = 1e-9


@dataclass(frozen=True)
class StackGeometry:
    """What the mesher needs to know about a stack and its pattern (nm).

    Attributes
    ----------
    interfaces : tuple of float
        z of every layer boundary, bottom to top, starting at 0.0 (substrate
        top) and ending at the stack top.
    substrate_depth : float
        Modelled substrate depth below z = 0.
    half_width, half_length : float or None
        Half of the mesa size along x and y; None for a blanket stack.
    etch_depth : float
        Depth of the etch below the top surface (0 for a blanket stack).
    margin : float
        Lateral substrate modelled around the mesa along x (or half the column
        width for a blanket stack).
    margin_y : float or None
        The same along y (None: equal to ``margin``). A margin of 0 means the
        feature fills the cell along that axis (a periodic array without gap).
    mirrors : tuple of int
        Axes (0 = x, 1 = y) modelled from the mirror plane through the centre
        only (x >= 0 or y >= 0); see :mod:`mesastrain.model.symmetry`.
    periodic : tuple of int
        Axes along which the cell repeats (periodic array); the faces of a
        periodic axis that is not also a mirror are tied.
    taper : float
        Inset of the top outline of the feature relative to its footprint at
        the etch floor, nm (positive: sloped sidewalls narrowing upward; the
        half sizes above are those of the footprint).
    """

    interfaces: tuple
    substrate_depth: float
    half_width: float | None
    half_length: float | None
    etch_depth: float
    margin: float
    margin_y: float | None = None
    mirrors: tuple = ()
    periodic: tuple = ()
    taper: float = 0.0

    @property
    def margins(self) -> tuple:
        """Lateral margins (nm) along x and y."""
        return (self.margin, self.margin if self.margin_y is None else self.margin_y)

    def scale_at(self, z: np.ndarray, axis: int) -> np.ndarray:
        """Lateral scale of a tapered feature at height z (1 at and below the etch floor).

        The grid is built for the footprint at the etch floor; above it every
        lateral coordinate is multiplied by this factor, which moves the
        sidewall in by ``taper`` (nm) between the floor and the top.
        """
        z = np.asarray(z, dtype=float)
        half = self.half_width if axis == 0 else self.half_length
        if not self.taper or half is None or self.etch_depth <= 0:
            return np.ones_like(z)
        rise = np.clip((z - self.etch_floor) / self.etch_depth, 0.0, 1.0)
        return 1.0 - self.taper * rise / half

    @property
    def top(self) -> float:
        return float(self.interfaces[-1])

    @property
    def patterned(self) -> bool:
        return self.half_width is not None

    @property
    def etch_floor(self) -> float:
        return self.top - self.etch_depth


@dataclass(frozen=True)
class GridSpacing:
    """Element sizes (nm) used to grade the grid.

    Attributes
    ----------
    size : float
        Largest element size in the layers (vertically) and in the mesa.
    edge_size : float
        Element size at interfaces, the etch floor and the sidewalls.
    growth : float
        Largest ratio between neighbouring element sizes.
    lateral_cap : float
        Largest lateral element size inside the mesa.
    refine : float
        Uniform refinement factor already applied to the sizes and the
        grading (``mesh.refine``); also divides the far-field caps.
    """

    size: float
    edge_size: float
    growth: float
    lateral_cap: float
    refine: float = 1.0


@dataclass(frozen=True)
class Boundary:
    """Boundary conditions of a model, by position.

    Attributes
    ----------
    supports : tuple of (component, axis, value)
        Hold displacement ``component`` (0 x, 1 y, 2 z) at every dof whose
        coordinate along ``axis`` equals ``value`` (nm).
    periodic : tuple of (axis, lo, hi)
        Tie the dofs on the face ``axis = hi`` to those on ``axis = lo``.
    pin : tuple of int
        Components held at one dof of the bottom to remove a remaining rigid
        translation (filled in by the pipeline for periodic cells).
    """

    supports: tuple
    periodic: tuple = ()
    pin: tuple = ()


@dataclass(frozen=True)
class StackMesh:
    """A meshed stack: the scikit-fem mesh plus what later stages need.

    Attributes
    ----------
    mesh : skfem.MeshHex
        Trilinear hexahedral mesh (nm). Quadratic fields use it with a
        27-node element.
    layer : ndarray of int, (nelems,)
        0 for the substrate, i for the i-th layer (1 = first grown layer).
    xs, ys, zs : ndarray
        Grid coordinates along x, y and z.
    cell_of_grid : ndarray of int, (nx-1, ny-1, nz-1)
        Element index of each grid cell, -1 where the cell was etched away.
    geometry : StackGeometry
    """

    mesh: object
    layer: np.ndarray
    xs: np.ndarray
    ys: np.ndarray
    zs: np.ndarray
    cell_of_grid: np.ndarray
    geometry: StackGeometry
    spacing: GridSpacing = field(repr=False, default=None)

    @property
    def nnodes(self) -> int:
        return int(self.mesh.p.shape[1])

    @property
    def nelems(self) -> int:
        return int(self.mesh.t.shape[1])

    #: Kind of mesh, for summaries and dispatch.
    kind = "structured"

    @property
    def axis_aligned(self) -> bool:
        """True when every element is an axis-aligned brick (no tapered sidewalls)."""
        return not (self.geometry is not None and self.geometry.taper)

    @property
    def mirrors(self) -> tuple:
        """Mirror axes of the model (only the non-negative side is meshed)."""
        return tuple(self.geometry.mirrors)

    @property
    def bounds(self) -> np.ndarray:
        """(3, 2) extent of the modelled body, nm."""
        return np.array([[self.xs[0], self.xs[-1]], [self.ys[0], self.ys[-1]],
                         [self.zs[0], self.zs[-1]]])

    def boundary(self) -> "Boundary":
        """Supports and periodic ties of the structured model.

        The substrate bottom is held in z. Each lateral axis is either
        periodic (an array, not mirrored: opposite faces tied) or held normal
        to its faces (rollers: a mirror plane, the far edge of the modelled
        substrate, or the cell face of a mirror-symmetric array).
        """
        geom = self.geometry
        b = self.bounds
        supports = [(2, 2, b[2, 0])]
        periodic = []
        for axis in (0, 1):
            if axis in geom.periodic and axis not in geom.mirrors:
                periodic.append((axis, b[axis, 0], b[axis, 1]))
            else:
                supports += [(axis, axis, b[axis, 0]), (axis, axis, b[axis, 1])]
        # a tied axis leaves a rigid translation along it: hold it at one bottom node
        return Boundary(tuple(supports), tuple(periodic), pin=tuple(p[0] for p in periodic))

    def __repr__(self) -> str:
        return (f"StackMesh({self.nnodes} nodes, {self.nelems} hexahedra, grid "
                f"{len(self.xs) - 1}x{len(self.ys) - 1}x{len(self.zs) - 1}, "
                f"layers {sorted(set(self.layer.tolist()))})")

    def locate(self, points: np.ndarray) -> np.ndarray:
        """Element index containing each point, -1 outside the body.

        Parameters
        ----------
        points : array (npts, 3), nm

        Returns
        -------
        ndarray of int (npts,)

        Notes
        -----
        A point on a grid plane is given to the cell on its lower side when
        that cell exists, otherwise to the upper one, so that a probe on the
        top surface or on a sidewall lands in the body.
        """
        points = np.atleast_2d(np.asarray(points, dtype=float))
        geom = self.geometry
        if geom is not None and geom.taper:
            # undo the lateral scaling of a tapered feature: back to grid space
            points = points.copy()
            for axis in (0, 1):
                points[:, axis] = points[:, axis] / geom.scale_at(points[:, 2], axis)
        idx = []
        for axis, g in enumerate((self.xs, self.ys, self.zs)):
            x = points[:, axis]
            tol = 1e-9 * (g[-1] - g[0])
            inside = (x >= g[0] - tol) & (x <= g[-1] + tol)
            lo = np.clip(np.searchsorted(g, x - tol, side="left") - 1, 0, len(g) - 2)
            hi = np.clip(np.searchsorted(g, x + tol, side="right") - 1, 0, len(g) - 2)
            idx.append((lo, hi, inside))
        result = np.full(len(points), -1, dtype=int)
        inside_all = idx[0][2] & idx[1][2] & idx[2][2]
        # try every combination of lower/upper candidates, lower first
        for cx in (0, 1):
            for cy in (0, 1):
                for cz in (0, 1):
                    e = self.cell_of_grid[idx[0][cx], idx[1][cy], idx[2][cz]]
                    take = (result < 0) & inside_all & (e >= 0)
                    result[take] = e[take]
        return result


def graded_coordinates(a: float, b: float, h_a: float | None, h_b: float | None,
                       cap: float, growth: float) -> np.ndarray:
    """Grid coordinates on [a, b] graded from sizes h_a, h_b at the ends.

    The target size grows linearly with distance from each refined end,
    h(s) = min(cap, h_a + (growth - 1) (s - a), h_b + (growth - 1) (b - s)),
    which makes neighbouring elements differ by about the factor ``growth``;
    nodes equidistribute the integral of 1/h.

    Parameters
    ----------
    a, b : float
        Segment ends (nm), a < b.
    h_a, h_b : float or None
        Element size at each end; None for no refinement there.
    cap : float
        Largest element size.
    growth : float
        Ratio between neighbouring element sizes (> 1).

    Returns
    -------
    ndarray
        Increasing coordinates with exactly a and b at the ends.
    """
    length = b - a
    if not length > 0:
        raise MeshError(f"empty grid segment [{a}, {b}]")
    cap = min(cap, length)
    s = np.linspace(a, b, 4001)
    h = np.full_like(s, cap)
    if h_a is not None:
        h = np.minimum(h, h_a + (growth - 1.0) * (s - a))
    if h_b is not None:
        h = np.minimum(h, h_b + (growth - 1.0) * (b - s))
    inv = 1.0 / h
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(s))])
    n = max(1, int(np.ceil(cum[-1] - 1e-6)))
    targets = np.linspace(0.0, cum[-1], n + 1)
    x = np.interp(targets, cum, s)
    x[0], x[-1] = a, b
    return x


def join_segments(breaks, sizes_at_breaks, caps, growth) -> np.ndarray:
    """Concatenate graded segments between consecutive break points.

    Parameters
    ----------
    breaks : sequence of float
        Increasing break points (nm); each becomes a grid coordinate.
    sizes_at_breaks : sequence of float or None
        Element size wanted at each break point (None: no refinement).
    caps : sequence of float
        Largest element size in each segment (len(breaks) - 1 entries).
    growth : float
    """
    breaks = np.asarray(breaks, dtype=float)
    parts = []
    for k in range(len(breaks) - 1):
        seg = graded_coordinates(breaks[k], breaks[k + 1], sizes_at_breaks[k],
                                 sizes_at_breaks[k + 1], caps[k], growth)
        parts.append(seg if k == 0 else seg[1:])
    x = np.concatenate(parts)
    span = x[-1] - x[0]
    if np.min(np.diff(x)) <= MIN_RELATIVE_SPACING * span:
        raise MeshError("grid has a zero-width element; two geometric planes nearly coincide")
    return x


def _unique_breaks(values, span):
    """Sorted break points with near-duplicates (round-off) merged."""
    v = np.sort(np.asarray(values, dtype=float))
    keep = np.concatenate([[True], np.diff(v) > 1e-7 * span])
    return v[keep]


def axis_coordinates(geom: StackGeometry, spacing: GridSpacing):
    """Graded grid coordinates along x, y and z for a stack geometry.

    Always the whole body's grid (a mirrored axis gets a grid line at 0);
    :func:`build_stack_mesh` meshes the non-negative side of mirrored axes.
    """
    growth = spacing.growth
    he = spacing.edge_size
    # --- z: substrate bottom, interfaces, etch floor, top
    zb = [-geom.substrate_depth, *geom.interfaces]
    if geom.patterned and geom.etch_depth > 0:
        zb.append(geom.etch_floor)
    span_z = geom.top + geom.substrate_depth
    zb = _unique_breaks(zb, span_z)
    zsize = [None] + [he] * (len(zb) - 1)
    zcap = []
    for k in range(len(zb) - 1):
        if zb[k + 1] <= 0.0 + 1e-9 * span_z:   # inside the substrate
            zcap.append(max(spacing.size, (zb[k + 1] - zb[k]) / 4 / spacing.refine))
        else:
            zcap.append(spacing.size)
    zs = join_segments(zb, zsize, zcap, growth)

    def lateral(half, margin, mirrored):
        if half is None:  # blanket column: two elements across
            m = geom.margin
            return np.array([-m, 0.0, m])
        cap_out = max(spacing.lateral_cap, margin / 3 / spacing.refine)
        if margin <= MIN_RELATIVE_SPACING * half:   # the feature fills the cell
            full = join_segments([-half, half], [None, None], [spacing.lateral_cap], growth)
        else:
            outer = half + margin
            full = join_segments([-outer, -half, half, outer], [None, he, he, None],
                                 [cap_out, spacing.lateral_cap, cap_out], growth)
        if not mirrored:
            return full
        # a mirrored model uses the full model's grid with 0 added as a grid line, so that
        # half, quarter and full models share their elements away from the centre line;
        # build_stack_mesh meshes only the non-negative side
        tol = 1e-9 * full[-1]
        pos = np.concatenate([[0.0], full[full > tol]])
        return np.concatenate([-pos[:0:-1], pos])

    mx, my = geom.margins
    return (lateral(geom.half_width, mx, 0 in geom.mirrors),
            lateral(geom.half_length, my, 1 in geom.mirrors), zs)


def build_stack_mesh(geom: StackGeometry, spacing: GridSpacing) -> StackMesh:
    """Mesh a blanket stack or a rectangular mesa with trilinear hexahedra.

    Mirror axes of ``geom`` are meshed from 0; a tapered mesa (``geom.taper``)
    is the straight-walled grid of its footprint with the lateral coordinates
    above the etch floor scaled toward the centre, so the sidewalls are planes
    at the requested angle and the elements there are trapezoidal (not
    axis-aligned bricks).

    Parameters
    ----------
    geom : StackGeometry
    spacing : GridSpacing

    Returns
    -------
    StackMesh
    """
    from skfem import MeshHex

    xs, ys, zs = axis_coordinates(geom, spacing)
    if 0 in geom.mirrors:
        xs = xs[xs >= 0.0]
    if 1 in geom.mirrors:
        ys = ys[ys >= 0.0]
    full = MeshHex.init_tensor(xs, ys, zs)
    mid = full.p[:, full.t].mean(axis=1)  # (3, nelems)
    ix = np.searchsorted(xs, mid[0]) - 1
    iy = np.searchsorted(ys, mid[1]) - 1
    iz = np.searchsorted(zs, mid[2]) - 1
    keep = np.ones(mid.shape[1], dtype=bool)
    if geom.patterned and geom.etch_depth > 0:
        above = mid[2] > geom.etch_floor
        outside = (np.abs(mid[0]) > geom.half_width) | (np.abs(mid[1]) > geom.half_length)
        keep = ~(above & outside)
    kept = np.flatnonzero(keep)
    mesh = full.restrict(kept) if len(kept) < full.t.shape[1] else full
    if geom.patterned and geom.taper:
        # sloped sidewalls: scale the lateral coordinates above the etch floor
        p = mesh.p.copy()
        for axis in (0, 1):
            p[axis] *= geom.scale_at(p[2], axis)
        mesh = MeshHex(p, mesh.t)
    # restrict() renumbers nodes but keeps element order; map grid -> element
    cell_of_grid = np.full((len(xs) - 1, len(ys) - 1, len(zs) - 1), -1, dtype=np.int64)
    cell_of_grid[ix[kept], iy[kept], iz[kept]] = np.arange(len(kept))
    zmid = mid[2, kept]
    layer = np.searchsorted(np.asarray(geom.interfaces[:-1]), zmid, side="right").astype(np.int32)
    sm = StackMesh(mesh=mesh, layer=layer, xs=xs, ys=ys, zs=zs,
                   cell_of_grid=cell_of_grid, geometry=geom, spacing=spacing)
    log.info("meshed %r", sm)
    return sm


# --------------------------------------------------------------------------
# unstructured (simplex) meshes: gmsh shapes, imported files, the Python API
# --------------------------------------------------------------------------
class SimplexLocator:
    """Find the simplex (tetrahedron or triangle) that contains each point.

    Candidates are first the elements with the nearest centroids (k-d tree);
    a point not found among them is tested against every element whose
    circumscribing ball about its centroid (radius r_e = largest centroid-to-
    vertex distance) holds the point, which finds it whenever it is inside.
    Barycentric coordinates decide, with a small tolerance so that points on
    faces and on the surface of the body are found.

    Parameters
    ----------
    p : ndarray (dim, nverts)
    t : ndarray (dim + 1, nelems)
    """

    def __init__(self, p: np.ndarray, t: np.ndarray):
        from scipy.spatial import cKDTree

        self.p = np.asarray(p, dtype=float)
        self.t = np.asarray(t)
        v0 = self.p[:, self.t[0]]                                   # (d, n)
        T = np.stack([self.p[:, self.t[k]] - v0 for k in range(1, self.t.shape[0])], axis=-1)
        T = T.transpose(1, 0, 2)                                   # (n, d, d)
        det = np.linalg.det(T)
        if np.any(np.abs(det) <= 1e-14 * np.max(np.abs(det))):
            raise MeshError("the mesh has a degenerate (flat) element")
        self.Tinv = np.linalg.inv(T)
        self.v0 = v0.T
        centroids = self.p[:, self.t].mean(axis=1)                  # (d, n)
        self.radius = np.max(np.linalg.norm(self.p[:, self.t] - centroids[:, None, :], axis=0),
                             axis=0)
        self.tree = cKDTree(centroids.T)
        self.size = float(np.max(np.ptp(self.p, axis=1))) or 1.0
        # elements grouped by size (powers of 2 of the radius), one k-d tree per group, so
        # that a ball search only meets elements of about its own size
        cls = np.floor(np.log2(np.maximum(self.radius, 1e-300))).astype(int)
        self.groups = []
        for c in np.unique(cls):
            members = np.flatnonzero(cls == c)
            self.groups.append((members, cKDTree(centroids[:, members].T),
                                float(self.radius[members].max())))

    def _bary(self, x: np.ndarray, elems: np.ndarray) -> np.ndarray:
        """Smallest barycentric coordinate of points x (m, d) in elements (m,)."""
        lam = np.einsum("mij,mj->mi", self.Tinv[elems], x - self.v0[elems])
        return np.minimum(lam.min(axis=1), 1.0 - lam.sum(axis=1))

    def __call__(self, points: np.ndarray, tol: float = 1e-9) -> np.ndarray:
        x = np.atleast_2d(np.asarray(points, dtype=float))
        n = len(x)
        out = np.full(n, -1, dtype=np.int64)
        best = np.full(n, -np.inf)
        nel = self.t.shape[1]
        kk = min(8, nel)
        _, cand = self.tree.query(x, k=kk)
        cand = np.asarray(cand).reshape(n, kk)
        for j in range(kk):
            b = self._bary(x, cand[:, j])
            better = b > best
            best[better] = b[better]
            out[better] = cand[better, j]
        slack = tol * self.size
        todo = np.flatnonzero(best < -tol)
        if todo.size:
            xt = x[todo]
            for members, tree, rmax in self.groups:
                lists = tree.query_ball_point(xt, rmax + slack)
                counts = np.array([len(v) for v in lists])
                if counts.sum() == 0:
                    continue
                pi = np.repeat(np.arange(todo.size), counts)
                el = members[np.concatenate([np.asarray(v, dtype=np.int64) for v in lists])]
                d = np.linalg.norm(self.tree.data[el] - xt[pi], axis=1)
                keep = d <= self.radius[el] + slack
                pi, el = pi[keep], el[keep]
                if pi.size == 0:
                    continue
                b = self._bary(xt[pi], el)
                order = np.lexsort((-b, pi))          # best candidate first per point
                first = np.concatenate([[True], pi[order][1:] != pi[order][:-1]])
                sel = order[first]
                pts, bb, ee = todo[pi[sel]], b[sel], el[sel]
                better = bb > best[pts]
                best[pts[better]] = bb[better]
                out[pts[better]] = ee[better]
        out[best < -tol] = -1
        return out


@dataclass(frozen=True)
class UnstructuredMesh:
    """A tetrahedral mesh with a region per element.

    The same interface as :class:`StackMesh` where later stages need it:
    ``mesh`` (a scikit-fem ``MeshTet``), ``layer``, ``nnodes``, ``nelems``,
    ``locate``, ``bounds``, ``boundary()``; ``xs``, ``ys`` and ``zs`` hold only
    the extents of the body (there is no grid).

    Attributes
    ----------
    mesh : skfem.MeshTet
        Linear-geometry tetrahedra (nm). Quadratic fields use P2 elements on it.
    layer : ndarray of int (nelems,)
        Region of each element (0 substrate, i layer i; for the Python API the
        index into its list of materials).
    kind : str
        ``"gmsh"`` (built-in shapes), ``"file"`` (imported) or ``"api"``.
    boundary_conditions : Boundary
    spacing : GridSpacing or None
        Requested element sizes (for the summary).
    mirrors : tuple of int
        Mirror axes of the model (see :mod:`mesastrain.model.symmetry`).
    description : str
    """

    mesh: object
    layer: np.ndarray
    kind: str
    boundary_conditions: Boundary
    spacing: GridSpacing | None = None
    mirrors: tuple = ()
    description: str = ""
    axis_aligned = False

    @property
    def nnodes(self) -> int:
        return int(self.mesh.p.shape[1])

    @property
    def nelems(self) -> int:
        return int(self.mesh.t.shape[1])

    @property
    def bounds(self) -> np.ndarray:
        p = self.mesh.p
        return np.stack([p.min(axis=1), p.max(axis=1)], axis=1)

    @property
    def xs(self) -> np.ndarray:
        return self.bounds[0]

    @property
    def ys(self) -> np.ndarray:
        return self.bounds[1]

    @property
    def zs(self) -> np.ndarray:
        return self.bounds[2]

    @property
    def geometry(self):
        return None

    def boundary(self) -> Boundary:
        return self.boundary_conditions

    @cached_property
    def _locator(self) -> SimplexLocator:
        return SimplexLocator(self.mesh.p, self.mesh.t)

    def locate(self, points: np.ndarray) -> np.ndarray:
        """Element index containing each point (nm), -1 outside the body."""
        return self._locator(points)

    def __repr__(self) -> str:
        return (f"UnstructuredMesh({self.kind}: {self.nnodes} nodes, {self.nelems} tetrahedra, "
                f"regions {sorted(set(self.layer.tolist()))})")


def box_boundary(p: np.ndarray, periodic_axes=(), mirrors=()) -> Boundary:
    """Default supports of a body inside a box: bottom held in z, rollers or ties at the sides.

    Parameters
    ----------
    p : ndarray (3, n)
        Vertex coordinates, nm.
    periodic_axes : sequence of int
        Lateral axes whose faces are tied (not also mirrored).
    mirrors : sequence of int
        Mirror axes (their faces are rollers).
    """
    lo, hi = p.min(axis=1), p.max(axis=1)
    supports = [(2, 2, lo[2])]
    periodic = []
    for axis in (0, 1):
        if axis in periodic_axes and axis not in mirrors:
            periodic.append((axis, lo[axis], hi[axis]))
        else:
            supports += [(axis, axis, lo[axis]), (axis, axis, hi[axis])]
    return Boundary(tuple(supports), tuple(periodic), pin=tuple(q[0] for q in periodic))
