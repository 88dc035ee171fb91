"""A straight dislocation in a brick mesh: a Volterra line as an eigenstrain sheet.

A straight dislocation is put into the finite-element model as a plastic
eigenstrain on a thin sheet over its slipped half-plane (the Volterra cut),
so that free surfaces, sidewalls and the other layers give its image field
without further work. The closed-form infinite-medium field of the same
lines (:mod:`mesastrain.physics.dislocations`) is the check of the
representation and the overlay of :mod:`mesastrain.derived.misfit`.

Representation (eigenstrain sheet)
----------------------------------
Slip a body along a half-plane S bounded by the dislocation line, displace
the side the unit normal nu points to by J relative to the other side and
weld the faces: the result is a dislocation. In the finite-element model
the jump is smeared over a sheet of thickness w centred on S, which carries
the plastic eigenstrain

    eps* = sym(J (x) nu) / w,

a stress-free shear (and stretch) of the sheet that offsets its two faces by
J. Outside the sheet the field is the field of the dislocation, to
O((w / r)^2) at distance r from the line; inside the sheet the stress differs
from the Volterra stress. With the line sense xi and the half-plane running
from the line in the unit direction d (normal to xi), nu = xi x d and
J = -b, where b is the Burgers vector in the convention of
:mod:`mesastrain.physics.dislocations` (displacement jump +b across
{n.x = 0, m.x < 0}, right-handed about xi).

Here d must be a grid axis (+-x, +-y or +-z) of a mesh of axis-aligned
bricks; the line may have any direction normal to d. Each element gets the
volume fraction of the sheet it contains (computed exactly for the brick),
so the sheet need not coincide with element faces, the total Burgers vector
is exact and the line keeps its position (the first moment of the sheet's
cross-section). The default sheet thickness is the width of the element
column at the line, measured along nu: the finest sheet the mesh can carry.

Units: lengths nm; eigenstrain dimensionless.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MesastrainError
from mesastrain.physics.dislocations import Dislocation

__all__ = [
    "VolterraLine",
    "brick_bounds",
    "lines_eigenstrain",
    "sheet_eigenstrain",
    "sheet_width",
]


#: Tolerance (relative to the element size) for "a point lies on a grid plane".
_ON_PLANE = 1e-9


# --------------------------------------------------------------------------
# one line and its slipped half-plane
# --------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class VolterraLine:
    """A straight dislocation with the slipped half-plane (Volterra cut) that represents it.

    Attributes
    ----------
    dislocation : Dislocation
        Line sense xi, Burgers vector b (nm) and a point on the line (nm),
        all in the model (sample) frame.
    half_plane : ndarray (3,)
        Unit direction d from the line into the slipped half-plane; one of
        the grid axes +-x, +-y, +-z, normal to xi.
    width : float or None
        Sheet thickness w, nm; None uses the width of the element column at
        the line (:func:`sheet_width`).
    label : str
        A name for reports.
    """
    dislocation: Dislocation
    half_plane: np.ndarray
    width: float | None = None
    label: str = ""

    def __post_init__(self):
        d = np.asarray(self.half_plane, dtype=float)
        if d.shape != (3,) or not np.all(np.isfinite(d)):
            raise MesastrainError(f"half-plane direction must be 3 finite numbers, got "
                                  f"{self.half_plane!r}")
        axis = int(np.argmax(np.abs(d)))
        if np.linalg.norm(d) == 0 or np.count_nonzero(np.abs(d) > 1e-12 * np.abs(d).max()) != 1:
            raise MesastrainError(f"half-plane direction must be a grid axis (+-x, +-y or +-z), "
                                  f"got {list(np.round(d, 6))}")
        d = np.sign(d[axis]) * np.eye(3)[axis]
        if abs(d @ self.dislocation.xi) > 1e-9:
            raise MesastrainError("the half-plane direction must be normal to the line direction "
                                  f"(d.xi = {d @ self.dislocation.xi:.3g})")
        if self.width is not None and not (np.isfinite(self.width) and self.width > 0):
            raise MesastrainError(f"sheet width must be > 0 nm, got {self.width!r}")
        d.setflags(write=False)
        object.__setattr__(self, "half_plane", d)

    @property
    def axis(self) -> int:
        """Index (0, 1, 2) of the grid axis the slipped half-plane runs along."""
        return int(np.argmax(np.abs(self.half_plane)))

    @property
    def normal(self) -> np.ndarray:
        """Unit normal nu = xi x d of the slipped half-plane."""
        return np.cross(self.dislocation.xi, self.half_plane)

    @property
    def jump(self) -> np.ndarray:
        """Offset J (nm) of the nu side of the half-plane relative to the other: -b."""
        return -self.dislocation.b

    def plastic_strain(self, width: float) -> np.ndarray:
        """Eigenstrain sym(J (x) nu) / w inside a sheet of thickness w (nm), (3, 3)."""
        g = np.outer(self.jump, self.normal) / width
        return 0.5 * (g + g.T)


# --------------------------------------------------------------------------
# sheets on brick meshes
# --------------------------------------------------------------------------
def brick_bounds(mesh) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper corners of the elements of a mesh of axis-aligned bricks.

    Parameters
    ----------
    mesh : skfem.MeshHex
        Hexahedra whose faces are normal to the axes (structured grids).

    Returns
    -------
    lo, hi : ndarray (nelems, 3)
        nm.
    """
    xe = mesh.p[:, mesh.t]                      # (3, 8, nel)
    return xe.min(axis=1).T, xe.max(axis=1).T


