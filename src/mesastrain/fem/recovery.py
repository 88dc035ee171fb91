"""Recovered (smoothed, more accurate) stress at points: superconvergent patch recovery.

The finite-element stress jumps between elements and is least accurate on
element faces, exactly where edge and interface readouts sit. Zienkiewicz and
Zhu's superconvergent patch recovery (SPR; Int. J. Numer. Meth. Eng. 33, 1331
(1992) and 33, 1365 (1992)) fits, for every mesh vertex, a polynomial to the
stresses at the superconvergent sampling points of the elements around it
(its patch) by least squares. Here the recovered stress at a point x of
element e is the blend of the patch polynomials of e's vertices with the
vertex shape functions,

    sigma*(x) = sum_v N_v(x) P_v(x),

the "conjoint" form of SPR (Blacker & Belytschko, Int. J. Numer. Meth. Eng.
37, 517 (1994), from memory), continuous inside a region and of the
polynomial's order wherever the patches are. It is done **per region**: a
patch holds only the elements of one region, so nothing is averaged across a
material interface (the stress there is discontinuous); a point on an
interface gets one value per side, each the one-sided limit of its region.

Sampling points (reference cell [0, 1]^d of quadrilaterals and hexahedra):
the centre for (bi/tri)linear elements and the 2^d Gauss points for
quadratic ones (Zienkiewicz & Zhu 1992); the centroid of linear tetrahedra
(constant stress) and the 4-point Gauss rule of quadratic ones. Patch
polynomials are complete of the element order (linear: 1 + d terms,
quadratic: (d + 1)(d + 2)/2). A patch too small or too flat for that (a
vertex on a free surface or an interface has a half or quarter patch, all
samples in one layer of elements) takes the patch of its patch (the elements
of that region sharing a vertex with it) and, if still singular, a lower
degree.

Everything is vectorised: patches are rows of sparse incidence matrices,
normal equations are accumulated with ``np.add.at`` and solved in one batch.
Only the patches of the vertices of the elements holding the query points
are built, so the cost is local.

Units: whatever ``sample`` returns (MPa in the pipeline); lengths nm.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["recover_at", "sampling_points", "vertex_shape"]

_G = 0.5 / np.sqrt(3.0)
_TET_A, _TET_B = 0.5854101966249685, 0.1381966011250105


def sampling_points(kind: str, order: int) -> np.ndarray:
    """Reference sampling points (dim, nq) of an element kind ('hex', 'quad', 'tet', 'tri')."""
    dim = {"hex": 3, "quad": 2, "tet": 3, "tri": 2}[kind]
    if kind in ("hex", "quad"):
        if order == 1:
            return np.full((dim, 1), 0.5)
        g = np.array([0.5 - _G, 0.5 + _G])
        return np.stack(np.meshgrid(*([g] * dim), indexing="ij")).reshape(dim, -1)
    if order == 1:
        return np.full((dim, 1), 1.0 / (dim + 1))
    if kind == "tet":
        pts = np.full((4, 3), _TET_B)
        pts[[1, 2, 3], [0, 1, 2]] = _TET_A
        return pts.T
    return np.array([[1 / 6, 2 / 3, 1 / 6], [1 / 6, 1 / 6, 2 / 3]])


def vertex_shape(kind: str, vertex_ref: np.ndarray, X: np.ndarray) -> np.ndarray:
    """Values (npts, nv) of the linear vertex shape functions at reference points X (dim, npts).

    ``vertex_ref`` (nv, dim) are the reference coordinates of the element's
    vertices in connectivity order (scikit-fem's ``ElementHex1().doflocs`` ...).
    """
    X = np.asarray(X, dtype=float)
    if kind in ("hex", "quad"):
        v = np.asarray(vertex_ref, dtype=float)                  # (nv, dim), 0 or 1
        f = np.where(v[:, :, None] > 0.5, X[None, :, :], 1.0 - X[None, :, :])   # (nv, dim, n)
        return np.prod(f, axis=1).T
    lam = np.vstack([1.0 - X.sum(axis=0), X])                    # barycentric (dim+1, n)
    v = np.asarray(vertex_ref, dtype=float)
    idx = [0 if not np.any(r) else 1 + int(np.argmax(r)) for r in v]
    return lam[idx].T


def _monomials(xi: np.ndarray, degree: int) -> np.ndarray:
    """Complete polynomial basis (n, m) of ``degree`` in scaled coordinates xi (n, dim)."""
    n, dim = xi.shape
    cols = [np.ones(n)]
    if degree >= 1:
        cols += [xi[:, i] for i in range(dim)]
    if degree >= 2:
        cols += [xi[:, i] * xi[:, j] for i in range(dim) for j in range(i, dim)]
    return np.stack(cols, axis=1)


def _shifted(coef: np.ndarray, delta: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """Patch polynomials re-expanded in unscaled coordinates about another point.

    A polynomial sum_k C_k phi_k(xi) of the scaled coordinates xi = sigma y + delta (y
    the offset from the new point, nm; delta the new point in the patch's scaled
    coordinates; sigma = 1 / the patch scale) written as sum_k D_k phi_k(y), with the
    basis of :func:`_monomials` (constant, linear, then the products x_i x_j, i <= j).

    Parameters
    ----------
    coef : ndarray (n, m, c)
    delta : ndarray (n, dim)
    sigma : ndarray (n,)

    Returns
    -------
    ndarray (n, m, c)
    """
    m = coef.shape[1]
    dim = delta.shape[1]
    C = coef
    D = np.empty_like(C)
    D[:, 0] = C[:, 0]
    if m == 1:
        return D
    D[:, 1:1 + dim] = C[:, 1:1 + dim] * sigma[:, None, None]            # sigma C_i
    for i in range(dim):
        D[:, 0] += delta[:, i, None] * C[:, 1 + i]
    if m > 1 + dim:
        s2 = (sigma * sigma)[:, None]
        k = 1 + dim
        for i in range(dim):
            for j in range(i, dim):
                Cq = C[:, k]
                D[:, 0] += (delta[:, i] * delta[:, j])[:, None] * Cq
                if i == j:
                    D[:, 1 + i] += (2.0 * sigma * delta[:, i])[:, None] * Cq
                else:
                    D[:, 1 + i] += (sigma * delta[:, j])[:, None] * Cq
                    D[:, 1 + j] += (sigma * delta[:, i])[:, None] * Cq
                D[:, k] = s2 * Cq
                k += 1
    return D


def _fit(rows: np.ndarray, elems: np.ndarray, centre: np.ndarray, scale: np.ndarray,
         xs: np.ndarray, vals: np.ndarray, slot_of: np.ndarray, npatch: int, degree: int):
    """Least-squares patch polynomials for (patch, element) incidence pairs.

    Returns coefficients (npatch, m, ncomp) and a flag per patch: well posed.
    """
    nq = xs.shape[1]
    k = np.repeat(rows, nq)
    s = slot_of[elems][:, None] * nq + np.arange(nq)[None, :]
    s = s.ravel()
    if np.any(k[1:] < k[:-1]):                                   # rows sorted by patch
        by = np.argsort(k, kind="stable")
        k, s = k[by], s[by]
    # (np.take: several times faster than fancy indexing on numpy 2.4, measured)
    xi = (np.take(xs.reshape(-1, xs.shape[-1]), s, axis=0) - np.take(centre, k, axis=0)) \
        / np.take(scale, k)[:, None]
    P = _monomials(xi, degree)                                   # (npairs, m)
    m = P.shape[1]
    c = vals.shape[-1]
    # the rows of each patch side by side in a zero-padded block (patches, L, m + c): the
    # normal equations are then one batched product P_k^T [P_k V_k] per patch, without the
    # (npairs, m, m) outer products (several GB for quadratic patches). Patches of similar
    # size are blocked together so that little padding is stored.
    counts = np.bincount(k, minlength=npatch)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    Q = np.empty((k.size, m + c))
    Q[:, :m] = P
    np.take(vals.reshape(-1, c), s, axis=0, out=Q[:, m:])
    A = np.empty((npatch, m, m))
    b = np.empty((npatch, m, c))
    by_size = np.argsort(counts, kind="stable")
    for pc in np.array_split(by_size, max(1, min(16, npatch))):
        L = max(int(counts[pc].max(initial=0)), 1)
        pos = starts[pc][:, None] + np.arange(L)[None, :]
        valid = np.arange(L)[None, :] < counts[pc][:, None]
        block = np.zeros((pc.size, L, m + c))
        block[valid] = Q[pos[valid]]
        S = np.matmul(block[:, :, :m].transpose(0, 2, 1), block)     # (patches, m, m + c)
        A[pc] = S[:, :, :m]
        b[pc] = S[:, :, m:]
    w = np.linalg.eigvalsh(A)
    ok = w[:, 0] > 1e-8 * np.maximum(w[:, -1], 1e-300)
    A[~ok] += np.eye(m)                                          # keep the batch solvable
    return np.linalg.solve(A, b), ok


def recover_at(p: np.ndarray, t: np.ndarray, region: np.ndarray, elements: np.ndarray,
               X: np.ndarray, kind: str, order: int, vertex_ref: np.ndarray, sample,
               coords: np.ndarray | None = None, symmetric: bool = False):
    """Recovered field at points given by their element and reference coordinates.

    Parameters
    ----------
    p : ndarray (dim, nverts)
        Vertices of the mesh the field lives on, nm.
    t : ndarray of int (nv, nelems)
        Vertex connectivity (the vertices are the first nv nodes of an element).
    region : ndarray of int (nelems,)
        The patch of a vertex for a point holds only elements of the region of
        the point's element.
    elements : ndarray of int (npts,)
        Element holding each query point (choose it in the region wanted).
    X : ndarray (dim, npts)
        Reference coordinates of the query points in their elements.
    kind : {'hex', 'quad', 'tet', 'tri'}
    order : int
        Element order: 1 or 2 (sampling points and polynomial degree).
    vertex_ref : ndarray (nv, dim)
        Reference coordinates of the vertices, in connectivity order.
    sample : callable (elements (n,), Xref (dim, n, nq)) -> (x (n, nq, dim), values (n, nq, c))
        Physical coordinates and finite-element values of a field (e.g. the
        stress as 9 components) at reference points of elements.
    coords : ndarray (npts, dim), optional
        Physical coordinates of the query points, nm, when the caller has them
        (otherwise ``sample`` is asked, which also evaluates the field there).
    symmetric : bool
        The field is a symmetric 3x3 tensor given as 9 components (row-major):
        only its 6 independent components are fitted and blended (2/3 of the
        work; the fit is component by component, so the result is the same).

    Returns
    -------
    values : ndarray (npts, c)
        The recovered field.
    degree : ndarray of int (npts,)
        Lowest polynomial degree used among the point's patches (a diagnostic:
        below ``order`` where a patch had too few samples).
    """
    p = np.asarray(p, dtype=float)
    t = np.asarray(t)
    region = np.asarray(region)
    elements = np.asarray(elements, dtype=np.int64)
    nv, nel = t.shape
    nn = p.shape[1]
    dim = p.shape[0]
    # --- patches: one per (vertex, region) of the query elements (keyed per element)
    uel, e_inv = np.unique(elements, return_inverse=True)
    pv = t[:, uel].T                                                 # (nuel, nv)
    key = pv.astype(np.int64) * (int(region.max()) + 1) + region[uel][:, None]
    ukey, inv = np.unique(key.ravel(), return_inverse=True)
    inv = inv.reshape(pv.shape)[e_inv.ravel()]                       # (npts, nv)
    nreg = int(region.max()) + 1
    pvert, preg = ukey // nreg, ukey % nreg
    npatch = ukey.size
    # only the elements within two rings of the patch vertices can enter a patch: the
    # incidence is built for those (the same rings as over the whole mesh, at the cost
    # of the query instead of the mesh)
    flag = np.zeros(nn, dtype=bool)
    flag[pvert] = True
    flag[t[:, flag[t].any(axis=0)].ravel()] = True
    near = np.flatnonzero(flag[t].any(axis=0))
    tn = t[:, near]
    v2e = sp.csr_matrix((np.ones(tn.size), (tn.ravel(), np.tile(near, nv))), shape=(nn, nel))
    e2v = v2e.T.tocsr()

    def incidence(mat, patches=None):
        """Patch-element incidence from vertex-element reach ``mat`` (rows: ``patches``,
        default all), elements of the patch's region only."""
        c = mat.tocoo()
        reg = preg if patches is None else preg[patches]
        keep = region[c.col] == reg[c.row]
        return sp.csr_matrix((np.ones(int(keep.sum())), (c.row[keep], c.col[keep])),
                             shape=(mat.shape[0], nel))

    sel = sp.csr_matrix((np.ones(npatch), (np.arange(npatch), pvert)), shape=(npatch, nn))
    ring1 = incidence(sel @ v2e)
    # --- the polynomial degree and ring of each patch: the order, then lower, ring 1 then 2
    centre = p[:, pvert].T
    plan = [(1, order), (2, order)] + ([(1, 1), (2, 1)] if order > 1 else []) + [(2, 0)]
    ref = sampling_points(kind, order)
    nq = ref.shape[1]
    slot = np.full(nel, -1)
    xs = np.zeros((0, nq, dim))
    vs = None

    def ensure(el):
        """Sample the elements not sampled yet (arrays indexed through ``slot``)."""
        nonlocal xs, vs
        new = np.unique(el[slot[el] < 0])
        if new.size:
            xq, vq = sample(new, np.repeat(ref[:, None, :], new.size, axis=1))
            if symmetric:
                vq = _upper(vq)
            slot[new] = len(xs) + np.arange(new.size)
            xs = np.concatenate([xs, xq])
            vs = vq if vs is None else np.concatenate([vs, vq])

    m_max = _monomials(np.zeros((1, dim)), order).shape[1]
    coef = scales = None
    chosen = np.full(npatch, -1)
    todo = np.arange(npatch)
    ring2 = pos2 = None
    for ring, degree in plan:
        if todo.size == 0:
            break
        if ring == 2 and ring2 is None:
            # the second ring only of the patches still without a fit (few: boundary and
            # thin-layer vertices; over every patch it was a fifth of the recovery's time)
            ring2 = incidence(ring1[todo] @ e2v @ v2e, todo)
            pos2 = np.full(npatch, -1)
            pos2[todo] = np.arange(todo.size)
        inc = (ring1[todo] if ring == 1 else ring2[pos2[todo]]).tocoo()
        rows, el = inc.row, inc.col
        ensure(el)
        if coef is None:
            coef = np.zeros((npatch, m_max, vs.shape[-1]))
            scales = np.ones(npatch)
        cen = centre[todo]
        flat = (slot[el][:, None] * nq + np.arange(nq)).ravel()
        d = np.linalg.norm(np.take(xs.reshape(-1, dim), flat, axis=0)
                           - np.repeat(np.take(cen, rows, axis=0), nq, axis=0), axis=1)
        scale = np.zeros(todo.size)
        np.maximum.at(scale, np.repeat(rows, nq), d)
        scale[scale == 0] = 1.0
        c, ok = _fit(rows, el, cen, scale, xs, vs, slot, todo.size, degree)
        good = todo[ok]
        coef[good, :c.shape[1]] = c[ok]
        scales[good] = scale[ok]
        chosen[good] = degree
        todo = todo[~ok]
    # --- blend the patch polynomials at the query points
    X = np.asarray(X, dtype=float)
    npts, c = len(elements), coef.shape[-1]
    per = npts // max(uel.size, 1)
    blocks = per > 1 and per * uel.size == npts and np.array_equal(elements,
                                                                    np.repeat(uel, per))
    Xb = X.reshape(X.shape[0], uel.size, per) if blocks else None
    if blocks and np.array_equal(Xb, np.broadcast_to(Xb[:, :1], Xb.shape)):
        # the same reference points in every element (Gauss points): shape values once
        N = np.tile(vertex_shape(kind, vertex_ref, Xb[:, 0]), (uel.size, 1))
    else:
        N = vertex_shape(kind, vertex_ref, X)                        # (npts, nv)
    if coords is None:
        from_ref = sample(elements, X[:, :, None])[0][:, 0, :]
    else:
        from_ref = np.asarray(coords, dtype=float)                   # (npts, dim)
    if blocks:
        # the points come in equal blocks per element (every Gauss point of every element):
        # each element's patch polynomials are re-expanded once about the element's mean
        # point (the same polynomials in the offset y from it), blended by the shape
        # values into one polynomial of y per point, then evaluated: sum_a N_a P_a(x) =
        # sum_k phi_k(y) sum_a N_a D_ak, without a basis per point and vertex
        m = coef.shape[1]
        xb = from_ref.reshape(uel.size, per, dim)
        xe = xb.mean(axis=1)                                          # (nuel, dim)
        phi = _monomials((xb - xe[:, None, :]).reshape(-1, dim), order)[:, :m]
        phi = phi.reshape(uel.size, per, m)
        out = np.zeros((uel.size, per, c))
        for a in range(nv):
            k = inv[::per, a]
            sig = 1.0 / np.take(scales, k)
            D = _shifted(np.take(coef, k, axis=0), (xe - np.take(centre, k, axis=0))
                         * sig[:, None], sig)                         # (nuel, m, c)
            out += N.reshape(uel.size, per, nv)[:, :, a, None] * np.matmul(phi, D)
        out = out.reshape(npts, c)
    else:
        out = np.zeros((npts, c))
        for a in range(nv):
            k = inv[:, a]
            xi = (from_ref - centre[k]) / scales[k, None]
            P = _monomials(xi, order)
            out += N[:, a, None] * np.einsum("nm,nmc->nc", P, coef[k])
    deg = np.take(chosen, inv).min(axis=1)
    if symmetric:
        out = out[:, _FULL]
    return out, deg


#: Row-major 3x3 components 11, 22, 33, 23, 13, 12 (the 6 of a symmetric tensor), and the
#: position among them of each of the 9.
_UPPER = np.array([0, 4, 8, 5, 2, 1])
_FULL = np.array([0, 5, 4, 5, 1, 3, 4, 3, 2])


def _upper(v: np.ndarray) -> np.ndarray:
    """(..., 9) row-major components of symmetric tensors -> (..., 6), the off-diagonal
    ones averaged with their mirror (which they equal up to round-off)."""
    out = v[..., _UPPER].copy()
    out[..., 3:] = 0.5 * (out[..., 3:] + v[..., [7, 6, 3]])
    return out
