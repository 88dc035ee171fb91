"""Engineering readouts: edge relaxation, tractions, corners, energy, critical thickness, thermal.

Sources are named beside each check. Cases are small (a few thousand elements).
"""

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from mesastrain.case.parse import parse_case
from mesastrain.derived import solve_and_derive
from mesastrain.derived.corners import _extreme_principal
from mesastrain.derived.relaxation import overshoot, relaxation_length
from mesastrain.errors import CaseError
from mesastrain.fem.fields import principal
from mesastrain.io.export import jsonable
from mesastrain.physics.materials import get_material
from mesastrain.physics.thinfilm import biaxial_stress_ratios_110

SI = {"material": "Si", "thickness": "100 um", "normal": [0, 0, 1], "x_axis": [1, 1, 0]}
QUIET = {"report": False, "vtu": False}


def _readouts(res) -> dict:
    return jsonable(next(d.summary["readouts"] for d in res.derived if "readouts" in d.summary))


def _run(data: dict):
    data = {"output": QUIET, "readouts": {"bow": False}, **data}
    return solve_and_derive(parse_case(data))


# --------------------------------------------------------------------------
# edge relaxation
# --------------------------------------------------------------------------
def _stripe(h: float):
    return _run({"substrate": SI, "layer": [{"material": "SiGe", "x": 0.3, "thickness": h}],
                 "pattern": {"shape": "stripe", "width": 3000, "etch_depth": 2 * h},
                 "mesh": {"order": 2, "edge_size": 2.0, "size": 100, "substrate_depth": 600},
                 "solver": {"method": "direct"}})


def test_relaxation_length_scales_with_film_thickness():
    # Linear elasticity has no length scale of its own: for a stripe much wider than the film
    # (here W/h >= 150, etch depth 2h), the edge field depends on the film thickness alone, so
    # doubling the film doubles the relaxation length (dimensional analysis, common practice).
    # The mesh (edge size 2 nm), the width and the substrate depth are NOT scaled with h.
    thin = _readouts(_stripe(10.0))["layers"]["SiGe"]["relaxation"]["+x"]["length"]
    thick = _readouts(_stripe(20.0))["layers"]["SiGe"]["relaxation"]["+x"]["length"]
    assert thin > 2 * 10.0          # several film thicknesses, not a mesh artefact
    assert thick / thin == pytest.approx(2.0, rel=0.10)


def test_relaxation_length_definition():
    s = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 10.0])
    ratio = np.array([0.0, 0.5, 0.85, 0.95, 1.02, 1.0])
    # crossing of 0.9 between s = 2 (0.85) and s = 3 (0.95): at 2.5
    assert relaxation_length(s, ratio) == pytest.approx(2.5)
    # a dip below 0.9 further in counts: the length is where it recovers for good
    ratio2 = np.array([0.0, 0.95, 0.5, 0.95, 1.0, 1.0])
    assert relaxation_length(s, ratio2) == pytest.approx(2.0 + 0.4 / 0.45)
    assert relaxation_length(s, np.ones(6)) == 0.0


def test_relaxation_length_does_not_hide_an_overshoot():
    # a cap pulled over a relaxing film: 3 x its centre stress 2 nm in from the sidewall. The
    # length is where the stress settles within 10 % of the centre value for good (entering
    # the band through 1.1 between s = 3 and 4), not where it first passes 0.9 (s = 1.16)
    s = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 10.0])
    ratio = np.array([0.0, 0.5, 3.0, 2.0, 1.05, 1.0])
    assert relaxation_length(s, ratio) == pytest.approx(3.0 + 0.9 / 0.95)
    assert overshoot(s, ratio) == {"peak_over_centre": 3.0, "at": 2.0}
    assert overshoot(s, np.array([0.0, 0.5, 0.85, 0.95, 1.05, 1.0])) is None


