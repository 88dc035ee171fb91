"""Unfold a half or quarter model into the whole feature after the solve.

A mirror-symmetric problem is solved on x >= 0 (and/or y >= 0) only; the
result is then reflected so that everything downstream (fields.vtu, layer
figures, readouts, probes) sees the whole body. With S = diag(s) the
reflection of an image (s = +-1 per axis):

    u(S x) = S u(x),   eps(S x) = S eps(x) S,   sigma(S x) = S sigma(x) S

(uniqueness of the linear-elastic solution of a symmetric problem, common
practice). Nothing is solved or integrated again: the reflected copies reuse
the solved part's shape-function data. An element of an image keeps the local
node order of its original, so its shape-function gradients are the
original's with the mirrored components negated:
grad N_a(S x) = S grad N_a(x). Its vertices are reordered only in the mesh
used for export, so that exported cells are positively oriented.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from mesastrain.fem.discretisation import Discretisation


def images(mirrors) -> np.ndarray:
    """Sign vectors (nimg, 3) of the identity and every reflection over ``mirrors``."""
    out = []
    for flips in itertools.product((1.0, -1.0), repeat=len(mirrors)):
        s = np.ones(3)
        for a, f in zip(mirrors, flips):
            s[a] = f
        out.append(s)
    return np.array(out)


def _merge(points: np.ndarray, signs: np.ndarray, span: float) -> tuple[int, list]:
    """Number the union of the mirror images of a point set, merging coincident points.

    Image k of point i is ``signs[k] * points[:, i]``. Two images of one point coincide
    where every axis on which their signs differ holds a coordinate that rounds to zero
    on a grid of ``span * 1e-9`` (the point lies on those mirror planes); images of
    different points never do (the solved part has no duplicate points). Each merged
    point keeps the number of its first image (images in the order given, identity
    first): the first set keeps its numbering (0..n-1), and the new points of each
    later image follow in order. The same numbering as rounding every image to that
    grid and merging equal keys, without sorting them.

    Parameters
    ----------
    points : ndarray (dim, n)
    signs : ndarray (nimg, dim)
        +1 or -1 per axis; the first row all +1.
    span : float
        Size of the body, for the merge tolerance.

    Returns
    -------
    count : int
    maps : list of ndarray of int (n,)
        ``maps[k][i]`` the number of image k of point i.
    """
    q = span * 1e-9
    off_plane = np.round(points / q) != 0                    # (dim, n)
    flips = np.asarray(signs) < 0                            # (nimg, dim)
    bit = 1 << np.arange(flips.shape[1])
    code = flips @ bit                                       # each image as a bit mask
    n = points.shape[1]
    maps, count = [], 0
    for k in range(len(flips)):
        # the first image this one coincides with: its flips on the point's planes undone
        canon = (flips[k][:, None] & off_plane).T @ bit      # (n,)
        ids = np.empty(n, dtype=np.int64)
        new = canon == code[k]
        for j in range(k):
            sel = canon == code[j]
            ids[sel] = maps[j][sel]
        ids[new] = count + np.arange(int(new.sum()))
        count += int(new.sum())
        maps.append(ids)
    return count, maps


def _orientation_permutation(elem) -> np.ndarray | None:
    """Local vertex permutation that turns a mirror-image element right-handed again."""
    ref = np.asarray(elem.doflocs, dtype=float)
    nv = {"hex": 8, "quad": 4, "tet": 4, "tri": 3}
    name = type(elem).__name__.lower()
    if "tet" in name:
        return np.array([1, 0, 2, 3])
    if "tri" in name:
        return np.array([1, 0, 2])
    n = nv["hex"] if "hex" in name else nv["quad"]
    ref = ref[:n]
    flipped = ref.copy()
    flipped[:, 0] = 1.0 - flipped[:, 0] if ref[:, 0].min() >= 0 else -flipped[:, 0]
    perm = np.array([int(np.flatnonzero(np.all(np.isclose(ref, f), axis=1))[0]) for f in flipped])
    return perm


@dataclass(frozen=True)
class MirroredDiscretisation(Discretisation):
    """The whole feature's discretisation, built from the solved part by reflection.

    Attributes (besides those of Discretisation)
    ----------
    parent : Discretisation
        The solved part's.
    elem_map : ndarray of int (nelems,)
        Element of the solved part each element is an image of.
    signs : ndarray (nelems, 3)
        Reflection of each element (+1 or -1 per axis).
    dof_source : ndarray of int (ndofs / 3,)
        Node (scalar dof) of the solved part each node is an image of.
    dof_sign : ndarray (ndofs / 3, 3)
        The reflection's sign per component of that image (see :meth:`unfold_vector`).
    """

    parent: Discretisation = None
    elem_map: np.ndarray = None
    signs: np.ndarray = None
    dof_source: np.ndarray = None
    dof_sign: np.ndarray = None

    def unfold_vector(self, v: np.ndarray) -> np.ndarray:
        """A node-major vector field of the solved part (ndofs of ``parent``), reflected
        onto the whole body like the displacement: component i of node g is component i
        of its source node times the reflection's sign on axis i."""
        return (np.asarray(v).reshape(-1, 3)[self.dof_source] * self.dof_sign).ravel()

    def gradients(self, elements=slice(None)) -> np.ndarray:
        e = np.arange(self.elem_map.size)[elements]
        g = self.parent.gradients(self.elem_map[e])
        return g * self.signs[e][:, None, None, :]

    def weights(self, elements=slice(None)) -> np.ndarray:
        e = np.arange(self.elem_map.size)[elements]
        return self.parent.weights(self.elem_map[e])

    def mean_gradients(self, elements=slice(None)) -> tuple[np.ndarray, np.ndarray]:
        """The parent's element-mean gradients with the mirrored components negated."""
        e = np.arange(self.elem_map.size)[elements]
        g, v = self.parent.mean_gradients(self.elem_map[e])
        return g * self.signs[e][:, None, :], v


