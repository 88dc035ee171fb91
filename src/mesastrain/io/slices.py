"""Plane sections of a result held in memory, for the 2-D pictures.

A section of the body on an axis plane (x, y or z = const) is cut from the
linear vertices of the mesh: a hexahedron crossing the plane gives a convex
polygon of three to six corners on its edges (fanned into triangles), a
tetrahedron a triangle or a quadrilateral. Only element edges are cut (no
diagonals), so neighbouring elements share the section's points whatever
their local vertex order (mirrored halves included). The section's points lie on mesh edges; a point belongs to one
region, so points on an interface are doubled, one per side, and values that
jump across interfaces (stress, strain) stay sharp.

Values on the section are shaded per vertex:

- point data (displacement) are interpolated along the edge;
- cell data (element averages of stress, strain, device fields) are first
  smoothed to the two edge vertices within the point's own region (the
  volume-weighted average of that region's elements around the vertex) and
  then interpolated, so tetrahedral meshes do not look mottled.

Only the elements touching the section are read, so a section of a body of
millions of nodes costs a fraction of a second; nothing is written to or read
back from ``fields.vtu``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Section", "cut"]

#: The twelve edges of a hexahedron in scikit-fem's local vertex order (``MeshHex1``).
_HEX_EDGES = np.array([(0, 1), (0, 2), (0, 3), (1, 4), (1, 5), (2, 4), (2, 6), (3, 5), (3, 6),
                       (4, 7), (5, 7), (6, 7)])


@dataclass
class Section:
    """Triangles of a plane section, with what is needed to put values on them.

    Attributes
    ----------
    axis : int
        Normal of the plane (0 x, 1 y, 2 z).
    position : float
        Plane position, nm.
    xy : ndarray (npts, 2)
        In-plane coordinates, nm: (y, z) for axis 0, (x, z) for axis 1, (x, y) for axis 2.
    triangles : ndarray of int (ntri, 3)
    region : ndarray of int (npts,)
        Region of each point (and so of each triangle).
    a, b : ndarray of int (npts,)
        The mesh vertices of the edge a point lies on.
    s : ndarray (npts,)
        Position along the edge (0 at ``a``, 1 at ``b``).
    """

    axis: int
    position: float
    xy: np.ndarray
    triangles: np.ndarray
    region: np.ndarray
    a: np.ndarray
    b: np.ndarray
    s: np.ndarray
    _cache: dict = field(default_factory=dict, repr=False)

    @property
    def triangle_region(self) -> np.ndarray:
        return self.region[self.triangles[:, 0]]

    def point_values(self, values: np.ndarray) -> np.ndarray:
        """Interpolate nodal values (nnodes, ...) to the section's points."""
        va, vb = values[self.a], values[self.b]
        s = self.s.reshape((-1,) + (1,) * (va.ndim - 1))
        return va + s * (vb - va)

    def cell_values(self, values: np.ndarray, t: np.ndarray, region: np.ndarray,
                    volume: np.ndarray) -> np.ndarray:
        """Element values (nelems, ...) smoothed per region to the section's points.

        Parameters
        ----------
        values : ndarray (nelems, ...)
        t : ndarray of int (nv, nelems)
            Element vertices of the mesh the values belong to.
        region, volume : ndarray (nelems,)
        """
        key = "weights"
        if key not in self._cache:
            self._cache[key] = _regional_weights(self, t, region, volume)
        rows, cols, w, npair, pair_a, pair_b = self._cache[key]
        flat = values.reshape(len(values), -1)
        sums = np.empty((npair, flat.shape[1]))
        for k in range(flat.shape[1]):
            sums[:, k] = np.bincount(rows, weights=w * flat[cols, k], minlength=npair)
        va, vb = sums[pair_a], sums[pair_b]
        out = va + self.s[:, None] * (vb - va)
        return out.reshape((len(self.s),) + values.shape[1:])

    def boundary_segments(self) -> np.ndarray:
        """Edges of the triangles on the boundary of each region, (nseg, 2, 2) nm."""
        tri = self.triangles
        e = np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [2, 0]]])
        e.sort(axis=1)
        key = e[:, 0].astype(np.int64) * len(self.xy) + e[:, 1]
        uniq, inv, cnt = np.unique(key, return_inverse=True, return_counts=True)
        once = e[cnt[inv] == 1]
        return self.xy[once]