def test_summary_flags_singular_peaks_and_piezoresistance_out_of_range(small_mesa_result):
    import json

    from mesastrain.io.folder import summary_of

    s = json.loads(json.dumps(summary_of(small_mesa_result), default=lambda o: o.tolist()))
    peaks = {n: e["peaks"]["von_mises"] for n, e in s["readouts"]["layers"].items()}
    for n, lf in s["layer_figures"].items():
        assert lf["max_von_mises_singular"] == peaks[n]["singular"]
    assert s["layer_figures"]["substrate"]["max_von_mises_singular"]  # the etch-floor corner
    lim = s["device"]["piezo_linear_limit"]["percent"]
    assert lim == 20.0 and "Smith 1954" in s["device"]["piezo_linear_limit"]["reason"]
    for f in s["device"]["layer_figures"].values():
        for k, v in f.items():
            if k.startswith("piezo_"):
                beyond = [q for q in ("mean", "min", "max") if abs(v[q]) > lim]
                assert v.get("out_of_range", []) == beyond
    for p in s["probes"]:
        for item in (p.get("piezoresistance") or {}).values():
            if item and item.get("longitudinal") is not None:
                beyond = [w for w in ("longitudinal", "transverse") if abs(item[w]) > lim]
                assert item.get("out_of_range", []) == beyond


# --------------------------------------------------------------------------
# a small free mesa: tractions, corners, peaks
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def mesa():
    return _run({"substrate": SI,
                 "layer": [{"material": "SiGe", "x": 0.3, "thickness": 10},
                           {"material": "Si", "thickness": 5}],
                 "pattern": {"shape": "rectangle", "width": 80, "length": 80,
                             "etch_depth": 20, "margin": 40},
                 "mesh": {"order": 1, "edge_size": 2.5, "size": 10, "substrate_depth": 120}})


def test_interface_tractions_balance(mesa):
    # The part of a free mesa above an interface carries no external load, so the net normal
    # and shear force across the whole interface vanish (statics).
    r = _readouts(mesa)
    assert [i["z"] for i in r["interfaces"]] == [0.0, 10.0]
    for it in r["interfaces"]:
        bal = it["balance"]
        assert bal["area"] == pytest.approx(80.0 * 80.0, rel=1e-9)
        assert abs(bal["peel_force_relative"]) < 1e-3
        assert abs(bal["shear_force_relative"]) < 1e-3
        # and the tractions are not trivially zero: the edge concentrates them
        assert abs(it["shear_peak"]) > 100.0 and abs(it["peel_peak"]) > 10.0


def test_shear_at_film_edge_points_outward_for_compressive_film(mesa):
    # A compressed film pushes outward on its substrate at the free edge: the shear traction
    # it carries points toward the sidewall on every side (common practice; the sign follows
    # from equilibrium of the film's edge region).
    it = _readouts(mesa)["interfaces"][0]
    for side in ("+x", "-x", "+y", "-y"):
        assert it["sides"][side]["shear_peak"] > 0


def test_corner_and_edge_standoff_values(mesa):
    r = _readouts(mesa)
    assert r["standoff"] == pytest.approx(2.5)          # default: half the thinnest layer
    names = {f["name"] for f in r["edges"]}
    assert "SiGe/substrate edge +x" in names and "etch-floor corner +x" in names
    assert "etch-floor vertex (+x,+y)" in names
    for f in r["edges"]:
        assert f["singular"]                              # every edge here is a sharp one
        assert f["values"], f["name"]
        for v in f["values"].values():
            assert np.isfinite(v["von_mises"]) and v["element_size"] > 0
    # the square <110>-edged mesa on (001) is four-fold symmetric: same values on all sides
    vm = {f["name"]: next(iter(f["values"].values()))["von_mises"] for f in r["edges"]}
    assert vm["SiGe/substrate edge +x"] == pytest.approx(vm["SiGe/substrate edge -y"],
                                                            rel=1e-6)


