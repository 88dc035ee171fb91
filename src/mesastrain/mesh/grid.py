"""Graded tensor-product grids of film stacks: the layout and the grid lines.

:class:`StackLayout` holds where things are in a stack model (layer
interfaces, substrate depth, the feature's footprint, the modelled cell,
mirror and periodic axes, sidewall taper) and :class:`GridSpacing` the
element sizes; :func:`axis_coordinates` turns them into grid lines whose
planes include every layer interface, the etch floor and the sidewalls,
graded toward them. The structured hexahedral mesh
(:mod:`mesastrain.mesh.structured`) and the stripe's cross-section
(:mod:`mesastrain.mesh.section`) are built on these lines; the size
estimate counts cells on them without meshing (:func:`keep_mask`).

Coordinates are in nm: z = 0 at the substrate's top surface, +z up through the
layers, x = y = 0 at the centre of the pattern.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MeshError

#: Shortest allowed grid spacing relative to the model's overall size.
MIN_RELATIVE_SPACING = 1e-9


@dataclass(frozen=True)
class StackLayout:
    """Where the layers, the feature and the modelled cell of a stack are (nm).

    Attributes
    ----------
    interfaces : tuple of float
        z of every layer boundary, bottom to top, starting at 0.0 (substrate
        top) and ending at the stack top.
    substrate_depth : float
        Modelled substrate depth below z = 0.
    half_width, half_length : float or None
        Half of the mesa size along x and y; None for a blanket stack.
    etch_depth : float
        Depth of the etch below the top surface (0 for a blanket stack).
    margin : float
        Lateral substrate modelled around the mesa along x (or half the column
        width for a blanket stack).
    margin_y : float or None
        The same along y (None: equal to ``margin``). A margin of 0 means the
        feature fills the cell along that axis (a periodic array without gap).
    mirrors : tuple of int
        Axes (0 = x, 1 = y) modelled from the mirror plane through the centre
        only (x >= 0 or y >= 0); see :mod:`mesastrain.model.symmetry`.
    periodic : tuple of int
        Axes along which the cell repeats (periodic array); the faces of a
        periodic axis that is not also a mirror are tied.
    taper : float
        Inset of the top outline of the feature relative to its footprint at
        the etch floor, nm (positive: sloped sidewalls narrowing upward; the
        half sizes above are those of the footprint).
    liners : tuple of (top, side, floor)
        Conformal liners over the feature, bottom to top: for each, the total
        thickness of the liners up to and including it on the feature top, on
        the sidewalls (horizontal offset of the sidewall plane) and on the etch
        floor, nm. Liner k (from 1) is region ``len(interfaces) - 1 + k``.
    """

    interfaces: tuple
    substrate_depth: float
    half_width: float | None
    half_length: float | None
    etch_depth: float
    margin: float
    margin_y: float | None = None
    mirrors: tuple = ()
    periodic: tuple = ()
    taper: float = 0.0
    liners: tuple = ()

    @property
    def margins(self) -> tuple:
        """Lateral margins (nm) along x and y."""
        return (self.margin, self.margin if self.margin_y is None else self.margin_y)

    def scale_at(self, z: np.ndarray, axis: int) -> np.ndarray:
        """Lateral scale of a tapered feature at height z (1 at and below the etch floor).

        The grid is built for the footprint at the etch floor; above it every
        lateral coordinate is multiplied by this factor, which moves the
        sidewall in by ``taper`` (nm) between the floor and the top.
        """
        z = np.asarray(z, dtype=float)
        half = self.half_width if axis == 0 else self.half_length
        if not self.taper or half is None or self.etch_depth <= 0:
            return np.ones_like(z)
        rise = np.clip((z - self.etch_floor) / self.etch_depth, 0.0, 1.0)
        return 1.0 - self.taper * rise / half

    def map_lateral(self, x: np.ndarray, z: np.ndarray, axis: int,
                    inverse: bool = False) -> np.ndarray:
        """Grid coordinate -> physical one along a lateral axis (or back, ``inverse``).

        The grid is built for the footprint at the etch floor, with the liners'
        sidewall planes at ``half + side_k``. Above the floor, at rise
        r = (z - floor) / etch_depth (not capped above, so the liners' sloped
        sidewalls continue up to their tops), the sidewall moves in by
        ``taper * r``: the feature (|x| <= half) is scaled toward the centre,
        the liner band beside it is shifted by the same amount (so each liner's
        outer sidewall is the sidewall plane offset by its horizontal
        thickness), and the floor beyond the band is stretched linearly to the
        fixed cell face. At and below the floor the map is the identity.
        """
        x = np.asarray(x, dtype=float)
        z = np.asarray(z, dtype=float)
        half = self.half_width if axis == 0 else self.half_length
        if not self.taper or half is None or self.etch_depth <= 0:
            return x.copy()
        shift = self.taper * np.maximum((z - self.etch_floor) / self.etch_depth, 0.0)
        band = self.liners[-1][1] if self.liners else 0.0
        edge = half + self.margins[axis]
        a, u = np.abs(x), np.sign(x)
        knot = half + band                       # outer liner plane (grid)
        outer = max(edge - knot, 0.0)
        if not inverse:
            inner = a * (1.0 - shift / half)
            mid = a - shift
            far = edge - (edge - a) * ((outer + shift) / outer if outer > 0 else 1.0)
            out = np.where(a <= half, inner, np.where(a <= knot, mid, far))
        else:
            inner = a / (1.0 - shift / half)
            mid = a + shift
            far = edge - (edge - a) * (outer / (outer + shift) if outer > 0 else 1.0)
            out = np.where(a <= half - shift, inner, np.where(a <= knot - shift, mid, far))
        return u * out

    def to_physical(self, p: np.ndarray) -> np.ndarray:
        """Mesh nodes (3, n) from grid space to the physical body (sloped sidewalls)."""
        p = np.array(p, dtype=float)
        z = p[2].copy()
        for axis in (0, 1):
            p[axis] = self.map_lateral(p[axis], z, axis)
        return p

    def to_grid(self, points: np.ndarray) -> np.ndarray:
        """Points (n, 3) back to grid space (inverse of :meth:`to_physical`)."""
        pts = np.array(points, dtype=float)
        for axis in (0, 1):
            pts[:, axis] = self.map_lateral(pts[:, axis], pts[:, 2], axis, inverse=True)
        return pts

    @property
    def nlayers(self) -> int:
        """Grown layers (the first liner's region is ``nlayers + 1``)."""
        return len(self.interfaces) - 1

    @property
    def top(self) -> float:
        return float(self.interfaces[-1])

    @property
    def patterned(self) -> bool:
        return self.half_width is not None

    @property
    def etch_floor(self) -> float:
        return self.top - self.etch_depth


@dataclass(frozen=True)
class GridSpacing:
    """Element sizes (nm) used to grade the grid.

    Attributes
    ----------
    size : float
        Largest element size in the layers (vertically) and in the mesa.
    edge_size : float
        Element size at interfaces, the etch floor and the sidewalls.
    growth : float
        Largest ratio between neighbouring element sizes.
    lateral_cap : float
        Largest lateral element size inside the mesa.
    refine : float
        Uniform refinement factor already applied to the sizes and the
        grading (``mesh.refine``); also divides the far-field caps.
    """

    size: float
    edge_size: float
    growth: float
    lateral_cap: float
    refine: float = 1.0


def graded_coordinates(a: float, b: float, h_a: float | None, h_b: float | None,
                       cap: float, growth: float) -> np.ndarray:
    """Grid coordinates on [a, b] graded from sizes h_a, h_b at the ends.

    The target size grows linearly with distance from each refined end,
    h(s) = min(cap, h_a + (growth - 1) (s - a), h_b + (growth - 1) (b - s)),
    which makes neighbouring elements differ by about the factor ``growth``;
    nodes equidistribute the integral of 1/h.

    Parameters
    ----------
    a, b : float
        Segment ends (nm), a < b.
    h_a, h_b : float or None
        Element size at each end; None for no refinement there.
    cap : float
        Largest element size.
    growth : float
        Ratio between neighbouring element sizes (> 1).

    Returns
    -------
    ndarray
        Increasing coordinates with exactly a and b at the ends.
    """
    length = b - a
    if not length > 0:
        raise MeshError(f"empty grid segment [{a}, {b}]")
    cap = min(cap, length)
    s = np.linspace(a, b, 4001)
    h = np.full_like(s, cap)
    if h_a is not None:
        h = np.minimum(h, h_a + (growth - 1.0) * (s - a))
    if h_b is not None:
        h = np.minimum(h, h_b + (growth - 1.0) * (b - s))
    inv = 1.0 / h
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(s))])
    n = max(1, int(np.ceil(cum[-1] - 1e-6)))
    targets = np.linspace(0.0, cum[-1], n + 1)
    x = np.interp(targets, cum, s)
    x[0], x[-1] = a, b
    return x


