"""Strain and stress recovered from the displacement.

Definitions (sample frame unless a name says ``crystal``)
--------------------------------------------------------
total strain
    eps = sym(grad u), measured from the reference lattice (the substrate's).
elastic strain
    eps_el = eps - eps0 = C^-1 sigma: the lattice strain of each material
    relative to its own relaxed lattice. This is what the outputs call
    ``strain``.
stress
    sigma = C : eps_el, in MPa (positive in tension).
von Mises
    sqrt(3/2 s:s) with s the deviatoric stress, MPa.
hydrostatic
    tr(sigma)/3, MPa (negative in compression).

Element values are averages over each element (exact for the mean of the
strain, which is linear in the displacement); nodal values are the
volume-weighted average of the elements around each node (a smoothed
field for viewing; probes and cuts are evaluated exactly in their element).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from mesastrain.fem.assembly import CHUNK
from mesastrain.fem.discretisation import Discretisation, solved_elements
from mesastrain.fem.mapping import as_fast, fast_mapping
from mesastrain.physics.crystal import voigt_to_full

GPA_TO_MPA = 1000.0


@dataclass(frozen=True)
class Fields:
    """Recovered fields on a mesh.

    Attributes
    ----------
    displacement : ndarray (nnodes, 3)
        Displacement at the mesh vertices, nm.
    cell_strain, cell_total_strain, cell_stress : ndarray (nelems, 3, 3)
        Element averages: elastic strain, total strain, stress (MPa).
    node_strain, node_stress : ndarray (nnodes, 3, 3)
        Smoothed nodal elastic strain and stress (MPa).
    cell_volume : ndarray (nelems,)
        nm^3.
    """

    displacement: np.ndarray
    cell_strain: np.ndarray
    cell_total_strain: np.ndarray
    cell_stress: np.ndarray
    node_strain: np.ndarray
    node_stress: np.ndarray
    cell_volume: np.ndarray


def von_mises(sig: np.ndarray) -> np.ndarray:
    """Von Mises equivalent stress of tensors (..., 3, 3), same unit."""
    s = sig - np.trace(sig, axis1=-2, axis2=-1)[..., None, None] * np.eye(3) / 3.0
    return np.sqrt(1.5 * np.einsum("...ij,...ij->...", s, s))


def hydrostatic(sig: np.ndarray) -> np.ndarray:
    """Mean normal stress tr(sigma)/3 of tensors (..., 3, 3)."""
    return np.trace(sig, axis1=-2, axis2=-1) / 3.0


def principal(sig: np.ndarray) -> np.ndarray:
    """Principal values of symmetric tensors (..., 3, 3), descending."""
    return np.linalg.eigvalsh(sig)[..., ::-1]


def _sym(g: np.ndarray) -> np.ndarray:
    return 0.5 * (g + np.swapaxes(g, -1, -2))


def nodal_average_matrix(element_vertices: np.ndarray, volume: np.ndarray,
                         nnodes: int) -> sp.csc_matrix:
    """Sparse operator from element values to volume-weighted nodal averages.

    Parameters
    ----------
    element_vertices : ndarray of int (nv, nelems)
    volume : ndarray (nelems,)
        Element volumes (the weights), nm^3.
    nnodes : int

    Returns
    -------
    csc_matrix (nnodes, nelems)
        Row v holds vol_e / sum(vol) over the elements e around vertex v. Built
        as the transpose of an element-by-vertex CSR matrix, which needs no
        sorting or conversion.
    """
    verts = np.asarray(element_vertices)
    nv, nel = verts.shape
    vol = np.asarray(volume, dtype=float)
    wsum = np.bincount(verts.ravel(), weights=np.tile(vol, nv), minlength=nnodes)
    wsum[wsum == 0] = 1.0
    cols = verts.T.ravel()
    vals = np.repeat(vol, nv) / wsum[cols]
    E = sp.csr_matrix((vals, cols, np.arange(0, nv * nel + 1, nv)), shape=(nel, nnodes))
    return E.T


def _stress_of(C: np.ndarray, region: np.ndarray, el: np.ndarray) -> np.ndarray:
    """sigma = C[region] : el, one contraction per region (GPa)."""
    sig = np.empty_like(el)
    flat = el.reshape(-1, 9)
    for r in np.unique(region):
        m = region == r
        sig[m] = (flat[m] @ C[r].reshape(9, 9).T).reshape(-1, 3, 3)
    return sig


def recover(disc: Discretisation, u: np.ndarray, region: np.ndarray,
            stiffness: np.ndarray, eigenstrain: np.ndarray, nnodes: int,
            element_vertices: np.ndarray, cell_eigenstrain: np.ndarray | None = None) -> Fields:
    """Element and nodal strain/stress from the displacement vector.

    Element averages use the element-mean shape-function gradients (one
    contraction per element; closed form on brick meshes). Nodal values are a
    sparse averaging operator applied to the element values. Memory: the
    returned arrays plus one chunk of temporaries.

    Parameters
    ----------
    disc : Discretisation
    u : ndarray (ndofs,)
        Displacement, nm, node-major (3 per scalar dof).
    region, stiffness, eigenstrain
        As in :func:`mesastrain.fem.assembly.assemble` (GPa).
    nnodes : int
        Number of mesh vertices (the first scalar dofs are the vertices).
    element_vertices : ndarray (nv, nelems)
        Vertex indices of each element (mesh.t).
    cell_eigenstrain : ndarray (nelems, 3, 3), optional
        Extra per-element eigenstrain, as in :func:`mesastrain.fem.assembly.assemble`.
    """
    C = voigt_to_full(np.asarray(stiffness, dtype=float))
    eig = np.asarray(eigenstrain, dtype=float)
    region = np.asarray(region)
    nel = disc.element_dofs.shape[1]
    U = u.reshape(-1, 3)
    tot = np.empty((nel, 3, 3))
    vol = np.empty(nel)
    # an unfolded model: its first elements are the solved part, in order, and every other
    # element is the reflection S (.) S of one of them (the same products with signs
    # flipped, so the same numbers): only the solved part is computed
    n_own = solved_elements(disc)
    for start in range(0, n_own, CHUNK):
        sl = slice(start, min(start + CHUNK, n_own))
        gbar, v = disc.mean_gradients(sl)                # (n,a,3), (n,)
        ue = U[disc.element_dofs[:, sl].T]               # (n,a,3)
        grad = np.matmul(ue.transpose(0, 2, 1), gbar)    # du_i/dx_j, element mean
        tot[sl] = _sym(grad)
        vol[sl] = v
    if n_own < nel:
        img = disc.elem_map[n_own:]
        sg = disc.signs[n_own:]
        tot[n_own:] = tot[img] * sg[:, :, None] * sg[:, None, :]
        vol[n_own:] = vol[img]
    el = tot - eig[region]
    if cell_eigenstrain is not None:
        el -= cell_eigenstrain
    sig = _stress_of(C, region, el)
    sig *= GPA_TO_MPA
    S = nodal_average_matrix(element_vertices, vol, nnodes)
    node_strain = (S @ el.reshape(nel, 9)).reshape(nnodes, 3, 3)
    node_stress = (S @ sig.reshape(nel, 9)).reshape(nnodes, 3, 3)
    disp = U[:nnodes].copy()
    return Fields(displacement=disp, cell_strain=el, cell_total_strain=tot, cell_stress=sig,
                  node_strain=node_strain, node_stress=node_stress, cell_volume=vol)


def evaluate_at_points(disc: Discretisation, u: np.ndarray, elements: np.ndarray,
                       points: np.ndarray, region: np.ndarray, stiffness: np.ndarray,
                       eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact elastic strain and stress at points inside known elements.

    Parameters
    ----------
    disc : Discretisation
    u : ndarray (ndofs,)
    elements : ndarray of int (npts,)
        Element containing each point.
    points : ndarray (npts, 3), nm
    region, stiffness, eigenstrain, cell_eigenstrain : as for :func:`recover`

    Returns
    -------
    strain : ndarray (npts, 3, 3)
        Elastic strain (sample frame).
    stress : ndarray (npts, 3, 3)
        Stress, MPa.
    displacement : ndarray (npts, 3)
        nm.
    """
    mapping = fast_mapping(disc.basis.mesh)
    x = np.asarray(points, dtype=float).T[:, :, None]            # (3, npts, 1)
    X = reference_coordinates(mapping, x, elements)               # (3, npts, 1)
    return evaluate_at_reference(disc, u, elements, X[:, :, 0], region, stiffness, eigenstrain,
                                 cell_eigenstrain)