def test_peaks_sit_at_singular_edges(mesa):
    r = _readouts(mesa)
    film = r["layers"]["SiGe"]
    vm = film["peaks"]["von_mises"]
    assert vm["value"] > 1000.0
    # the peak element touches an edge or corner: its centre is within two elements of it
    assert vm["distance_to_feature"] < 2 * 2.5 * math.sqrt(3)
    assert film["peaks"]["principal_min"]["value"] < -1000.0     # a compressed film
    assert film["peaks"]["hydrostatic_min"]["value"] < 0


def test_centre_keeps_most_of_the_blanket_stress_and_energy_drops(mesa):
    film = _readouts(mesa)["layers"]["SiGe"]
    c, b = film["centre_stress"], film["blanket_stress"]
    assert b[0][0] < 0 and c[0][0] < 0
    assert 0.3 < film["centre_over_blanket"]["xx"] < 1.0
    e = film["energy_per_area"]
    assert 0 < e["patterned"] < e["blanket"]
    assert e["plan_area"] == pytest.approx(80.0 * 80.0, rel=1e-9)


# --------------------------------------------------------------------------
# blanket value in an anisotropic orientation
# --------------------------------------------------------------------------
def test_blanket_stress_on_110_matches_closed_form():
    # Cubic film on (110), equal biaxial strain: sigma[1-10] and sigma[001] differ
    # (closed forms in REFERENCES.md 4, cubic (110), derived from the traction-free top).
    res = _run({"substrate": {"material": "Si", "thickness": "100 um", "normal": [1, 1, 0],
                              "x_axis": [1, -1, 0]},
                "layer": [{"material": "SiGe", "x": 0.2, "thickness": 20}]})
    film = _readouts(res)["layers"]["SiGe"]
    lm = res.layers[1]
    c = lm.material.constants
    m1, m2 = biaxial_stress_ratios_110(c["C11"], c["C12"], c["C44"])
    eps = lm.misfit
    assert film["blanket_stress"][0][0] == pytest.approx(1000 * m1 * eps, rel=1e-9)
    assert film["blanket_stress"][1][1] == pytest.approx(1000 * m2 * eps, rel=1e-9)
    # the blanket finite-element column reproduces it at the centre
    assert film["centre_stress"][0][0] == pytest.approx(film["blanket_stress"][0][0], rel=1e-6)
    assert film["centre_stress"][1][1] == pytest.approx(film["blanket_stress"][1][1], rel=1e-6)
    assert "relaxation" not in film and _readouts(res)["edges"] == []


# --------------------------------------------------------------------------
# critical thickness
# --------------------------------------------------------------------------
def _mb_single(f, b, nu):
    # Matthews & Blakeslee, J. Cryst. Growth 27, 118 (1974), force balance for one strained
    # layer on a thick substrate (8 pi form, REFERENCES.md 5b), 60 degree dislocations:
    # h = b (1 - nu cos^2 60) (ln(h/b) + 1) / (8 pi f (1 + nu) cos 60), largest root.
    A = b * (1 - nu * 0.25) / (8 * math.pi * f * (1 + nu) * 0.5)
    return brentq(lambda h: h - A * (math.log(h / b) + 1), A, 1e6 * b)


def _pb(f, b, a, nu):
    # People & Bean, Appl. Phys. Lett. 47, 322 (1985):
    # h = (1 - nu)/(1 + nu) / (16 pi sqrt 2) * b^2/a / f^2 * ln(h/b), largest root.
    C = (1 - nu) / (1 + nu) / (16 * math.pi * math.sqrt(2)) * b * b / a / (f * f)
    return brentq(lambda h: h - C * math.log(h / b), math.e * b, 1e8 * b)


