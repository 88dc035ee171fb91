"""Plan-view outlines of etched features: containment, distance, offset.

A feature is a prism (or, with sloped sidewalls, a frustum) whose cross-section
in the sample x-y plane is one of:

``rectangle``  half sizes (hx, hy), optional corner radius r (r <= min(hx, hy))
``disk``       radius R
``polygon``    vertices (n, 2), simple (no self-crossing), either orientation
``stripe``     half width hx, unbounded along y

All lengths in nm; the feature is centred on x = y = 0 (a polygon's vertices
are taken as given). Offsetting by d moves every edge outward by d: for a
rounded rectangle the half sizes and the radius grow by d (a sharp corner stays
sharp, as a mitred offset), for a polygon each edge moves along its outward
normal and neighbouring edges are re-intersected (mitre joints). This is what
a sloped sidewall does between the top of a feature and its foot.
Only numpy and the error classes are used here (no meshing).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MeshError


def polygon_area(v: np.ndarray) -> float:
    """Signed area (positive counter-clockwise), shoelace formula."""
    v = np.asarray(v, dtype=float)
    x, y = v[:, 0], v[:, 1]
    return 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))


def _segments_cross(a0, a1, b0, b1) -> np.ndarray:
    """Proper or touching intersection of segment pairs (vectorised), (m,) bool."""
    def orient(p, q, r):
        return (q[..., 0] - p[..., 0]) * (r[..., 1] - p[..., 1]) - \
               (q[..., 1] - p[..., 1]) * (r[..., 0] - p[..., 0])
    scale = max(float(np.max(np.abs(np.concatenate([a0, a1, b0, b1])))), 1e-300)
    eps = 1e-12 * scale * scale
    d1, d2 = orient(b0, b1, a0), orient(b0, b1, a1)
    d3, d4 = orient(a0, a1, b0), orient(a0, a1, b1)
    return ((d1 * d2) <= eps) & ((d3 * d4) <= eps) & \
        (np.maximum(a0[..., 0], a1[..., 0]) >= np.minimum(b0[..., 0], b1[..., 0])) & \
        (np.maximum(b0[..., 0], b1[..., 0]) >= np.minimum(a0[..., 0], a1[..., 0])) & \
        (np.maximum(a0[..., 1], a1[..., 1]) >= np.minimum(b0[..., 1], b1[..., 1])) & \
        (np.maximum(b0[..., 1], b1[..., 1]) >= np.minimum(a0[..., 1], a1[..., 1]))


def polygon_problem(v) -> str | None:
    """Why a vertex list is not a usable simple polygon, or None if it is."""
    v = np.asarray(v, dtype=float)
    n = len(v)
    if n < 3:
        return "a polygon needs at least 3 vertices"
    span = float(np.max(np.ptp(v, axis=0)))
    if span <= 0:
        return "the vertices coincide"
    e = np.roll(v, -1, axis=0) - v
    if np.any(np.hypot(e[:, 0], e[:, 1]) <= 1e-9 * span):
        return "two consecutive vertices coincide"
    i, j = np.triu_indices(n, k=2)
    keep = ~((i == 0) & (j == n - 1))          # first and last edges are neighbours
    i, j = i[keep], j[keep]
    if i.size:
        hit = _segments_cross(v[i], v[(i + 1) % n], v[j], v[(j + 1) % n])
        if np.any(hit):
            k = int(np.flatnonzero(hit)[0])
            return (f"edges {int(i[k])}-{int(i[k]) + 1} and {int(j[k])}-{(int(j[k]) + 1) % n} "
                    f"cross (the outline must not intersect itself)")
    if abs(polygon_area(v)) <= 1e-9 * span * span:
        return "the polygon has zero area"
    return None


def offset_polygon(v, d: float) -> np.ndarray:
    """Mitred outward offset of a simple polygon by d (nm; negative shrinks)."""
    v = np.asarray(v, dtype=float)
    ccw = polygon_area(v) > 0
    e = np.roll(v, -1, axis=0) - v
    length = np.hypot(e[:, 0], e[:, 1])
    t = e / length[:, None]
    nrm = np.column_stack([t[:, 1], -t[:, 0]]) if ccw else np.column_stack([-t[:, 1], t[:, 0]])
    # edge k: points v[k] + d n_k + s t_k; vertex k joins edges k-1 and k
    prev = np.roll(np.arange(len(v)), 1)
    p1, t1 = v + d * nrm[prev], t[prev]
    p2, t2 = v + d * nrm, t
    cross = t1[:, 0] * t2[:, 1] - t1[:, 1] * t2[:, 0]
    out = p2.copy()
    ok = np.abs(cross) > 1e-12
    diff = p2 - p1
    s = (diff[:, 0] * t2[:, 1] - diff[:, 1] * t2[:, 0])[ok] / cross[ok]
    out[ok] = p1[ok] + s[:, None] * t1[ok]
    return out


def _point_in_polygon(x, y, v) -> np.ndarray:
    """Even-odd rule, vectorised over points."""
    inside = np.zeros(np.shape(x), dtype=bool)
    n = len(v)
    for k in range(n):
        (x0, y0), (x1, y1) = v[k], v[(k + 1) % n]
        crosses = (y0 > y) != (y1 > y)
        with np.errstate(divide="ignore", invalid="ignore"):
            xc = x0 + (y - y0) * (x1 - x0) / (y1 - y0)
        inside ^= crosses & (x < xc)
    return inside


def _distance_to_polygon(x, y, v) -> np.ndarray:
    n = len(v)
    best = np.full(np.shape(x), np.inf)
    for k in range(n):
        a, b = v[k], v[(k + 1) % n]
        ab = b - a
        s = np.clip(((x - a[0]) * ab[0] + (y - a[1]) * ab[1]) / (ab @ ab), 0.0, 1.0)
        best = np.minimum(best, np.hypot(x - a[0] - s * ab[0], y - a[1] - s * ab[1]))
    return best


def _signed_distance_one(x: float, y: float, vertices) -> float:
    """:func:`_distance_to_polygon` with the even-odd sign for one point, in plain Python
    floats (about 20x faster than numpy scalars for the few vertices of an outline)."""
    n = len(vertices)
    best = math.inf
    inside = False
    for k in range(n):
        x0, y0 = vertices[k]
        x1, y1 = vertices[(k + 1) % n]
        if (y0 > y) != (y1 > y) and x < x0 + (y - y0) * (x1 - x0) / (y1 - y0):
            inside = not inside
        ax, ay = x1 - x0, y1 - y0
        s = min(max(((x - x0) * ax + (y - y0) * ay) / (ax * ax + ay * ay), 0.0), 1.0)
        best = min(best, math.hypot(x - x0 - s * ax, y - y0 - s * ay))
    return -best if inside else best


@dataclass(frozen=True)
class Outline:
    """Cross-section of a feature in the sample x-y plane (nm).

    Attributes
    ----------
    kind : str
        ``"rectangle"``, ``"disk"``, ``"polygon"`` or ``"stripe"``.
    hx, hy : float
        Half sizes (rectangle), half width (stripe, hy = inf), radius (disk).
    radius : float
        Corner radius (rectangle) or radius (disk).
    vertices : tuple of (x, y)
        Polygon vertices.
    """

    kind: str
    hx: float = 0.0
    hy: float = 0.0
    radius: float = 0.0
    vertices: tuple = ()

    @property
    def points(self) -> np.ndarray:
        return np.asarray(self.vertices, dtype=float)

    def offset(self, d: float) -> Outline:
        """The outline moved outward by d (nm)."""
        if self.kind == "rectangle":
            r = max(self.radius + d, 0.0) if self.radius > 0 else 0.0
            return Outline("rectangle", self.hx + d, self.hy + d, r)
        if self.kind == "disk":
            return Outline("disk", self.hx + d, self.hy + d, self.radius + d)
        if self.kind == "stripe":
            return Outline("stripe", self.hx + d, np.inf)
        return Outline("polygon", vertices=tuple(map(tuple, offset_polygon(self.points, d))))

    def problem(self) -> str | None:
        """Why this outline is not a valid shape (after an offset), or None."""
        if self.kind in ("rectangle", "stripe"):
            return None if self.hx > 0 and self.hy > 0 else "the outline vanishes"
        if self.kind == "disk":
            return None if self.radius > 0 else "the outline vanishes"
        return polygon_problem(self.points)

    def half_extent(self) -> tuple[float, float]:
        """max |x| and max |y| over the outline (nm)."""
        if self.kind == "polygon":
            v = self.points
            return float(np.max(np.abs(v[:, 0]))), float(np.max(np.abs(v[:, 1])))
        return float(self.hx), float(self.hy)

    def signed_distance(self, x, y) -> np.ndarray:
        """Distance to the outline in the x-y plane, negative inside (nm)."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        if self.kind == "stripe":
            return np.abs(x) - self.hx
        if self.kind == "disk":
            return np.hypot(x, y) - self.radius
        if self.kind == "rectangle":
            r = self.radius
            qx, qy = np.abs(x) - (self.hx - r), np.abs(y) - (self.hy - r)
            outside = np.hypot(np.maximum(qx, 0.0), np.maximum(qy, 0.0))
            return outside + np.minimum(np.maximum(qx, qy), 0.0) - r
        if x.ndim == 0 and y.ndim == 0:     # one point (gmsh's size callback): plain floats
            return np.float64(_signed_distance_one(float(x), float(y), self.vertices))
        v = self.points
        d = _distance_to_polygon(x, y, v)
        return np.where(_point_in_polygon(x, y, v), -d, d)

    def contains(self, x, y, tol: float = 0.0) -> np.ndarray:
        """True inside or on the outline (within ``tol`` nm)."""
        return self.signed_distance(x, y) <= tol

    def describe(self) -> str:
        if self.kind == "rectangle":
            s = f"{2 * self.hx:.6g} x {2 * self.hy:.6g} nm rectangle"
            return s + (f", corner radius {self.radius:.6g} nm" if self.radius > 0 else "")
        if self.kind == "disk":
            return f"disk of diameter {2 * self.radius:.6g} nm"
        if self.kind == "stripe":
            return f"stripe {2 * self.hx:.6g} nm wide"
        return f"polygon of {len(self.vertices)} vertices"