def _ramp2(t):
    t = np.maximum(t, 0.0)
    return 0.5 * t * t


def _below_fraction(s, smin, p, q):
    """Fraction of a rectangle where nu.x < s.

    The rectangle has sides dx, dy; p = |nu_1| dx, q = |nu_2| dy and smin is
    the smallest nu.x over its corners. Exact piecewise-quadratic area
    (difference of ramps); linear when one side projects to nearly nothing.
    """
    t = s - smin
    pq = p * q
    tot = p + q
    lin = np.clip(t / np.where(tot > 0, tot, 1.0), 0.0, 1.0)
    thin = pq <= 1e-12 * tot * tot
    with np.errstate(divide="ignore", invalid="ignore"):
        quad = (_ramp2(t) - _ramp2(t - p) - _ramp2(t - q) + _ramp2(t - p - q)) / pq
    return np.where(thin, lin, np.clip(quad, 0.0, 1.0))


def _sheet_fractions(line: VolterraLine, lo: np.ndarray, hi: np.ndarray,
                     width: float) -> np.ndarray:
    """Volume fraction of each brick inside the sheet (thickness ``width``)."""
    k = line.axis
    P = line.dislocation.point
    ext = hi - lo
    # along d: the part of [lo_k, hi_k] on the slipped side of the line
    if line.half_plane[k] > 0:
        along = (hi[:, k] - np.maximum(lo[:, k], P[k])) / ext[:, k]
    else:
        along = (np.minimum(hi[:, k], P[k]) - lo[:, k]) / ext[:, k]
    along = np.clip(along, 0.0, 1.0)
    # across: the slab |nu.(x - P)| <= w/2 in the cross-section normal to d
    i, j = [a for a in range(3) if a != k]
    nu = line.normal
    s0 = nu @ P
    # an axis with nu_a = 0 does not enter (and may be unbounded: cross-section meshes)
    smin = np.zeros(len(lo))
    pq = []
    for a in (i, j):
        if abs(nu[a]) > 1e-12:
            smin = smin + np.where(nu[a] >= 0, lo[:, a], hi[:, a]) * nu[a]
            pq.append(abs(nu[a]) * ext[:, a])
        else:
            pq.append(np.zeros(len(lo)))
    p, q = pq
    across = (_below_fraction(s0 + 0.5 * width, smin, p, q)
              - _below_fraction(s0 - 0.5 * width, smin, p, q))
    return along * np.clip(across, 0.0, 1.0)


def sheet_width(line: VolterraLine, lo: np.ndarray, hi: np.ndarray) -> float:
    """Default sheet thickness: width along nu of the element column at the line.

    The elements touching the line on its slipped side are found; their
    extent along nu (sum of |nu_a| times the brick side a) is averaged.

    Parameters
    ----------
    line : VolterraLine
    lo, hi : ndarray (nelems, 3)
        From :func:`brick_bounds`.

    Returns
    -------
    float
        nm.

    Raises
    ------
    MesastrainError
        The line does not touch the mesh.
    """
    P = line.dislocation.point
    k = line.axis
    ext = hi - lo
    fin = np.where(np.isfinite(ext), ext, 0.0)
    tol = _ON_PLANE * fin.max(axis=1)
    near = np.all((lo - tol[:, None] <= P) & (P <= hi + tol[:, None]), axis=1)
    # on the slipped side of the line
    mid = 0.5 * (lo[:, k] + hi[:, k])
    near &= (mid - P[k]) * line.half_plane[k] > 0
    if not np.any(near):
        raise MesastrainError(f"the dislocation line through {np.round(P, 6).tolist()} nm does "
                              "not pass through the meshed body")
    nu = np.abs(line.normal)
    return float(np.mean(np.where(nu > 1e-12, fin[near], 0.0) @ nu))


def sheet_eigenstrain(line: VolterraLine, lo: np.ndarray, hi: np.ndarray,
                      width: float | None = None) -> np.ndarray:
    """Per-element plastic eigenstrain of one dislocation's sheet.

    Parameters
    ----------
    line : VolterraLine
    lo, hi : ndarray (nelems, 3)
        Element bounds (:func:`brick_bounds`), nm.
    width : float, optional
        Sheet thickness, nm; default ``line.width`` or :func:`sheet_width`.

    Returns
    -------
    ndarray (nelems, 3, 3)
        Sample-frame eigenstrain (dimensionless), zero away from the sheet.
    """
    w = width or line.width or sheet_width(line, lo, hi)
    frac = _sheet_fractions(line, lo, hi, w)
    return frac[:, None, None] * line.plastic_strain(w)


def lines_eigenstrain(lines, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Sum of :func:`sheet_eigenstrain` over several lines, (nelems, 3, 3)."""
    out = np.zeros((lo.shape[0], 3, 3))
    for line in lines:
        out += sheet_eigenstrain(line, lo, hi)
    return out
