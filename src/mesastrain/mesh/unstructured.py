"""Tetrahedral meshes with a region per element: gmsh shapes, imported files, the API.

:class:`UnstructuredMesh` is the :class:`mesastrain.mesh.base.ModelMesh` of every
simplex mesh; :class:`SimplexLocator` finds the element that contains a point
and :func:`box_boundary` gives the default supports of a body in a box.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from mesastrain.errors import MeshError
from mesastrain.fem.constraints import Boundary
from mesastrain.fem.discretisation import Discretisation, discretise_tet
from mesastrain.mesh.base import ModelMesh
from mesastrain.mesh.grid import GridSpacing


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


    def all(self, points: np.ndarray, tol: float = 1e-9) -> np.ndarray:
        """Every simplex holding each point: (npts, k) padded with -1, the best one first.

        The others are searched among the elements that share a vertex with
        the best one (every element touching a face, edge or vertex of it), with
        the same barycentric tolerance (relative to each element's size).
        """
        x = np.atleast_2d(np.asarray(points, dtype=float))
        best = self(x, tol)
        n = len(x)
        ok = np.flatnonzero(best >= 0)
        if ok.size == 0:
            return best[:, None]
        nv, nel = self.t.shape
        nn = self.p.shape[1]
        v2e = sp.csr_matrix((np.ones(nv * nel), (self.t.ravel(), np.tile(np.arange(nel), nv))),
                            shape=(nn, nel))
        pv = sp.csr_matrix((np.ones(nv * ok.size), (np.repeat(np.arange(ok.size), nv),
                                                    self.t[:, best[ok]].T.ravel())),
                           shape=(ok.size, nn))
        cand = (pv @ v2e).tocoo()
        pi, el = ok[cand.row], cand.col
        hit = (self._bary(x[pi], el) >= -tol) & (el != best[pi])
        pi, el = pi[hit], el[hit]
        order = np.lexsort((el, pi))
        pi, el = pi[order], el[order]
        start = np.searchsorted(pi, np.arange(n))
        rank = np.arange(pi.size) - start[pi]
        width = 1 + (int(rank.max()) + 1 if rank.size else 0)
        out = np.full((n, width), -1, dtype=np.int64)
        out[:, 0] = best
        out[pi, 1 + rank] = el
        return out


@dataclass(frozen=True)
class UnstructuredMesh(ModelMesh):
    """A tetrahedral mesh with a region per element (a :class:`ModelMesh`).

    ``xs``, ``ys`` and ``zs`` hold only the extents of the body (there is no
    grid).

    Attributes
    ----------
    mesh : skfem.MeshTet
        Linear-geometry tetrahedra (nm). Quadratic fields use P2 elements on it.
    region : ndarray of int (nelems,)
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
    region: np.ndarray
    kind: str
    boundary_conditions: Boundary
    spacing: GridSpacing | None = None
    mirrors: tuple = ()
    description: str = ""

    element_name = "tetrahedra"

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

    def boundary(self) -> Boundary:
        return self.boundary_conditions

    def discretise(self, order: int) -> Discretisation:
        """P1 or P2 Lagrange elements on the tetrahedra."""
        return discretise_tet(self.mesh, order)

    @cached_property
    def _locator(self) -> SimplexLocator:
        return SimplexLocator(self.mesh.p, self.mesh.t)

    def locate(self, points: np.ndarray) -> np.ndarray:
        """Element index containing each point (nm), -1 outside the body."""
        return self._locator(points)

    def locate_all(self, points: np.ndarray) -> np.ndarray:
        """Every element that holds each point (on a face, edge or vertex: several).

        Returns (npts, k), -1 padded; the first column is :meth:`locate`.
        """
        return self._locator.all(points)

    def unfolded(self, uf) -> UnstructuredMesh:
        """The whole body from its unfolded mirrored part (:mod:`mesastrain.mesh.unfold`)."""
        return replace(self, mesh=type(self.mesh)(uf.p, uf.t_export), region=uf.region,
                       mirrors=())

    def __repr__(self) -> str:
        return (f"UnstructuredMesh({self.kind}: {self.nnodes} nodes, {self.nelems} tetrahedra, "
                f"regions {sorted(set(self.region.tolist()))})")


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
