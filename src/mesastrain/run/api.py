"""A lower-level Python interface: solve on any tetrahedral mesh.

For problems the case file cannot describe (devices with their own geometry,
inclusions, graded compositions, tests against closed forms):

>>> from mesastrain import api
>>> sol = api.solve(mesh, {1: api.Region("Si", normal=(0, 0, 1), x_axis=(1, 1, 0)),
...                        2: api.Region("Ge", eigenstrain=0.01)},
...                 region_of_cell="gmsh:physical", order=2)        # doctest: +SKIP
>>> strain, stress, displacement, region = sol.sample([[0, 0, 5.0]])  # doctest: +SKIP

* ``mesh``: a ``meshio.Mesh``, a file meshio reads, or a pair (points (n, 3),
  cells (m, 4) tetrahedra); lengths in nm. Second-order tetrahedra
  (``tetra10``) are read by their corners (the field order is ``order``).
* per cell: a region (an integer per cell, or the name of a cell-data array),
  each region a :class:`Region` (a material and its crystal orientation, or a
  stiffness matrix in the sample frame); optionally a rotation per cell
  (``rotations``) that replaces the region's orientation.
* eigenstrain: the region's own (crystal frame) plus an optional extra field in
  the sample frame: an array per cell (ncells, 3, 3), per point (npoints, 3, 3)
  (averaged over each cell's vertices) or a function of position
  ``f(points (n, 3)) -> (n, 3, 3)`` evaluated at the cell centroids. The
  extra eigenstrain is constant in each element.
* supports: ``"box"`` (as the case pipeline: bottom of the bounding box held
  in z, its four lateral faces held normal to themselves), ``"free"``
  (a free body: only the six rigid-body motions are removed, at three
  vertices) or a list of (component, axis, value): hold displacement
  ``component`` on every node with coordinate ``axis`` = ``value``.

The result carries the same :class:`mesastrain.fem.fields.Fields` object the case
pipeline produces, and :meth:`Solution.sample` gives exact values at points.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from mesastrain.case.types import SolverSettings
from mesastrain.errors import MesastrainError, MeshError
from mesastrain.fem.assembly import assemble, rigid_body_modes
from mesastrain.fem.constraints import Boundary
from mesastrain.fem.discretisation import Discretisation
from mesastrain.fem.fields import Fields, evaluate_at_points, recover
from mesastrain.fem.solve import SolverReport, solve_condensed, solve_model
from mesastrain.mesh.imported import read_mesh, skfem_mesh
from mesastrain.mesh.unstructured import UnstructuredMesh, box_boundary
from mesastrain.physics.crystal import (
    INDEX_SYSTEMS,
    rotate_tensor2,
    rotate_voigt_stiffness,
    sample_frame,
)
from mesastrain.physics.material_record import Material
from mesastrain.physics.materials import get_material

__all__ = ["Region", "Solution", "solve", "isotropic_stiffness", "read_mesh"]


@dataclass(frozen=True)
class Region:
    """A material region: material and crystal orientation, or a stiffness.

    Attributes
    ----------
    material : str, Material or None
        Name in the material table (``mesastrain materials``), or a
        :class:`mesastrain.physics.material_record.Material` of one's own
        (e.g. from :func:`mesastrain.physics.materials.material_from_table`).
    x : float or None
        Alloy fraction.
    normal, x_axis : tuple of int
        Crystal plane along sample z and crystal direction along sample x.
    eigenstrain : float or array (3, 3) or None
        Stress-free strain: a number is a dilatation (times the identity);
        a tensor is in the crystal frame when ``material`` is given, in the
        sample frame when ``stiffness`` is given.
    stiffness : array (6, 6) or None
        Voigt stiffness in the sample frame, GPa (instead of ``material``).
    """

    material: str | Material | None = None
    x: float | None = None
    normal: tuple = (0, 0, 1)
    x_axis: tuple = (1, 0, 0)
    eigenstrain: object = None
    stiffness: object = None

    def resolve(self, rotation: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """(stiffness (6, 6) GPa, eigenstrain (3, 3)), both in the sample frame.

        Parameters
        ----------
        rotation : array (3, 3), optional
            Sample axes written in crystal axes (rows), replacing the
            orientation given by normal and x_axis.
        """
        eig = self.eigenstrain
        eig = np.zeros((3, 3)) if eig is None else (
            float(eig) * np.eye(3) if np.ndim(eig) == 0 else np.asarray(eig, dtype=float))
        if self.stiffness is not None:
            C = np.asarray(self.stiffness, dtype=float)
            if C.shape != (6, 6):
                raise MesastrainError(f"Region.stiffness must be 6x6, got shape {C.shape}")
            return C, eig
        if self.material is None:
            raise MesastrainError("a Region needs a material name or a stiffness")
        if isinstance(self.material, Material):
            if self.x is not None:
                raise MesastrainError("Region.x is for alloy names; a Material object is "
                                      "already at its composition")
            mat = self.material
        else:
            mat = get_material(self.material, self.x)
        if rotation is None:
            frame = sample_frame(self.normal, self.x_axis, INDEX_SYSTEMS[mat.system],
                                 mat.c_over_a)
            return frame.stiffness_to_sample(mat.stiffness), frame.to_sample(eig)
        R = np.asarray(rotation, dtype=float)
        return rotate_voigt_stiffness(mat.stiffness, R), rotate_tensor2(eig, R)


def isotropic_stiffness(E: float, nu: float) -> np.ndarray:
    """Voigt stiffness (6, 6) of an isotropic solid; E in GPa.

    C11 = lambda + 2 mu, C12 = lambda, C44 = mu with lambda = E nu/((1+nu)(1-2nu)),
    mu = E/(2(1+nu)) (common practice).
    """
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    C = np.zeros((6, 6))
    C[:3, :3] = lam
    C[[0, 1, 2], [0, 1, 2]] = lam + 2 * mu
    C[[3, 4, 5], [3, 4, 5]] = mu
    return C


def cell_values(values, mesh, nelems: int, what: str) -> np.ndarray | None:
    """Per-element (n, 3, 3) tensors from an array per cell, per point, or a function."""
    if values is None:
        return None
    p, t = mesh.p, mesh.t
    if callable(values):
        centroids = p[:, t].mean(axis=1).T
        out = np.asarray(values(centroids), dtype=float)
        if out.shape != (nelems, 3, 3):
            raise MesastrainError(f"{what}: the function must return (n, 3, 3) for n points, "
                                  f"got {out.shape}")
        return out
    arr = np.asarray(values, dtype=float)
    if arr.shape == (nelems, 3, 3):
        return arr
    if arr.shape == (p.shape[1], 3, 3):
        return arr[t].mean(axis=0)
    raise MesastrainError(f"{what}: expected ({nelems}, 3, 3) per cell or ({p.shape[1]}, 3, 3) "
                          f"per point, got {arr.shape}")


def _boundary(supports, p: np.ndarray) -> Boundary:
    if isinstance(supports, Boundary):
        return supports
    if supports == "box":
        return box_boundary(p)
    if supports == "free":
        return _free_boundary(p)
    try:
        sup = tuple((int(c), int(a), float(v)) for c, a, v in supports)
    except (TypeError, ValueError):
        raise MesastrainError('supports must be "box", "free" or a list of (component, axis, '
                              'value)') from None
    return Boundary(sup, ())


def _free_boundary(p: np.ndarray) -> Boundary:
    """Remove only the rigid-body motions (3-2-1 rule at three far-apart vertices)."""
    return Boundary((), (), pin=(0, 1, 2))


@dataclass
class Solution:
    """The solved fields on a mesh given to :func:`solve`.

    Attributes
    ----------
    mesh : UnstructuredMesh
        With ``region`` = the material group of each element.
    disc : Discretisation
    u : ndarray (ndofs,)
        Displacement, nm, node-major.
    fields : Fields
        Element and nodal strain/stress, as the case pipeline's.
    stiffness : ndarray (ngroups, 6, 6)
        Sample-frame stiffness of each material group, GPa.
    eigenstrain : ndarray (ngroups, 3, 3)
    cell_eigenstrain : ndarray (nelems, 3, 3) or None
    region : ndarray (nelems,)
        The caller's region id of each element.
    solver : SolverReport
    """

    mesh: UnstructuredMesh
    disc: Discretisation
    u: np.ndarray = field(repr=False)
    fields: Fields = field(repr=False)
    stiffness: np.ndarray = field(repr=False)
    eigenstrain: np.ndarray = field(repr=False)
    cell_eigenstrain: np.ndarray | None = field(repr=False)
    region: np.ndarray = field(repr=False)
    solver: SolverReport = None

    def sample(self, points):
        """Exact elastic strain, stress (MPa), displacement (nm) and region id at points."""
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        elems = self.mesh.locate(pts)
        if np.any(elems < 0):
            bad = pts[int(np.flatnonzero(elems < 0)[0])]
            raise MeshError(f"the point {bad.tolist()} nm lies outside the mesh")
        strain, stress, disp = evaluate_at_points(self.disc, self.u, elems, pts, self.mesh.region,
                                                  self.stiffness, self.eigenstrain,
                                                  self.cell_eigenstrain)
        return strain, stress, disp, self.region[elems]


def solve(mesh, regions, region_of_cell=None, *, rotations=None, eigenstrain=None,
          supports="box", order: int = 2, method: str = "auto", tol: float = 1e-8,
          max_iterations: int = 2000, scale: float = 1.0) -> Solution:
    """Solve linear elasticity with eigenstrain on a given mesh.

    Parameters
    ----------
    mesh : meshio.Mesh, path or (points, cells)
        Tetrahedra; coordinates in nm (times ``scale``).
    regions : dict of int -> Region, or a single Region
        Material of each region id (a single Region: the whole mesh).
    region_of_cell : array of int (ncells,) or str, optional
        Region id per volume cell, or the name of an integer cell-data array
        (default ``"gmsh:physical"`` when present, else every cell region 0
        or the single region given).
    rotations : array (ncells, 3, 3), optional
        Per-cell crystal orientation (rows: sample axes in crystal axes),
        replacing the regions' normal/x_axis. Cells with equal rotation share
        a material group.
    eigenstrain : array or callable, optional
        Extra sample-frame eigenstrain (see the module docstring).
    supports : "box", "free" or list of (component, axis, value)
    order : int
        1 (linear) or 2 (quadratic) elements.
    method, tol, max_iterations
        Linear solver settings (:func:`mesastrain.fem.solve.solve_condensed`).
    scale : float
        Multiplies mesh coordinates (e.g. 1000 for a mesh in um).

    Returns
    -------
    Solution
    """
    pts, cells, kind, data, _ = read_mesh(mesh, scale)
    if kind != "tetra":
        raise MeshError("api.solve takes tetrahedral meshes (tetra or tetra10)")
    if isinstance(regions, Region):           # one material everywhere
        regions = {0: regions}
        if isinstance(region_of_cell, str) and region_of_cell not in data:
            raise MeshError(f"the mesh has no cell data {region_of_cell!r}; it has "
                            f"{', '.join(data) or 'none'}")
        region_of_cell = np.zeros(len(cells), dtype=np.int64)
    if region_of_cell is None:
        region_of_cell = "gmsh:physical" if "gmsh:physical" in data else None
    if region_of_cell is None:
        reg = np.full(len(cells), next(iter(regions)), dtype=np.int64)
    elif isinstance(region_of_cell, str):
        if region_of_cell not in data:
            raise MeshError(f"the mesh has no cell data {region_of_cell!r}; it has "
                            f"{', '.join(data) or 'none'}")
        reg = np.asarray(data[region_of_cell]).astype(np.int64)
    else:
        reg = np.asarray(region_of_cell).astype(np.int64).ravel()
    if reg.shape != (len(cells),):
        raise MeshError(f"region_of_cell has {reg.size} entries for {len(cells)} cells")
    missing = sorted(set(np.unique(reg).tolist()) - set(regions))
    if missing:
        raise MeshError(f"no Region given for region id(s) {missing}")
    skm = skfem_mesh(pts, cells, kind)
    nel = skm.t.shape[1]
    # material groups: one per (region, rotation)
    if rotations is None:
        ids = sorted(regions)
        pos = {r: k for k, r in enumerate(ids)}
        group = np.array([pos[r] for r in reg], dtype=np.int64) if nel else reg
        resolved = [regions[r].resolve() for r in ids]
    else:
        R = np.asarray(rotations, dtype=float).reshape(nel, 3, 3)
        key = np.column_stack([reg, np.round(R.reshape(nel, 9), 9)])
        _, first, group = np.unique(key, axis=0, return_index=True, return_inverse=True)
        group = group.ravel()
        resolved = [regions[int(reg[k])].resolve(R[k]) for k in first]
    stiff = np.array([c for c, _ in resolved])
    eig = np.array([e for _, e in resolved])
    extra = cell_values(eigenstrain, skm, nel, "eigenstrain")
    sm = UnstructuredMesh(mesh=skm, region=group.astype(np.int32), kind="api",
                          boundary_conditions=_boundary(supports, skm.p))
    disc = sm.discretise(order)
    K, f = assemble(disc, sm.region, stiff, eig, extra)
    b = sm.boundary()
    if not b.supports and b.pin == (0, 1, 2):
        u, rep = _solve_free(K, f, disc, method, tol, max_iterations)
    else:
        u, rep = solve_model(K, f, disc, b, SolverSettings(method, tol, max_iterations))
    fl = recover(disc, u, sm.region, stiff, eig, sm.nnodes, skm.t, extra)
    return Solution(mesh=sm, disc=disc, u=u, fields=fl, stiffness=stiff, eigenstrain=eig,
                    cell_eigenstrain=extra, region=reg, solver=rep)


def _solve_free(K, f, disc, method, tol, maxiter):
    """A free body: hold 6 dofs at three vertices (3-2-1 rule), which adds no stress."""
    x = disc.doflocs
    c = x.mean(axis=1, keepdims=True)
    a = int(np.argmin(np.linalg.norm(x - c, axis=0)))          # near the centre
    b = int(np.argmax(np.linalg.norm(x - x[:, [a]], axis=0)))  # far from a
    ab = (x[:, b] - x[:, a]) / np.linalg.norm(x[:, b] - x[:, a])
    off = x - x[:, [a]]
    cc = int(np.argmax(np.linalg.norm(off - np.outer(ab, ab @ off), axis=0)))  # off the line
    j = int(np.argmax(np.abs(ab)))
    k1, k2 = [q for q in range(3) if q != j]
    n = np.cross(ab, x[:, cc] - x[:, a])                       # rotation about a-b moves c along n
    fixed = np.array([3 * a, 3 * a + 1, 3 * a + 2, 3 * b + k1, 3 * b + k2,
                      3 * cc + int(np.argmax(np.abs(n)))])
    return solve_condensed(K, f, np.unique(fixed), rigid_body_modes(x), method=method, tol=tol,
                           maxiter=maxiter)