@pytest.mark.parametrize("x, mb_ref, pb_ref", [(0.2, 13.7, 273.0), (0.3, 8.0, 101.0)])
def test_critical_thickness_sige_on_si(x, mb_ref, pb_ref):
    # Parameters written here: misfit f = (a_SiGe - a_Si)/a_SiGe with the Dismukes a(x) of the
    # materials table; MB with b = a_SiGe/sqrt(2), nu = C12/(C11 + C12) of the layer,
    # alpha = lambda = 60 deg; People-Bean with b = 0.4 nm, a = a_Si = 0.5431 nm (their
    # choice). Reference values: REFERENCES.md 5d, set A (derived from the same formulas).
    res = _run({"substrate": SI, "layer": [{"material": "SiGe", "x": x, "thickness": 5}]})
    ct = _readouts(res)["layers"]["SiGe"]["critical_thickness"]
    sige, si = get_material("SiGe", x), get_material("Si")
    f = (sige.a - si.a) / sige.a
    nu = sige.constants["C12"] / (sige.constants["C11"] + sige.constants["C12"])
    assert ct["misfit"] == pytest.approx(f, rel=1e-9)
    assert ct["matthews_blakeslee"] == pytest.approx(_mb_single(f, sige.a / 10 / math.sqrt(2),
                                                                nu), rel=1e-6)
    assert ct["people_bean"] == pytest.approx(_pb(f, 0.4, 0.5431, nu), rel=1e-6)
    assert ct["matthews_blakeslee"] == pytest.approx(mb_ref, rel=0.01)
    assert ct["people_bean"] == pytest.approx(pb_ref, rel=0.01)
    assert not ct["exceeds_matthews_blakeslee"]
    assert not any("Matthews-Blakeslee" in w for w in res.warnings)


def test_warning_when_a_pseudomorphic_layer_exceeds_critical_thickness():
    res = _run({"substrate": SI, "layer": [{"material": "SiGe", "x": 0.3, "thickness": 30}]})
    w = [w for w in res.warnings if "Matthews-Blakeslee" in w]
    assert len(w) == 1 and "pseudomorphic assumption" in w[0] and "People-Bean" in w[0]
    # a layer declared relaxed is the user's own statement: no critical-thickness warning
    res = _run({"substrate": SI,
                "layer": [{"material": "SiGe", "x": 0.3, "thickness": 30, "relaxed": 0.5}]})
    assert not any("Matthews-Blakeslee" in w for w in res.warnings)


# --------------------------------------------------------------------------
# thermal mismatch
# --------------------------------------------------------------------------
THERMAL = {"growth_temperature": "700 C", "final_temperature": "20 C"}


def test_relaxed_ge_on_si_cooled_from_growth_is_tensile():
    # A Ge layer relaxed at the growth temperature and cooled with the Si wafer ends in
    # in-plane tension of about +0.2 to +0.3 % (a well-known fact of the trade for Ge-on-Si,
    # common practice), and equals the closed form (alpha_Ge - alpha_Si)(T_growth - T_final)
    # with the coefficients of the materials table (Ge 5.9: Ioffe NSM; Si 2.57: Okada &
    # Tokumaru, J. Appl. Phys. 56, 314, 1984, at 300 K) within 1 %.
    res = _run({"substrate": SI, "layer": [{"material": "Ge", "thickness": 50, "relaxed": 1.0}],
                "thermal": THERMAL})
    strain, _, _, _ = res.sample(np.array([[0.0, 0.0, 25.0]]))
    exx = strain[0, 0, 0]
    closed = (get_material("Ge").alpha[0] - get_material("Si").alpha[0]) * 1e-6 * 680.0
    assert 0.002 <= exx <= 0.003
    assert exx == pytest.approx(closed, rel=0.01)
    assert strain[0, 1, 1] == pytest.approx(exx, rel=1e-6)
    # the layer summary reports the thermal part of the eigenstrain (crystal axes)
    th = res.layers[1].thermal_eigenstrain
    assert th[0, 0] == pytest.approx(-closed, rel=1e-9)


