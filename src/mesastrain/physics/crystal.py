"""Crystal directions, sample frames and tensor rotation.

Conventions
-----------
Crystal Cartesian axes
    Cubic crystals: the cube axes [100], [010], [001].
    Hexagonal and trigonal crystals (hexagonal setting): x along a1 = [2-1-10],
    z along c = [0001], y = z cross x (so y is along [01-10]).
    Isotropic materials: any Cartesian axes; indices are read as Cartesian
    directions, as for cubic crystals.
Sample frame
    z is the wafer normal (+z points up through the layers), x is the crystal
    direction given as ``x_axis`` (it must lie in the surface), y = z cross x.
Rotation matrix
    ``Frame.R`` has the sample axes as its **rows**, written in crystal Cartesian
    coordinates. A vector transforms as v_sample = R @ v_crystal, a second-order
    tensor as T'_ij = R_ia R_jb T_ab and a fourth-order tensor as
    C'_ijkl = R_ia R_jb R_kc R_ld C_abcd. The same convention as
    ``matscipy.elasticity.rotate_elastic_constants`` and pymatgen's
    ``ElasticTensor.rotate``.
Voigt notation
    Index order 1..6 = 11, 22, 33, 23, 13, 12. Stiffness matrices are the plain
    components C_IJ = C_ijkl. Strain vectors use **engineering** shear,
    gamma_23 = 2 eps_23 etc., so that sigma_I = C_IJ eps_J holds with the same
    C_IJ; stress vectors carry the tensor shear components unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from mesastrain.errors import OrientationError

#: Voigt index pairs in the order 11, 22, 33, 23, 13, 12.
VOIGT_PAIRS = ((0, 0), (1, 1), (2, 2), (1, 2), (0, 2), (0, 1))

_VOIGT_INDEX = np.empty((3, 3), dtype=int)
for _I, (_i, _j) in enumerate(VOIGT_PAIRS):
    _VOIGT_INDEX[_i, _j] = _VOIGT_INDEX[_j, _i] = _I

SYSTEMS = ("cubic", "hexagonal", "trigonal", "isotropic")
#: Symmetry system of a material (mesastrain.physics.elastic) -> the system its Miller indices
#: are read in. Tetragonal, orthorhombic and anisotropic crystals: indices are read as
#: Cartesian directions in the crystal axes (exact for the axes themselves, [001], [100], ...).
INDEX_SYSTEMS = {"cubic": "cubic", "hexagonal": "hexagonal", "trigonal": "trigonal",
                 "isotropic": "isotropic", "tetragonal": "isotropic",
                 "orthorhombic": "isotropic", "anisotropic": "isotropic"}
#: Systems whose Miller indices are Cartesian directions (the rest use the hexagonal basis).
_CARTESIAN = ("cubic", "isotropic")


# --------------------------------------------------------------------------
# Voigt <-> full tensors
# --------------------------------------------------------------------------
def voigt_to_full(c6: np.ndarray) -> np.ndarray:
    """Expand a 6x6 Voigt stiffness (plain components) to the 3x3x3x3 tensor.

    Parameters
    ----------
    c6 : array (..., 6, 6)
        Voigt stiffness, any unit.

    Returns
    -------
    array (..., 3, 3, 3, 3)
        C_ijkl with all minor and major symmetries.
    """
    c6 = np.asarray(c6, dtype=float)
    idx = _VOIGT_INDEX
    return c6[..., idx[:, :, None, None], idx[None, None, :, :]]


def full_to_voigt(c: np.ndarray) -> np.ndarray:
    """Contract a 3x3x3x3 stiffness tensor to its 6x6 Voigt matrix.

    Parameters
    ----------
    c : array (..., 3, 3, 3, 3)

    Returns
    -------
    array (..., 6, 6)
        C_IJ = C_ijkl with I = (ij), J = (kl) in the order 11, 22, 33, 23, 13, 12.
    """
    c = np.asarray(c, dtype=float)
    i = np.array([p[0] for p in VOIGT_PAIRS])
    j = np.array([p[1] for p in VOIGT_PAIRS])
    return c[..., i[:, None], j[:, None], i[None, :], j[None, :]]


def strain_to_voigt(eps: np.ndarray) -> np.ndarray:
    """Strain tensor (..., 3, 3) to a Voigt vector (..., 6) with engineering shear."""
    eps = np.asarray(eps, dtype=float)
    return np.stack(
        [eps[..., 0, 0], eps[..., 1, 1], eps[..., 2, 2],
         2 * eps[..., 1, 2], 2 * eps[..., 0, 2], 2 * eps[..., 0, 1]], axis=-1)


def voigt_to_strain(v: np.ndarray) -> np.ndarray:
    """Voigt strain vector (..., 6) with engineering shear to a tensor (..., 3, 3)."""
    v = np.asarray(v, dtype=float)
    f = np.array([1.0, 1.0, 1.0, 0.5, 0.5, 0.5])
    return (v * f)[..., _VOIGT_INDEX]


def stress_to_voigt(sig: np.ndarray) -> np.ndarray:
    """Stress tensor (..., 3, 3) to a Voigt vector (..., 6) (tensor shear)."""
    sig = np.asarray(sig, dtype=float)
    return np.stack([sig[..., i, j] for i, j in VOIGT_PAIRS], axis=-1)


def voigt_to_stress(v: np.ndarray) -> np.ndarray:
    """Voigt stress vector (..., 6) to a symmetric tensor (..., 3, 3)."""
    return np.asarray(v, dtype=float)[..., _VOIGT_INDEX]


# --------------------------------------------------------------------------
# rotation
# --------------------------------------------------------------------------
def rotate_tensor2(t: np.ndarray, R: np.ndarray) -> np.ndarray:
    """Rotate second-order tensors: T'_ij = R_ia R_jb T_ab.

    Parameters
    ----------
    t : array (..., 3, 3)
    R : array (3, 3)
        Rows are the new axes written in the old axes.
    """
    return np.einsum("ia,jb,...ab->...ij", R, R, t, optimize=True)


def rotate_tensor4(c: np.ndarray, R: np.ndarray) -> np.ndarray:
    """Rotate fourth-order tensors: C'_ijkl = R_ia R_jb R_kc R_ld C_abcd."""
    return np.einsum("ia,jb,kc,ld,...abcd->...ijkl", R, R, R, R, c, optimize=True)


