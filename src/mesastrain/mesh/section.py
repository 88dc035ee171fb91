"""Long stripes as a 2-D cross-section in generalized plane strain.

A stripe of width w runs along sample y without end. Far from its ends nothing
depends on y, so the displacement is u(x, z) with all three components, and

    eps_yy = 0            (the strain along the line is the wafer's: zero
                           relative to the substrate lattice)
    eps_xy = 1/2 du_y/dx,  eps_yz = 1/2 du_y/dz   (out-of-plane shear allowed)

This is generalized plane strain with the axial strain fixed by the wafer; the
anti-plane displacement u_y matters because a rotated anisotropic crystal
couples in-plane and out-of-plane shear (Lekhnitskii, Theory of Elasticity of
an Anisotropic Body, 1963, from memory). The finite elements are bilinear or
biquadratic quadrilaterals on the x-z section, graded exactly as the 3-D
structured mesh is in x and z (:func:`mesastrain.mesh.grid.axis_coordinates`);
their gradients are handed to the 3-D assembly kernel with a zero y column,
so assembly, solve and field recovery are the 3-D ones. All integrals are per
nm of stripe length.

For output the section is extruded into one layer of hexahedra of small
thickness centred on y = 0, so ``fields.vtu`` opens as a 3-D slab and the
VTU viewers and section pictures work unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from mesastrain.fem.constraints import Boundary
from mesastrain.fem.cost import Estimate, estimate_from_counts
from mesastrain.fem.discretisation import INTORDER, Discretisation
from mesastrain.fem.fields import Fields, elastic_state, reference_coordinates
from mesastrain.fem.mapping import fast_mapping
from mesastrain.mesh.base import ModelMesh
from mesastrain.mesh.grid import GridSpacing, StackLayout, axis_coordinates, cell_regions
from mesastrain.mesh.planning import layout_of
from mesastrain.mesh.structured import distinct_rows, grid_cells

#: Thickness of the exported slab along y, as a fraction of the modelled x extent.
SLAB_FRACTION = 0.05


@dataclass(frozen=True)
class SectionDiscretisation(Discretisation):
    """A 2-D scalar basis on the x-z section seen as a 3-D discretisation.

    ``gradients`` returns (dN/dx, 0, dN/dz); ``weights`` are areas (nm^2), so
    the assembled matrix and load are per nm of stripe length. ``doflocs``
    are (x, 0, z).
    """

    def gradients(self, elements=slice(None)) -> np.ndarray:
        g = np.stack([self.basis.basis[a][0].grad[:, elements, :] for a in range(self.nloc)])
        g = g.transpose(2, 3, 0, 1)                      # (nel, nqp, nloc, 2)
        out = np.zeros(g.shape[:3] + (3,))
        out[..., 0] = g[..., 0]
        out[..., 2] = g[..., 1]
        return out

    def weights(self, elements=slice(None)) -> np.ndarray:
        return self.basis.dx[elements]


def discretise_section(mesh2d, order: int) -> SectionDiscretisation:
    """Q1 or Q2 basis on a quadrilateral x-z mesh."""
    from skfem import Basis, ElementQuad1, ElementQuad2

    elem = {1: ElementQuad1, 2: ElementQuad2}[order]()
    basis = Basis(mesh2d, elem, intorder=INTORDER[order])
    d2 = np.asarray(basis.doflocs)
    doflocs = np.vstack([d2[0], np.zeros(d2.shape[1]), d2[1]])
    return SectionDiscretisation(basis=basis, order=order,
                                 element_dofs=np.ascontiguousarray(basis.element_dofs),
                                 ndofs=3 * basis.N, doflocs=doflocs)


def extrude(p2: np.ndarray, t2: np.ndarray, dy: float):
    """One layer of hexahedra from quadrilaterals: (x, z) -> y in [-dy/2, dy/2].

    Returns
    -------
    skfem.MeshHex
        Node k of the section gives nodes k (y = -dy/2) and n + k (y = +dy/2);
        every hexahedron is positively oriented.
    """
    from skfem import ElementHex1, ElementQuad1, MeshHex

    H = np.asarray(ElementHex1().doflocs)             # (8, 3)
    Q = np.asarray(ElementQuad1().doflocs)            # (4, 2)
    n = p2.shape[1]
    qidx = [int(np.flatnonzero(np.all(Q == [h[0], h[2]], axis=1))[0]) for h in H]
    # orientation of each quad in the ref (a, b) -> (x, z) map
    o = [int(np.flatnonzero(np.all(Q == q, axis=1))[0]) for q in ([0, 0], [1, 0], [0, 1])]
    a = p2[:, t2[o[1]]] - p2[:, t2[o[0]]]
    b = p2[:, t2[o[2]]] - p2[:, t2[o[0]]]
    sign = np.sign(a[0] * b[1] - a[1] * b[0])          # (nel,)
    t3 = np.empty((8, t2.shape[1]), dtype=np.int64)
    for k, h in enumerate(H):
        top = np.where(sign > 0, h[1], 1.0 - h[1]).astype(np.int64)
        t3[k] = t2[qidx[k]] + n * top
    p3 = np.vstack([np.concatenate([p2[0], p2[0]]),
                    np.concatenate([np.full(n, -dy / 2), np.full(n, dy / 2)]),
                    np.concatenate([p2[1], p2[1]])])
    return MeshHex(p3, t3)


@dataclass(frozen=True)
class SectionMesh(ModelMesh):
    """The x-z cross-section of a stripe, with a slab of hexahedra for export (a :class:`ModelMesh`).

    ``nnodes`` counts the nodes of the exported slab (twice the section's),
    ``solve_nnodes`` and ``nelems`` those of the section.

    Attributes
    ----------
    section : skfem.MeshQuad
        The section (coordinates x, z in nm); the mesh that is solved
        (``solve_mesh``).
    mesh : skfem.MeshHex
        The same elements extruded into a thin slab around y = 0 (export).
    region : ndarray of int (nelems,)
    xs, zs : ndarray
        Grid lines of the section (before any sidewall slope).
    cell_of_grid : ndarray (nx-1, nz-1)
        Element of each grid cell, -1 where etched away.
    layout : StackLayout
    spacing : GridSpacing
    slab : float
        Thickness of the exported slab, nm.
    """

    section: object
    mesh: object
    region: np.ndarray
    xs: np.ndarray
    zs: np.ndarray
    cell_of_grid: np.ndarray
    layout: StackLayout
    spacing: GridSpacing = field(repr=False, default=None)
    slab: float = 1.0

    kind = "section"
    element_name = "quadrilaterals (cross-section)"

    @property
    def solve_mesh(self):
        """The quadrilateral section (what is solved)."""
        return self.section

    @property
    def mirrors(self) -> tuple:
        return tuple(a for a in self.layout.mirrors if a == 0)

    @property
    def ys(self) -> np.ndarray:
        return np.array([-self.slab / 2, self.slab / 2])

    @property
    def bounds(self) -> np.ndarray:
        return np.array([[self.xs[0], self.xs[-1]], [-np.inf, np.inf], [self.zs[0], self.zs[-1]]])

    def discretise(self, order: int) -> SectionDiscretisation:
        return discretise_section(self.section, order)

    def boundary(self) -> Boundary:
        """Bottom held in z; x faces rollers (or tied in a grating); u_y pinned at one node."""
        g = self.layout
        x0, x1, z0 = self.xs[0], self.xs[-1], self.zs[0]
        if 0 in g.periodic and 0 not in g.mirrors:
            return Boundary(((2, 2, z0),), ((0, x0, x1),), pin=(0, 1))
        return Boundary(((2, 2, z0), (0, 0, x0), (0, 0, x1)), (), pin=(1,))

    def expand_fields(self, fl: Fields) -> Fields:
        """Section fields -> slab fields (node arrays repeated for both y faces)."""
        def tile(a):
            return np.concatenate([a, a], axis=0)
        return replace(fl, displacement=tile(fl.displacement), node_strain=tile(fl.node_strain),
                       node_stress=tile(fl.node_stress))

    def locate_all(self, points: np.ndarray) -> np.ndarray:
        """Every element that holds each point (its y is ignored): (npts, k), -1 padded.

        Tolerances relative to the neighbouring cells
        (:func:`mesastrain.mesh.structured.grid_cells`); lowest cell first.
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        x = pts[:, 0].copy()
        z = pts[:, 2]
        if self.layout.taper:
            x = self.layout.map_lateral(x, z, 0, inverse=True)
        ix, iz = grid_cells(self.xs, x), grid_cells(self.zs, z)
        ok = ix[2] & iz[2]
        cands = [np.where(ok, self.cell_of_grid[ix[cx], iz[cz]], -1)
                 for cx in (0, 1) for cz in (0, 1)]
        return distinct_rows(np.stack(cands, axis=1))

    def locate(self, points: np.ndarray) -> np.ndarray:
        """Element containing each point (its y is ignored), -1 outside."""
        return self.locate_all(points)[:, 0]

    def evaluate(self, disc, u, elements, points, region, stiffness, eigenstrain,
                 cell_eigenstrain=None):
        """Exact elastic strain, stress (MPa), displacement at points (as evaluate_at_points)."""
        mesh = disc.basis.mesh
        elem = disc.basis.elem
        mapping = fast_mapping(mesh)
        x = np.asarray(points, dtype=float)[:, [0, 2]].T[:, :, None]
        X = reference_coordinates(mapping, x, elements)
        invDF = mapping.invDF(X, tind=elements)                   # (2, 2, npts, 1)
        Xf = X[:, :, 0]
        U = np.asarray(u).reshape(-1, 3)
        ue = U[disc.element_dofs[:, elements].T]                  # (npts, a, 3)
        grad = np.zeros((len(elements), 3, 3))
        disp = np.zeros((len(elements), 3))
        for a in range(disc.nloc):
            phi, dphi = elem.lbasis(Xf, a)
            d2 = np.einsum("ijp,ip->jp", invDF[:, :, :, 0], dphi)   # (2, npts): d/dx, d/dz
            d3 = np.stack([d2[0], np.zeros_like(d2[0]), d2[1]])
            grad += np.einsum("pi,jp->pij", ue[:, a, :], d3)
            disp += phi[:, None] * ue[:, a, :]
        el, sig = elastic_state(0.5 * (grad + grad.transpose(0, 2, 1)), elements, region,
                                stiffness, eigenstrain, cell_eigenstrain)
        return el, sig, disp

    def unfolded(self, uf) -> SectionMesh:
        """The whole section from its mirrored half (see :mod:`mesastrain.mesh.unfold`)."""
        from skfem import MeshQuad

        nx = len(self.xs) - 1
        full_x = np.concatenate([-self.xs[:0:-1], self.xs])
        cog = np.full((2 * nx, len(self.zs) - 1), -1, dtype=np.int64)
        ix, iz = np.nonzero(self.cell_of_grid >= 0)
        e = self.cell_of_grid[ix, iz]
        for k, s in enumerate(uf.images):
            jx = nx + ix if s[0] > 0 else nx - 1 - ix
            cog[jx, iz] = k * self.nelems + e
        m2 = MeshQuad(uf.p, uf.t_export)
        return replace(self, section=m2, mesh=extrude(m2.p, m2.t, self.slab), region=uf.region,
                       xs=full_x, cell_of_grid=cog, layout=replace(self.layout, mirrors=()))

    def __repr__(self) -> str:
        return (f"SectionMesh({self.solve_nnodes} nodes, {self.nelems} quadrilaterals, grid "
                f"{len(self.xs) - 1}x{len(self.zs) - 1})")


def section_coordinates(case, mirrors=None, whole: bool = False):
    """Layout, spacing and the x and z grid lines of a stripe's section.

    With ``whole`` the grid lines of the whole section are returned even for a
    mirrored model (what the unfolded result has); otherwise x >= 0 only.
    """
    geom, spacing = layout_of(case, mirrors=None if mirrors is None else tuple(mirrors))
    xs, _, zs = axis_coordinates(geom, spacing)
    if 0 in geom.mirrors and not whole:
        xs = xs[xs >= 0.0]
    return geom, spacing, xs, zs


def _regions(geom, xs, zs) -> np.ndarray:
    """Region of each grid cell (nx-1, nz-1), -1 where etched away (liners included)."""
    xm, zm = 0.5 * (xs[1:] + xs[:-1]), 0.5 * (zs[1:] + zs[:-1])
    return cell_regions(geom, xm[:, None], None, zm[None, :])


def _keep(geom, xs, zs) -> np.ndarray:
    return _regions(geom, xs, zs) >= 0


def build_section_mesh(case, mirrors=()) -> SectionMesh:
    """Mesh the x-z section of a stripe (graded bilinear quadrilaterals).

    Parameters
    ----------
    case : Case
        ``pattern.shape == "stripe"``.
    mirrors : tuple of int
        (0,) to model x >= 0 only.
    """
    from skfem import MeshQuad

    geom, spacing, xs, zs = section_coordinates(case, mirrors)
    full = MeshQuad.init_tensor(xs, zs)
    mid = full.p[:, full.t].mean(axis=1)
    ix = np.searchsorted(xs, mid[0]) - 1
    iz = np.searchsorted(zs, mid[1]) - 1
    cell_region = _regions(geom, xs, zs)[ix, iz]
    kept = np.flatnonzero(cell_region >= 0)
    mesh = full.restrict(kept) if len(kept) < full.t.shape[1] else full
    if geom.taper:
        p = mesh.p.copy()
        p[0] = geom.map_lateral(p[0], p[1], 0)
        mesh = MeshQuad(p, mesh.t)
    cog = np.full((len(xs) - 1, len(zs) - 1), -1, dtype=np.int64)
    cog[ix[kept], iz[kept]] = np.arange(len(kept))
    region = cell_region[kept].astype(np.int32)
    full_width = 2.0 * max(abs(xs[0]), abs(xs[-1]))
    slab = SLAB_FRACTION * full_width
    return SectionMesh(section=mesh, mesh=extrude(mesh.p, mesh.t, slab), region=region,
                       xs=xs, zs=zs, cell_of_grid=cog, layout=geom, spacing=spacing, slab=slab)


def handles(pattern) -> bool:
    """A stripe is modelled by its cross-section."""
    return pattern.shape == "stripe"


def _section_counts(geom, xs, zs, order: int) -> tuple[int, int, int]:
    """Vertices, elements and scalar dofs of the section on grid lines ``xs``, ``zs``."""
    keep = _keep(geom, xs, zs)
    nx, nz = keep.shape
    k2 = np.zeros((2 * nx + 1, 2 * nz + 1), dtype=bool)
    for dx in (0, 1, 2):
        for dz in (0, 1, 2):
            k2[dx:dx + 2 * nx:2, dz:dz + 2 * nz:2] |= keep
    vertices = int(k2[::2, ::2].sum())
    return vertices, int(keep.sum()), vertices if order == 1 else int(k2.sum())


def estimate_section(case) -> Estimate:
    """Exact node, element and unknown counts of a stripe's section (no meshing).

    ``unknowns``, memory and time are those of the whole section; ``solved_*`` the part
    that is solved (x >= 0 when the mirror x = 0 is used); ``nodes`` the exported slab
    (one layer of hexahedra: twice the section's vertices).
    """
    order = case.mesh.order
    geom, spacing, xs, zs = section_coordinates(case, whole=True)
    vertices, elements, scalar = _section_counts(geom, xs, zs, order)
    nloc = 4 if order == 1 else 9
    est = estimate_from_counts(case, vertices, elements, scalar, nloc,
                               18 if order == 1 else 45, shape="quadrilaterals", section=True)
    _, _, half, _ = section_coordinates(case)
    sv, se, ss = _section_counts(geom, half, zs, order)
    return replace(est, nodes=2 * vertices, solved_nodes=sv, solved_elements=se,
                   solved_unknowns=3 * ss, symmetry="half" if 0 in geom.mirrors else "full")