def outline_of(pattern) -> Outline:
    """The top outline of a case's pattern (:class:`mesastrain.case.types.Pattern`)."""
    shape = pattern.shape
    if shape == "rectangle":
        length = pattern.length if pattern.length is not None else pattern.width
        return Outline("rectangle", pattern.width / 2.0, length / 2.0,
                       float(getattr(pattern, "corner_radius", None) or 0.0))
    if shape == "stripe":
        return Outline("stripe", pattern.width / 2.0, np.inf)
    if shape == "disk":
        r = pattern.diameter / 2.0
        return Outline("disk", r, r, r)
    if shape == "polygon":
        return Outline("polygon", vertices=tuple(tuple(p) for p in pattern.vertices))
    raise MeshError(f"pattern shape {shape!r} has no outline")


def taper_of(pattern) -> float:
    """Outward offset of the foot of the feature relative to its top, nm.

    etch_depth / tan(sidewall_angle): 0 for vertical sidewalls, positive when
    the sidewalls slope outward toward the etch floor (angle < 90 degrees),
    negative for an undercut (angle > 90 degrees).
    """
    angle = getattr(pattern, "sidewall_angle", None)
    if angle is None or angle == 90.0 or not pattern.etch_depth:
        return 0.0
    return float(pattern.etch_depth / np.tan(np.radians(angle)))


def outline_at(pattern, top: float, z: float) -> Outline:
    """Outline of the feature at height z (between its etch floor and ``top``)."""
    base = outline_of(pattern)
    taper = taper_of(pattern)
    if not taper:
        return base
    rise = (top - z) / pattern.etch_depth
    return base.offset(taper * min(max(rise, 0.0), 1.0))