def bond_matrix(R: np.ndarray) -> np.ndarray:
    """Bond's 6x6 stress transformation matrix for the rotation ``R``.

    With it, sigma'_V = M sigma_V for Voigt stress vectors and the Voigt
    stiffness rotates as C' = M C M^T (Bond 1943; Auld, *Acoustic Fields and
    Waves in Solids*, 1973, ch. 3).
    """
    R = np.asarray(R, dtype=float)
    M = np.empty((6, 6))
    for I, (i, j) in enumerate(VOIGT_PAIRS):
        for J, (k, l) in enumerate(VOIGT_PAIRS):
            if J < 3:
                M[I, J] = R[i, k] * R[j, l]
            else:
                M[I, J] = R[i, k] * R[j, l] + R[i, l] * R[j, k]
    return M


def rotate_voigt_stiffness(c6: np.ndarray, R: np.ndarray) -> np.ndarray:
    """Rotate a 6x6 Voigt stiffness into new axes with the Bond matrix."""
    M = bond_matrix(R)
    return M @ np.asarray(c6, dtype=float) @ M.T


# --------------------------------------------------------------------------
# Miller indices and sample frames
# --------------------------------------------------------------------------
def _as_indices(idx, what: str) -> np.ndarray:
    try:
        arr = np.asarray(idx, dtype=float)
    except (TypeError, ValueError):
        raise OrientationError(f"{what} must be a list of integers, got {idx!r}") from None
    if arr.ndim != 1 or arr.size not in (3, 4) or not np.all(np.isfinite(arr)):
        raise OrientationError(
            f"{what} must have 3 (cubic or hexagonal) or 4 (hexagonal Miller-Bravais) "
            f"integer entries, got {idx!r}")
    if np.any(np.abs(arr - np.round(arr)) > 1e-9):
        raise OrientationError(f"{what} must be integers (Miller indices), got {idx!r}")
    if not np.any(arr):
        raise OrientationError(f"{what} must not be all zero, got {idx!r}")
    return np.round(arr)


def _hex_basis(c_over_a: float) -> np.ndarray:
    """Rows a1, a2, c of the hexagonal lattice in crystal Cartesian axes (a = 1)."""
    return np.array([[1.0, 0.0, 0.0],
                     [-0.5, np.sqrt(3.0) / 2.0, 0.0],
                     [0.0, 0.0, float(c_over_a)]])


def _check_system(system: str, c_over_a: float | None) -> None:
    if system not in SYSTEMS:
        raise OrientationError(f"crystal system must be one of {SYSTEMS}, got {system!r}")
    if system not in _CARTESIAN and (c_over_a is None or not c_over_a > 0):
        raise OrientationError(f"a {system} crystal needs c/a > 0")


