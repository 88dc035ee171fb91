"""Property-based tests: random valid cases solve and balance; random invalid ones fail cleanly.

Valid cases: a blanket stack must reproduce the exact laterally-constrained
film solution (thinfilm.biaxial_response, the closed form behind REFERENCES.md
section 4); a free mesa must carry no net force across a horizontal cut through
its film (statics). Invalid cases: whatever is wrong, the only exception that
may escape is mesastrain's own (which the command line turns into one line and
exit status 2) -- never a TypeError, KeyError or a traceback.
"""

import copy

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mesastrain.case.parse import parse_case
from mesastrain.errors import MesastrainError
from mesastrain.physics.thinfilm import biaxial_response
from mesastrain.run.pipeline import run_case
from small_cases import cubes

CUBIC = [("Si", None), ("Ge", None), ("GaAs", None), ("InP", None)]
CUBIC_LAYERS = [("SiGe", "x"), ("InGaAs", "x"), ("AlGaAs", "x"), ("Si", None), ("Ge", None),
                ("GaAs", None)]
ORIENT_CUBIC = [([0, 0, 1], [1, 0, 0]), ([0, 0, 1], [1, 1, 0]), ([1, 1, 1], [1, -1, 0]),
                ([1, 1, 0], [0, 0, 1]), ([1, 1, 0], [1, -1, 0]), ([1, 1, 3], [1, -1, 0])]
HEX_LAYERS = [("AlGaN", "x"), ("InGaN", "x"), ("GaN", None), ("AlN", None)]
ORIENT_HEX = [([0, 0, 0, 1], [2, -1, -1, 0]), ([1, 1, -2, 0], [0, 0, 0, 1]),
              ([1, -1, 0, 0], [1, 1, -2, 0])]


@st.composite
def valid_case(draw):
    hexagonal = draw(st.booleans())
    if hexagonal:
        sub = ("GaN", None)
        normal, x_axis = draw(st.sampled_from(ORIENT_HEX))
        pool = HEX_LAYERS
    else:
        sub = draw(st.sampled_from(CUBIC))
        normal, x_axis = draw(st.sampled_from(ORIENT_CUBIC))
        pool = CUBIC_LAYERS
    nlay = draw(st.integers(1, 2))
    layers = []
    for _ in range(nlay):
        name, alloy = draw(st.sampled_from(pool))
        lay = {"material": name, "thickness": draw(st.sampled_from([10, 20, 30])),
               "relaxed": draw(st.sampled_from([0.0, 0.0, 0.5, 1.0]))}
        if alloy:
            lay["x"] = draw(st.sampled_from([0.05, 0.2, 0.35]))
        layers.append(lay)
    stack = sum(l["thickness"] for l in layers)
    case = {"title": "fuzz",
            "substrate": {"material": sub[0], "thickness": "20 um", "normal": normal,
                          "x_axis": x_axis},
            "layer": layers,
            "mesh": {"order": 1, "size": 20, "edge_size": 10, "growth": 2.0},
            "probe": [{"name": "film", "at": [0, 0, layers[0]["thickness"] / 2]}]}
    if draw(st.booleans()):
        w = draw(st.sampled_from([100, 160]))
        case["pattern"] = {"shape": "rectangle", "width": w,
                           "length": draw(st.sampled_from([w, 120])),
                           "etch_depth": stack + draw(st.sampled_from([0, 10])),
                           "margin": 40}
        case["mesh"]["substrate_depth"] = 80
    return case


def _cut_balance(res, z):
    sm = res.mesh
    k = np.searchsorted(sm.zs, z) - 1
    cells = sm.cell_of_grid[:, :, k]
    cells = cells[cells >= 0]
    area = res.fields.cell_volume[cells] / np.diff(sm.zs)[k]
    sig = res.fields.cell_stress[cells]
    scale = np.sum(np.abs(sig) * area[:, None, None]) / 9 + 1e-12
    return max(abs(np.sum(sig[:, i, 2] * area)) for i in range(3)) / scale


