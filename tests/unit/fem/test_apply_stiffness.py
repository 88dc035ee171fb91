"""K u without the matrix (the sensitivity right-hand sides) equals the assembled K times u."""

import tomllib

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.fem.assembly import apply_stiffness, assemble_matrix
from mesastrain.mesh.kinds import build_mesh
from small_cases import SMALL_MESA, STIFF, sige_on_si

DISK = sige_on_si("disk", 'shape = "disk"\ndiameter = "160 nm"', "order = 1\nsize = 60\n"
                  "edge_size = 30")


@pytest.mark.parametrize("text", [SMALL_MESA, DISK], ids=["bricks", "tetrahedra"])
@pytest.mark.parametrize("order", [1, 2])
@pytest.mark.slow
def test_apply_stiffness_equals_assembled_product(text, order):
    d = tomllib.loads(text)
    d["mesh"]["order"] = order
    sm = build_mesh(parse_case(d), mirrors=())
    disc = sm.discretise(order)
    region = np.asarray(sm.region) % 2          # two low-symmetry stiffnesses (every coupling)
    u = np.random.default_rng(order).normal(size=disc.ndofs)
    want = assemble_matrix(disc, region, STIFF) @ u
    got = apply_stiffness(disc, region, STIFF, u)
    assert np.max(np.abs(got - want)) <= 1e-12 * np.max(np.abs(want))


@pytest.mark.parametrize("text", [SMALL_MESA, DISK], ids=["bricks", "tetrahedra"])
def test_regions_of_zero_stiffness_are_skipped_exactly(text):
    # a sensitivity's dC is zero outside the varied material: those elements are not
    # visited, and the product still equals the assembled one (regions not contiguous)
    sm = build_mesh(parse_case(tomllib.loads(text)), mirrors=())
    disc = sm.discretise(1)
    region = np.asarray(sm.region) % 2
    stiff = STIFF.copy()
    stiff[0] = 0.0
    u = np.random.default_rng(3).normal(size=disc.ndofs)
    want = assemble_matrix(disc, region, stiff) @ u
    got = apply_stiffness(disc, region, stiff, u)
    assert np.any(region == 0) and np.any(want != 0)
    assert np.max(np.abs(got - want)) <= 1e-12 * np.max(np.abs(want))
