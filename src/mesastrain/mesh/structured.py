"""Structured hexahedral meshes of film stacks, blanket or etched into a mesa.

The body is a tensor-product grid of axis-aligned bricks whose planes include
every layer interface, the etch floor and the mesa sidewalls, so that material
boundaries and free surfaces are element faces. Grid lines are graded toward
those planes (:mod:`mesastrain.mesh.grid`). Elements outside the body (etched
away) are removed.

Coordinates are in nm: z = 0 at the substrate's top surface, +z up through the
layers, x = y = 0 at the centre of the pattern.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field, replace

import numpy as np

from mesastrain.fem.constraints import Boundary
from mesastrain.fem.cost import (
    Estimate,
    count_unknowns,
    element_type,
    output_seconds,
    pattern_nonzeros,
    resources,
    rhs_seconds,
)
from mesastrain.fem.discretisation import Discretisation, discretise
from mesastrain.fem.solve import choose_method
from mesastrain.mesh.base import ModelMesh
from mesastrain.mesh.grid import (
    GridSpacing,
    StackLayout,
    axis_coordinates,
    cell_regions,
    keep_mask,
)
from mesastrain.mesh.planning import layout_of

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class StackMesh(ModelMesh):
    """A meshed stack: the scikit-fem mesh plus what later stages need (a :class:`ModelMesh`).

    Attributes
    ----------
    mesh : skfem.MeshHex
        Trilinear hexahedral mesh (nm). Quadratic fields use it with a
        27-node element.
    region : ndarray of int, (nelems,)
        0 for the substrate, i for the i-th layer (1 = first grown layer).
    xs, ys, zs : ndarray
        Grid coordinates along x, y and z.
    cell_of_grid : ndarray of int, (nx-1, ny-1, nz-1)
        Element index of each grid cell, -1 where the cell was etched away.
    layout : StackLayout
    spacing : GridSpacing
    """

    mesh: object
    region: np.ndarray
    xs: np.ndarray
    ys: np.ndarray
    zs: np.ndarray
    cell_of_grid: np.ndarray
    layout: StackLayout
    spacing: GridSpacing = field(repr=False, default=None)

    kind = "structured"
    element_name = "hexahedra"

    @property
    def axis_aligned(self) -> bool:
        """True when every element is an axis-aligned brick (no tapered sidewalls)."""
        return not self.layout.taper

    @property
    def mirrors(self) -> tuple:
        """Mirror axes of the model (only the non-negative side is meshed)."""
        return tuple(self.layout.mirrors)

    def discretise(self, order: int) -> Discretisation:
        """Trilinear or 27-node hexahedra (closed-form brick kernels when axis-aligned)."""
        return discretise(self.mesh, order)

    @property
    def bounds(self) -> np.ndarray:
        """(3, 2) extent of the modelled body, nm."""
        return np.array([[self.xs[0], self.xs[-1]], [self.ys[0], self.ys[-1]],
                         [self.zs[0], self.zs[-1]]])

    def boundary(self) -> Boundary:
        """Supports and periodic ties of the structured model.

        The substrate bottom is held in z. Each lateral axis is either
        periodic (an array, not mirrored: opposite faces tied) or held normal
        to its faces (rollers: a mirror plane, the far edge of the modelled
        substrate, or the cell face of a mirror-symmetric array).
        """
        geom = self.layout
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
                f"regions {sorted(set(self.region.tolist()))})")

    def locate_all(self, points: np.ndarray) -> np.ndarray:
        """Every element that holds each point: (npts, k), -1 padded, lowest cell first.

        A point on a grid plane (within :data:`LOCATE_RTOL` of the cells beside
        it) lies in the cells on both sides; the first column is the cell on the
        lower side when it exists (:meth:`locate`), so that a probe on the top
        surface or on a sidewall lands in the body.
        """
        points = np.atleast_2d(np.asarray(points, dtype=float))
        geom = self.layout
        if geom.taper:
            # undo the lateral map of a tapered feature: back to grid space
            points = geom.to_grid(points)
        idx = [grid_cells(g, points[:, a]) for a, g in enumerate((self.xs, self.ys, self.zs))]
        inside = idx[0][2] & idx[1][2] & idx[2][2]
        cands = [np.where(inside, self.cell_of_grid[idx[0][cx], idx[1][cy], idx[2][cz]], -1)
                 for cx in (0, 1) for cy in (0, 1) for cz in (0, 1)]
        return distinct_rows(np.stack(cands, axis=1))

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
        The tolerance is relative to the size of the cells next to each point
        (:func:`grid_cells`), not to the model, so a 1 pm layer on a 1 mm
        substrate is found. A point on a grid plane is given to the cell on
        its lower side when that cell exists, otherwise to the upper one.
        """
        return self.locate_all(points)[:, 0]

    def unfolded(self, uf) -> StackMesh:
        """The whole structured mesh (grid, cell map, export mesh) from an unfolded part.

        Parameters
        ----------
        uf : mesastrain.mesh.unfold.Unfolded
        """
        from skfem import MeshHex

        geom = self.layout
        xs, ys = self.xs, self.ys
        nx, ny = len(xs) - 1, len(ys) - 1
        full_x = np.concatenate([-xs[:0:-1], xs]) if 0 in geom.mirrors else xs
        full_y = np.concatenate([-ys[:0:-1], ys]) if 1 in geom.mirrors else ys
        cog = np.full((len(full_x) - 1, len(full_y) - 1, len(self.zs) - 1), -1, dtype=np.int64)
        ix, iy, iz = np.nonzero(self.cell_of_grid >= 0)
        e = self.cell_of_grid[ix, iy, iz]
        nel = self.nelems
        for k, s in enumerate(uf.images):
            jx = ix if 0 not in geom.mirrors else (nx + ix if s[0] > 0 else nx - 1 - ix)
            jy = iy if 1 not in geom.mirrors else (ny + iy if s[1] > 0 else ny - 1 - iy)
            cog[jx, jy, iz] = k * nel + e
        mesh = MeshHex(uf.p, uf.t_export)
        return replace(self, mesh=mesh, region=uf.region, xs=full_x, ys=full_y, cell_of_grid=cog,
                       layout=replace(geom, mirrors=()))