@settings(max_examples=20, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(valid_case())
def test_valid_cases_solve_and_balance(d):
    case = parse_case(d)
    res = run_case(case)
    assert np.all(np.isfinite(res.fields.cell_stress))
    film = res.layers[1]
    if case.pattern.shape == "none":
        # exact: the FE blanket equals the laterally constrained film solution
        e = -film.eigenstrain_sample
        sig, _ = biaxial_response(film.stiffness_sample, e[0, 0], e[1, 1], e[0, 1])
        fe = res.probes[0]["stress"] / 1000.0                         # GPa
        scale = np.max(np.abs(sig)) + 1e-6
        assert np.max(np.abs(fe - sig)) < 5e-3 * scale + 1e-9
    else:
        # statics: no net force across a horizontal cut through the first layer
        z = film.z_bottom + 0.5 * (film.z_top - film.z_bottom)
        assert _cut_balance(res, z) < 2e-2


# ---------------------------------------------------------------- invalid input
BASE = {"title": "t",
        "substrate": {"material": "Si", "thickness": "1 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.2, "thickness": 20}],
        "pattern": {"shape": "rectangle", "width": 200, "etch_depth": 30},
        "mesh": {"order": 1, "size": 20, "edge_size": 20},
        "probe": [{"at": [0, 0, 10]}]}

PATHS = [("title",), ("substrate", "material"), ("substrate", "thickness"),
         ("substrate", "normal"), ("substrate", "x_axis"), ("layer", 0, "material"),
         ("layer", 0, "x"), ("layer", 0, "thickness"), ("layer", 0, "relaxed"),
         ("pattern", "shape"), ("pattern", "width"), ("pattern", "etch_depth"),
         ("mesh", "order"), ("mesh", "size"), ("mesh", "growth"), ("probe", 0, "at"),
         ("substrate",), ("layer",), ("layer", 0), ("pattern",), ("mesh",), ("probe",),
         ("substrate", "bogus"), ("bogus",), ("layer", 0, "thicknes")]

JUNK = st.one_of(
    st.none(), st.booleans(), st.integers(-10**6, 10**6),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
    st.sampled_from(["40 nm", "-3 um", "2 furlongs", "nan nm", "1e400 nm", "Si", "SiGe",
                     "rectangle", "disk"]),
    st.lists(st.one_of(st.integers(-3, 3), st.floats(-2, 2), st.text(max_size=3)), max_size=5),
    st.dictionaries(st.text(max_size=5), st.integers(), max_size=2))


def _set(d, path, value):
    for k in path[:-1]:
        d = d[k]
    if value is _DELETE:
        if isinstance(d, list):
            if path[-1] < len(d):
                d.pop(path[-1])
        else:
            d.pop(path[-1], None)
    else:
        d[path[-1]] = value


_DELETE = object()


@pytest.mark.slow
@settings(max_examples=150, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(PATHS), st.one_of(JUNK, st.just(_DELETE))),
                min_size=1, max_size=3))
def test_invalid_cases_fail_cleanly(edits):
    d = copy.deepcopy(BASE)
    for path, value in edits:
        try:
            _set(d, path, value)
        except (KeyError, IndexError, TypeError):
            pass      # an earlier edit removed the parent: nothing to change
    try:
        case = parse_case(d)
    except MesastrainError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg
        return
    # whatever survived validation must run (small) or fail with our own error
    try:
        run_case(case, max_memory_gb=2.0)
    except MesastrainError as exc:
        assert "\n" not in str(exc)


# ---------------------------------------------------------------- bounds (issue #14)
def _nested(depth):
    v = 1
    for _ in range(depth):
        v = [v]
    return v


#: Values beyond every bound: huge and tiny numbers, integers too large for a float,
#: lengths beyond any wafer, deep nesting, long lists, control characters.
EXTREME = st.one_of(
    st.sampled_from([10**400, -10**400, 1e30, 1e308, 5e-324, -1e-320, 1e-320, 2**63, 2**64,
                     "1e30 nm", "1e999999999 nm", "1e-999999999 nm", "5000 C", "1e30 K",
                     "1e400 C", "x\ny", "a\x1b[2Kb", "\u2028", "x/y", "x_y"]),
    st.integers(2, 3000).map(_nested),
    st.integers(0, 10**6).map(lambda n: [n] * 3),
    st.floats(allow_nan=True, allow_infinity=True, allow_subnormal=True).map(lambda f: [f, 0]),
    st.integers(10**4, 3 * 10**5).map(lambda n: ["stress_xx"] * n),
)

