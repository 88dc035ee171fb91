"""Scalar shape-function data for every kind of element, as :class:`Discretisation`.

* hexahedra (the structured stack): :func:`discretise` (trilinear or 27-node
  triquadratic); when every element is an axis-aligned brick the result
  carries :class:`Bricks` data and no per-element basis arrays are built;
* tetrahedra (gmsh shapes, imported meshes, the Python API):
  :func:`discretise_tet`, P1 (4-node) or P2 (10-node) Lagrange elements on
  straight-sided tetrahedra;
* quadrilaterals of a cross-section (the stripe, generalized plane strain):
  :class:`mesastrain.mesh.section.SectionDiscretisation`.

Each mesh kind picks its own (``ModelMesh.discretise(order)``, see
:mod:`mesastrain.mesh.base`); assembly, solve and field recovery work on any
of them unchanged. :func:`brick_cells` recovers the tensor-product grid behind
a brick discretisation (used by the geometric multigrid).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

log = logging.getLogger(__name__)

#: Quadrature orders exact for the stiffness of undistorted bricks.
INTORDER = {1: 3, 2: 5}

#: Quadrature order per polynomial order on affine tetrahedra: exact for the
#: stiffness (products of gradients of degree order-1) and the constant-per-element load.
TET_INTORDER = {1: 1, 2: 2}

#: Relative tolerance of the axis-aligned-brick test on vertex coordinates.
BRICK_RTOL = 1e-10

@dataclass(frozen=True)
class Bricks:
    """Geometry of a mesh whose every element is an axis-aligned brick.

    The reference cube [0, 1]^3 maps to element e by x_m = corner[e, m] +
    xi_j h[e, m] with m = axis[j] (h may be negative along an axis when the
    element's local numbering runs against it). ``ref_grad`` is already
    written in sample axes: ref_grad[a, m] = dN_a/dxi_j.

    Attributes
    ----------
    corner : ndarray (nelems, 3)
        Image of the reference origin, nm.
    h : ndarray (nelems, 3)
        Signed edge lengths, nm.
    points : ndarray (3, nqp)
        Reference quadrature points.
    qweights : ndarray (nqp,)
        Reference quadrature weights (sum 1).
    ref_grad : ndarray (nloc, 3, nqp)
        Reference gradients at the quadrature points, indexed by sample axis.
    """

    corner: np.ndarray
    h: np.ndarray
    points: np.ndarray
    qweights: np.ndarray
    ref_grad: np.ndarray

    @property
    def det(self) -> np.ndarray:
        """|h1 h2 h3| per element, nm^3 (the element volume)."""
        return np.abs(np.prod(self.h, axis=1))


class _DeferredBasis:
    """Stand-in for a scikit-fem ``CellBasis`` that is built only when needed.

    ``mesh``, ``elem``, ``intorder`` and ``N`` are available at once; any other
    attribute builds the full basis (all gradients at all quadrature points)
    on first use and forwards to it. The brick kernels never need it.
    """

    def __init__(self, mesh, elem, intorder: int, dofs, nscalar: int):
        self.mesh = mesh
        self.elem = elem
        self.intorder = intorder
        self.N = nscalar
        self._dofs = dofs
        self._basis = None

    def _build(self):
        if self._basis is None:
            from skfem import Basis

            log.info("building the full scikit-fem basis (%d elements)", self.mesh.t.shape[1])
            self._basis = Basis(self.mesh, self.elem, intorder=self.intorder, dofs=self._dofs)
        return self._basis

    def __getattr__(self, name):
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(self._build(), name)


@dataclass(frozen=True)
class Discretisation:
    """Scalar shape-function data shared by assembly and field recovery.

    Attributes
    ----------
    basis : skfem.CellBasis
        Scalar basis (one component); the vector field uses 3 dofs per scalar
        dof. For brick meshes a deferred stand-in that builds the scikit-fem
        basis only if an attribute other than ``mesh``/``elem`` is used.
    order : int
        1 (trilinear, 8 nodes) or 2 (triquadratic, 27 nodes); for other
        element families the polynomial order.
    element_dofs : ndarray (nloc, nelems)
        Scalar dof numbers of each element.
    ndofs : int
        Number of vector unknowns (3 x scalar dofs).
    doflocs : ndarray (3, nscalar)
        Coordinates of the scalar dofs (nm).
    bricks : Bricks or None
        Set when every element is an axis-aligned brick: enables the
        closed-form kernels. None for any other mesh.
    """

    basis: object
    order: int
    element_dofs: np.ndarray
    ndofs: int
    doflocs: np.ndarray
    bricks: Bricks | None = None

    @property
    def nloc(self) -> int:
        return self.element_dofs.shape[0]

    @property
    def nelems(self) -> int:
        return self.element_dofs.shape[1]

    def gradients(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Shape-function gradients dN_a/dx_j at the quadrature points, 1/nm.

        Returns
        -------
        ndarray (nel, nqp, nloc, 3)
        """
        b = self.bricks
        if b is not None:
            inv_h = 1.0 / b.h[elements]                                  # (n,3)
            return b.ref_grad.transpose(2, 0, 1)[None] * inv_h[:, None, None, :]
        g = np.stack([self.basis.basis[a][0].grad[:, elements, :] for a in range(self.nloc)])
        return g.transpose(2, 3, 0, 1)  # (nloc,3,nel,nqp) -> (nel,nqp,nloc,3)

    def weights(self, elements: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Quadrature weights times the Jacobian, (nel, nqp), in nm^3."""
        b = self.bricks
        if b is not None:
            det = np.abs(np.prod(b.h[elements], axis=1))
            return det[:, None] * b.qweights[None, :]
        return self.basis.dx[elements]

    def mean_gradients(self, elements: np.ndarray | slice = slice(None)
                       ) -> tuple[np.ndarray, np.ndarray]:
        """Element-averaged shape-function gradients and element volumes.

        Returns
        -------
        gbar : ndarray (nel, nloc, 3)
            (1/V) int dN_a/dx_j dV, 1/nm.
        volume : ndarray (nel,)
            nm^3.

        Notes
        -----
        Closed form on bricks; otherwise the quadrature of :meth:`gradients`
        with :meth:`weights` (:class:`mesastrain.mesh.unfold.MirroredDiscretisation`
        overrides it with its parent's values, mirrored).
        """
        b = self.bricks
        if b is not None:
            ref = np.einsum("ajq,q->aj", b.ref_grad, b.qweights)          # (nloc,3)
            return ref[None] / b.h[elements][:, None, :], b.det[elements]
        g = self.gradients(elements)
        w = self.weights(elements)
        v = w.sum(axis=1)
        return np.einsum("nq,nqaj->naj", w, g) / v[:, None, None], v


def solved_elements(disc) -> int:
    """Elements at the start of ``disc`` that are the solved part of an unfolded model.

    A mirrored discretisation (:class:`mesastrain.mesh.unfold.MirroredDiscretisation`)
    lists the solved part's elements first, in order (``elem_map[e] == e``), and every
    other element is the reflection of one of them: work that reflects exactly is done on
    those and copied. Every element for any other discretisation (or an ``elem_map`` in
    another order).
    """
    nel = disc.element_dofs.shape[1]
    emap = getattr(disc, "elem_map", None)
    if emap is None or emap.size != nel:
        return nel
    n_own = int(emap.max()) + 1
    return n_own if np.array_equal(emap[:n_own], np.arange(n_own)) else nel


# --------------------------------------------------------------------------
# discretisation of hexahedral meshes
# --------------------------------------------------------------------------
def brick_maps(mesh) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The affine map of every hexahedron, if each is an axis-aligned brick.

    Returns the corner, the signed edge lengths and the axis map.

    The map from scikit-fem's reference cube is x = corner + J xi with J the
    same signed permutation-times-diagonal matrix pattern for all elements:
    reference axis j runs along sample axis ``axis[j]`` with signed length
    ``h[e, axis[j]]``.

    Parameters
    ----------
    mesh : skfem.MeshHex

    Returns
    -------
    (corner (nelems, 3), h (nelems, 3), axis (3,)) with lengths in nm, or None
    when some element is not such a brick.
    """
    from skfem import ElementHex1

    ref = ElementHex1().doflocs                                          # (8, 3) in {0,1}
    origin = int(np.flatnonzero((ref == 0).all(axis=1))[0])
    unit = [int(np.flatnonzero((ref == np.eye(3)[j]).all(axis=1))[0]) for j in range(3)]
    p, t = mesh.p, mesh.t
    if p.shape[0] != 3 or t.shape[0] != 8 or t.shape[1] == 0:
        return None
    scale = float(np.max(np.ptp(p, axis=1))) or 1.0
    tol = BRICK_RTOL * scale
    corner = p[:, t[origin]].T                                           # (nel, 3)
    J = np.stack([p[:, t[unit[j]]].T - corner for j in range(3)], axis=2)  # (nel, m, j)
    axis = np.argmax(np.abs(J[0]), axis=0)                               # (3,) from element 0
    if sorted(axis.tolist()) != [0, 1, 2]:
        return None
    h = np.empty((t.shape[1], 3))
    for j in range(3):
        h[:, axis[j]] = J[:, axis[j], j]
        off = np.delete(J[:, :, j], axis[j], axis=1)
        if np.any(np.abs(off) > tol):
            return None
    if np.any(np.abs(h) <= tol):
        return None
    for a in range(ref.shape[0]):
        xi = np.zeros(3)
        xi[axis] = ref[a]
        if np.max(np.abs(p[:, t[a]].T - (corner + xi * h))) > tol:
            return None
    return corner, h, axis


#: Relative tolerance when snapping brick corners to grid lines.
GRID_RTOL = 1e-9


def snap_to_lines(x: np.ndarray, lines: np.ndarray, span: float) -> np.ndarray | None:
    """Index of the grid line at each coordinate, or None if one is off every line."""
    i = np.clip(np.searchsorted(lines, x), 0, len(lines) - 1)
    j = np.clip(i - 1, 0, len(lines) - 1)
    best = np.where(np.abs(lines[j] - x) < np.abs(lines[i] - x), j, i)
    if np.max(np.abs(lines[best] - x), initial=0.0) > 1e3 * GRID_RTOL * span:
        return None
    return best


def brick_cells(disc) -> tuple[list, list, float] | None:
    """The tensor-product grid behind a brick discretisation, if there is one.

    Returns
    -------
    (lines, cell, span) or None
        ``lines`` the grid coordinates per axis, ``cell[a][e]`` the grid
        interval of element e along axis a, ``span`` the model size (nm).
        None when the elements are not the cells of one tensor grid.
    """
    b = disc.bricks
    if b is None:
        return None
    lo = np.minimum(b.corner, b.corner + b.h)
    hi = np.maximum(b.corner, b.corner + b.h)
    span = float(np.max(hi.max(axis=0) - lo.min(axis=0))) or 1.0
    lines, cells = [], []
    for a in range(3):
        v = np.sort(np.concatenate([lo[:, a], hi[:, a]]))
        g = v[np.concatenate([[True], np.diff(v) > GRID_RTOL * span])]
        i0 = snap_to_lines(lo[:, a], g, span)
        i1 = snap_to_lines(hi[:, a], g, span)
        if i0 is None or i1 is None or np.any(i1 != i0 + 1):
            return None
        lines.append(g)
        cells.append(i0)
    return lines, cells, span


def discretise(mesh, order: int) -> Discretisation:
    """Build the scalar basis of the given order on a hexahedral mesh.

    When every element is an axis-aligned brick (the structured stack mesh),
    the returned discretisation carries :class:`Bricks` data and a deferred
    scikit-fem basis, so no per-element basis arrays are built.
    """
    from skfem import Basis, ElementHex1, ElementHex2
    from skfem.assembly import Dofs
    from skfem.quadrature import get_quadrature

    elem = {1: ElementHex1, 2: ElementHex2}[order]()
    maps = brick_maps(mesh)
    if maps is None:
        basis = Basis(mesh, elem, intorder=INTORDER[order])
        return Discretisation(basis=basis, order=order,
                              element_dofs=np.ascontiguousarray(basis.element_dofs),
                              ndofs=3 * basis.N, doflocs=np.asarray(basis.doflocs))
    corner, h, axis = maps
    if order == 1:
        element_dofs = np.ascontiguousarray(mesh.t)
        dofs = None
        doflocs = np.asarray(mesh.p)
        nscalar = mesh.p.shape[1]
    else:
        dofs = Dofs(mesh, elem)
        element_dofs = np.ascontiguousarray(dofs.element_dofs)
        nscalar = int(dofs.N)
        doflocs = np.empty((3, nscalar))
        for a, ref_xi in enumerate(np.asarray(elem.doflocs)):
            xi = np.empty(3)
            xi[axis] = ref_xi
            doflocs[:, element_dofs[a]] = (corner + xi * h).T
    X, W = get_quadrature(elem.refdom, INTORDER[order])
    ref_grad = np.empty((element_dofs.shape[0], 3, X.shape[1]))
    for a in range(element_dofs.shape[0]):
        ref_grad[a, axis] = elem.lbasis(X, a)[1]   # reference axis j -> sample axis axis[j]
    bricks = Bricks(corner=corner, h=h, points=X, qweights=W, ref_grad=ref_grad)
    basis = _DeferredBasis(mesh, elem, INTORDER[order], dofs, nscalar)
    return Discretisation(basis=basis, order=order, element_dofs=element_dofs,
                          ndofs=3 * nscalar, doflocs=doflocs, bricks=bricks)


def discretise_tet(mesh, order: int) -> Discretisation:
    """P1 or P2 scalar basis on a tetrahedral scikit-fem mesh."""
    from skfem import Basis, ElementTetP1, ElementTetP2

    elem = {1: ElementTetP1, 2: ElementTetP2}[order]()
    basis = Basis(mesh, elem, intorder=TET_INTORDER[order])
    return Discretisation(basis=basis, order=order,
                          element_dofs=np.ascontiguousarray(basis.element_dofs),
                          ndofs=3 * basis.N, doflocs=np.asarray(basis.doflocs))
