"""Sensitivities of the figures to the material data against closed forms and full re-runs.

Blanket film: the film stress is sigma = Q(C) eps with eps = (a_sub - a_film)/a_film and
Q the reduced (biaxial) stiffness of the rotated film stiffness with a traction-free top,
Q = C_KK - C_KU C_UU^-1 C_UK over the in-plane (K) and out-of-plane (U) Voigt parts
(the closed form of mesastrain.physics.thinfilm.biaxial_response). Its derivative along a
stiffness direction dC is dQ = dC_KK - dC_KU X - X^T dC_UK + X^T dC_UU X with
X = C_UU^-1 C_UK (differentiating the Schur complement); on (001) this is
d/dC11 (C11 + C12 - 2 C12^2/C11) = 1 + 2 C12^2/C11^2 and d/dC12 = 1 - 4 C12/C11
(Freund & Suresh, Thin Film Materials, 2003, from memory, for M). The finite-element
sensitivities must agree to 1e-6.
"""

import tomllib

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.model.regions import build_layers
from mesastrain.physics.materials import cubic_stiffness, get_material
from small_cases import SMALL_MESA

SI = get_material("Si")
FILM = get_material("SiGe", 0.25)
FILM_TABLE = {"system": "cubic", **FILM.constants, "a": FILM.a,
              "source": "Si0.75Ge0.25 of the built-in database, as a material of our own"}


def blanket(normal, x_axis, spread, groups=("stiffness", "lattice")):
    return parse_case({
        "title": "blanket sensitivity",
        "material": {"film": {**FILM_TABLE, "spread": spread}},
        "substrate": {"material": "Si", "thickness": "10 um", "normal": normal,
                      "x_axis": x_axis},
        "layer": [{"material": "film", "thickness": 20}],
        "mesh": {"order": 1},
        "solver": {"method": "direct"},
        "probe": [{"name": "film", "at": [0, 0, 10]}],
        "uncertainty": {"groups": list(groups)},
    })


def summary_of(res):
    out = {}
    for d in res.derived:
        out.update(d.summary)
    return out


_K, _U = [0, 1, 5], [2, 3, 4]     # Voigt in-plane (11, 22, 12) and out-of-plane (33, 23, 13)


def reduced(C):
    X = np.linalg.solve(C[np.ix_(_U, _U)], C[np.ix_(_U, _K)])
    return C[np.ix_(_K, _K)] - C[np.ix_(_K, _U)] @ X, X


def d_reduced(C, dC):
    _, X = reduced(C)
    return (dC[np.ix_(_K, _K)] - dC[np.ix_(_K, _U)] @ X - X.T @ dC[np.ix_(_U, _K)]
            + X.T @ dC[np.ix_(_U, _U)] @ X)


ORIENTATIONS = {"001": ([0, 0, 1], [1, 1, 0]), "111": ([1, 1, 1], [1, -1, 0]),
                "113": ([1, 1, 3], [1, -1, 0])}


@pytest.mark.parametrize("orient", sorted(ORIENTATIONS))
@pytest.mark.parametrize("constant", ["C11", "C12", "C44"])
def test_blanket_stiffness_sensitivity_closed_form(orient, constant):
    normal, x_axis = ORIENTATIONS[orient]
    step = 0.05 * FILM.constants[constant]           # a second source 5 % away
    case = blanket(normal, x_axis, {"stiffness": {
        constant: FILM.constants[constant] + step, "source": "test direction"}})
    res = solve_and_derive(case)
    fig = summary_of(res)["material_scatter"]["figures"]
    lm = build_layers(case)[1]
    eps = (SI.a - FILM.a) / FILM.a
    c = dict(FILM.constants)
    moved = {k: v + (step if k == constant else 0.0) for k, v in c.items()}
    # the Voigt matrix is linear in the constants: the difference is the direction dC
    dC = lm.frame.stiffness_to_sample(cubic_stiffness(*moved.values())
                                      - cubic_stiffness(*c.values()))
    dQ = d_reduced(lm.stiffness_sample, dC)
    want = dQ @ np.array([eps, eps, 0.0]) * 1000.0     # d(sxx, syy, sxy) per spread, MPa
    for comp, k in (("sxx", 0), ("syy", 1)):
        got = fig[f"probe film {comp}"]["changes"]["film C_ij"]
        assert got == pytest.approx(want[k], rel=1e-6, abs=1e-9 * abs(res.probes[0]["stress"][0, 0]))
    if orient == "001":
        c11, c12 = FILM.constants["C11"], FILM.constants["C12"]
        dM = {"C11": 1 + 2 * c12**2 / c11**2, "C12": 1 - 4 * c12 / c11, "C44": 0.0}[constant]
        assert want[0] == pytest.approx(dM * step * eps * 1000.0, rel=1e-9, abs=1e-9)
    # the substrate's own C_ij do not move a coherent film on a thick substrate
    si = fig["probe film sxx"]["changes"]["Si C_ij"]
    assert abs(si) < 1e-6 * abs(res.probes[0]["stress"][0, 0])


@pytest.mark.parametrize("orient", ["001", "113"])
def test_blanket_lattice_sensitivity_closed_form(orient):
    normal, x_axis = ORIENTATIONS[orient]
    da = 0.004                                          # Angstrom
    case = blanket(normal, x_axis, {"lattice": {"a": FILM.a + da, "source": "test"}},
                   groups=("lattice",))
    res = solve_and_derive(case)
    fig = summary_of(res)["material_scatter"]["figures"]
    lm = build_layers(case)[1]
    Q, _ = reduced(lm.stiffness_sample)
    deps = -SI.a / FILM.a**2 * da                       # d/da of (a_sub - a)/a
    want = Q @ np.array([deps, deps, 0.0]) * 1000.0
    got = fig["probe film sxx"]["changes"]["film lattice constant"]
    assert got == pytest.approx(want[0], rel=1e-6)
    assert set(summary_of(res)["material_scatter"]["groups"]) == {"film lattice constant"}


