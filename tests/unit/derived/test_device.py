"""End-to-end tests of mesastrain.derived.device: band edges, Raman shift and piezoresistance of a run.

Every case here is a blanket column (a few dozen elements, well under a second per solve),
except the map test, which renders one PNG.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.cli.main import main
from mesastrain.derived import PROVIDERS
from mesastrain.derived.device import CONDUCTION_VALLEYS, valley_names
from mesastrain.errors import CaseError
from mesastrain.io.folder import summary_of, vtu_data, write_result
from mesastrain.physics.bands import band_parameters
from mesastrain.physics.materials import get_material
from mesastrain.physics.piezo import piezo_coefficients
from mesastrain.physics.raman import backscatter_shift, raman_parameters
from mesastrain.run import pipeline


def blanket(substrate="SiGe", sub_x=0.2, layer="Si", layer_x=None, normal=(0, 0, 1),
            x_axis=(1, 1, 0), **extra) -> dict:
    d = {
        "title": "device blanket",
        "substrate": {"material": substrate, "thickness": "10 um", "normal": list(normal),
                      "x_axis": list(x_axis)},
        "layer": [{"material": layer, "thickness": 20}],
        "mesh": {"order": 1},
        "probe": [{"name": "film", "at": [0, 0, 10]}, {"name": "sub", "at": [0, 0, -5]}],
        "device": {"maps": False},
        "output": {"report": False,    # report.html renders many pictures: not needed here
                   "fields": ["displacement", "stress", "strain", "strain_crystal", "derived"],
                   "precision": "double"},
    }
    if sub_x is not None:
        d["substrate"]["x"] = sub_x
    if layer_x is not None:
        d["layer"][0]["x"] = layer_x
    for key, value in extra.items():
        if key == "device":
            d["device"].update(value)
        else:
            d[key] = value
    return d


def run(d: dict, extra=None):
    return pipeline.run_case(parse_case(d), providers=PROVIDERS, extra_eigenstrain=extra)


def summary(res) -> dict:
    """summary.json content as it is written (through JSON)."""
    from mesastrain.io.export import jsonable

    return json.loads(json.dumps(jsonable(summary_of(res))))


@pytest.fixture(scope="module")
def strained_si():
    """Strained Si(001) on relaxed Si0.8Ge0.2, edges along <110>, two channels."""
    d = blanket(channel=[{"name": "n110", "direction": [1, 0], "carrier": "n"},
                         {"name": "p100", "direction": [1, 1, 0], "carrier": "p"}])
    res = run(d)
    return res, summary(res)


# --------------------------------------------------------------------------
# band edges
# --------------------------------------------------------------------------
def test_delta2_delta4_splitting_of_strained_si(strained_si):
    # Strained Si on relaxed Si(1-y)Ge(y)(001): Delta2 - Delta4 = Xi_u (eps_perp - eps_par), with
    # eps_par = (a_SiGe - a_Si)/a_Si and eps_perp = -2 C12/C11 eps_par (REFERENCES.md sections 4
    # and 8; Herring & Vogt form with Van de Walle, PRB 39, 1871 (1989) Xi_u = 9.16 eV [M]).
    # REFERENCES.md section 8 [D] gives 122 meV at y = 0.2 with Dismukes a and the Si C_ij.
    res, s = strained_si
    si, sub = get_material("Si"), get_material("SiGe", 0.2)
    eps_par = (sub.a - si.a) / si.a
    eps_perp = -2.0 * si.constants["C12"] / si.constants["C11"] * eps_par
    closed = band_parameters("Si").xi_u_delta * (eps_perp - eps_par)
    be = s["probes"][0]["band_edges"]
    split = be["shifts"]["delta_z"] - be["shifts"]["delta_x"]
    assert split == pytest.approx(closed, rel=0.01)
    assert -1000.0 * split == pytest.approx(122.0, rel=0.01)
    assert be["shifts"]["delta_x"] == pytest.approx(be["shifts"]["delta_y"], abs=1e-9)
    # tensile Si: the two [001] valleys form the conduction edge (common practice)
    assert be["conduction_valleys"] == ["delta_z"]
    # the cell fields agree in every film element
    film = res.mesh.layer == 1
    _, d = vtu_data(res)
    cells = d["band_shift_delta_z"][film] - d["band_shift_delta_x"][film]
    assert np.allclose(cells, closed, rtol=0.01)
    assert np.all(d["band_conduction_valleys"][film] == 1 << CONDUCTION_VALLEYS.index("delta_z"))


def test_relaxed_substrate_has_no_band_shift(strained_si):
    # Far below the film the relaxed SiGe is unstrained: no shift, all six Delta valleys
    # degenerate (cubic symmetry, common practice).
    _, s = strained_si
    be = s["probes"][1]["band_edges"]
    assert max(abs(v) for v in be["shifts"].values()) < 1e-6
    assert be["conduction_valleys"] == ["delta_x", "delta_y", "delta_z"]
    assert be["parameters"] == "Si0.8Ge0.2"


def test_sige_on_si_valence_offset_end_to_end():
    # Coherent Si(1-x)Ge(x) on Si(001): heavy-hole offset ~0.74 x eV, People & Bean, Appl. Phys.
    # Lett. 48, 538 (1986) [C citation, value M]. The model gives about 0.69 x here; the 8 %
    # tolerance is derived from the scatter of b in tests/unit/physics/test_bands.py.
    x = 0.1
    s = summary(run(blanket(substrate="Si", sub_x=None, layer="SiGe", layer_x=x)))
    top_film = s["probes"][0]["band_edges"]["valence_edge_common"]
    top_si = s["probes"][1]["band_edges"]["valence_edge_common"]
    assert top_film - top_si == pytest.approx(0.74 * x, rel=0.08)


def test_zinc_blende_gamma_valley_end_to_end():
    # AlAs on GaAs(001), coherent: the Gamma conduction band moves by a_c tr(eps) with
    # eps_perp = -2 C12/C11 eps_par (REFERENCES.md section 4); a_c = -5.64 eV, Vurgaftman, Meyer
    # & Ram-Mohan, J. Appl. Phys. 89, 5815 (2001) [M]. No Raman or piezo data for III-Vs.
    s = summary(run(blanket(substrate="GaAs", sub_x=None, layer="AlAs")))
    film, sub = get_material("AlAs"), get_material("GaAs")
    eps_par = (sub.a - film.a) / film.a
    tr = eps_par * (2.0 - 2.0 * film.constants["C12"] / film.constants["C11"])
    be = s["probes"][0]["band_edges"]
    assert be["shifts"]["gamma_c"] == pytest.approx(-5.64 * tr, rel=0.01)
    assert be["conduction_valleys"] == ["gamma_c"]
    assert "raman_shift" not in s["probes"][0]             # no material with PDPs here
    assert not any(f.startswith(("raman", "piezo")) for f in s["device"]["fields"])


# --------------------------------------------------------------------------
# Raman
# --------------------------------------------------------------------------
def test_probe_raman_shift_is_backscatter_shift_of_its_strain(strained_si):
    # Same formula on the probe's own crystal-frame strain (mesastrain.physics.raman, secular equation
    # of Anastassakis et al. 1970), and the (001) closed form d omega = (omega0/2)(p e33 +
    # q(e11 + e22)) (REFERENCES.md section 7).
    res, s = strained_si
    p = s["probes"][0]
    par = raman_parameters("Si")
    R = res.layers[1].frame.R
    expected = backscatter_shift(np.array(p["strain_crystal"]), R, par.p, par.q, par.r,
                                 par.omega0)
    assert p["raman_shift"] == pytest.approx(float(expected), abs=1e-9)
    e = np.array(p["strain_crystal"])
    closed = 0.5 * par.omega0 * (par.p * e[2, 2] + par.q * (e[0, 0] + e[1, 1]))
    assert p["raman_shift"] == pytest.approx(closed, rel=1e-9)
    assert p["raman_modes"]["pdp_set"] == "acc1990"
    # (001): only the z-polarised mode is Raman-active (Loudon, Adv. Phys. 13, 423 (1964))
    z = int(np.argmax(np.abs(np.array(p["raman_modes"]["polarisation_sample"])[:, 2])))
    assert p["raman_modes"]["share"][z] == pytest.approx(1.0, abs=1e-9)
    # the relaxed SiGe substrate: Si-Si line at its relaxed position (no strain shift)
    assert s["probes"][1]["raman_shift"] == pytest.approx(0.0, abs=1e-9)
    assert "scaled to b_SiSi" in s["probes"][1]["raman_modes"]["pdp_set"]


def test_biaxial_raman_factor_end_to_end(strained_si):
    # Equi-biaxial (001) stress: sigma (MPa, each component) = -217 x d omega (cm^-1), De Wolf,
    # Semicond. Sci. Technol. 11, 139 (1996) [M], which follows from the 1990 PDPs
    # (REFERENCES.md section 7): within 1 %.
    _, s = strained_si
    p = s["probes"][0]
    sxx = p["stress"][0][0]
    assert sxx == pytest.approx(p["stress"][1][1], rel=1e-9)
    assert sxx / p["raman_shift"] == pytest.approx(-217.0, rel=0.01)
    reg = list(s["device"]["regions"].values())[1]["raman"]
    assert reg["stress_per_shift_biaxial"] == pytest.approx(-217.0, rel=0.01)
    assert reg["stress_per_shift_uniaxial_x"] == pytest.approx(-434.0, rel=0.01)


def test_vtu_raman_field_matches_crystal_frame_strain(strained_si, tmp_path):
    meshio = pytest.importorskip("meshio")
    from mesastrain.io.export import from_vtk6

    res, _ = strained_si
    out = write_result(res, tmp_path / "r")
    m = meshio.read(out / "fields.vtu")
    cd = {k: v[0] for k, v in m.cell_data.items()}
    for name in ("raman_shift", "band_shift_delta_z", "band_shift_L_m111", "band_gap_shift",
                 "band_conduction_valleys", "piezo_n110_long", "piezo_n110_trans",
                 "piezo_p100_long", "piezo_p100_trans"):
        assert name in cd, name
    film, sub = cd["region"] == 1, cd["region"] == 0
    par = raman_parameters("Si")
    expected = backscatter_shift(from_vtk6(cd["strain_crystal"][film]), res.layers[1].frame.R,
                                 par.p, par.q, par.r, par.omega0)
    assert np.allclose(cd["raman_shift"][film], expected, rtol=1e-9, atol=1e-12)
    assert np.allclose(cd["raman_shift"][sub], 0.0, atol=1e-9)   # relaxed SiGe: no shift
    assert np.all(np.isnan(cd["piezo_n110_long"][sub]))    # SiGe: no coefficients
    assert np.all(np.isfinite(cd["band_gap_shift"]))


S2, S3, S6 = np.sqrt(2.0), np.sqrt(3.0), np.sqrt(6.0)
#: Sample frames by hand (rows x, y = z cross x, z in cube coordinates).
R_111 = np.array([[1 / S2, -1 / S2, 0.0], [1 / S6, 1 / S6, -2 / S6], [1 / S3, 1 / S3, 1 / S3]])
R_110 = np.array([[1 / S2, -1 / S2, 0.0], [0.0, 0.0, -1.0], [1 / S2, 1 / S2, 0.0]])
#: Raman tensors R_x, R_y, R_z (Loudon, Adv. Phys. 13, 423 (1964)), written out here.
LOUDON = np.array([[[0, 0, 0], [0, 0, 1], [0, 1, 0]], [[0, 0, 1], [0, 0, 0], [1, 0, 0]],
                   [[0, 1, 0], [1, 0, 0], [0, 0, 0]]], dtype=float)


def _line_by_hand(eps_c, R, par, pols=None):
    """Intensity-weighted line from the secular equation and Loudon's tensors, by hand."""
    e = eps_c
    K = 0.5 * par.omega0 * np.array(
        [[par.p * e[0, 0] + par.q * (e[1, 1] + e[2, 2]), 2 * par.r * e[0, 1], 2 * par.r * e[0, 2]],
         [2 * par.r * e[0, 1], par.p * e[1, 1] + par.q * (e[0, 0] + e[2, 2]), 2 * par.r * e[1, 2]],
         [2 * par.r * e[0, 2], 2 * par.r * e[1, 2], par.p * e[2, 2] + par.q * (e[0, 0] + e[1, 1])]])
    w, V = np.linalg.eigh(K)
    pairs = pols or [(R[a], R[b]) for a in (0, 1) for b in (0, 1)]
    inten = [sum(float(es @ np.einsum("k,kij->ij", V[:, j], LOUDON) @ ei) ** 2
                 for ei, es in pairs) for j in range(3)]
    return float(np.dot(inten, w) / np.sum(inten))


