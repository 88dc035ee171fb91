"""Imported meshes (pattern.shape = "mesh"): groups to regions, units, errors.

A film block on a substrate block, held by rollers on the sides of the
bounding box, is a laterally constrained blanket film: its stress is the
closed form of thinfilm.biaxial_response (REFERENCES.md section 4).
"""

import pytest

from mesastrain.case.parse import parse_case
from mesastrain.errors import CaseError
from mesastrain.physics.thinfilm import biaxial_response
from mesastrain.run.pipeline import run_case

gmsh = pytest.importorskip("gmsh")


def stack_msh(path, scale=1.0, h=12.0):
    """Substrate block (group "wafer") and a 20 nm film (group "film"), 120 nm square."""
    gmsh.initialize(readConfigFiles=False)
    gmsh.option.setNumber("General.Terminal", 0)
    try:
        occ = gmsh.model.occ
        a = occ.addBox(-60 * scale, -60 * scale, -100 * scale, 120 * scale, 120 * scale,
                       100 * scale)
        b = occ.addBox(-60 * scale, -60 * scale, 0, 120 * scale, 120 * scale, 20 * scale)
        occ.fragment([(3, a)], [(3, b)])
        occ.synchronize()
        for _, t in gmsh.model.getEntities(3):
            z = occ.getCenterOfMass(3, t)[2]
            gmsh.model.addPhysicalGroup(3, [t], name="film" if z > 0 else "wafer")
        gmsh.option.setNumber("Mesh.MeshSizeMax", h * scale)
        gmsh.option.setNumber("Mesh.MeshSizeMin", h * scale)
        gmsh.model.mesh.generate(3)
        gmsh.write(str(path))
    finally:
        gmsh.finalize()


def case_for(path, groups=None, unit=None, probe=(0, 0, 10)):
    pat = {"shape": "mesh", "file": str(path), "groups": groups or {"wafer": 0, "film": 1}}
    if unit:
        pat["unit"] = unit
    return parse_case({
        "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.25, "thickness": 20}],
        "pattern": pat,
        "mesh": {"order": 2},
        "probe": [{"name": "film", "at": list(probe)}],
    })


@pytest.fixture(scope="module")
def msh(tmp_path_factory):
    d = tmp_path_factory.mktemp("imported")
    stack_msh(d / "stack_nm.msh")
    stack_msh(d / "stack_um.msh", scale=1e-3)
    return d


@pytest.mark.slow
def test_imported_stack_is_a_blanket_film(msh):
    res = run_case(case_for(msh / "stack_nm.msh"))
    film = res.layers[1]
    sig, _ = biaxial_response(film.stiffness_sample, film.misfit, film.misfit)
    p = res.probes[0]
    assert p["region"] == res.layers[1].name
    assert p["stress"][0, 0] == pytest.approx(sig[0, 0] * 1000, rel=0.01)
    assert p["stress"][1, 1] == pytest.approx(sig[1, 1] * 1000, rel=0.01)
    assert abs(p["stress"][2, 2]) < 0.01 * abs(sig[0, 0] * 1000)
    assert res.derived[0].summary["model"]["mesh_kind"] == "file"


@pytest.mark.slow
def test_unit_scales_the_coordinates(msh):
    a = run_case(case_for(msh / "stack_nm.msh"))
    b = run_case(case_for(msh / "stack_um.msh", unit="um"))
    assert b.mesh.bounds == pytest.approx(a.mesh.bounds)
    assert b.probes[0]["stress"][0, 0] == pytest.approx(a.probes[0]["stress"][0, 0], rel=0.02)


def test_group_errors(msh):
    path = msh / "stack_nm.msh"
    with pytest.raises(CaseError) as e:
        run_case(case_for(path, groups={"wafer": 0}))
    assert e.value.key == "pattern.groups" and "film" in str(e.value)
    with pytest.raises(CaseError) as e:
        run_case(case_for(path, groups={"wafer": 0, "flim": 1}))
    assert e.value.key == "pattern.groups.flim" and "film" in str(e.value)
    with pytest.raises(CaseError) as e:
        run_case(case_for(path, probe=(0, 0, 50)))
    assert e.value.key == "probe[0].at"


def test_casefile_checks(msh, tmp_path):
    with pytest.raises(CaseError) as e:
        case_for(tmp_path / "missing.msh")
    assert e.value.key == "pattern.file"
    with pytest.raises(CaseError) as e:
        case_for(msh / "stack_nm.msh", groups={"wafer": 0, "film": 3})
    assert e.value.key == "pattern.groups.film" and "does not exist" in str(e.value)
    with pytest.raises(CaseError) as e:
        case_for(msh / "stack_nm.msh", unit="furlong")
    assert e.value.key == "pattern.unit"