def join_segments(breaks, sizes_at_breaks, caps, growth) -> np.ndarray:
    """Concatenate graded segments between consecutive break points.

    Parameters
    ----------
    breaks : sequence of float
        Increasing break points (nm); each becomes a grid coordinate.
    sizes_at_breaks : sequence of float or None
        Element size wanted at each break point (None: no refinement).
    caps : sequence of float
        Largest element size in each segment (len(breaks) - 1 entries).
    growth : float
    """
    breaks = np.asarray(breaks, dtype=float)
    parts = []
    for k in range(len(breaks) - 1):
        seg = graded_coordinates(breaks[k], breaks[k + 1], sizes_at_breaks[k],
                                 sizes_at_breaks[k + 1], caps[k], growth)
        parts.append(seg if k == 0 else seg[1:])
    x = np.concatenate(parts)
    span = x[-1] - x[0]
    if np.min(np.diff(x)) <= MIN_RELATIVE_SPACING * span:
        raise MeshError("grid has a zero-width element; two geometric planes nearly coincide")
    return x


def _unique_breaks(values, span):
    """Sorted break points with near-duplicates (round-off) merged."""
    v = np.sort(np.asarray(values, dtype=float))
    keep = np.concatenate([[True], np.diff(v) > 1e-7 * span])
    return v[keep]