def test_raman_on_111_with_strain_rotated_by_hand():
    # Strained Si on relaxed Si0.8Ge0.2(111), x along [1-10]. The probe's sample-frame strain is
    # rotated into cube axes here with the hand-written matrix (eps_c = R^T eps_s R), and the
    # line is computed from the secular equation (Anastassakis et al. 1990 PDPs) and Loudon's
    # (1964) tensors. Rotating the wrong way (R eps_s R^T) changes the line by far more than
    # the tolerance, so this test catches that bug.
    s = summary(run(blanket(normal=(1, 1, 1), x_axis=(1, -1, 0))))
    p = s["probes"][0]
    eps_s = np.array(p["strain"])
    eps_c = R_111.T @ eps_s @ R_111
    assert np.allclose(p["strain_crystal"], eps_c, atol=1e-12)
    par = raman_parameters("Si")
    hand = _line_by_hand(eps_c, R_111, par)
    assert p["raman_shift"] == pytest.approx(hand, rel=1e-6)
    wrong = _line_by_hand(R_111 @ eps_s @ R_111.T, R_111, par)
    assert abs(wrong - hand) > 0.1 * abs(hand)
    # (111): all three modes are Raman-active (Loudon 1964)
    assert min(p["raman_modes"]["share"]) > 0.19