def test_pseudomorphic_layer_keeps_the_lattice_mismatch_of_the_final_temperature():
    # A coherent layer follows the substrate at every temperature: only the expansion between
    # the table's 300 K and the final temperature changes its strain (model notes).
    res = _run({"substrate": SI, "layer": [{"material": "Ge", "thickness": 1}],
                "thermal": THERMAL})
    th = res.layers[1].thermal_eigenstrain[0, 0]
    assert th == pytest.approx((5.9 - 2.57) * 1e-6 * (293.15 - 300.0), rel=1e-9)
    # half relaxed: half of the growth-to-final mismatch plus the rest at 300 K -> 293.15 K
    res = _run({"substrate": SI, "layer": [{"material": "Ge", "thickness": 1, "relaxed": 0.5}],
                "thermal": THERMAL})
    d = (5.9 - 2.57) * 1e-6
    want = d * (293.15 - 300.0) - 0.5 * d * (973.15 - 300.0)
    assert res.layers[1].thermal_eigenstrain[0, 0] == pytest.approx(want, rel=1e-9)


def test_readout_keys_are_checked():
    with pytest.raises(CaseError) as err:
        parse_case({"substrate": SI, "layer": [{"material": "Ge", "thickness": 5}],
                    "readouts": {"standoff": "-1 nm"}})
    assert err.value.key == "readouts.standoff"
    with pytest.raises(CaseError) as err:
        parse_case({"substrate": SI, "layer": [{"material": "Ge", "thickness": 5}],
                    "output": {"maps": ["stress_xx", "stres_zz"]}})
    assert err.value.key == "output.maps[1]" and "stress_zz" in str(err.value)
    case = parse_case({"substrate": SI, "layer": [{"material": "Ge", "thickness": 5}],
                       "readouts": {"standoff": "3 nm", "wafer_diameter": "300 mm",
                                    "bow": False}})
    assert (case.readouts.standoff, case.readouts.wafer_diameter, case.readouts.bow) == \
        (3.0, 3e8, False)
    assert parse_case(case.to_dict()).readouts == case.readouts


def test_convergence_figures(mesa):
    from mesastrain.derived.readouts import convergence_figures

    f = convergence_figures(mesa)
    names = list(f)
    assert any(n.startswith("SiGe/substrate edge +x in SiGe: von_mises at 2.5 nm")
               for n in names)
    assert f["SiGe relaxation length +x (nm)"] == pytest.approx(
        _readouts(mesa)["layers"]["SiGe"]["relaxation"]["+x"]["length"], rel=1e-9)
    assert "interface z=0 +x: peak shear" in f and all(np.isfinite(v) for v in f.values())


@pytest.mark.parametrize("kind", ["random", "all equal", "degenerate pairs", "one element"])
def test_principal_peaks_pruned_by_gershgorin_equal_the_full_search(kind):
    # The region peaks decompose only the elements whose Gershgorin bound can reach the
    # extreme: the value and the first element holding it equal those of decomposing every
    # element (bitwise: the same LAPACK call per matrix), also with ties and degenerate pairs.
    rng = np.random.default_rng(11)
    for scale in (1.0, 1e3, 1e-3):
        a = rng.normal(scale=scale, size=(1 if kind == "one element" else 2000, 3, 3))
        s = a + a.transpose(0, 2, 1)
        if kind == "all equal":
            s[:] = s[0]
        elif kind == "degenerate pairs":
            s[:, 0, 1] = s[:, 1, 0] = s[:, 0, 2] = s[:, 2, 0] = 0.0
            s[:, 0, 0] = s[:, 1, 1]
        pr = principal(s)
        i, v = _extreme_principal(s, largest=True)
        j, u = _extreme_principal(s, largest=False)
        assert i == int(np.argmax(pr[:, 0])) and v == pr[i, 0]
        assert j == int(np.argmin(pr[:, 2])) and u == pr[j, 2]
