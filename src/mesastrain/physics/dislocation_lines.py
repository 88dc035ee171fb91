"""Straight dislocations as objects: line, Burgers vector, axes and character.

The :class:`Dislocation` record and what follows from its geometry alone
(:func:`dislocation_axes`, edge and screw parts, character angle), its
construction from crystal indices (:func:`dislocation_from_crystal`), and the
isotropic Voigt stiffness, stress-to-strain helpers and the isotropic Volterra
field (:func:`isotropic_fields`) used by the field solutions in :mod:`mesastrain.physics.dislocations` (conventions there).
Lengths in nm; lattice constants in Angstrom.

Conventions
-----------
Dislocation axes (:func:`dislocation_axes`)
    m along the edge part of b, n = xi x m (the glide-plane normal of a
    non-screw dislocation), xi the line sense; (m, n, xi) is right-handed. For
    a pure screw dislocation m is an arbitrary direction normal to xi.
Burgers vector sign
    ``b`` is the closure of the displacement on a loop taken right-handed about
    ``xi``: b = (loop integral of du), i.e. the displacement increases by b
    when one circles the line counter-clockwise seen from the tip of xi. With
    xi = +z and b = +x the extra half-plane lies at y > 0 (Hirth & Lothe 1982,
    ch. 3). matscipy's and atomman's Stroh solvers use the same sense.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError, MesastrainError, OrientationError
from mesastrain.physics.crystal import (
    Frame,
    direction_vector,
    stress_to_voigt,
    voigt_to_strain,
)

__all__ = [
    "Dislocation",
    "dislocation_from_crystal",
    "dislocation_axes",
    "edge_component",
    "screw_component",
    "character_angle",
    "isotropic_stiffness",
    "strain_from_stress",
    "isotropic_fields",
]


# --------------------------------------------------------------------------
# input checks
# --------------------------------------------------------------------------
def _vector3(v, what: str) -> np.ndarray:
    try:
        arr = np.asarray(v, dtype=float)
    except (TypeError, ValueError):
        raise OrientationError(f"{what} must be 3 numbers, got {v!r}") from None
    if arr.shape != (3,) or not np.all(np.isfinite(arr)):
        raise OrientationError(f"{what} must be 3 finite numbers, got {v!r}")
    return arr


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


def _points(points) -> np.ndarray:
    try:
        x = np.asarray(points, dtype=float)
    except (TypeError, ValueError):
        raise MesastrainError("points must be a numeric array of shape (..., 3) in nm") from None
    if x.ndim == 0 or x.shape[-1] != 3:
        raise MesastrainError(f"points must have shape (..., 3) (x, y, z in nm), got shape {x.shape}")
    return x


def _check_isotropic(mu, nu) -> tuple[float, float]:
    try:
        mu, nu = float(mu), float(nu)
    except (TypeError, ValueError):
        raise MaterialError(f"mu and nu must be numbers, got mu={mu!r}, nu={nu!r}") from None
    if not (np.isfinite(mu) and mu > 0):
        raise MaterialError(f"shear modulus mu must be > 0, got {mu!r}")
    if not (-1.0 < nu < 0.5):
        raise MaterialError(f"Poisson ratio nu must lie in (-1, 0.5), got {nu!r}")
    return mu, nu


def _check_stiffness(c6) -> np.ndarray:
    try:
        c = np.asarray(c6, dtype=float)
    except (TypeError, ValueError):
        raise MaterialError("stiffness must be a 6x6 Voigt matrix of numbers") from None
    if c.shape != (6, 6) or not np.all(np.isfinite(c)):
        raise MaterialError(f"stiffness must be a finite 6x6 Voigt matrix, got shape {c.shape}")
    scale = np.max(np.abs(c))
    if scale == 0 or np.max(np.abs(c - c.T)) > 1e-8 * scale:
        raise MaterialError("stiffness must be a non-zero symmetric 6x6 Voigt matrix")
    if np.linalg.eigvalsh(c).min() <= 1e-12 * scale:
        raise MaterialError("stiffness must be positive definite (a stable crystal)")
    return c


def _check_core(core_radius) -> float:
    r = float(core_radius)
    if not (np.isfinite(r) and r >= 0):
        raise MesastrainError(f"core_radius must be >= 0 nm, got {core_radius!r}")
    return r


# --------------------------------------------------------------------------
# the dislocation
# --------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Dislocation:
    """A straight dislocation line.

    Attributes
    ----------
    xi : ndarray (3,)
        Unit line direction (line sense), in the working frame. Normalised on
        construction.
    b : ndarray (3,)
        Burgers vector, nm, in the same frame (closure of the displacement on a
        loop right-handed about ``xi``; see the module docstring).
    point : ndarray (3,), default: origin
        Any point on the line, nm.

    Raises
    ------
    OrientationError
        A zero or non-finite line direction or Burgers vector, or a bad point.
    """

    xi: np.ndarray
    b: np.ndarray
    point: np.ndarray = (0.0, 0.0, 0.0)

    def __post_init__(self):
        xi = _vector3(self.xi, "line direction xi")
        b = _vector3(self.b, "Burgers vector b")
        point = _vector3(self.point, "point on the line")
        nxi = np.linalg.norm(xi)
        if nxi == 0:
            raise OrientationError("line direction xi must not be zero")
        if np.linalg.norm(b) == 0:
            raise OrientationError("Burgers vector b must not be zero")
        object.__setattr__(self, "xi", _readonly(xi / nxi))
        object.__setattr__(self, "b", _readonly(b))
        object.__setattr__(self, "point", _readonly(point))

    def __repr__(self) -> str:
        f = lambda v: "[" + ", ".join(f"{x:.6g}" for x in v) + "]"  # noqa: E731
        return (f"Dislocation(xi={f(self.xi)}, b={f(self.b)} nm, point={f(self.point)} nm, "
                f"character={character_angle(self):.4g} deg)")

    def shifted(self, offset) -> Dislocation:
        """The same dislocation translated by ``offset`` (nm)."""
        return Dislocation(self.xi, self.b, self.point + _vector3(offset, "offset"))


def dislocation_from_crystal(line, burgers, a: float, frame: Frame, *,
                             burgers_fraction: float = 1.0, point=(0.0, 0.0, 0.0),
                             c_over_a: float | None = None) -> Dislocation:
    """Build a dislocation from crystal directions and a sample frame.

    Parameters
    ----------
    line : sequence of int
        Line direction [uvw] (or [UVTW] for hexagonal crystals), crystal indices.
    burgers : sequence of int
        Direction of the Burgers vector, crystal indices.
    a : float
        Lattice constant a, Angstrom.
    frame : Frame
        Sample frame from :func:`mesastrain.physics.crystal.sample_frame`; its
        ``system`` decides how indices are read.
    burgers_fraction : float, default: 1.0
        b = burgers_fraction * a * [uvw] (for hexagonal crystals [uvw] is on
        the lattice basis a1, a2, c). E.g. 0.5 for b = a/2 [101], 1/3 for
        b = a/3 [11-20].
    point : sequence of 3 float, default: origin
        A point on the line, nm, sample frame.
    c_over_a : float, optional
        Required for hexagonal crystals.

    Returns
    -------
    Dislocation
        Line direction and Burgers vector (nm) in the sample frame.

    Examples
    --------
    The 60-degree misfit dislocation of a Si(001) interface, line [1-10],
    b = a/2 [101]:

    >>> from mesastrain.physics.crystal import sample_frame
    >>> fr = sample_frame((0, 0, 1), (1, 1, 0))
    >>> d = dislocation_from_crystal((1, -1, 0), (1, 0, 1), 5.431, fr, burgers_fraction=0.5)
    >>> round(character_angle(d), 6)
    60.0
    """
    system = frame.system
    xi_c = direction_vector(line, system, c_over_a, what="line direction")
    b_c = direction_vector(burgers, system, c_over_a, what="Burgers vector")
    try:
        a = float(a)
        frac = float(burgers_fraction)
    except (TypeError, ValueError):
        raise MaterialError(f"lattice constant a and burgers_fraction must be numbers, "
                            f"got {a!r}, {burgers_fraction!r}") from None
    if not (np.isfinite(a) and a > 0):
        raise MaterialError(f"lattice constant a must be > 0 Angstrom, got {a!r}")
    if not (np.isfinite(frac) and frac != 0):
        raise OrientationError(f"burgers_fraction must be a non-zero number, got {burgers_fraction!r}")
    R = np.asarray(frame.R, dtype=float)
    xi = R @ (xi_c / np.linalg.norm(xi_c))
    b = R @ (frac * (a / 10.0) * b_c)
    return Dislocation(xi=xi, b=b, point=point)


def dislocation_axes(d: Dislocation) -> np.ndarray:
    """Right-handed dislocation axes (m, n, xi) as the rows of a 3x3 matrix.

    Parameters
    ----------
    d : Dislocation

    Returns
    -------
    ndarray (3, 3)
        Row 0: m, unit vector along the edge part of b. Row 1: n = xi x m,
        the glide-plane normal. Row 2: xi. For a pure screw dislocation m is
        the unit vector normal to xi closest to the working axis least aligned
        with xi. ``axes @ v`` writes a vector in (m, n, xi) components.
    """
    xi = d.xi
    be = d.b - (d.b @ xi) * xi
    nb = np.linalg.norm(be)
    if nb > 1e-12 * np.linalg.norm(d.b):
        m = be / nb
    else:
        e = np.eye(3)[np.argmin(np.abs(xi))]
        m = e - (e @ xi) * xi
        m /= np.linalg.norm(m)
    n = np.cross(xi, m)
    return np.array([m, n, xi])


def screw_component(d: Dislocation) -> float:
    """Screw component b . xi of the Burgers vector, nm (signed)."""
    return float(d.b @ d.xi)


def edge_component(d: Dislocation, direction=None):
    """Edge part of the Burgers vector.

    Parameters
    ----------
    d : Dislocation
    direction : sequence of 3 float, optional
        A direction in the working frame (normalised here).

    Returns
    -------
    ndarray (3,) or float
        Without ``direction``: the vector b - (b . xi) xi, nm. With it: the
        signed projection of that vector on the direction, nm. For a misfit
        dislocation in an interface with normal N, ``direction = N x xi`` gives
        the component that relaxes the in-plane mismatch (b cos(lambda) of
        Matthews & Blakeslee 1974).
    """
    be = d.b - (d.b @ d.xi) * d.xi
    if direction is None:
        return be
    e = _vector3(direction, "direction")
    ne = np.linalg.norm(e)
    if ne == 0:
        raise OrientationError("direction must not be zero")
    return float(be @ e / ne)


def character_angle(d: Dislocation) -> float:
    """Angle between b and the line sense xi, degrees in [0, 180].

    0 (or 180) for screw, 90 for edge, 60 for the 60-degree dislocation.
    """
    c = d.b @ d.xi / np.linalg.norm(d.b)
    return float(np.degrees(np.arccos(np.clip(c, -1.0, 1.0))))


# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------
def isotropic_stiffness(mu: float, nu: float) -> np.ndarray:
    """Voigt stiffness of an isotropic medium.

    Parameters
    ----------
    mu : float
        Shear modulus (any unit, e.g. GPa), > 0.
    nu : float
        Poisson ratio, in (-1, 0.5).

    Returns
    -------
    ndarray (6, 6)
        C11 = lambda + 2 mu, C12 = lambda, C44 = mu with
        lambda = 2 mu nu / (1 - 2 nu); same unit as ``mu``.
    """
    mu, nu = _check_isotropic(mu, nu)
    lam = 2 * mu * nu / (1 - 2 * nu)
    c = np.zeros((6, 6))
    c[:3, :3] = lam
    c[np.arange(3), np.arange(3)] = lam + 2 * mu
    c[np.arange(3, 6), np.arange(3, 6)] = mu
    return c


def strain_from_stress(stress: np.ndarray, c6: np.ndarray) -> np.ndarray:
    """Strain tensors of given stress tensors (Hooke's law inverted).

    Parameters
    ----------
    stress : array (..., 3, 3)
        Stress, same unit as ``c6``.
    c6 : array (6, 6)
        Voigt stiffness in the frame of ``stress``.

    Returns
    -------
    ndarray (..., 3, 3)
        Dimensionless (tensor) strain.
    """
    c = _check_stiffness(c6)
    s = np.linalg.inv(c)
    ev = np.einsum("IJ,...J->...I", s, stress_to_voigt(stress))
    return voigt_to_strain(ev)


def _core_mask(x_loc: np.ndarray, core_radius: float) -> np.ndarray:
    """True where a point is on the line or inside the core radius."""
    r2 = x_loc[..., 0] ** 2 + x_loc[..., 1] ** 2
    return r2 <= core_radius ** 2


# --------------------------------------------------------------------------
# isotropic (Volterra) fields
# --------------------------------------------------------------------------
def _isotropic_local(X, Y, be, bs, mu, nu):
    """Stress and displacement in the (m, n, xi) axes (Hirth & Lothe 1982, ch. 3)."""
    r2 = X * X + Y * Y
    r4 = r2 * r2
    D = mu * be / (2 * np.pi * (1 - nu))
    s = np.zeros(X.shape + (3, 3))
    sxx = -D * Y * (3 * X * X + Y * Y) / r4
    syy = D * Y * (X * X - Y * Y) / r4
    sxy = D * X * (X * X - Y * Y) / r4
    sxz = -mu * bs / (2 * np.pi) * Y / r2
    syz = mu * bs / (2 * np.pi) * X / r2
    s[..., 0, 0] = sxx
    s[..., 1, 1] = syy
    s[..., 2, 2] = nu * (sxx + syy)
    s[..., 0, 1] = s[..., 1, 0] = sxy
    s[..., 0, 2] = s[..., 2, 0] = sxz
    s[..., 1, 2] = s[..., 2, 1] = syz
    theta = np.arctan2(Y, X)
    u = np.empty(X.shape + (3,))
    u[..., 0] = be / (2 * np.pi) * (theta + X * Y / (2 * (1 - nu) * r2))
    u[..., 1] = -be / (2 * np.pi) * ((1 - 2 * nu) / (4 * (1 - nu)) * np.log(r2)
                                     + (X * X - Y * Y) / (4 * (1 - nu) * r2))
    u[..., 2] = bs / (2 * np.pi) * theta
    return s, u


def isotropic_fields(d: Dislocation, points, mu: float, nu: float, *,
                     core_radius: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Stress and displacement of a straight dislocation in an isotropic medium.

    The edge part b_e = b - (b.xi) xi and the screw part (b.xi) xi are
    superposed (Volterra solution, Hirth & Lothe 1982, ch. 3): in the axes
    (m, n, xi) of :func:`dislocation_axes`, with D = mu b_e / (2 pi (1 - nu)),
    sigma_mm = -D y(3x^2 + y^2)/r^4, sigma_nn = D y(x^2 - y^2)/r^4,
    sigma_mn = D x(x^2 - y^2)/r^4, sigma_xixi = nu (sigma_mm + sigma_nn),
    sigma_m,xi = -mu b_s y / (2 pi r^2), sigma_n,xi = mu b_s x / (2 pi r^2);
    the displacement is the Hull & Bacon form.

    Parameters
    ----------
    d : Dislocation
        Line, Burgers vector (nm) and a point on the line (nm).
    points : array (..., 3)
        Field points, nm, same frame as ``d``.
    mu : float
        Shear modulus (unit of the returned stress, e.g. GPa).
    nu : float
        Poisson ratio, in (-1, 0.5).
    core_radius : float, default: 0.0
        Points closer than this to the line (nm) get NaN.

    Returns
    -------
    stress : ndarray (..., 3, 3)
        Unit of ``mu``, in the frame of ``points``.
    displacement : ndarray (..., 3)
        nm, up to a rigid translation; discontinuous by b across the cut
        {n.x = 0, m.x < 0}.
    """
    mu, nu = _check_isotropic(mu, nu)
    x = _points(points)
    rc = _check_core(core_radius)
    axes = dislocation_axes(d)
    xl = (x - d.point) @ axes.T
    be = float(np.linalg.norm(edge_component(d)))
    bs = screw_component(d)
    with np.errstate(divide="ignore", invalid="ignore"):
        s_loc, u_loc = _isotropic_local(xl[..., 0], xl[..., 1], be, bs, mu, nu)
    bad = _core_mask(xl, rc)
    s_loc[bad] = np.nan
    u_loc[bad] = np.nan
    stress = np.einsum("ai,bj,...ab->...ij", axes, axes, s_loc)
    return stress, u_loc @ axes