def test_raman_on_110_forbids_the_normal_mode():
    # Strained Si on relaxed SiGe(110), x along [1-10]: the mode polarised along the normal
    # [110] has zero share (Loudon 1964); the line equals the hand computation. With
    # [device] raman_polarisation = [[1, 0], [0, 1]] (incident x, scattered y) only the mode
    # along [1-10] is seen: e_s R e_i vanishes for the [001] mode (hand: R_z has xy entries
    # only, and y = [00-1]).
    s = summary(run(blanket(normal=(1, 1, 0), x_axis=(1, -1, 0))))
    p = s["probes"][0]
    eps_c = R_110.T @ np.array(p["strain"]) @ R_110
    par = raman_parameters("Si")
    assert p["raman_shift"] == pytest.approx(_line_by_hand(eps_c, R_110, par), rel=1e-6)
    pol = np.array(p["raman_modes"]["polarisation_sample"])          # rows: modes
    normal_mode = int(np.argmax(np.abs(pol[:, 2])))
    assert p["raman_modes"]["share"][normal_mode] == pytest.approx(0.0, abs=1e-9)
    s2 = summary(run(blanket(normal=(1, 1, 0), x_axis=(1, -1, 0),
                             device={"raman_polarisation": [[1, 0], [0, 1]]})))
    p2 = s2["probes"][0]
    hand = _line_by_hand(eps_c, R_110, par, [(R_110[0], R_110[1])])
    assert p2["raman_shift"] == pytest.approx(hand, rel=1e-6)
    x_mode = int(np.argmax(np.abs(np.array(p2["raman_modes"]["polarisation_sample"])[:, 0])))
    assert p2["raman_modes"]["share"][x_mode] == pytest.approx(1.0, abs=1e-9)
    assert "incident" in list(s2["device"]["regions"].values())[1]["raman"]["mode_seen"]