#: Tolerance of :func:`grid_cells`, relative to the width of the cells beside a point.
LOCATE_RTOL = 1e-9


def grid_cells(g: np.ndarray, x: np.ndarray, rtol: float = LOCATE_RTOL):
    """Cells of increasing grid lines ``g`` that hold each coordinate x.

    A coordinate within ``rtol`` of the narrower neighbouring cell (or of the
    coordinate's own round-off, 1e-13 of the largest line) from a grid line
    lies in the cells on both sides of it.

    Returns
    -------
    lo, hi : ndarray of int
        The lower and upper candidate cell (equal inside a cell).
    inside : ndarray of bool
        Within the grid (same tolerance at its ends).
    """
    g = np.asarray(g, dtype=float)
    x = np.asarray(x, dtype=float)
    w = np.diff(g)
    n = len(w)
    floor = 1e-13 * float(np.max(np.abs(g)))
    i = np.clip(np.searchsorted(g, x, side="right") - 1, 0, n - 1)
    below = np.maximum(i - 1, 0)
    above = np.minimum(i + 1, n - 1)
    tol_lo = np.maximum(rtol * np.minimum(w[i], w[below]), floor)
    tol_hi = np.maximum(rtol * np.minimum(w[i], w[above]), floor)
    lo = np.where((i > 0) & (np.abs(x - g[i]) <= tol_lo), i - 1, i)
    hi = np.where((i < n - 1) & (np.abs(g[i + 1] - x) <= tol_hi), i + 1, i)
    inside = ((x >= g[0] - max(rtol * w[0], floor)) & (x <= g[-1] + max(rtol * w[-1], floor)))
    return lo, hi, inside