BOUND_PATHS = PATHS + [
    ("thermal", "growth_temperature"), ("thermal", "final_temperature"),
    ("cut", 0, "points"), ("cut", 0, "name"), ("cut", 0, "components"),
    ("channel", 0, "direction"), ("channel", 0, "name"), ("solver", "max_iterations"),
    ("substrate", "normal", 0), ("pattern", "corner_radius"), ("probe", 0, "at", 2)]

BOUND_BASE = copy.deepcopy(BASE)
BOUND_BASE.update({
    "thermal": {"growth_temperature": "700 C", "final_temperature": "20 C"},
    "cut": [{"name": "c", "from": [0, 0, 0], "to": [0, 0, 20]}],
    "channel": [{"name": "ch", "direction": [1, 0], "carrier": "n"}],
    "solver": {"max_iterations": 100}})


@pytest.mark.slow
@settings(max_examples=120, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(st.lists(st.tuples(st.sampled_from(BOUND_PATHS), EXTREME), min_size=1, max_size=3))
def test_values_beyond_the_bounds_fail_cleanly(edits):
    """Validation only (no solve): a bounded value is read or refused in one line."""
    d = copy.deepcopy(BOUND_BASE)
    for path, value in edits:
        try:
            _set(d, path, value)
        except (KeyError, IndexError, TypeError):
            pass
    try:
        case = parse_case(d)
    except MesastrainError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg and "\x1b" not in msg and len(msg) < 2000
        return
    # what passed is within every bound
    assert case.substrate.thickness <= 1e9
    assert all(c.points <= 10000 for c in case.cuts)
    if case.thermal is not None:
        assert case.thermal.growth_temperature < 1687.0      # Si, the substrate, melts


# ---------------------------------------------------------------- imported meshes
def _mesh_case(path, groups):
    return parse_case({
        "substrate": {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1],
                      "x_axis": [1, 1, 0]},
        "layer": [{"material": "SiGe", "x": 0.25, "thickness": 20}],
        "pattern": {"shape": "mesh", "file": str(path), "groups": groups},
        "mesh": {"order": 1}})


@st.composite
def small_meshes(draw):
    """Up to three unit cubes of 6 tetrahedra, joined or apart, with random tags and
    occasionally a NaN, infinite or huge coordinate."""
    n = draw(st.integers(1, 3))
    offsets = [(0.0, 0.0, -20.0)]
    for _ in range(n - 1):
        offsets.append(draw(st.sampled_from([(0.0, 0.0, 0.0), (0.0, 0.0, 20.0),
                                             (0.0, 0.0, 40.0), (20.0, 20.0, 20.0),
                                             (20.0, 0.0, -20.0)])))
    pts, cells = cubes(offsets)
    tags = np.array(draw(st.lists(st.integers(1, 4), min_size=len(cells),
                                  max_size=len(cells))))
    if draw(st.booleans()):
        pts[draw(st.integers(0, len(pts) - 1)), draw(st.integers(0, 2))] = draw(
            st.sampled_from([np.nan, np.inf, -np.inf, 1e30]))
    groups = draw(st.dictionaries(st.sampled_from(["1", "2", "3", "4", "+2", "01", "wafer"]),
                                  st.integers(0, 1), min_size=1, max_size=4))
    return pts, cells, tags, groups


@pytest.mark.slow
@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(small_meshes())
def test_imported_meshes_load_or_fail_cleanly(tmp_path, m):
    import meshio

    from mesastrain.mesh.imported import case_mesh_from_file
    from mesastrain.run.resources import estimate

    pts, cells, tags, groups = m
    path = tmp_path / "m.msh"
    meshio.write(path, meshio.Mesh(pts, [("tetra", cells)],
                                   cell_data={"gmsh:physical": [tags],
                                              "gmsh:geometrical": [tags]}),
                 file_format="gmsh22", binary=False)
    try:
        case = _mesh_case(path, groups)
        um = case_mesh_from_file(case)
        estimate(case)
    except MesastrainError as exc:
        assert "\n" not in str(exc)
        return
    # what loaded is finite, in one piece, and every cell has exactly one region
    from mesastrain.mesh.imported import face_connected_pieces

    assert np.all(np.isfinite(um.mesh.p))
    assert face_connected_pieces(um.mesh.t.T)[0] == 1
    assert set(np.unique(um.region).tolist()) <= {0, 1}