def test_raman_under_uniaxial_stress_along_100_on_001():
    # 100 MPa uniaxial along [100] in Si(001) (x along [100], so crystal = sample axes). By hand:
    # eps_xx = S11 sigma, eps_yy = eps_zz = S12 sigma with S11 = (C11 + C12)/((C11 - C12)(C11 +
    # 2 C12)), S12 = -C12/((C11 - C12)(C11 + 2 C12)); only the z mode is seen, d omega =
    # (omega0/2)(p S12 + q (S11 + S12)) sigma; and sigma / d omega = -434 MPa per cm^-1 (De Wolf,
    # Semicond. Sci. Technol. 11, 139 (1996) [M]).
    d = blanket(substrate="Si", sub_x=None, x_axis=(1, 0, 0))
    s = summary(run(d, extra=_uniaxial_source(100.0)))
    p = s["probes"][0]
    c = get_material("Si").constants
    c11, c12 = c["C11"], c["C12"]
    den = (c11 - c12) * (c11 + 2 * c12)
    s11, s12 = (c11 + c12) / den, -c12 / den                         # 1/GPa
    sig = 0.1                                                        # GPa
    assert np.allclose(p["strain_crystal"], np.diag([s11, s12, s12]) * sig, atol=1e-9)
    par = raman_parameters("Si")
    hand = 0.5 * par.omega0 * (par.p * s12 + par.q * (s11 + s12)) * sig
    assert p["raman_shift"] == pytest.approx(hand, rel=1e-4)
    assert 100.0 / p["raman_shift"] == pytest.approx(-434.0, rel=0.01)
    assert sorted(p["raman_modes"]["share"]) == pytest.approx([0.0, 0.0, 1.0], abs=1e-9)


