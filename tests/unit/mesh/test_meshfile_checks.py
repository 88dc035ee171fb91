"""Imported meshes that must be refused with ``pattern.file`` / ``pattern.groups.*`` named.

Small tetrahedral meshes are written with meshio directly (no gmsh): two
cubes of 6 tetrahedra each (Kuhn split), a "wafer" cube below z = 0 and a
"film" cube above it, joined through their common face (issue #14 item 6).
"""

import meshio
import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.errors import CaseError
from mesastrain.mesh.imported import case_mesh_from_file, face_connected_pieces
from mesastrain.run.resources import estimate
from small_cases import cubes


def write(path, pts, cells, tags, field=True):
    m = meshio.Mesh(pts, [("tetra", cells)], cell_data={"gmsh:physical": [tags],
                                                         "gmsh:geometrical": [tags]})
    if field:
        m.field_data = {"wafer": np.array([1, 3]), "film": np.array([2, 3])}
    meshio.write(path, m, file_format="gmsh22", binary=False)
    return path


def case_for(path, groups=None, probe=None):
    data = {
        "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.25, "thickness": 20}],
        "pattern": {"shape": "mesh", "file": str(path),
                    "groups": groups or {"wafer": 0, "film": 1}},
        "mesh": {"order": 1},
    }
    if probe:
        data["probe"] = [{"at": list(probe)}]
    return parse_case(data)


def stack(tmp_path, name="ok.msh"):
    pts, cells = cubes([(0, 0, -20), (0, 0, 0)])
    return write(tmp_path / name, pts, cells, np.repeat([1, 2], 6))


def refused(case, key, fragment):
    for step in (case_mesh_from_file, estimate):    # `run` and `check` refuse alike
        with pytest.raises(CaseError) as e:
            step(case)
        assert e.value.key == key, str(e.value)
        assert fragment in e.value.message
        assert "\n" not in str(e.value)


def test_good_stack_reads(tmp_path):
    um = case_mesh_from_file(case_for(stack(tmp_path)))
    assert sorted(set(um.region.tolist())) == [0, 1]
    assert estimate(case_for(stack(tmp_path))).elements == 12


@pytest.mark.parametrize("groups, key", [({"wafer": 0, "film": 1, "2": 0}, "2"),
                                         ({"wafer": 0, "film": 1, "+2": 0}, "+2"),
                                         ({"1": 0, "wafer": 1, "film": 1}, "wafer")])
def test_a_tag_mapped_twice_is_refused(tmp_path, groups, key):
    """`2 = 0` would silently turn the film (tag 2) into substrate."""
    case = case_for(stack(tmp_path), groups)
    for step in (case_mesh_from_file, estimate):
        with pytest.raises(CaseError) as e:
            step(case)
        assert e.value.key == "pattern.groups." + key
        assert "already mapped" in e.value.message


def test_integer_tags_mapped_twice_refused_when_read():
    with pytest.raises(CaseError) as e:
        parse_case({"substrate": {"material": "Si", "thickness": 100, "normal": [0, 0, 1],
                                  "x_axis": [1, 0, 0]},
                    "layer": [{"material": "Ge", "thickness": 10}],
                    "pattern": {"shape": "mesh", "file": __file__,
                                "groups": {"2": 0, "02": 1}}})
    assert e.value.key == "pattern.groups.02" and "already mapped" in e.value.message


@pytest.mark.parametrize("content", [b"this is not a mesh\n", b"$MeshFormat\n2.2 0 8\n",
                                     b"$MeshFormat\n4.1 0 8\n$EndMeshFormat\n$Nodes\n1 2\n",
                                     b"\x00\x01\x02" * 50, b""])
def test_unparsable_file_is_one_line_naming_the_key(tmp_path, content, capfd):
    """meshio's gmsh reader calls sys.exit(1) on some of these, and prints warnings."""
    path = tmp_path / "broken.msh"
    path.write_bytes(content)
    refused(case_for(path), "pattern.file", "cannot read the mesh file")
    out, err = capfd.readouterr()
    assert out == "" and err == ""


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_coordinates_are_refused(tmp_path, bad):
    pts, cells = cubes([(0, 0, -20), (0, 0, 0)])
    pts[3, 2] = bad
    path = write(tmp_path / "nan.msh", pts, cells, np.repeat([1, 2], 6))
    refused(case_for(path), "pattern.file", "NaN or infinite")


def test_absurd_coordinates_are_refused(tmp_path):
    pts, cells = cubes([(0, 0, -20), (0, 0, 0)])
    pts[3, 2] = 1e30
    path = write(tmp_path / "far.msh", pts, cells, np.repeat([1, 2], 6))
    refused(case_for(path), "pattern.file", "more than any wafer")


@pytest.mark.parametrize("offset", [(0, 0, 40), (20, 20, 20), (20, 0, 20)],
                         ids=["apart", "touching at a node", "touching along an edge"])
def test_a_piece_not_joined_by_faces_is_refused(tmp_path, offset):
    """The film cube floats above, or hangs on a node or an edge of, the wafer cube."""
    pts, cells = cubes([(0, 0, -20), offset])
    path = write(tmp_path / "apart.msh", pts, cells, np.repeat([1, 2], 6))
    refused(case_for(path), "pattern.file", "falls apart into 2 pieces")


def test_flat_tetrahedra_are_refused(tmp_path):
    pts, cells = cubes([(0, 0, -20), (0, 0, 0)])
    cells = np.concatenate([cells, [[0, 1, 2, 3]]])     # four corners of one face: flat
    path = write(tmp_path / "flat.msh", pts, cells, np.concatenate([np.repeat([1, 2], 6),
                                                                    [1]]))
    refused(case_for(path), "pattern.file", "no volume")


def test_face_connected_pieces_counts():
    _, cells = cubes([(0, 0, 0), (0, 0, 20), (0, 0, 60)])
    n, label = face_connected_pieces(cells)
    assert n == 2 and np.bincount(label).tolist() == [12, 6]