def distinct_rows(c: np.ndarray) -> np.ndarray:
    """Candidate elements (npts, k): repeats and -1 moved to the end (padded -1), order kept."""
    c = np.asarray(c)
    out = np.full_like(c, -1)
    seen = np.zeros(c.shape, dtype=bool)
    for j in range(1, c.shape[1]):
        seen[:, j] = np.any(c[:, :j] == c[:, j:j + 1], axis=1)
    keep = (c >= 0) & ~seen
    pos = np.cumsum(keep, axis=1) - 1
    r, k = np.nonzero(keep)
    out[r, pos[r, k]] = c[r, k]
    width = max(int(keep.sum(axis=1).max(initial=1)), 1)
    return out[:, :width]


def build_stack_mesh(geom: StackLayout, spacing: GridSpacing) -> StackMesh:
    """Mesh a blanket stack or a rectangular mesa with trilinear hexahedra.

    Mirror axes of ``geom`` are meshed from 0; a tapered mesa (``geom.taper``)
    is the straight-walled grid of its footprint with the lateral coordinates
    above the etch floor scaled toward the centre, so the sidewalls are planes
    at the requested angle and the elements there are trapezoidal (not
    axis-aligned bricks).

    Parameters
    ----------
    geom : StackLayout
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
    cell_region = cell_regions(geom, mid[0], mid[1], mid[2])
    kept = np.flatnonzero(cell_region >= 0)
    mesh = full.restrict(kept) if len(kept) < full.t.shape[1] else full
    if geom.patterned and geom.taper:
        # sloped sidewalls: move the lateral coordinates above the etch floor
        mesh = MeshHex(geom.to_physical(mesh.p), mesh.t)
    # restrict() renumbers nodes but keeps element order; map grid -> element
    cell_of_grid = np.full((len(xs) - 1, len(ys) - 1, len(zs) - 1), -1, dtype=np.int64)
    cell_of_grid[ix[kept], iy[kept], iz[kept]] = np.arange(len(kept))
    region = cell_region[kept].astype(np.int32)
    sm = StackMesh(mesh=mesh, region=region, xs=xs, ys=ys, zs=zs,
                   cell_of_grid=cell_of_grid, layout=geom, spacing=spacing)
    log.info("meshed %r", sm)
    return sm


def handles(pattern) -> bool:
    """The structured kind takes every pattern no other kind claims (registered last)."""
    return True


def build_structured(case, mirrors=()) -> StackMesh:
    """The structured mesh of a case (blanket stack or rectangle, vertical or sloped walls)."""
    return build_stack_mesh(*layout_of(case, mirrors=tuple(mirrors)))


def estimate_structured(case) -> Estimate:
    """Unknowns, peak memory and wall time of a structured case, without meshing.

    Unknowns and stored nonzeros are counted exactly on the structured grid
    the mesher will build (only the mirrored part is solved when symmetry is
    used). Memory and time follow :func:`mesastrain.fem.cost.resources`.
    """
    geom, spacing = layout_of(case)
    xs, ys, zs = axis_coordinates(geom, spacing)
    order = case.mesh.order
    # the result holds the whole body (a half/quarter model is unfolded after the solve):
    # report its counts, but size memory and time by the part that is solved
    whole = count_unknowns(keep_mask(geom, xs, ys, zs), order)
    if 0 in geom.mirrors:                    # only the non-negative side is meshed
        xs = xs[xs >= 0.0]
    if 1 in geom.mirrors:
        ys = ys[ys >= 0.0]
    keep = keep_mask(geom, xs, ys, zs)
    nodes, nel, n = count_unknowns(keep, order)
    nnz = pattern_nonzeros(keep, order)
    method = choose_method(case.solver.method, n, case.solver.direct_limit)
    mem, solver = resources(n, nnz, nel, 8 if order == 1 else 27, order, method,
                            whole_unknowns=whole[2], whole_elements=whole[1])
    secs = solver + output_seconds(whole[2], case.output.pictures and case.output.report)
    return Estimate(*whole, order, method, mem, secs, solved_unknowns=n,
                    element_type=element_type("hexahedra", order), solved_nodes=nodes,
                    solved_elements=nel,
                    symmetry={0: "full", 1: "half", 2: "quarter"}[len(geom.mirrors)],
                    solver_seconds=solver, rhs_seconds=rhs_seconds(n, nnz, order, method))