def test_sige_film_si_si_line():
    # Pseudomorphic Si0.8Ge0.2 on Si(001): d omega = b_SiSi eps_par with b_SiSi = -850 cm^-1
    # (Tsang et al., J. Appl. Phys. 75, 8088 (1994); Pezzoli et al., J. Appl. Phys. 103, 093521
    # (2008) [from memory]), eps_par = (a_Si - a_SiGe)/a_SiGe; about +6.9 cm^-1 at x = 0.2.
    s = summary(run(blanket(substrate="Si", sub_x=None, layer="SiGe", layer_x=0.2)))
    film = s["probes"][0]
    eps_par = film["strain"][0][0]
    si, sige = get_material("Si"), get_material("SiGe", 0.2)
    assert eps_par == pytest.approx((si.a - sige.a) / sige.a, rel=1e-3)
    assert film["raman_shift"] == pytest.approx(-850.0 * eps_par, rel=1e-3)
    assert film["raman_modes"]["omega0"] == pytest.approx(520.5 - 62.0 * 0.2)
    assert s["probes"][1]["raman_shift"] == pytest.approx(0.0, abs=1e-9)   # relaxed Si


def test_gan_film_e2_high():
    # GaN on AlN(0001): the E2(high) line shifts by -4.2 cm^-1 per GPa of biaxial stress
    # (Kisielowski et al., Phys. Rev. B 54, 17745 (1996) [from memory]); tensile GaN on AlN is
    # softer. The biaxial factor is 1000/-4.2 = -238 MPa per cm^-1.
    d = blanket(substrate="AlN", sub_x=None, layer="GaN", normal=(0, 0, 0, 1),
                x_axis=(2, -1, -1, 0))
    s = summary(run(d))
    film = s["probes"][0]
    sxx = film["stress"][0][0]
    assert sxx < 0.0 or sxx > 0.0
    assert film["raman_shift"] == pytest.approx(-4.2e-3 * sxx, rel=1e-6)
    reg = list(s["device"]["regions"].values())[1]["raman"]
    assert reg["stress_per_shift_biaxial"] == pytest.approx(1000.0 / -4.2)
    assert reg["stress_per_shift_uniaxial_x"] is None


# --------------------------------------------------------------------------
# piezoresistance
# --------------------------------------------------------------------------
def _uniaxial_source(sigma_mpa: float):
    """Film eigenstrain giving plane stress sigma_xx = sigma_mpa, sigma_yy = 0 in a blanket film.

    The blanket column keeps zero in-plane total strain, so the elastic in-plane strain is
    -eps0 and sigma = S_in^-1 (-eps0) with S_in the in-plane block (Voigt 1, 2, 6) of the
    film's sample-frame compliance: eps0 = -S_in sigma.
    """
    def source(case, layers, mesh):
        S = np.linalg.inv(layers[1].stiffness_sample)            # 1/GPa
        idx = [0, 1, 5]
        v = -S[np.ix_(idx, idx)] @ np.array([sigma_mpa / 1000.0, 0.0, 0.0])
        e0 = np.array([[v[0], v[2] / 2, 0.0], [v[2] / 2, v[1], 0.0], [0.0, 0.0, 0.0]])
        out = np.zeros((len(mesh.layer), 3, 3))
        out[mesh.layer == 1] = e0
        return out
    return source


@pytest.mark.parametrize("kind", ["n", "p"])
def test_channel_along_110_under_uniaxial_stress(kind, monkeypatch):
    # Uniaxial stress sigma along the <110> channel on Si(001): d rho/rho = pi_l sigma with
    # pi_l = (pi11 + pi12 + pi44)/2, and across it pi_t sigma with pi_t = (pi11 + pi12 - pi44)/2
    # (Smith, Phys. Rev. 94, 42 (1954); Kanda, IEEE Trans. Electron Devices ED-29, 64 (1982);
    # REFERENCES.md section 6: -31.2/-17.6 n-Si, +71.8/-66.3 p-Si in 1e-11/Pa [D]). A <100>
    # channel under the same stress sees (pi11 + pi12) sigma/2 (the <100> pi_l and pi_t, each
    # with half the stress, and no shear coefficient in cube axes).
    d = blanket(substrate="Si", sub_x=None,
                channel=[{"name": "along", "direction": [1, 0], "carrier": kind},
                         {"name": "cube", "direction": [1, 1], "carrier": kind}])
    s = summary(run(d, extra=_uniaxial_source(100.0)))
    p = s["probes"][0]
    assert np.allclose(p["stress"], np.diag([100.0, 0.0, 0.0]), atol=1e-3)
    c = piezo_coefficients(f"{kind}-Si")
    pi_l = (c.pi11 + c.pi12 + c.pi44) / 2
    pi_t = (c.pi11 + c.pi12 - c.pi44) / 2
    along, cube = p["piezoresistance"]["along"], p["piezoresistance"]["cube"]
    assert along["direction_crystal"] == "[110]" and cube["direction_crystal"] == "[010]"
    assert along["pi_l"] == pytest.approx(pi_l) and along["pi_t"] == pytest.approx(pi_t)
    assert along["pi_l"] == pytest.approx({"n": -31.2, "p": 71.8}[kind], abs=0.05)
    # percent = 100 * 1e-11/Pa * pi * sigma[MPa] * 1e6 = 1e-3 pi sigma
    assert along["longitudinal"] == pytest.approx(1e-3 * pi_l * 100.0, rel=1e-6)
    assert along["transverse"] == pytest.approx(1e-3 * pi_t * 100.0, rel=1e-6)
    assert cube["longitudinal"] == pytest.approx(1e-3 * (c.pi11 + c.pi12) / 2 * 100.0,
                                                 rel=1e-6)
    assert not any("small-stress" in w for w in s["warnings"])   # 100 MPa: within range


