"""Sampling a solved result and the geometry of the modelled feature.

Exact fields at points of the whole feature (mirror images mapped onto the
modelled part), element sizes and centres, the etch floor, the distance to
the free sidewall along an in-plane direction, and stress profiles from the
sidewall inward. The readout modules build on these.

Units: lengths nm, stress MPa, sample frame.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "PROFILE_POINTS",
    "cell_centres",
    "column_profile",
    "directions",
    "element_size_at",
    "etch_floor",
    "feature_bounds",
    "locate",
    "mirrors_of",
    "sample_inside",
    "sidewall_distance",
]


#: Sample points on each relaxation / traction profile.
PROFILE_POINTS = 240


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


def element_size_at(res, points: np.ndarray) -> np.ndarray:
    """Cube root of the volume of the element holding each point, nm (NaN outside)."""
    elems = locate(res, points)
    out = np.full(len(elems), np.nan)
    ok = elems >= 0
    out[ok] = np.cbrt(res.fields.cell_volume[elems[ok]])
    return out


def cell_centres(res) -> np.ndarray:
    """(nelems, 3) element centroids (mean of the vertices), nm."""
    m = res.mesh.mesh
    return m.p[:, m.t].mean(axis=1).T


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
    t = np.linspace(0.0, t_box * (1 - 1e-9), 801)
    inside = locate(res, o + t[:, None] * d3) >= 0
    if not inside[0]:
        return None
    out = np.flatnonzero(~inside)
    if out.size == 0:
        return None                  # the model boundary (a roller or periodic face), not free
    lo, hi = t[out[0] - 1], t[out[0]]
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if locate(res, (o + mid * d3)[None, :])[0] >= 0:
            lo = mid
        else:
            hi = mid
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
    cen = cell_centres(res)[el]
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