def direction_vector(uvw, system: str = "cubic", c_over_a: float | None = None,
                     what: str = "direction") -> np.ndarray:
    """Crystal direction [uvw] or [UVTW] as a Cartesian vector (not normalised).

    Parameters
    ----------
    uvw : sequence of 3 or 4 integers
        Cubic: [u, v, w]. Hexagonal: three-index [u, v, w] on the basis a1, a2, c
        or four-index Miller-Bravais [U, V, T, W] with T = -(U + V).
    system : {"cubic", "hexagonal", "trigonal", "isotropic"}
    c_over_a : float
        Lattice ratio, required for hexagonal crystals.
    """
    _check_system(system, c_over_a)
    d = _as_indices(uvw, what)
    if system in _CARTESIAN:
        if d.size != 3:
            raise OrientationError(f"{what} of a cubic crystal takes 3 indices, got {list(uvw)!r}")
        return d
    basis = _hex_basis(c_over_a)
    if d.size == 4:
        U, V, T, W = d
        if abs(T + U + V) > 1e-9:
            raise OrientationError(
                f"{what} {list(uvw)!r}: in Miller-Bravais notation the third index must be "
                f"-(first + second) = {-(U + V):g}")
        # r = U a1 + V a2 + T a3 + W c with a3 = -(a1 + a2)
        return (U - T) * basis[0] + (V - T) * basis[1] + W * basis[2]
    return d @ basis


def plane_normal(hkl, system: str = "cubic", c_over_a: float | None = None,
                 what: str = "plane") -> np.ndarray:
    """Normal of the lattice plane (hkl) or (hkil) as a Cartesian vector.

    For cubic crystals the normal of (hkl) is the direction [hkl]. For hexagonal
    crystals it is h b1 + k b2 + l b3 with the reciprocal basis of a1, a2, c;
    four-index input requires i = -(h + k).
    """
    _check_system(system, c_over_a)
    n = _as_indices(hkl, what)
    if system in _CARTESIAN:
        if n.size != 3:
            raise OrientationError(f"{what} of a cubic crystal takes 3 indices, got {list(hkl)!r}")
        return n
    if n.size == 4:
        h, k, i, l = n
        if abs(h + k + i) > 1e-9:
            raise OrientationError(
                f"{what} {list(hkl)!r}: in Miller-Bravais notation the third index must be "
                f"-(first + second) = {-(h + k):g}")
        n = np.array([h, k, l])
    recip = np.linalg.inv(_hex_basis(c_over_a)).T  # rows b1, b2, b3 with a_i . b_j = delta_ij
    return n @ recip


@dataclass(frozen=True)
class Frame:
    """A sample frame written in a crystal's Cartesian axes.

    Attributes
    ----------
    R : array (3, 3)
        Rows are the unit vectors of sample x, y, z in crystal Cartesian axes.
    normal, x_axis : tuple of int
        The Miller indices it was built from.
    system : str
        ``"cubic"`` or ``"hexagonal"``.
    """

    R: np.ndarray
    normal: tuple
    x_axis: tuple
    system: str
    miscut_deg: float = 0.0

    def tilted(self, M: np.ndarray, angle_deg: float) -> Frame:
        """The frame of a vicinal wafer: sample axes turned by the rotation ``M``.

        Parameters
        ----------
        M : array (3, 3)
            Rotation written in this (exact) sample frame that takes the exact
            normal to the vicinal one (:func:`miscut_rotation`).
        angle_deg : float
            The miscut angle, degrees (kept for the summary).

        Returns
        -------
        Frame
            Rows ``R' = M^T R``: the new sample axes ``R^T M e_i`` in crystal
            coordinates. Every frame of the stack turned by the same ``M``
            keeps the epitaxial relation between the layers.
        """
        R = np.asarray(M, dtype=float).T @ self.R
        return Frame(R=R, normal=self.normal, x_axis=self.x_axis, system=self.system,
                     miscut_deg=float(angle_deg))

    def to_sample(self, t: np.ndarray) -> np.ndarray:
        """Second-order tensor(s) from crystal to sample axes."""
        return rotate_tensor2(t, self.R)

    def to_crystal(self, t: np.ndarray) -> np.ndarray:
        """Second-order tensor(s) from sample to crystal axes."""
        return rotate_tensor2(t, self.R.T)

    def stiffness_to_sample(self, c6: np.ndarray) -> np.ndarray:
        """6x6 Voigt stiffness from crystal to sample axes."""
        return full_to_voigt(rotate_tensor4(voigt_to_full(c6), self.R))