def _mesa_case(film_table, groups=("stiffness", "lattice")):
    d = tomllib.loads(SMALL_MESA)
    d["material"] = {"film": film_table}
    d["layer"][0] = {"material": "film", "thickness": d["layer"][0]["thickness"]}
    d["uncertainty"] = {"groups": list(groups)}
    d["solver"] = {"stress_tolerance": 1e-6, "tolerance": 1e-10}
    return parse_case(d)


@pytest.mark.slow
def test_mesa_sensitivities_match_two_full_runs():
    # a 200 nm square mesa: the linear sensitivities of every headline figure against central
    # finite differences of two full runs with the film's constants moved by -/+ t spreads
    from mesastrain.derived import readouts
    from mesastrain.derived.headline import headline_figures
    from mesastrain.run.pipeline import run_case

    film = get_material("SiGe", 0.2)
    base = {"system": "cubic", **film.constants, "a": film.a, "source": "own"}
    delta = {"C11": 0.06 * film.constants["C11"], "C12": -0.04 * film.constants["C12"],
             "C44": 0.05 * film.constants["C44"]}
    spread = {"stiffness": {**{k: film.constants[k] + v for k, v in delta.items()},
                            "source": "test"},
              "lattice": {"a": film.a + 0.003, "source": "test"}}
    res = solve_and_derive(_mesa_case({**base, "spread": spread}))
    figs = summary_of(res)["material_scatter"]["figures"]
    t = 0.05
    for group, moved in (("film C_ij", lambda s: {k: film.constants[k] + s * v
                                                  for k, v in delta.items()}),
                         ("film lattice constant", lambda s: {"a": film.a + s * 0.003})):
        vals = []
        for s in (t, -t):
            case = _mesa_case({**base, **moved(s)}, groups=("raman",))
            r = run_case(case, providers=(readouts.derive,))
            vals.append({f.name: f.value for f in headline_figures(r) if not f.singular})
        checked = 0
        for name, entry in figs.items():
            if name not in vals[0] or "changes" not in entry:
                continue
            fd = (vals[0][name] - vals[1][name]) / (2 * t)
            lin = entry["changes"][group]
            scale = max(abs(fd), 1e-3 * abs(vals[0][name]))
            assert lin == pytest.approx(fd, abs=0.02 * scale), (group, name)
            checked += 1
        assert checked >= 10


def test_uncertainty_off_and_groups(small_mesa_case):
    from dataclasses import replace

    from mesastrain.run.sensitivity import groups_of

    layers = build_layers(small_mesa_case)
    names = [g.name for g in groups_of(small_mesa_case, layers)]
    assert names == ["Si C_ij", "SiGe C_ij", "SiGe lattice law"]
    assert [g.name for g in groups_of(small_mesa_case, layers, ["lattice"])] == [
        "SiGe lattice law"]
    assert groups_of(small_mesa_case, layers, ["alpha"]) == []     # no [thermal]
    off = replace(small_mesa_case, uncertainty=replace(small_mesa_case.uncertainty,
                                                       enabled=False))
    res = solve_and_derive(off)
    assert res.sensitivities == {} and "material_scatter" not in summary_of(res)
    assert all("material_scatter" not in row for row in summary_of(res)["headline"])


def test_raman_pdp_set_band_of_a_biaxially_strained_si_film():
    # (001) backscattering sees the LO mode: d omega = omega0 (p eps_zz + 2 q eps)/2 with
    # eps_zz = -2 C12/C11 eps for a biaxially strained film, i.e. b eps with b = -831 (1990
    # set, the default), -723 (1978), -697 cm^-1 (1970) (REFERENCES.md section 7, [D] from the
    # published PDPs). The band is the largest change over the other sets: |b_1970 - b_1990|
    # / |b_1990| of the shift, whatever the strain.
    from mesastrain.physics.raman_data import pdp_sets, raman_parameters

    c = SI.constants
    ratio = -2 * c["C12"] / c["C11"]
    b = {s: raman_parameters("Si", s) for s in pdp_sets("Si")}
    b = {s: p.omega0 * (p.p * ratio + 2 * p.q) / 2 for s, p in b.items()}
    default = pdp_sets("Si")[0]
    want = max(abs(v - b[default]) for v in b.values()) / abs(b[default])
    case = parse_case({
        "title": "strained Si on relaxed SiGe",
        "substrate": {"material": "SiGe", "x": 0.2, "thickness": "10 um",
                      "normal": [0, 0, 1], "x_axis": [1, 1, 0]},
        "layer": [{"material": "Si", "thickness": 20}],
        "solver": {"method": "direct"},
        "probe": [{"name": "film", "at": [0, 0, 10]}],
        "uncertainty": {"groups": ["raman"]},
    })
    s = summary_of(solve_and_derive(case))
    row = next(r for r in s["headline"] if r["name"] == "probe film Raman shift")
    entry = row["material_scatter"]
    assert entry["dominant"] == "Raman PDP set"
    assert entry["error"] == pytest.approx(abs(row["value"]) * want, rel=1e-6)
    assert 0.15 < want < 0.17
    assert s["material_scatter"]["groups"]["Raman PDP set"]["alternatives"] == [
        f"Si {k}" for k in pdp_sets("Si")[1:]]