@dataclass(frozen=True)
class Unfolded:
    """Arrays of the whole feature built from a solved part.

    Attributes
    ----------
    p : ndarray (dim, nverts)
    t_solve : ndarray (nv_el, nelems)
        Connectivity in the local order of the solved part (used by ``disc``).
    t_export : ndarray (nv_el, nelems)
        Connectivity with positively oriented elements (for export and viewing).
    region : ndarray (nelems,)
    disc : MirroredDiscretisation
    u : ndarray (ndofs,)
    image_of_element : ndarray of int (nelems,)
        Index of the image (row of ``images``) each element belongs to.
    images : ndarray (nimg, 3)
    """

    p: np.ndarray
    t_solve: np.ndarray
    t_export: np.ndarray
    region: np.ndarray
    disc: MirroredDiscretisation
    u: np.ndarray
    image_of_element: np.ndarray
    images: np.ndarray


def unfold(p: np.ndarray, t: np.ndarray, region: np.ndarray, disc: Discretisation,
           u: np.ndarray, mirrors, mesh_type) -> Unfolded:
    """Reflect a solved part over its mirror planes.

    Parameters
    ----------
    p : ndarray (dim, nverts)
        Vertices of the solved part (dim 3, or 2 for an x-z cross-section whose
        first coordinate is x).
    t : ndarray (nv_el, nelems)
    region : ndarray (nelems,)
    disc : Discretisation
        Of the solved part; its first ``nverts`` scalar dofs are the vertices.
    u : ndarray (ndofs,)
    mirrors : tuple of int
        Mirrored axes (0 = x, 1 = y).
    mesh_type : type
        scikit-fem mesh class of the result (MeshHex, MeshTet, MeshQuad ...).
    """
    imgs = images(mirrors)
    dim = p.shape[0]
    sp_ = imgs if dim == 3 else imgs[:, [0, 2]]     # a cross-section holds (x, z)
    nv = p.shape[1]
    span = float(np.max(np.ptp(disc.doflocs, axis=1))) or 1.0
    vcount, vmaps = _merge(p, sp_, span)
    extra = disc.doflocs[:, nv:]
    ecount, emaps = _merge(extra, imgs, span)
    dmaps = [np.concatenate([vm, vcount + em]) for vm, em in zip(vmaps, emaps)]
    nfull = vcount + ecount
    doflocs = np.empty((3, nfull))
    source = np.empty(nfull, dtype=np.int64)
    sign = np.empty((nfull, 3))
    for s, dm in zip(imgs, dmaps):
        doflocs[:, dm] = disc.doflocs * s[:, None]
        source[dm] = np.arange(dm.size)
        sign[dm] = s
    pfull = np.empty((dim, vcount))
    for s, vm in zip(sp_, vmaps):
        pfull[:, vm] = p * s[:, None]
    nel = t.shape[1]
    t_solve = np.concatenate([vm[t] for vm in vmaps], axis=1)
    perm = _orientation_permutation(disc.basis.elem)
    parts = []
    for s, vm in zip(imgs, vmaps):
        tt = vm[t]
        if perm is not None and np.prod(s) < 0:
            tt = tt[perm[:tt.shape[0]]] if perm.size == tt.shape[0] else tt
        parts.append(tt)
    t_export = np.concatenate(parts, axis=1)
    edofs = np.concatenate([dm[disc.element_dofs] for dm in dmaps], axis=1)
    k = len(imgs)
    elem_map = np.tile(np.arange(nel), k)
    signs = np.repeat(imgs, nel, axis=0)
    solve_mesh = mesh_type(pfull, t_solve)
    basis = SimpleNamespace(mesh=solve_mesh, elem=disc.basis.elem)
    full = MirroredDiscretisation(basis=basis, order=disc.order,
                                  element_dofs=np.ascontiguousarray(edofs), ndofs=3 * nfull,
                                  doflocs=doflocs, parent=disc, elem_map=elem_map, signs=signs,
                                  dof_source=source, dof_sign=sign)
    return Unfolded(p=pfull, t_solve=t_solve, t_export=t_export, region=np.tile(region, k),
                    disc=full, u=full.unfold_vector(u),
                    image_of_element=np.repeat(np.arange(k), nel),
                    images=imgs)


def unfold_model(sm, disc: Discretisation, u: np.ndarray):
    """The whole feature's mesh object, discretisation and displacement.

    Parameters
    ----------
    sm : mesastrain.mesh.base.ModelMesh
        The solved part (``sm.mirrors`` not empty).
    disc : Discretisation
    u : ndarray

    Returns
    -------
    (ModelMesh, MirroredDiscretisation, u)
        The mesh is ``sm.unfolded(...)`` of the reflected arrays.
    """
    skm = sm.solve_mesh
    uf = unfold(skm.p, skm.t, sm.region, disc, u, sm.mirrors, type(skm))
    return sm.unfolded(uf), uf.disc, uf.u