def test_large_piezo_change_is_flagged(strained_si):
    # 1.3 GPa biaxial tension: the n-channel change is far beyond the small-stress range of the
    # linear coefficients (common practice), so the run says so.
    _, s = strained_si
    assert any("n110" in w and "small-stress" in w for w in s["warnings"])


def test_default_channels_when_none_given():
    s = summary(run(blanket(substrate="Si", sub_x=None, layer="SiGe", layer_x=0.2)))
    names = [c["name"] for c in s["device"]["channels"]]
    assert names == ["n_x", "p_x"] and all(c["default"] for c in s["device"]["channels"])
    assert s["probes"][1]["piezoresistance"]["n_x"]["pi_l"] == pytest.approx(-31.2, abs=0.05)
    assert s["probes"][0]["piezoresistance"]["p_x"]["longitudinal"] is None   # SiGe


# --------------------------------------------------------------------------
# switches, cuts, maps, report
# --------------------------------------------------------------------------
@pytest.mark.parametrize("off", ["bands", "raman", "piezo"])
def test_each_switch_turns_its_quantity_off(off):
    res = run(blanket(device={off: False}))
    s = summary(res)
    prefix = {"bands": "band_", "raman": "raman_", "piezo": "piezo_"}[off]
    probe_key = {"bands": "band_edges", "raman": "raman_shift", "piezo": "piezoresistance"}[off]
    names = s["device"]["fields"]
    assert not any(n.startswith(prefix) for n in names)
    assert probe_key not in s["probes"][0]
    others = {"bands", "raman", "piezo"} - {off}
    for other in others:
        key = {"bands": "band_edges", "raman": "raman_shift", "piezo": "piezoresistance"}[other]
        assert key in s["probes"][0]
    assert s["device"]["switches"][off] is False


def test_all_switches_off_adds_nothing():
    res = run(blanket(device={"bands": False, "raman": False, "piezo": False}))
    s = summary(res)
    assert "device" not in s
    assert not any(k in s["probes"][0] for k in ("band_edges", "raman_shift", "piezoresistance"))


def test_pdp_choice_is_used():
    # The 1970 PDP set (Anastassakis et al., Solid State Commun. 8, 133 (1970) [M]) gives
    # -259 MPa per cm^-1 for each component of biaxial stress on (001) (REFERENCES.md section 7).
    s = summary(run(blanket(device={"raman_pdp": {"Si": "apbpc1970"}})))
    assert s["probes"][0]["raman_modes"]["pdp_set"] == "apbpc1970"
    assert list(s["device"]["regions"].values())[1]["raman"]["stress_per_shift_biaxial"] == pytest.approx(
        -259.0, rel=0.01)


def test_cut_csv_and_report(tmp_path):
    from mesastrain.io.report_device import report_text

    d = blanket(cut=[{"name": "down", "from": [0, 0, 20], "to": [0, 0, -10], "points": 7}])
    res = run(d)
    out = write_result(res, tmp_path / "r")
    lines = (out / "cut_down_device.csv").read_text().splitlines()
    head = lines[0].split(",")
    assert head[:5] == ["distance_nm", "x_nm", "y_nm", "z_nm", "region"]
    assert "raman_shift_cm-1" in head and "piezo_p_x_long_percent" in head
    rows = [r.split(",") for r in lines[1:]]
    assert len(rows) == 7
    k = head.index("raman_shift_cm-1")
    assert rows[0][4] == res.layers[1].name and float(rows[0][k]) < -5.0   # tensile Si: softer
    assert rows[-1][4] == "substrate" and abs(float(rows[-1][k])) < 1e-3   # relaxed SiGe
    summ = json.loads((out / "summary.json").read_text())
    text = report_text(summ, out)
    assert "Raman" in text and "cm⁻¹" in text and "Δ[001]" in text
    from mesastrain.io import report
    from mesastrain.io.report_device import section_device

    assert section_device in report.SECTIONS
    html = section_device(summ, out)
    assert "<h2>Device readouts" in html and "p_x" in html and "cut_down_device.csv" in html


