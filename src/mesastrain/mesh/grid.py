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
    span_z = geom.top + geom.substrate_depth
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
            full = join_segments([-outer, -half, half, outer], [None, he, he, None],
                                 [cap_out, spacing.lateral_cap, cap_out], growth)
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
    """Cells of the full grid that belong to the body (not etched away)."""
    xm, ym, zm = (0.5 * (g[1:] + g[:-1]) for g in (xs, ys, zs))
    keep = np.ones((len(xm), len(ym), len(zm)), dtype=bool)
    if geom.patterned and geom.etch_depth > 0:
        outside = (np.abs(xm)[:, None] > geom.half_width) | (np.abs(ym)[None, :] > geom.half_length)
        keep &= ~(outside[:, :, None] & (zm > geom.etch_floor)[None, None, :])
    return keep

