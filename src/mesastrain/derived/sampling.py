"""Sampling a solved result and the geometry of the modelled feature.

Exact fields at points of the whole feature (mirror images mapped onto the
modelled part), element sizes and centres, the etch floor, the distance to
the free sidewall along an in-plane direction, and stress profiles from the
sidewall inward. The readout modules build on these.

Units: lengths nm, stress MPa, sample frame.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.fem.fields import evaluate_at_reference, reference_coordinates
from mesastrain.fem.mapping import fast_mapping
from mesastrain.fem.recovery import recover_at
from mesastrain.mesh.base import ModelMesh
from mesastrain.model.symmetry import reflect_points, reflect_tensors

__all__ = [
    "PROFILE_POINTS",
    "cell_centres",
    "column_profile",
    "directions",
    "element_size_at",
    "etch_floor",
    "feature_bounds",
    "locate",
    "locate_in_region",
    "mirrors_of",
    "recovered_stress",
    "sample_inside",
    "sidewall_distance",
    "stress_sampler",
    "StressSampler",
]


#: Sample points on each relaxation / traction profile.
PROFILE_POINTS = 240

#: Points along a ray in the first scan of :func:`sidewall_distance`, and in each of its
#: narrowing steps (each divides the bracket by 32: 7 vectorised steps reach 1e-12 of the ray;
#: fewer, larger steps cost more on tetrahedra, where locating a point costs ~16 us against a
#: call's ~0.2 ms: 4 rays of the L-shaped pad took 32 ms with 33 points, 303 ms with 801).
SIDEWALL_POINTS = 801
NARROWING_POINTS = 33


# --------------------------------------------------------------------------
# sampling helpers
# --------------------------------------------------------------------------
def mirrors_of(res) -> tuple:
    """Mirror axes of the model (0 = x, 1 = y): only the non-negative side is meshed."""
    return tuple(res.mesh.mirrors)


def locate(res, points: np.ndarray) -> np.ndarray:
    """Element index of each point of the whole feature (mirror images mapped), -1 outside."""
    q = np.array(np.atleast_2d(points), dtype=float)
    for a in mirrors_of(res):
        q[:, a] = np.abs(q[:, a])
    return res.mesh.locate(q)


def sample_inside(res, points: np.ndarray):
    """``res.sample`` at points, NaN where a point lies outside the body.

    Returns
    -------
    strain, stress (MPa), displacement, region : as :meth:`Result.sample`,
        region -1 outside.
    """
    pts = np.atleast_2d(np.asarray(points, dtype=float))
    n = len(pts)
    strain = np.full((n, 3, 3), np.nan)
    stress = np.full((n, 3, 3), np.nan)
    disp = np.full((n, 3), np.nan)
    region = np.full(n, -1, dtype=int)
    inside = locate(res, pts) >= 0
    if np.any(inside):
        e, s, u, r = res.sample(pts[inside])
        strain[inside], stress[inside], disp[inside], region[inside] = e, s, u, r
    return strain, stress, disp, region


def locate_in_region(res, points: np.ndarray, regions=None) -> np.ndarray:
    """Element of region ``regions[i]`` holding each point (a point on an interface lies in
    elements of both regions), -1 where none does; ``regions`` None: :func:`locate`.

    Points are of the modelled body (mirror images are not mapped here).
    """
    cand = res.mesh.locate_all(np.atleast_2d(np.asarray(points, dtype=float)))
    if regions is None:
        return cand[:, 0]
    want = np.broadcast_to(np.asarray(regions), (len(cand),))
    match = (cand >= 0) & (res.mesh.region[np.maximum(cand, 0)] == want[:, None])
    j = np.argmax(match, axis=1)
    return np.where(match.any(axis=1), cand[np.arange(len(cand)), j], -1)


def _element_kind(mesh) -> str:
    name = type(mesh).__name__.lower()
    for kind in ("hex", "quad", "tet", "tri"):
        if kind in name:
            return kind
    raise TypeError(f"no recovery for elements of {type(mesh).__name__}")


@dataclass(frozen=True)
class StressSampler:
    """The finite-element stress of a result at reference points of its elements.

    Attributes
    ----------
    mesh : skfem mesh
        The mesh the discretisation lives on (2-D for a cross-section).
    kind : str
        ``'hex'``, ``'quad'``, ``'tet'`` or ``'tri'``.
    vertex_ref : ndarray (nv, dim)
        Reference coordinates of the element vertices, in connectivity order.
    mapping : skfem mapping
    cols : list of int
        The sample axes of the mesh coordinates ([0, 1, 2], or [0, 2] for a section).
    stress : callable (elements (n,), points (n, 3) nm) -> (n, 3, 3) MPa
    sample : callable (elements (n,), Xref (dim, n, nq)) -> (x (n, nq, dim), values (n, nq, 9))
        Physical coordinates and stress (MPa, 9 components) at reference points,
        the form :func:`mesastrain.fem.recovery.recover_at` takes.
    """

    mesh: object
    kind: str
    vertex_ref: np.ndarray
    mapping: object
    cols: list
    stress: object
    sample: object


def stress_sampler(res) -> StressSampler:
    """A :class:`StressSampler` of a solved result (exact element stresses, MPa)."""
    from skfem import ElementHex1, ElementQuad1, ElementTetP1, ElementTriP1

    disc, mm = res.disc, res.mesh
    m = disc.basis.mesh
    dim = m.p.shape[0]
    kind = _element_kind(m)
    vref = {"hex": ElementHex1, "quad": ElementQuad1, "tet": ElementTetP1,
            "tri": ElementTriP1}[kind]().doflocs
    mapping = fast_mapping(m)
    cols = [0, 1, 2] if dim == 3 else [0, 2]

    def to3(x):                                              # (..., dim) -> (..., 3)
        if dim == 3:
            return x
        return np.stack([x[..., 0], np.zeros_like(x[..., 0]), x[..., 1]], axis=-1)

    def stress(el, x3):
        _, sig, _ = mm.evaluate(disc, res.u, el, x3, mm.region, res.stiffness, res.eigenstrain,
                                res.cell_eigenstrain)
        return sig

    # the default evaluation of a 3-D mesh needs no point location at reference points
    direct = dim == 3 and type(mm).evaluate is ModelMesh.evaluate

    def sample(el, Xref):                                    # Xref (dim, n, nq)
        x = np.moveaxis(mapping.F(Xref, tind=el), 0, -1)     # (n, nq, dim)
        nq = x.shape[1]
        e = np.repeat(el, nq)
        if direct:
            _, sig, _ = evaluate_at_reference(disc, res.u, e, Xref.reshape(dim, -1), mm.region,
                                              res.stiffness, res.eigenstrain,
                                              res.cell_eigenstrain)
        else:
            sig = stress(e, to3(x).reshape(-1, 3))
        return x, sig.reshape(len(el), nq, 9)

    return StressSampler(m, kind, vref, mapping, cols, stress, sample)


def recovered_stress(res, points: np.ndarray, regions=None):
    """Stress at points from superconvergent patch recovery, one-sided per region.

    The patches of :func:`mesastrain.fem.recovery.recover_at` hold only the
    elements of the region asked for, so a point on a material interface gets
    the limit of that region's stress, never an average across the interface.
    The finite-element stress of the same element is returned beside it: their
    difference is the Zienkiewicz-Zhu error estimate of the finite-element
    value there (Zienkiewicz & Zhu, Int. J. Numer. Meth. Eng. 24, 337 (1987)).

    Parameters
    ----------
    points : array (npts, 3), nm
        Points of the whole feature (mirror images are mapped).
    regions : int or array of int, optional
        Region whose one-sided value is wanted at each point (default: the
        region :func:`locate` gives).

    Returns
    -------
    recovered, fe : ndarray (npts, 3, 3)
        MPa; NaN where the point is not in an element of the region.
    elements : ndarray of int (npts,)
        The element used (-1: none).
    degree : ndarray of int (npts,)
        Lowest patch polynomial degree used (below the element order where the
        patches near a corner had too few samples; -1 where not evaluated).
    """
    pts = np.atleast_2d(np.asarray(points, dtype=float))
    q, signs = reflect_points(pts, tuple(mirrors_of(res)))
    n = len(q)
    elems = locate_in_region(res, q, regions)
    rec = np.full((n, 3, 3), np.nan)
    fe = np.full((n, 3, 3), np.nan)
    deg = np.full(n, -1)
    ok = np.flatnonzero(elems >= 0)
    if ok.size == 0:
        return rec, fe, elems, deg
    sm = stress_sampler(res)
    m, kind, vref, mapping, cols, stress, sample = (sm.mesh, sm.kind, sm.vertex_ref, sm.mapping,
                                                    sm.cols, sm.stress, sm.sample)
    mm = res.mesh
    e = elems[ok]
    X = reference_coordinates(mapping, q[ok][:, cols].T[:, :, None], e)[:, :, 0]
    r, d = recover_at(m.p, m.t[:len(vref)], mm.region, e, X, kind, res.order, vref, sample,
                      symmetric=True)
    rec[ok] = r.reshape(-1, 3, 3)
    fe[ok] = stress(e, q[ok])
    deg[ok] = d
    if mirrors_of(res):
        rec, fe = reflect_tensors(rec, signs), reflect_tensors(fe, signs)
    return rec, fe, elems, deg


def element_size_at(res, points: np.ndarray) -> np.ndarray:
    """Cube root of the volume of the element holding each point, nm (NaN outside)."""
    elems = locate(res, points)
    out = np.full(len(elems), np.nan)
    ok = elems >= 0
    out[ok] = np.cbrt(res.fields.cell_volume[elems[ok]])
    return out


def cell_centres(res, elements=None) -> np.ndarray:
    """(nelems, 3) element centroids (mean of the vertices), nm; of ``elements`` if given."""
    m = res.mesh.mesh
    t = m.t if elements is None else m.t[:, elements]
    return m.p[:, t].mean(axis=1).T


def feature_bounds(res) -> np.ndarray:
    """(3, 2) extent of the whole modelled feature (mirror images included), nm."""
    p = res.mesh.mesh.p
    b = np.stack([p.min(axis=1), p.max(axis=1)], axis=1)
    for a in mirrors_of(res):
        b[a, 0] = min(b[a, 0], -b[a, 1])
    return b


# --------------------------------------------------------------------------
# geometry of the feature
# --------------------------------------------------------------------------
def etch_floor(res) -> float | None:
    """z of the etch floor, nm; None for a blanket stack."""
    pat = res.case.pattern
    if pat.shape == "none" or not getattr(pat, "etch_depth", None):
        return None
    return float(res.case.top - pat.etch_depth)


def sidewall_distance(res, direction: np.ndarray, z: float, origin=(0.0, 0.0)) -> float | None:
    """Distance from ``origin`` along an in-plane ``direction`` to the free sidewall at height z.

    Uses the rectangle's own size where the pattern is a rectangle, otherwise a
    bisection on ``res.mesh.locate``. None when the ray reaches the model
    boundary without meeting a free surface (no sidewall that way).
    """
    d = np.asarray(direction, dtype=float)
    d = d / np.linalg.norm(d)
    floor = etch_floor(res)
    if floor is None or z <= floor:
        return None
    bounds = feature_bounds(res)
    o = np.array([origin[0], origin[1], z])
    d3 = np.array([d[0], d[1], 0.0])
    t_box = min(((bounds[k, 1] if d[k] > 0 else bounds[k, 0]) - o[k]) / d[k]
                for k in (0, 1) if abs(d[k]) > 1e-12)
    t = np.linspace(0.0, t_box * (1 - 1e-9), SIDEWALL_POINTS)
    inside = locate(res, o + t[:, None] * d3) >= 0
    if not inside[0]:
        return None
    out = np.flatnonzero(~inside)
    if out.size == 0:
        return None                  # the model boundary (a roller or periodic face), not free
    lo, hi = t[out[0] - 1], t[out[0]]
    # narrow the bracket (lo inside, hi outside) NARROWING_POINTS - 1 times per step, one
    # vectorised locate per step, until it is below 1e-12 of the ray (as a bisection would
    # in 30 scalar calls)
    while hi - lo > 1e-12 * t_box:
        s = np.linspace(lo, hi, NARROWING_POINTS)
        gone = np.flatnonzero(locate(res, o + s[:, None] * d3) < 0)
        k = int(gone[0]) if gone.size else s.size - 1
        if k == 0:                   # cannot happen for a deterministic locate: lo was inside
            break
        lo, hi = s[k - 1], s[k]
    # locate() accepts points up to 1e-9 of the model size outside an element; step back so that
    # the sidewall point lies inside its element
    return float(max(lo - 1e-8 * t_box, 0.0))


def directions():
    """(label, unit vector, normal-stress index) of the four in-plane rays."""
    return (("+x", np.array([1.0, 0.0]), 0), ("-x", np.array([-1.0, 0.0]), 0),
            ("+y", np.array([0.0, 1.0]), 1), ("-y", np.array([0.0, -1.0]), 1))


def _profile_distances(extent: float, n: int = PROFILE_POINTS) -> np.ndarray:
    """Distances from the sidewall, 0 .. extent, dense near the sidewall."""
    t = np.linspace(0.0, 1.0, n)
    return extent * t ** 2


def column_profile(res, d: np.ndarray, ext: float, z: float, side: int = 0):
    """Distances from the sidewall of the element centres met along a ray at height z.

    Element-average positions are where the stress of low-order elements is most
    accurate (no saw-tooth from the jumps between elements). The ray runs from
    the centre (0, 0) along ``d`` to the sidewall at ``ext``.

    Parameters
    ----------
    side : int
        0: the elements holding the points; +1 / -1: the elements just above /
        below the height z (for an interface).

    Returns
    -------
    s : ndarray
        Distances from the sidewall, increasing (the last is the centre).
    zc : ndarray
        Height of the centre of each of those elements, nm.
    """
    s_dense = _profile_distances(ext, 4 * PROFILE_POINTS)
    eps = 1e-6 * max(res.case.top, 1.0)
    pts = np.column_stack([d[0] * (ext - s_dense), d[1] * (ext - s_dense),
                           np.full_like(s_dense, z + side * eps)])
    el = locate(res, pts)
    ok = el >= 0
    pts, el = pts[ok], el[ok]
    first = np.concatenate([[True], el[1:] != el[:-1]])
    el = el[first]
    cen = cell_centres(res, el)
    along = np.abs(cen[:, 0] * d[0]) + np.abs(cen[:, 1] * d[1])   # mirror-safe |coordinate|
    s = ext - along
    order = np.argsort(s)
    s, zc = s[order], cen[order, 2]
    keep = np.concatenate([[True], np.diff(s) > 1e-9 * max(ext, 1.0)])
    s, zc = s[keep], zc[keep]
    s = np.clip(s, 0.0, ext)
    if s[-1] < ext:                                       # the feature centre itself
        s, zc = np.append(s, ext), np.append(zc, zc[-1])
    return s, zc