@pytest.mark.slow
def test_map_png_is_written(tmp_path):
    pytest.importorskip("pyvista")
    d = blanket(device={"maps": True, "bands": False, "piezo": False})
    d["pattern"] = {"shape": "rectangle", "width": 200, "length": 200, "etch_depth": 40}
    d["mesh"] = {"order": 1, "size": 25, "edge_size": 10}
    d["probe"] = [{"name": "film", "at": [0, 0, 10]}]
    out = write_result(run(d), tmp_path / "r")
    pngs = sorted(p.name for p in out.glob("device_map_*.png"))
    assert pngs == ["device_map_raman_shift.png"]
    assert (out / pngs[0]).stat().st_size > 10_000


def test_valley_mask_names():
    assert valley_names(3) == ["delta_x", "delta_y"]
    assert valley_names(1 << 7) == ["gamma_c"] and valley_names(0) == []


# --------------------------------------------------------------------------
# case-file keys
# --------------------------------------------------------------------------
@pytest.mark.parametrize("patch, key, fragment", [
    ({"channel": [{"direction": [1, 0, 1], "carrier": "n"}]}, "channel[0].direction",
     "must lie in the wafer plane"),
    ({"channel": [{"direction": [0, 0], "carrier": "n"}]}, "channel[0].direction",
     "zero vector"),
    ({"channel": [{"direction": [1], "carrier": "n"}]}, "channel[0].direction",
     "expected an in-plane direction"),
    ({"channel": [{"direction": "110", "carrier": "n"}]}, "channel[0].direction",
     "expected an in-plane direction"),
    ({"channel": [{"direction": [1, True], "carrier": "n"}]}, "channel[0].direction",
     "expected an in-plane direction"),
    ({"channel": [{"direction": [1, 0], "carrier": "electrons"}]}, "channel[0].carrier",
     'allowed: "n", "p"'),
    ({"channel": [{"direction": [1, 0]}]}, "channel[0].carrier", "required key is missing"),
    ({"channel": [{"carrier": "p"}]}, "channel[0].direction", "required key is missing"),
    ({"channel": [{"direction": [1, 0], "carrier": "p", "type": "p"}]}, "channel[0].type",
     "unknown key"),
    ({"channel": [{"direction": [1, 0], "carrier": "p"},
                  {"name": "channel1", "direction": [0, 1], "carrier": "n"}]},
     "channel[1].name", "already used"),
    ({"channel": {"direction": [1, 0], "carrier": "p"}}, "channel", "[[channel]]"),
    ({"device": {"bands": "yes"}}, "device.bands", "expected true or false"),
    ({"device": {"raman": 1}}, "device.raman", "expected true or false"),
    ({"device": {"band": True}}, "device.band", 'did you mean "bands"'),
    ({"device": {"raman_pdp": "apbpc1970"}}, "device.raman_pdp", "expected a table"),
    ({"device": {"raman_pdp": {"Si": "1990"}}}, "device.raman_pdp.Si", "is not a PDP set"),
    ({"device": {"raman_pdp": {"GaAs": "x"}}}, "device.raman_pdp.GaAs", "no Raman data"),
    ({"device": {"raman_polarisation": [[1, 0]]}}, "device.raman_polarisation", "incident"),
    ({"device": {"raman_polarisation": [[1, 0], [1, 0, 1]]}}, "device.raman_polarisation[1]",
     "wafer plane"),
    ({"device": True}, "device", "expected a table"),
])
def test_bad_channel_and_device_input(patch, key, fragment):
    d = blanket()
    d.pop("device")
    d.update(patch)
    with pytest.raises(CaseError) as info:
        parse_case(d)
    assert info.value.key == key
    assert fragment in info.value.message


def test_channel_and_device_round_trip():
    d = blanket(channel=[{"name": "a b", "direction": [3, 4], "carrier": "p"}],
                device={"raman_pdp": {"Si": "crc1978"}, "piezo": False})
    case = parse_case(d)
    assert case.channels[0].direction == (3.0, 4.0, 0.0)
    assert case.device.raman_pdp == (("Si", "crc1978"),) and case.device.piezo is False
    assert parse_case(json.loads(json.dumps(case.to_dict()))) == case


