"""Tests of mesastrain.derived.sampling.sidewall_distance: where a ray from the centre leaves
the feature, on the structured (square) and the tetrahedral (disk) meshes."""

from __future__ import annotations

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived.sampling import feature_bounds, locate, sidewall_distance
from mesastrain.run.pipeline import run_case

SI = {"material": "Si", "thickness": "2 um", "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
FILM = [{"material": "SiGe", "x": 0.3, "thickness": 20}]
QUIET = {"report": False, "vtu": False}
#: Element size of the disk's mesh, nm: coarser than the film is thick (a quarter disk meshed
#: this coarse once lost part of its sidewall, see tests/unit/mesh/test_geometry_shapes.py).
DISK_SIZE = 40.0


def _solved(pattern, mesh):
    return run_case(parse_case({"substrate": SI, "layer": FILM, "pattern": pattern,
                                "mesh": mesh, "readouts": {"bow": False}, "output": QUIET}),
                    providers=())


@pytest.fixture(scope="module")
def square():
    # solved as a quarter and unfolded: the result holds the whole square
    return _solved({"shape": "rectangle", "width": 200, "etch_depth": 40, "margin": 60},
                   {"order": 1})


@pytest.fixture(scope="module")
def disk():
    return _solved({"shape": "disk", "diameter": 200, "etch_depth": 40, "margin": 60},
                   {"order": 1, "size": DISK_SIZE})


def _bisection(res, d, z):
    """The same question by a scalar bisection (the method used before, 60 halvings)."""
    d = np.asarray(d, float) / np.linalg.norm(d)
    b = feature_bounds(res)
    o = np.array([0.0, 0.0, z])
    d3 = np.array([d[0], d[1], 0.0])
    t_box = min(((b[k, 1] if d[k] > 0 else b[k, 0]) - o[k]) / d[k]
                for k in (0, 1) if abs(d[k]) > 1e-12)
    t = np.linspace(0.0, t_box * (1 - 1e-9), 801)
    out = np.flatnonzero(locate(res, o + t[:, None] * d3) < 0)
    lo, hi = t[out[0] - 1], t[out[0]]
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if locate(res, (o + mid * d3)[None, :])[0] >= 0:
            lo = mid
        else:
            hi = mid
    return lo - 1e-8 * t_box, t_box


DIRECTIONS = [(1, 0), (-1, 0), (0, -1), (1, 1), (-3, 1), (0.2, -1)]


@pytest.mark.parametrize("d", DIRECTIONS)
def test_square_sidewall_is_where_the_ray_leaves_the_square(square, d):
    # a 200 nm square: the ray leaves it where its larger component reaches 100 nm
    d = np.asarray(d, float) / np.linalg.norm(d)
    for z in (5.0, -10.0):               # in the film and in the etched substrate
        s = sidewall_distance(square, d, z)
        ref, t_box = _bisection(square, d, z)
        assert abs(s - ref) < 1e-11 * t_box
        # (the answer steps 1e-8 of the ray back inside, so that it lies in an element)
        assert s == pytest.approx(100.0 / np.abs(d).max(), abs=2e-8 * t_box)


@pytest.mark.parametrize("d", DIRECTIONS)
def test_disk_sidewall_matches_a_bisection_and_the_circle(disk, d):
    d = np.asarray(d, float) / np.linalg.norm(d)
    # the widest angle a flat sidewall facet spans (its nodes all on the circle)
    m = disk.mesh.mesh
    f = m.facets[:, m.boundary_facets()]
    r = np.hypot(m.p[0, f], m.p[1, f])
    side = np.all(np.abs(r - 100.0) < 1e-6 * 100.0, axis=0)
    ang = np.unwrap(np.sort(np.arctan2(m.p[1, f[:, side]], m.p[0, f[:, side]]), axis=0), axis=0)
    gap = float(np.max(ang.max(axis=0) - ang.min(axis=0)))
    assert 0.0 < gap < 0.5                  # finer than a 13-gon
    for z in (10.0, -10.0):
        s = sidewall_distance(disk, d, z)
        ref, t_box = _bisection(disk, d, z)
        assert abs(s - ref) < 1e-11 * t_box
        # the meshed sidewall is faceted between nodes on the circle: a facet spanning an
        # angle gap reaches no deeper than r (1 - cos(gap / 2)) inside the circle
        assert 100.0 * np.cos(gap / 2.0) - 1e-6 <= s <= 100.0 + 1e-6


def test_no_sidewall_below_the_etch_floor(square):
    assert sidewall_distance(square, np.array([1.0, 0.0]), -50.0) is None   # below the floor
