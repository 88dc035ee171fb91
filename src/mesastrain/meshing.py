"""Structured hexahedral meshes of film stacks, blanket or etched into a mesa.

The body is a tensor-product grid of axis-aligned bricks whose planes include
every layer interface, the etch floor and the mesa sidewalls, so that material
boundaries and free surfaces are element faces. Grid lines are graded toward
those planes. Elements outside the body (etched away) are removed.

Coordinates are in nm: z = 0 at the substrate's top surface, +z up through the
layers, x = y = 0 at the centre of the pattern.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np

from .errors import MeshError

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
        Lateral substrate modelled around the mesa (or half the column width
        for a blanket stack).
    """

    interfaces: tuple
    substrate_depth: float
    half_width: float | None
    half_length: float | None
    etch_depth: float
    margin: float

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
    """

    size: float
    edge_size: float
    growth: float
    lateral_cap: float


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
    """Graded grid coordinates along x, y and z for a stack geometry."""
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
            zcap.append(max(spacing.size, (zb[k + 1] - zb[k]) / 4))
        else:
            zcap.append(spacing.size)
    zs = join_segments(zb, zsize, zcap, growth)

    def lateral(half):
        if half is None:  # blanket column: two elements across
            m = geom.margin
            return np.array([-m, 0.0, m])
        outer = half + geom.margin
        brk = [-outer, -half, half, outer]
        sizes = [None, he, he, None]
        caps = [max(spacing.lateral_cap, geom.margin / 3), spacing.lateral_cap,
                max(spacing.lateral_cap, geom.margin / 3)]
        return join_segments(brk, sizes, caps, growth)

    return lateral(geom.half_width), lateral(geom.half_length), zs


def build_stack_mesh(geom: StackGeometry, spacing: GridSpacing) -> StackMesh:
    """Mesh a blanket stack or a rectangular mesa with trilinear hexahedra.

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
    # restrict() renumbers nodes but keeps element order; map grid -> element
    cell_of_grid = np.full((len(xs) - 1, len(ys) - 1, len(zs) - 1), -1, dtype=np.int64)
    cell_of_grid[ix[kept], iy[kept], iz[kept]] = np.arange(len(kept))
    zmid = mid[2, kept]
    layer = np.searchsorted(np.asarray(geom.interfaces[:-1]), zmid, side="right").astype(np.int32)
    sm = StackMesh(mesh=mesh, layer=layer, xs=xs, ys=ys, zs=zs,
                   cell_of_grid=cell_of_grid, geometry=geom, spacing=spacing)
    log.info("meshed %r", sm)
    return sm