def axis_coordinates(geom: StackLayout, spacing: GridSpacing):
    """Graded grid coordinates along x, y and z for a stack layout.

    Always the whole body's grid (a mirrored axis gets a grid line at 0);
    :func:`mesastrain.mesh.structured.build_stack_mesh` meshes the non-negative
    side of mirrored axes.
    """
    growth = spacing.growth
    he = spacing.edge_size
    # --- z: substrate bottom, interfaces, etch floor, top
    zb = [-geom.substrate_depth, *geom.interfaces]
    if geom.patterned and geom.etch_depth > 0:
        zb.append(geom.etch_floor)
    for t_top, _, t_floor in geom.liners:
        zb += [geom.top + t_top, geom.etch_floor + t_floor]
    span_z = geom.top + (geom.liners[-1][0] if geom.liners else 0.0) + geom.substrate_depth
    zb = _unique_breaks(zb, span_z)
    zsize = [None] + [he] * (len(zb) - 1)
    zcap = []
    for k in range(len(zb) - 1):
        if zb[k + 1] <= 0.0 + 1e-9 * span_z:   # inside the substrate
            zcap.append(max(spacing.size, (zb[k + 1] - zb[k]) / 4 / spacing.refine))
        else:
            zcap.append(spacing.size)
    zs = join_segments(zb, zsize, zcap, growth)

    def lateral(half, margin, mirrored):
        if half is None:  # blanket column: two elements across
            m = geom.margin
            return np.array([-m, 0.0, m])
        cap_out = max(spacing.lateral_cap, margin / 3 / spacing.refine)
        if margin <= MIN_RELATIVE_SPACING * half:   # the feature fills the cell
            full = join_segments([-half, half], [None, None], [spacing.lateral_cap], growth)
        else:
            outer = half + margin
            bands = [half + side for _, side, _ in geom.liners]     # liner sidewall planes
            right = [half, *bands, outer]
            breaks = [-b for b in right[::-1]] + right
            sizes = [None] + [he] * (2 * len(right) - 2) + [None]
            caps = ([cap_out] + [spacing.lateral_cap] * len(bands)
                    + [spacing.lateral_cap] + [spacing.lateral_cap] * len(bands) + [cap_out])
            full = join_segments(breaks, sizes, caps, growth)
        if not mirrored:
            return full
        # a mirrored model uses the full model's grid with 0 added as a grid line, so that
        # half, quarter and full models share their elements away from the centre line;
        # build_stack_mesh meshes only the non-negative side
        tol = 1e-9 * full[-1]
        pos = np.concatenate([[0.0], full[full > tol]])
        return np.concatenate([-pos[:0:-1], pos])

    mx, my = geom.margins
    return (lateral(geom.half_width, mx, 0 in geom.mirrors),
            lateral(geom.half_length, my, 1 in geom.mirrors), zs)


def keep_mask(geom: StackLayout, xs, ys, zs) -> np.ndarray:
    """Cells of the full grid that belong to the body (not etched away), liners included."""
    xm, ym, zm = (0.5 * (g[1:] + g[:-1]) for g in (xs, ys, zs))
    return cell_regions(geom, xm[:, None, None], ym[None, :, None], zm[None, None, :]) >= 0


def cell_regions(geom: StackLayout, x, y, z) -> np.ndarray:
    """Region of grid cells from their centres in grid space (broadcast); -1 etched away.

    0 the substrate, i layer i (by height), ``nlayers + k`` liner k: the cells
    outside the feature that lie within liner k's square offset of the feature
    (``|x| <= half + side_k``, ``|y| <= half + side_k``, ``z <= top + top_k``)
    or below its floor plane (``z <= floor + floor_k``), and within no lower
    liner. ``y`` may be None (a stripe's section).
    """
    x, z = np.asarray(x, dtype=float), np.asarray(z, dtype=float)
    ay = None if y is None else np.abs(np.asarray(y, dtype=float))
    layer = np.searchsorted(np.asarray(geom.interfaces[:-1]), z, side="right").astype(np.int32)
    region = np.broadcast_to(layer, np.broadcast_shapes(x.shape, z.shape, np.shape(ay))).copy()
    if not (geom.patterned and geom.etch_depth > 0):
        return region

    def within(extra):
        ok = np.abs(x) <= geom.half_width + extra
        return ok if ay is None else ok & (ay <= geom.half_length + extra)

    above = z > geom.etch_floor
    gone = np.broadcast_to((above & ~within(0.0)) | (z > geom.top), region.shape)
    region[gone] = -1
    for k in range(len(geom.liners), 0, -1):   # top liner first: lower ones overwrite
        t_top, side, t_floor = geom.liners[k - 1]
        inside = (z <= geom.etch_floor + t_floor) | (within(side) & (z <= geom.top + t_top))
        region[gone & inside] = geom.nlayers + k
    return region