def sample_frame(normal, x_axis, system: str = "cubic",
                 c_over_a: float | None = None) -> Frame:
    """Build the sample frame of a wafer from Miller indices.

    Parameters
    ----------
    normal : sequence of int
        Plane (hkl) or (hkil) of the surface; sample +z is its normal.
    x_axis : sequence of int
        Crystal direction [uvw] or [UVTW] along sample +x; must lie in the surface.
    system : {"cubic", "hexagonal", "trigonal", "isotropic"}
    c_over_a : float, optional
        Required for hexagonal crystals.

    Returns
    -------
    Frame

    Raises
    ------
    OrientationError
        Zero or non-integer indices, wrong index count, or an x_axis that is
        not perpendicular to the normal.
    """
    n = plane_normal(normal, system, c_over_a, what="normal")
    d = direction_vector(x_axis, system, c_over_a, what="x_axis")
    z = n / np.linalg.norm(n)
    x = d / np.linalg.norm(d)
    cosang = float(z @ x)
    if abs(cosang) > 1e-9:
        angle = np.degrees(np.arccos(np.clip(abs(cosang), 0, 1)))
        raise OrientationError(
            f"x_axis {list(x_axis)!r} is not in the surface plane {list(normal)!r}: it makes "
            f"{90 - angle:.3g} deg with the surface; choose a direction perpendicular to the normal")
    y = np.cross(z, x)
    R = np.array([x, y, z])
    return Frame(R=R, normal=tuple(int(v) for v in np.round(normal)),
                 x_axis=tuple(int(v) for v in np.round(x_axis)), system=system)


#: Largest miscut angle accepted, degrees (vicinal wafers; larger tilts are other planes).
MISCUT_MAX_DEG = 15.0
#: Smallest angle between a miscut direction and the exact normal, degrees.
MISCUT_MIN_DIRECTION_DEG = 45.0


def miscut_rotation(frame: Frame, angle_deg: float, toward, c_over_a: float | None = None
                    ) -> np.ndarray:
    """Rotation (in the exact sample frame) that tilts the wafer normal by a miscut.

    A wafer "(001) 4 deg off toward [110]" has its surface normal tilted from
    the exact [001] by 4 deg toward [110] (common practice in epitaxy). The
    direction is projected onto the exact surface plane, so a direction out
    of the plane, as in "(001) off toward (111)" with [111] at 54.7 deg from
    [001], gives the usual tilt toward the projection [110].

    Parameters
    ----------
    frame : Frame
        The exact frame (Miller indices of the wafer).
    angle_deg : float
        Miscut angle, degrees, 0 to :data:`MISCUT_MAX_DEG`.
    toward : sequence of int
        Crystal direction [uvw] or [UVTW] toward which the normal is tilted;
        at least :data:`MISCUT_MIN_DIRECTION_DEG` from the exact normal.
    c_over_a : float, optional
        Required for hexagonal crystals.

    Returns
    -------
    M : array (3, 3)
        Rotation about the in-plane axis z x t by the miscut angle (Rodrigues),
        written in the exact sample frame; ``M @ e_z`` is the vicinal normal,
        ``cos(a) e_z + sin(a) t`` with t the unit projection of ``toward``.

    Raises
    ------
    OrientationError
        Angle out of range, or a direction too close to the normal.
    """
    a = float(angle_deg)
    if not (np.isfinite(a) and 0.0 <= a <= MISCUT_MAX_DEG):
        raise OrientationError(f"miscut angle must be between 0 and {MISCUT_MAX_DEG:g} deg "
                               f"(a vicinal wafer), got {a:g} deg")
    t = frame.R @ direction_vector(toward, frame.system, c_over_a, what="miscut direction")
    t = t / np.linalg.norm(t)
    off = np.degrees(np.arccos(np.clip(abs(t[2]), 0.0, 1.0)))
    if off < MISCUT_MIN_DIRECTION_DEG:
        raise OrientationError(
            f"miscut direction {list(toward)!r} is {off:.3g} deg from the normal "
            f"{list(frame.normal)!r}; give a direction in (or near, at least "
            f"{MISCUT_MIN_DIRECTION_DEG:g} deg from the normal) the surface plane")
    t[2] = 0.0
    t /= np.linalg.norm(t)
    k = np.array([-t[1], t[0], 0.0])              # e_z x t, the tilt axis
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    r = np.radians(a)
    return np.eye(3) + np.sin(r) * K + (1.0 - np.cos(r)) * (K @ K)


def format_indices(idx, brackets: str = "[]") -> str:
    """Miller indices as text, negatives with a minus sign: ``[1-10]``."""
    parts = []
    for v in idx:
        f = Fraction(float(v)).limit_denominator(1000)
        parts.append(str(f))
    sep = "" if all(abs(float(v)) < 10 for v in idx) else ","
    return brackets[0] + sep.join(parts) + brackets[1]