def _regional_weights(sec: Section, t, region, volume):
    """Sparse pieces of the per-region nodal average at the section's edge vertices."""
    nreg = int(region.max()) + 1
    # (vertex, region) pairs the section needs: both ends of each point's edge
    pair_keys = np.concatenate([sec.a * nreg + sec.region, sec.b * nreg + sec.region])
    uniq, inv = np.unique(pair_keys, return_inverse=True)
    n = len(sec.s)
    pair_a, pair_b = inv[:n], inv[n:]
    need = np.zeros(int(t.max()) + 1, dtype=bool)
    need[uniq // nreg] = True
    els = np.flatnonzero(need[t].any(axis=0))
    tk = t[:, els] * nreg + region[els]
    pos = np.searchsorted(uniq, tk)
    pos[pos == len(uniq)] = 0
    hit = uniq[pos] == tk
    rows = pos[hit]
    cols = np.broadcast_to(els, tk.shape)[hit]
    wv = volume[cols]
    wsum = np.bincount(rows, weights=wv, minlength=len(uniq))
    wsum[wsum == 0] = 1.0
    return rows, cols, wv / wsum[rows], len(uniq), pair_a, pair_b


def _hex_polygons(p, t, d, els, region, axis):
    """Corners (a, b, region) and triangles of the polygons cut from hexahedra ``els``."""
    v = t[:8, els]
    ea, eb = v[_HEX_EDGES[:, 0]], v[_HEX_EDGES[:, 1]]          # (12, m)
    cross = (d[ea] > 0) != (d[eb] > 0)
    s = d[ea] / np.where(cross, d[ea] - d[eb], 1.0)
    keep = [i for i in range(3) if i != axis]
    pa, pb = p[keep][:, ea], p[keep][:, eb]                      # (2, 12, m)
    xy = pa + s * (pb - pa)
    k = cross.sum(axis=0)
    c = np.where(cross, xy, 0.0).sum(axis=1) / np.maximum(k, 1)  # centroid (2, m)
    ang = np.where(cross, np.arctan2(xy[1] - c[1], xy[0] - c[0]), np.inf)
    order = np.argsort(ang, axis=0)                              # crossing corners first
    m = len(els)
    base = np.arange(m) * 12
    corner_a = np.take_along_axis(ea, order, 0).T.ravel()
    corner_b = np.take_along_axis(eb, order, 0).T.ravel()
    lo, hi = np.minimum(corner_a, corner_b), np.maximum(corner_a, corner_b)
    corners = np.stack([lo, hi, np.repeat(region[els], 12)], axis=1)
    tris = [np.stack([base, base + i, base + i + 1], axis=1)[k > i + 1] for i in range(1, 5)]
    return corners, np.concatenate(tris)


def _tet_polygons(t, d, els, region):
    """Corners (a, b, region) and triangles of the triangles/quads cut from tetrahedra."""
    tets = t[:4, els]
    pos = d[tets] > 0
    k = pos.sum(axis=0)
    order = np.argsort(~pos, axis=0, kind="stable")     # positive vertices first
    v = np.take_along_axis(tets, order, axis=0)
    corners, tris, base = [], [], 0
    for kk, edges in ((1, [(0, 1), (0, 2), (0, 3)]), (3, [(3, 0), (3, 1), (3, 2)]),
                      (2, [(0, 2), (0, 3), (1, 3), (1, 2)])):
        m = k == kk
        if not np.any(m):
            continue
        ends = np.stack([np.stack([v[i, m], v[j, m]], axis=1) for i, j in edges], axis=1)
        n, nc = ends.shape[0], ends.shape[1]
        corners.append(np.concatenate([np.sort(ends, axis=2).reshape(-1, 2),
                                       np.repeat(region[els[m]], nc)[:, None]], axis=1))
        idx = base + np.arange(n * nc).reshape(n, nc)
        tris.append(idx[:, [0, 1, 2]])
        if nc == 4:
            tris.append(idx[:, [0, 2, 3]])
        base += n * nc
    if not corners:
        return np.zeros((0, 3), dtype=np.int64), np.zeros((0, 3), dtype=np.int64)
    return np.concatenate(corners), np.concatenate(tris)


def cut(p: np.ndarray, t: np.ndarray, region: np.ndarray, axis: int,
        position: float) -> Section:
    """The section of a mesh on the plane ``p[axis] = position``.

    Parameters
    ----------
    p : ndarray (3, nnodes)
        Vertex coordinates, nm.
    t : ndarray of int (nv, nelems)
        Element vertices (hexahedra: 8, tetrahedra: 4 or more rows, the first
        four the vertices).
    region : ndarray of int (nelems,)
    axis : int
    position : float

    Returns
    -------
    Section
        Empty (no triangles) when the plane misses the body.
    """
    d = p[axis] - position
    scale = max(float(np.ptp(p[axis])), 1.0)
    d = np.where(np.abs(d) <= 1e-12 * scale, 1e-9 * scale, d)   # on the plane: positive side
    nv = 8 if t.shape[0] >= 8 else 4
    de = d[t[:nv]]
    els = np.flatnonzero((de.min(axis=0) < 0) & (de.max(axis=0) > 0))
    if nv == 8:
        corners, tri = _hex_polygons(p, t, d, els, region, axis)
    else:
        corners, tri = _tet_polygons(t, d, els, region)
    if len(tri) == 0:
        empty = np.zeros(0, dtype=np.int64)
        return Section(axis, position, np.zeros((0, 2)), np.zeros((0, 3), dtype=np.int64),
                       empty, empty, empty, np.zeros(0))
    used = np.zeros(len(corners), dtype=bool)        # (a hexahedron's uncut edges: unused)
    used[tri.ravel()] = True
    tri = (np.cumsum(used) - 1)[tri]
    corners = corners[used]
    a, b, r = corners[:, 0], corners[:, 1], corners[:, 2]
    s = d[a] / (d[a] - d[b])
    # a corner at a vertex on the plane is that vertex, whatever edge it came from
    at_a, at_b = s < 1e-6, s > 1 - 1e-6
    node = np.where(at_a, a, b)
    on = at_a | at_b
    a = np.where(on, node, a)
    b = np.where(on, node, b)
    s = np.where(on, 0.0, s)
    nn = p.shape[1] + 1
    nreg = int(region.max()) + 1
    key = (a.astype(np.int64) * nn + b) * nreg + r
    uniq, first, inv = np.unique(key, return_index=True, return_inverse=True)
    tri = inv[tri]
    good = (tri[:, 0] != tri[:, 1]) & (tri[:, 1] != tri[:, 2]) & (tri[:, 0] != tri[:, 2])
    tri = tri[good]
    a, b, s, r = a[first], b[first], s[first], r[first]
    xyz = p[:, a].T + s[:, None] * (p[:, b] - p[:, a]).T
    keep_axes = [i for i in range(3) if i != axis]
    return Section(axis, float(position), xyz[:, keep_axes], tri, r, a, b, s)
