"""Periodic arrays: one cell with tied opposite faces.

* An array whose pitch is ten times the feature is, at the feature centre,
  the isolated feature (the neighbours' fields decay with distance; Flamant's
  line-load solution falls off as 1/r and a square feature's far field
  faster -- Johnson, Contact Mechanics, 1985, from memory).
* A pitch equal to the width (no gap) is the blanket film: the laterally
  constrained film of thinfilm.biaxial_response (REFERENCES.md section 4).
The crystal is (001) with x along [310], which has no mirror plane x = 0 or
y = 0, so the cell is solved whole and its faces are really tied (not
replaced by rollers).
"""

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.fem.constraints import reduce_system, tie_faces
from mesastrain.physics.thinfilm import biaxial_response
from mesastrain.run.pipeline import run_case

W, H = 100.0, 20.0


def square(pattern, x_axis=(3, 1, 0), mesh=None):
    return parse_case({
        "substrate": {"material": "Si", "thickness": "50 um", "normal": [0, 0, 1],
                      "x_axis": list(x_axis)},
        "layer": [{"material": "SiGe", "x": 0.3, "thickness": H}],
        "pattern": {"shape": "rectangle", "width": W, "etch_depth": 30, **pattern},
        "mesh": {"order": 1, "size": 20, "edge_size": 6.7, "growth": 2.0,
                 "substrate_depth": 400, **(mesh or {})},
        "probe": [{"name": "centre", "at": [0, 0, H / 2]},
                  {"name": "off", "at": [20, -15, H / 2]}],
    })


def test_tie_faces_pairs_every_node():
    x = np.array([[0.0, 1.0, 0.0, 1.0, 0.5], [0.0, 0.0, 1.0, 1.0, 0.5], [0.0] * 5])
    ties = tie_faces(x, [(0, 0.0, 1.0), (1, 0.0, 1.0)])
    # corners all collapse onto node 0; the interior node stays free
    assert ties.master.tolist() == [0, 0, 0, 0, 4]
    assert ties.independent.tolist() == [0, 4]


def test_reduction_is_exact_for_tied_fields():
    # P^T K P u_r gives the energy of the tied field u = P u_r (a 2x2 toy matrix per dof)
    x = np.array([[0.0, 1.0], [0.0, 0.0], [0.0, 0.0]])
    ties = tie_faces(x, [(0, 0.0, 1.0)])
    import scipy.sparse as sp

    K = sp.csr_matrix(np.eye(6) * 2.0)
    Kr, fr, P = reduce_system(K, np.arange(6.0), ties)
    assert Kr.toarray() == pytest.approx(np.eye(3) * 4.0)
    assert fr == pytest.approx([3.0, 5.0, 7.0])


def test_wide_pitch_matches_isolated_feature():
    isolated = run_case(square({"margin": 4.5 * W}))
    array = run_case(square({"pitch": 10 * W}))
    assert array.derived[0].summary["model"]["periodic_axes"] == ["x", "y"]
    assert isolated.derived[0].summary["model"]["periodic_axes"] == []
    for pi, pa in zip(isolated.probes, array.probes):
        si, sa = pi["stress"], pa["stress"]
        assert sa[0, 0] == pytest.approx(si[0, 0], rel=0.01)
        assert sa[1, 1] == pytest.approx(si[1, 1], rel=0.01)


def test_pitch_equal_to_width_is_the_blanket_film():
    res = run_case(square({"pitch": W}))
    film = res.layers[1]
    sig, _ = biaxial_response(film.stiffness_sample, film.misfit, film.misfit)
    for p in res.probes:
        assert p["stress"] == pytest.approx(sig * 1000.0, abs=1e-6 * abs(sig[0, 0]) * 1000)


def test_ties_equal_rollers_only_where_the_crystal_has_the_mirrors():
    # A cell of a mirror-symmetric problem is also symmetric about its faces, so tying the
    # faces or holding them as rollers gives the same field; without the mirror they differ
    # (the reason arrays of such features need the periodic ties).
    def pair(x_axis):
        rollers = run_case(square({"margin": 12.5, "symmetry": "full"}, x_axis))
        tied = run_case(square({"pitch": 1.25 * W, "symmetry": "full"}, x_axis))
        assert tied.derived[0].summary["model"]["periodic_axes"] == ["x", "y"]
        return max(np.max(np.abs(a["stress"] - b["stress"]))
                   for a, b in zip(rollers.probes, tied.probes))
    assert pair((1, 1, 0)) < 1e-4            # MPa: solver tolerance
    assert pair((3, 1, 0)) > 0.1
