"""Mirror symmetry of a patterned stack: when a half or quarter model is exact.

A mirror plane x = 0 (or y = 0) of the sample frame may be used to model only
x >= 0 (y >= 0) when BOTH

* the geometry is unchanged by the reflection (a centred rectangle, disk or
  stripe; a polygon whose reflected outline is itself; a periodic cell centred
  on the feature), and
* every region's material is unchanged: its sample-frame stiffness C' and
  eigenstrain e' satisfy C' = M C M M M and e' = M e M for the reflection
  M = diag(-1, 1, 1) (or diag(1, -1, 1)).

Then the solution is mirror symmetric too (uniqueness of the linear elastic
solution, common practice), and on the plane the normal displacement vanishes
and the shear tractions vanish: a roller condition. The reflection of a
fourth-order tensor flips the sign of every component with an odd number of
indices along the mirrored axis, so the test is that those components vanish.
A cubic crystal on (001) with x along <100> or <110> has both mirrors; with x
along [310] it has neither (its (310) and (-130) planes are not mirrors of
the cubic point group m-3m); a (111) wafer with x = [1-10] has the mirror
x = 0 only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.physics.crystal import voigt_to_full

#: Relative size of an odd component (of the largest stiffness entry) still taken as zero.
MIRROR_RTOL = 1e-9

AXIS_NAMES = ("x", "y", "z")


@dataclass(frozen=True)
class Symmetry:
    """Which mirror planes the model uses.

    Attributes
    ----------
    mirrors : tuple of int
        Axes (0 = x, 1 = y) whose plane through the feature centre is used as
        a mirror: only the non-negative side is modelled.
    requested : str
        ``"auto"`` or ``"full"``.
    reason : str
        One line saying why (for the summary).
    """

    mirrors: tuple
    requested: str
    reason: str

    @property
    def name(self) -> str:
        """``"full"``, ``"half"`` or ``"quarter"``."""
        return {0: "full", 1: "half", 2: "quarter"}[len(self.mirrors)]

    def to_dict(self) -> dict:
        return {"symmetry": self.name,
                "mirror_planes": [f"{AXIS_NAMES[a]} = 0" for a in self.mirrors],
                "requested": self.requested, "reason": self.reason}


def _odd_mask4(axis: int) -> np.ndarray:
    """(3,3,3,3) bool: components with an odd number of indices equal to ``axis``."""
    idx = np.indices((3, 3, 3, 3))
    return ((idx == axis).sum(axis=0) % 2) == 1


def material_has_mirror(stiffness_sample: np.ndarray, eigenstrain_sample: np.ndarray,
                        axis: int) -> bool:
    """True if every region is unchanged by the reflection of ``axis``.

    Parameters
    ----------
    stiffness_sample : array (n, 6, 6)
        Voigt stiffness per region, sample frame (any unit).
    eigenstrain_sample : array (n, 3, 3)
        Eigenstrain per region, sample frame.
    axis : int
        0 (mirror x = 0) or 1 (mirror y = 0).
    """
    C = voigt_to_full(np.asarray(stiffness_sample, dtype=float))
    scale = np.max(np.abs(C)) or 1.0
    if np.max(np.abs(C[..., _odd_mask4(axis)])) > MIRROR_RTOL * scale:
        return False
    e = np.asarray(eigenstrain_sample, dtype=float)
    odd2 = np.zeros((3, 3), dtype=bool)
    odd2[axis, :] = odd2[:, axis] = True
    odd2[axis, axis] = False
    escale = max(np.max(np.abs(e)), 1e-300)
    return bool(np.max(np.abs(e[..., odd2])) <= MIRROR_RTOL * escale)


def polygon_has_mirror(vertices, axis: int, rtol: float = 1e-9) -> bool:
    """True if the reflected polygon (about the plane ``axis`` = 0) is the same polygon.

    A simple polygon is fixed by its set of edges, so the test compares the
    sets of (unordered) edges before and after reflection.
    """
    v = np.asarray(vertices, dtype=float)
    scale = float(np.max(np.abs(v))) or 1.0
    q = scale * rtol * 10

    def edges(p):
        keys = np.round(p / q).astype(np.int64)
        nxt = np.roll(keys, -1, axis=0)
        return {tuple(sorted((tuple(a), tuple(b)))) for a, b in zip(keys, nxt)}

    r = v.copy()
    r[:, axis] = -r[:, axis]
    return edges(v) == edges(r)


def geometry_mirrors(pattern) -> tuple:
    """Mirror axes of the pattern's geometry (the cell is centred on the feature)."""
    shape = pattern.shape
    if shape in ("rectangle", "disk"):
        return (0, 1)
    if shape == "stripe":
        return (0,)
    if shape == "polygon":
        return tuple(a for a in (0, 1) if polygon_has_mirror(pattern.vertices, a))
    return ()


def decide(case, layers, extra_eigenstrain: bool = False) -> Symmetry:
    """Choose the mirror planes of the model.

    Parameters
    ----------
    case : Case
    layers : list of LayerModel
    extra_eigenstrain : bool
        An extra per-element eigenstrain source is active (its field need not
        be symmetric): solve the whole feature.

    Returns
    -------
    Symmetry
    """
    requested = getattr(case.pattern, "symmetry", None) or "auto"
    if not case.pattern.patterned:
        return Symmetry((), requested, "blanket stack (a periodic column: side faces tied)")
    if requested == "full":
        return Symmetry((), requested, "the case asks for the full model (pattern.symmetry)")
    if extra_eigenstrain:
        return Symmetry((), requested, "an extra eigenstrain source is active; solved whole")
    geo = geometry_mirrors(case.pattern)
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    mat = tuple(a for a in (0, 1) if material_has_mirror(stiff, eig, a))
    use = tuple(a for a in geo if a in mat)
    parts = []
    for a in (0, 1):
        if case.pattern.shape == "stripe" and a == 1:
            continue
        plane = f"{AXIS_NAMES[a]} = 0"
        if a in use:
            parts.append(f"{plane}: geometry and crystal symmetric")
        elif a not in geo:
            parts.append(f"{plane}: geometry not symmetric")
        else:
            parts.append(f"{plane}: crystal orientation not symmetric")
    if case.pattern.shape == "mesh":
        parts = ["imported mesh: solved as given"]
    return Symmetry(use, requested, "; ".join(parts))


def reflect_points(points: np.ndarray, mirrors: tuple) -> tuple[np.ndarray, np.ndarray]:
    """Map points into the modelled part (non-negative side of each mirror).

    Returns
    -------
    mapped : ndarray (npts, 3)
    signs : ndarray (npts, 3)
        +1 or -1 per axis: the reflection S = diag(signs) taking the mapped
        point back to the original.
    """
    pts = np.array(points, dtype=float)
    signs = np.ones_like(pts)
    for a in mirrors:
        neg = pts[:, a] < 0
        signs[neg, a] = -1.0
        pts[neg, a] = -pts[neg, a]
    return pts, signs


def reflect_tensors(t: np.ndarray, signs: np.ndarray) -> np.ndarray:
    """T -> S T S for tensors (npts, 3, 3) with S = diag(signs)."""
    return t * signs[:, :, None] * signs[:, None, :]
