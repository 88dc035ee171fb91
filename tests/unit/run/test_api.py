"""The lower-level Python API on tetrahedral meshes (gmsh), against closed forms."""

import numpy as np
import pytest

from mesastrain import api

gmsh = pytest.importorskip("gmsh")
meshio = pytest.importorskip("meshio")


def _start():
    gmsh.initialize(readConfigFiles=False)
    gmsh.option.setNumber("General.Terminal", 0)
    for name in ("Mesh.MeshSizeFromPoints", "Mesh.MeshSizeExtendFromBoundary",
                 "Mesh.MeshSizeFromCurvature"):
        gmsh.option.setNumber(name, 0)


def sphere_octant_mesh(path, a=1.0, L=6.0, h_in=0.12, h_out=1.0, slope=0.2):
    """One octant of a sphere of radius a (group 1) in a cube of side L (group 2)."""
    _start()
    try:
        occ = gmsh.model.occ
        box = occ.addBox(0, 0, 0, L, L, L)
        sph = occ.addSphere(0, 0, 0, a)
        occ.fragment([(3, box)], [(3, sph)])
        occ.synchronize()
        outside = [(3, t) for _, t in gmsh.model.getEntities(3)
                   if min(occ.getCenterOfMass(3, t)) < 0]
        occ.remove(outside, recursive=True)
        occ.synchronize()
        for _, t in gmsh.model.getEntities(3):
            inner = np.linalg.norm(occ.getCenterOfMass(3, t)) < a
            gmsh.model.addPhysicalGroup(3, [t], 1 if inner else 2, "inclusion" if inner
                                        else "matrix")
        gmsh.model.mesh.setSizeCallback(
            lambda dim, tag, x, y, z, lc: min(h_out, h_in + slope * max(np.sqrt(x * x + y * y
                                                                                + z * z) - a, 0)))
        gmsh.model.mesh.generate(3)
        gmsh.write(str(path))
    finally:
        gmsh.finalize()


def cube_mesh(path, L=10.0, h=3.0):
    _start()
    try:
        gmsh.model.occ.addBox(0, 0, 0, L, L, L)
        gmsh.model.occ.synchronize()
        gmsh.model.addPhysicalGroup(3, [1], 5, "block")
        gmsh.model.mesh.setSizeCallback(lambda *args: h)
        gmsh.model.mesh.generate(3)
        gmsh.write(str(path))
    finally:
        gmsh.finalize()


@pytest.fixture(scope="module")
def eshelby(tmp_path_factory):
    path = tmp_path_factory.mktemp("eshelby") / "octant.msh"
    sphere_octant_mesh(path)
    E, nu, eps = 100.0, 0.25, 0.01
    C = api.isotropic_stiffness(E, nu)
    # octant: the three coordinate planes are mirror planes (rollers); the outer faces free
    sol = api.solve(path, {1: api.Region(stiffness=C, eigenstrain=eps), 2: api.Region(stiffness=C)},
                    supports=[(0, 0, 0.0), (1, 1, 0.0), (2, 2, 0.0)], order=2)
    return sol, E, nu, eps


@pytest.mark.slow
def test_eshelby_interior_strain_is_uniform(eshelby):
    # Eshelby, Proc. R. Soc. A 241, 376 (1957); REFERENCES.md section 4: inside a spherical
    # inclusion with dilatational eigenstrain eps*, eps = (1+nu)/(3(1-nu)) eps* delta_ij
    sol, E, nu, eps = eshelby
    gamma = (1 + nu) / (3 * (1 - nu))
    pts = np.array([[0.2, 0.2, 0.2], [0.5, 0.1, 0.3], [0.1, 0.6, 0.2], [0.05, 0.05, 0.8]])
    strain, _, _, region = sol.sample(pts)
    total = strain + eps * np.eye(3)          # elastic + eigenstrain inside
    assert np.all(region == 1)
    for t in total:
        assert np.diag(t) == pytest.approx([gamma * eps] * 3, rel=0.02)
        assert np.max(np.abs(t - np.diag(np.diag(t)))) < 0.02 * gamma * eps


@pytest.mark.slow
def test_eshelby_exterior_radial_stress_decays_as_cube(eshelby):
    # outside: sigma_rr = -4 mu gamma eps* (a/r)^3 (same source)
    sol, E, nu, eps = eshelby
    mu = E / (2 * (1 + nu))
    gamma = (1 + nu) / (3 * (1 - nu))
    d = np.ones(3) / np.sqrt(3.0)
    r = np.array([1.2, 1.5, 2.0])
    _, sig, _, region = sol.sample(r[:, None] * d)
    assert np.all(region == 2)
    srr = np.einsum("i,nij,j->n", d, sig, d) / 1000.0          # GPa
    exact = -4 * mu * gamma * eps * r ** -3
    assert srr == pytest.approx(exact, rel=0.03)
    slope = np.polyfit(np.log(r), np.log(-srr), 1)[0]
    assert slope == pytest.approx(-3.0, rel=0.03)


def test_free_body_with_uniform_eigenstrain_is_stress_free(tmp_path):
    # a compatible (uniform) eigenstrain in a homogeneous free body gives displacement and no
    # stress (common practice)
    path = tmp_path / "cube.msh"
    cube_mesh(path)
    sol = api.solve(path, api.Region("Si", normal=(0, 0, 1), x_axis=(1, 1, 0), eigenstrain=0.01),
                    supports="free", order=1)
    assert np.max(np.abs(sol.fields.cell_stress)) < 1e-6
    assert np.max(np.abs(sol.fields.displacement)) > 0.05      # 1 % of a 10 nm block


def test_eigenstrain_function_equals_per_cell_array(tmp_path):
    path = tmp_path / "cube.msh"
    cube_mesh(path, h=4.0)

    def field(x):                     # a vertical gradient of dilatation, sample frame
        return (0.002 * x[:, 2] / 10.0)[:, None, None] * np.eye(3)

    region = api.Region("GaAs", normal=(0, 0, 1), x_axis=(1, 0, 0))
    a = api.solve(path, region, eigenstrain=field, order=1)
    m = a.mesh.mesh
    per_cell = field(m.p[:, m.t].mean(axis=1).T)
    b = api.solve(path, region, eigenstrain=per_cell, order=1)
    assert np.allclose(a.u, b.u, atol=1e-12)
    assert np.max(np.abs(a.fields.cell_stress)) > 1.0          # MPa: the gradient is resisted


def test_per_cell_rotation_equal_to_region_orientation(tmp_path):
    from mesastrain.physics.crystal import sample_frame

    path = tmp_path / "cube.msh"
    cube_mesh(path, h=4.0)
    region = api.Region("Si", normal=(1, 1, 1), x_axis=(1, -1, 0), eigenstrain=0.004)
    a = api.solve(path, region, order=1)
    R = sample_frame((1, 1, 1), (1, -1, 0)).R
    n = a.mesh.nelems
    b = api.solve(path, region, rotations=np.repeat(R[None], n, axis=0), order=1)
    assert np.allclose(a.fields.cell_stress, b.fields.cell_stress, atol=1e-9)


def test_bad_inputs_are_reported(tmp_path):
    from mesastrain.errors import MesastrainError

    path = tmp_path / "cube.msh"
    cube_mesh(path, h=5.0)
    with pytest.raises(MesastrainError, match="no Region given"):
        api.solve(path, {1: api.Region("Si")}, region_of_cell="gmsh:physical")
    with pytest.raises(MesastrainError, match="no cell data"):
        api.solve(path, api.Region("Si"), region_of_cell="material")