def evaluate_at_reference(disc: Discretisation, u: np.ndarray, elements: np.ndarray,
                          X: np.ndarray, region: np.ndarray, stiffness: np.ndarray,
                          eigenstrain: np.ndarray, cell_eigenstrain: np.ndarray | None = None
                          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """As :func:`evaluate_at_points`, at reference coordinates X (3, npts) of the elements.

    No point location: the cheap form when the reference points are known
    (quadrature and sampling points of a 3-D mesh).
    """
    mesh = disc.basis.mesh
    elem = disc.basis.elem
    mapping = fast_mapping(mesh)
    Xf = np.asarray(X, dtype=float)
    invDF = mapping.invDF(Xf[:, :, None], tind=elements)          # (3,3,npts,1)
    U = u.reshape(-1, 3)
    ue = np.take(U, disc.element_dofs[:, elements].T, axis=0)     # (npts, a, 3)
    phi = np.empty((disc.nloc, len(elements)))
    dphi = np.empty((disc.nloc, 3, len(elements)))
    for a in range(disc.nloc):
        phi[a], dphi[a] = elem.lbasis(Xf, a)                      # (npts,), (3, npts)
    # ("optimize" contracts these as batched products: 15x faster than einsum's own loop
    # for the gradient at 1M points, measured)
    dx = np.einsum("ijp,aip->paj", invDF[:, :, :, 0], dphi, optimize=True)   # dN_a/dx_j
    disp = np.einsum("ap,pai->pi", phi, ue, optimize=True)
    grad = np.einsum("pai,paj->pij", ue, dx, optimize=True)      # sum_a u_ai dN_a/dx_j
    el, sig = elastic_state(_sym(grad), elements, region, stiffness, eigenstrain,
                            cell_eigenstrain)
    return el, sig, disp


def elastic_state(total_strain, elements, region, stiffness, eigenstrain,
                  cell_eigenstrain=None) -> tuple[np.ndarray, np.ndarray]:
    """Elastic strain and stress at points from their total strain.

    Parameters
    ----------
    total_strain : ndarray (npts, 3, 3)
        Symmetric total strain at each point.
    elements : ndarray of int (npts,)
        Element holding each point.
    region : ndarray of int (nelems,)
        Region of every element.
    stiffness : ndarray (nregions, 6, 6)
        Sample-frame Voigt stiffness per region, GPa.
    eigenstrain : ndarray (nregions, 3, 3)
    cell_eigenstrain : ndarray (nelems, 3, 3), optional
        Per-element eigenstrain added to the region's own.

    Returns
    -------
    strain : ndarray (npts, 3, 3)
        Elastic strain (total minus eigenstrain).
    stress : ndarray (npts, 3, 3)
        MPa.
    """
    C = voigt_to_full(np.asarray(stiffness, dtype=float))
    el = total_strain - np.asarray(eigenstrain)[region[elements]]
    if cell_eigenstrain is not None:
        el = el - cell_eigenstrain[elements]
    sig = _stress_of(C, region[elements], el)
    sig *= GPA_TO_MPA
    return el, sig


def reference_coordinates(mapping, x: np.ndarray, elements: np.ndarray,
                          iters: int = 60) -> np.ndarray:
    """Reference coordinates of points in known elements; never raises.

    Affine elements (simplices) are inverted exactly, and so are parallelepipeds
    (the bricks of the structured stack mesh, :func:`_parallelepipeds`).
    Other isoparametric elements (quadrilaterals, hexahedra on the unit
    reference cell) use Newton's method started from the element's affine
    approximation at its centre, clipped to the reference cell so that a point
    a round-off distance outside its element ends on its boundary (the closed
    form clips the same way). Convergence is judged in reference coordinates and the best
    iterate is kept: unlike scikit-fem's ``invF`` (absolute tolerance 1e-12 in
    the physical unit) this works for coordinates of 1e6 nm and elements
    of 1e-3 nm alike. Points still unconverged after ``iters`` steps (a badly
    distorted element) restart from the nearest of 9^dim reference samples
    with damped steps.

    Parameters
    ----------
    mapping : scikit-fem mapping of the mesh
    x : ndarray (dim, npts, 1)
        Physical coordinates, nm.
    elements : ndarray of int (npts,)

    Returns
    -------
    ndarray (dim, npts, 1)
    """
    if "Affine" in type(mapping).__name__:
        return mapping.invF(x, tind=elements)
    x = np.asarray(x, dtype=float)
    dim = x.shape[0]
    elements = np.asarray(elements)

    mapping = as_fast(mapping)
    X = np.full((dim, len(elements), 1), 0.5)
    todo = _parallelepipeds(mapping, x, elements, X)
    if todo.size == 0:
        return X

    def newton(X0, sel, damping=1.0):
        X = X0.copy()
        best = X.copy()
        best_step = np.full(X.shape[1], np.inf)
        nodes = mapping.nodes(elements[sel])                  # gathered once
        xs = x[:, sel]
        act = np.arange(X.shape[1])                           # points still moving
        for _ in range(iters):
            Xa = X[:, act]
            dX = mapping.newton_step(Xa, xs[:, act], nodes[:, :, act])
            Xn = np.clip(Xa + damping * dX, 0.0, 1.0)
            step = np.max(np.abs(Xn - Xa), axis=(0, 2))
            X[:, act] = Xn
            better = step < best_step[act]
            best[:, act[better]], best_step[act[better]] = Xn[:, better], step[better]
            # a step of 1e-13 of the element is round-off for coordinates of
            # 1e3-1e6 element sizes: such points are done
            act = act[~(step < 1e-13)]
            if act.size == 0:
                break
        return best, best_step

    Xn, step = newton(X[:, todo], todo)
    X[:, todo] = Xn
    bad = todo[~(step < 1e-9)]
    if bad.size:
        g = np.linspace(0.0, 1.0, 9)
        ref = np.stack(np.meshgrid(*([g] * dim), indexing="ij")).reshape(dim, -1)
        trial = np.repeat(ref[:, None, :], bad.size, axis=1)              # (dim, nbad, nref)
        dist = np.linalg.norm(mapping.F(trial, tind=elements[bad]) - x[:, bad], axis=0)
        start = np.take_along_axis(trial, np.argmin(dist, axis=1)[None, :, None], axis=2)
        Xb, _ = newton(start, bad, damping=0.5)
        X[:, bad] = Xb
    return X


def _parallelepipeds(mapping, x: np.ndarray, elements: np.ndarray, X: np.ndarray) -> np.ndarray:
    """Reference coordinates in closed form where the element is a parallelepiped.

    An isoparametric element whose nodes sit at x_c + J (X_a - 1/2) (X_a its reference
    nodes, x_c its centre, J the Jacobian at the centre; to round-off of the coordinates)
    maps X to x_c + J (X - 1/2) exactly, so X = 1/2 + J^-1 (x - x_c), clipped to the cell as
    Newton's method would clip it: Newton's first step, without the second one that only
    confirms it. The bricks of the structured stack mesh are such elements (in whatever
    axis order the element numbers its nodes). Writes those points of ``X`` (dim, npts, 1)
    in place and returns the indices of the other points.
    """
    n = len(elements)
    ref = getattr(mapping.elem, "doflocs", None)
    if ref is None or n == 0:
        return np.arange(n)
    ref = np.asarray(ref, dtype=float)
    nodes = mapping.nodes(elements)                                   # (dim, nloc, n)
    dim = nodes.shape[0]
    if ref.shape != (nodes.shape[1], dim):
        return np.arange(n)
    phi, dphi = mapping.basis(np.full((dim, 1), 0.5))                 # (nloc, 1), (nloc, dim, 1)
    xc = np.einsum("dan,a->nd", nodes, phi[:, 0])                     # (n, dim)
    J = np.einsum("ian,aj->nij", nodes, dphi[:, :, 0])                # (n, dim, dim)
    pred = xc[:, None, :] + np.einsum("nij,aj->nai", J, ref - 0.5)    # (n, nloc, dim)
    err = np.abs(pred - np.moveaxis(nodes, (0, 1, 2), (2, 1, 0))).max(axis=(1, 2))
    # round-off of the span and of the coordinates themselves (a 1e-3 nm element 1e6 nm
    # from the origin)
    tol = 1e-12 * np.abs(J).max(axis=(1, 2)) \
        + 8.0 * np.finfo(float).eps * np.abs(nodes).max(axis=(0, 1))
    flat = np.abs(np.linalg.det(J)) <= 1e-12 * np.abs(J).max(axis=(1, 2)) ** dim
    sel = np.flatnonzero((err <= tol) & ~flat)
    if sel.size:
        d = np.linalg.solve(J[sel], (x[:, sel, 0].T - xc[sel])[..., None])[..., 0]
        X[:, sel, 0] = np.clip(0.5 + d.T, 0.0, 1.0)
    rest = np.ones(n, dtype=bool)
    rest[sel] = False
    return np.flatnonzero(rest)


# --------------------------------------------------------------------------
# 6-component layout of symmetric tensors in fields.vtu
# --------------------------------------------------------------------------
#: Component names of 6-component tensors in the VTU, in order (the order VTK-based
#: viewers expect for symmetric tensors; not the Voigt order of :mod:`mesastrain.physics.crystal`).
VTK_TENSOR_ORDER = ("XX", "YY", "ZZ", "XY", "YZ", "XZ")
_VTK_PAIRS = ((0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2))


def to_vtk6(t: np.ndarray) -> np.ndarray:
    """Symmetric tensors (..., 3, 3) -> (..., 6) in the order XX, YY, ZZ, XY, YZ, XZ."""
    return np.stack([t[..., i, j] for i, j in _VTK_PAIRS], axis=-1)


def from_vtk6(v: np.ndarray) -> np.ndarray:
    """(..., 6) in the order XX, YY, ZZ, XY, YZ, XZ -> symmetric tensors (..., 3, 3)."""
    v = np.asarray(v)
    t = np.empty(v.shape[:-1] + (3, 3), dtype=v.dtype)
    for k, (i, j) in enumerate(_VTK_PAIRS):
        t[..., i, j] = v[..., k]
        t[..., j, i] = v[..., k]
    return t