# --------------------------------------------------------------------------
# raman-stress command
# --------------------------------------------------------------------------
def test_raman_stress_command_factors(capsys):
    # (001) backscattering with the 1990 PDPs: uniaxial sigma = -434 MPa per cm^-1, biaxial
    # -217 per component (De Wolf, Semicond. Sci. Technol. 11, 139 (1996) [M]; REFERENCES.md
    # section 7), within 1 %.
    assert main(["raman-stress", "-1.0", "--kind", "uniaxial", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["factor"] == pytest.approx(-434.0, rel=0.01)
    assert d["stress"] == pytest.approx(434.0, rel=0.01) and d["along"] == "[100]"
    assert main(["raman-stress", "2", "--kind", "biaxial"]) == 0
    text = capsys.readouterr().out
    assert "MPa per cm^-1" in text and "compressive" in text and "acc1990" in text
    factor = float(text.split("conversion factor")[1].split()[0])
    assert factor == pytest.approx(-217.0, rel=0.01)


@pytest.mark.parametrize("argv, fragment", [
    (["--kind", "uniaxial", "--normal", "1,1"], "--normal"),
    (["--kind", "uniaxial", "--along", "1,1,1"], "--along"),
    (["--kind", "uniaxial", "--material", "GaAs"], "--material"),
    (["--kind", "biaxial", "--pdp", "nope"], "--pdp"),
])
def test_raman_stress_command_errors(argv, fragment, capsys):
    assert main(["raman-stress", "1.0", *argv]) == 2
    err = capsys.readouterr().err.strip()
    assert fragment in err and "\n" not in err


def test_raman_stress_command_on_110_and_polarised(capsys):
    # (110), uniaxial along [1-10], unpolarised: the line is the 2:1 mean of the allowed modes
    # -2.878 and -2.305 cm^-1 per GPa (REFERENCES.md section 7 [D]; Loudon 1964 tensors), so
    # -372 MPa per cm^-1, not 1000/-0.556 = -1800 from the forbidden normal mode.
    assert main(["raman-stress", "-1", "--kind", "uniaxial", "--normal", "1,1,0", "--along",
                 "1,-1,0", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["factor"] == pytest.approx(1000.0 / ((2 * -2.878 - 2.305) / 3), rel=0.002)
    # polarised x(y)-type: incident along x, analyser along y sees only the [1-10] mode
    assert main(["raman-stress", "-1", "--kind", "uniaxial", "--normal", "1,1,0", "--along",
                 "1,-1,0", "--incident", "1,0", "--scattered", "0,1", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["per_gpa"] == pytest.approx(-2.878, abs=0.002)
    # z(x,x)-z with x along [100] on (001): no first-order signal (Loudon 1964)
    assert main(["raman-stress", "-1", "--kind", "uniaxial", "--incident", "1,0",
                 "--scattered", "1,0"]) == 2
    err = capsys.readouterr().err.strip()
    assert "Raman-active" in err and "\n" not in err


@pytest.mark.parametrize("pols", [None, [[1, 0], [0, 1]]])
def test_cell_fields_without_mode_detail_equal_the_full_evaluation(pols):
    # The cell fields skip the per-mode eigen-decomposition: their Raman shift is the linear
    # observable tr(W K) / tr(W) (Loudon 1964 intensities summed over the modes). On a
    # low-symmetry (113) wafer, polarised and not, with random strains and stresses, every
    # written field equals the full evaluation, and only the probes' detail is left out.
    from mesastrain.derived.device_physics import evaluate, plan_of

    dev = {"raman_polarisation": pols} if pols else {}
    res = run(blanket(normal=(1, 1, 3), x_axis=(1, -1, 0), device=dev,
                      channel=[{"name": "c", "direction": [2, 1], "carrier": "p"}]))
    plan = plan_of(res.case, res.layers)
    rng = np.random.default_rng(7)
    n = 200
    a = rng.normal(scale=4e-3, size=(n, 3, 3))
    strain = 0.5 * (a + np.swapaxes(a, 1, 2))
    stress = 1e5 * strain + rng.normal(scale=50.0, size=(n, 1, 1)) * np.eye(3)
    region = rng.integers(0, 2, size=n)
    full = evaluate(plan, region, strain, stress)
    lean = evaluate(plan, region, strain, stress, detail=False)
    assert sorted(k for k in full if not k.startswith("_")) == sorted(lean)
    assert {"_raman_modes", "_raman_share", "_raman_polarisation"} <= set(full)
    for k, v in lean.items():
        np.testing.assert_allclose(v, full[k], rtol=1e-12, atol=1e-12, err_msg=k)
    # the line is the share-weighted mean of the modes, which the full evaluation keeps
    mean = np.sum(full["_raman_share"] * full["_raman_modes"], axis=1)
    np.testing.assert_allclose(lean["raman_shift"], mean, rtol=1e-9, atol=1e-12)
