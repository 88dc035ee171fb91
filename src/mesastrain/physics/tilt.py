"""Tilt of a coherent layer's lattice relative to the substrate lattice (what X-ray diffraction sees).

A coherent blanket layer shares the substrate's in-plane lattice: relative to
the substrate lattice its displacement gradient has no in-plane derivative, so

    H = du/dX = [[0, 0, 2 e_xz], [0, 0, 2 e_yz], [0, 0, e_zz]]

with e the layer's **total** strain relative to the substrate lattice (elastic
strain plus eigenstrain, sample frame). On wafers without a mirror plane
normal to x or y ((113), (211), (311), vicinal (001), ...) the traction-free
surface (sigma_i3 = 0) forces e_xz, e_yz != 0: the layer's cell is sheared
(monoclinic) and its lattice turns relative to the substrate's
(:func:`lattice_rotation`). The lattice planes parallel to the interface stay
parallel (F maps in-plane vectors to themselves), so on an exactly oriented
wafer the symmetric (hkl) reflection shows no tilt; the planes inclined to the
surface tilt (:func:`plane_tilt`), which for a vicinal wafer is the tilt of
the nominal (hkl) planes that a symmetric scan measures. In the limit without
shear this is the tilt of Nagai, J. Appl. Phys. 45, 3789 (1974) [from memory]:
tan(d_alpha) = ((a_perp,L - a_S)/a_S) tan(alpha) (:func:`nagai_tilt`).

Angles are returned in arcsec (1 rad = 206264.806 arcsec).
"""

from __future__ import annotations

import numpy as np

from mesastrain.errors import MesastrainError
from mesastrain.physics.thinfilm import biaxial_response

#: Arcseconds per radian (180 * 3600 / pi).
ARCSEC_PER_RAD = 180.0 * 3600.0 / np.pi

__all__ = ["ARCSEC_PER_RAD", "blanket_gradient", "gradient_from_strain", "lattice_rotation",
           "nagai_tilt", "plane_tilt"]


def gradient_from_strain(total_strain: np.ndarray) -> np.ndarray:
    """Displacement gradient of a coherent blanket layer from its total strain.

    Parameters
    ----------
    total_strain : array (..., 3, 3)
        Strain relative to the substrate lattice (elastic + eigenstrain),
        tensor shear, sample frame (z = wafer normal). Its in-plane part is
        zero for a coherent layer and is ignored.

    Returns
    -------
    H : array (..., 3, 3)
        du_i/dX_j: only the z column, (2 e_xz, 2 e_yz, e_zz), is non-zero
        (u_i depends on z alone, no rigid rotation about x or y of the substrate).
    """
    e = np.asarray(total_strain, dtype=float)
    H = np.zeros_like(e)
    H[..., 0, 2] = 2.0 * e[..., 0, 2]
    H[..., 1, 2] = 2.0 * e[..., 1, 2]
    H[..., 2, 2] = e[..., 2, 2]
    return H


def blanket_gradient(stiffness_sample: np.ndarray, eigenstrain_sample: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Closed-form blanket state of a coherent layer: displacement gradient and stress.

    Parameters
    ----------
    stiffness_sample : array (6, 6)
        Voigt stiffness in the sample frame, GPa.
    eigenstrain_sample : array (3, 3)
        Stress-free strain relative to the substrate lattice, sample frame.

    Returns
    -------
    H : array (3, 3)
        du/dX relative to the substrate lattice (:func:`gradient_from_strain`).
    stress : array (3, 3)
        GPa; sigma_i3 = 0.

    Notes
    -----
    The in-plane total strain is zero (locked to the substrate), so the
    in-plane elastic strain is minus the in-plane eigenstrain;
    :func:`mesastrain.physics.thinfilm.biaxial_response` gives the rest.
    """
    e0 = np.asarray(eigenstrain_sample, dtype=float)
    stress, elastic = biaxial_response(stiffness_sample, -e0[0, 0], -e0[1, 1], -e0[0, 1])
    return gradient_from_strain(elastic + e0), stress


def lattice_rotation(H: np.ndarray, eigenstrain_sample: np.ndarray | None = None) -> np.ndarray:
    """Rotation vector of the layer lattice relative to the substrate lattice, radians.

    Parameters
    ----------
    H : array (3, 3)
        Displacement gradient relative to the substrate lattice.
    eigenstrain_sample : array (3, 3), optional
        The layer's stress-free strain relative to the substrate lattice
        (symmetric: it carries no rotation).

    Returns
    -------
    omega : array (3,)
        Axis times angle (sample frame) of the rotation R of the polar
        decomposition F_e = R U, F_e = (I + H)(I + e0)^-1 the elastic
        deformation of the layer lattice. To first order omega =
        (-e_yz, e_xz, 0) with e the total strain.
    """
    from scipy.linalg import polar
    from scipy.spatial.transform import Rotation

    F = np.eye(3) + np.asarray(H, dtype=float)
    if eigenstrain_sample is not None:
        F = F @ np.linalg.inv(np.eye(3) + np.asarray(eigenstrain_sample, dtype=float))
    if np.linalg.det(F) <= 0:
        raise MesastrainError("lattice_rotation: the deformation gradient is not invertible")
    R, _ = polar(F)
    return Rotation.from_matrix(R).as_rotvec()


def plane_tilt(H: np.ndarray, plane_normal_sample: np.ndarray) -> tuple[float, np.ndarray]:
    """Tilt of the lattice planes with a given normal, layer against substrate.

    Parameters
    ----------
    H : array (3, 3)
        Displacement gradient of the layer relative to the substrate lattice.
    plane_normal_sample : array (3,)
        Normal of the substrate's planes in the sample frame (any length).

    Returns
    -------
    angle : float
        Angle between the layer's and the substrate's plane normals, radians
        (a plane normal maps as m' ~ F^-T m, F = I + H).
    axis : array (3,)
        Unit axis m x m' of the tilt (zeros when there is none).
    """
    m = np.asarray(plane_normal_sample, dtype=float)
    m = m / np.linalg.norm(m)
    mp = np.linalg.solve((np.eye(3) + np.asarray(H, dtype=float)).T, m)
    mp = mp / np.linalg.norm(mp)
    c = np.cross(m, mp)
    angle = float(np.arctan2(np.linalg.norm(c), float(m @ mp)))
    n = np.linalg.norm(c)
    return angle, (c / n if n > 1e-14 else np.zeros(3))


def nagai_tilt(perp_strain: float, miscut_rad: float) -> float:
    """Layer tilt on a vicinal substrate after Nagai (1974) [from memory], radians.

    tan(d_alpha) = ((a_perp,L - a_S)/a_S) tan(alpha).

    Parameters
    ----------
    perp_strain : float
        (a_perp,L - a_S)/a_S: the layer's out-of-plane spacing relative to the
        substrate's (the total strain e_zz relative to the substrate lattice).
    miscut_rad : float
        Miscut angle alpha, radians.

    Returns
    -------
    float
        d_alpha, radians; positive when the layer planes tilt further from the
        surface than the substrate's (a_perp,L > a_S).
    """
    return float(np.arctan(perp_strain * np.tan(miscut_rad)))
