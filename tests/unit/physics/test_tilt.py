"""Layer tilt, the blanket closed form on low-symmetry wafers, and the miscut rotation."""

import numpy as np
import pytest

from mesastrain.errors import OrientationError
from mesastrain.physics.crystal import (
    miscut_rotation,
    plane_normal,
    sample_frame,
    strain_to_voigt,
    voigt_to_strain,
)
from mesastrain.physics.materials import get_material
from mesastrain.physics.thinfilm import biaxial_response
from mesastrain.physics.tilt import (
    ARCSEC_PER_RAD,
    blanket_gradient,
    lattice_rotation,
    nagai_tilt,
    plane_tilt,
)


def _direct_6x6(C, e0):
    """Blanket film by one 6x6 solve: in-plane total strain 0 (Voigt 1, 2, 6), sigma_3,4,5 = 0.

    Unknown: the Voigt elastic strain v (engineering shear). Rows 0, 1, 5 fix the in-plane
    elastic strain to minus the eigenstrain; rows 2, 3, 4 are sigma_zz = sigma_yz = sigma_xz
    = 0 (the traction-free surface). Independent of biaxial_response's partitioning.
    """
    A = np.zeros((6, 6))
    b = np.zeros(6)
    e0v = strain_to_voigt(e0)
    for r in (0, 1, 5):
        A[r, r] = 1.0
        b[r] = -e0v[r]
    A[2:5] = C[2:5]
    v = np.linalg.solve(A, b)
    return C @ v, voigt_to_strain(v)


def _ingaas_311():
    fr = sample_frame((3, 1, 1), (0, 1, -1))
    film, sub = get_material("InGaAs", 0.1), get_material("GaAs")
    C = fr.stiffness_to_sample(film.stiffness)
    e0 = fr.to_sample((film.a - sub.a) / film.a * np.eye(3))
    return C, e0


def test_biaxial_response_against_a_direct_6x6_solve_on_311():
    # the closed form used by every low-symmetry check below, cross-checked once by a direct
    # solve of the six conditions (in-plane strain locked, sigma_i3 = 0; REFERENCES.md,
    # "Film shear on low-symmetry wafers" [D])
    C, e0 = _ingaas_311()
    s_cf, e_cf = biaxial_response(C, -e0[0, 0], -e0[1, 1], -e0[0, 1])
    sv, e_dir = _direct_6x6(C, e0)
    assert np.allclose(s_cf[[0, 1, 0], [0, 1, 1]], sv[[0, 1, 5]], rtol=1e-12, atol=1e-12)
    assert np.allclose(e_cf, e_dir, rtol=1e-12, atol=1e-15)
    # on (311) the film shears: eps_yz is a sizeable fraction of the misfit
    assert abs(e_cf[1, 2]) > 0.1 * abs(e0[0, 0])


def test_lattice_rotation_is_the_shear_to_first_order():
    # omega = (-e_yz, e_xz, 0) of the total strain for small strain (skew part of du/dX)
    C, e0 = _ingaas_311()
    H, _ = blanket_gradient(C, e0)
    omega = lattice_rotation(H, e0)
    e_xz, e_yz = H[0, 2] / 2, H[1, 2] / 2
    assert omega == pytest.approx([-e_yz, e_xz, 0.0], rel=1e-2, abs=1e-9)
    # (311) with x = [01-1]: the (01-1) mirror leaves only eps_yz, a rotation about x
    assert abs(omega[0]) * ARCSEC_PER_RAD > 100.0 and abs(omega[1]) < 1e-12


def test_plane_tilt_reduces_to_nagai_without_shear():
    # Nagai, J. Appl. Phys. 45, 3789 (1974) [from memory]: tan(d_alpha) = (da_perp/a) tan(alpha)
    # holds when the layer distorts only along the surface normal: an isotropic film
    # (no shear coupling on any plane). Our plane tilt is exact in the deformation; the two
    # agree to O(alpha^2) relative.
    E, nu = 130.0, 0.28
    lam, mu = E * nu / ((1 + nu) * (1 - 2 * nu)), E / (2 * (1 + nu))
    C = np.zeros((6, 6))
    C[:3, :3] = lam
    C[[0, 1, 2], [0, 1, 2]] += 2 * mu
    C[[3, 4, 5], [3, 4, 5]] = mu
    e0 = 0.008 * np.eye(3)
    H, _ = blanket_gradient(C, e0)
    assert abs(H[0, 2]) < 1e-15 and abs(H[1, 2]) < 1e-15
    for alpha_deg in (0.5, 2.0, 4.0, 6.0):
        a = np.radians(alpha_deg)
        ang, axis = plane_tilt(H, [np.sin(a), 0.0, np.cos(a)])
        assert ang == pytest.approx(nagai_tilt(H[2, 2], a), rel=2 * a ** 2)
        assert axis == pytest.approx([0, 1, 0])   # the planes tilt further from the surface
    # exact orientation: planes parallel to the coherent interface stay parallel
    C311, e311 = _ingaas_311()
    ang, _ = plane_tilt(blanket_gradient(C311, e311)[0], [0, 0, 1])
    assert ang < 1e-14


def test_miscut_rotation_tilts_the_normal_toward_the_direction():
    fr = sample_frame((0, 0, 1), (1, -1, 0))
    M = miscut_rotation(fr, 4.0, (1, 1, 0))
    tilted = fr.tilted(M, 4.0)
    z = tilted.R[2]                      # sample z in cube axes
    assert np.degrees(np.arccos(z @ [0, 0, 1])) == pytest.approx(4.0, rel=1e-12)
    t = np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    assert z == pytest.approx(np.cos(np.radians(4)) * np.array([0, 0, 1.0])
                              + np.sin(np.radians(4)) * t)
    assert tilted.R @ tilted.R.T == pytest.approx(np.eye(3))
    # "off toward (111)" on (001): the direction is projected onto the surface -> [110]
    assert miscut_rotation(fr, 4.0, (1, 1, 1)) == pytest.approx(M)
    # hexagonal: c-plane 0.3 deg off toward m = [1-100]
    gan = get_material("GaN")
    fh = sample_frame((0, 0, 0, 1), (2, -1, -1, 0), "hexagonal", gan.c_over_a)
    Mh = miscut_rotation(fh, 0.3, (1, -1, 0, 0), gan.c_over_a)
    zc = fh.tilted(Mh, 0.3).R[2]
    n = plane_normal((0, 0, 0, 1), "hexagonal", gan.c_over_a)
    assert np.degrees(np.arccos(zc @ n / np.linalg.norm(n))) == pytest.approx(0.3)


@pytest.mark.parametrize("angle, toward, fragment", [
    (16.0, (1, 1, 0), "between 0 and 15"), (-1.0, (1, 1, 0), "between 0 and 15"),
    (4.0, (0, 0, 1), "from the normal"), (4.0, (1, 1, 4), "from the normal")])
def test_miscut_rotation_rejects_bad_input(angle, toward, fragment):
    fr = sample_frame((0, 0, 1), (1, -1, 0))
    with pytest.raises(OrientationError, match=fragment):
        miscut_rotation(fr, angle, toward)
