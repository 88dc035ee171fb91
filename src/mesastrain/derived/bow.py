"""Wafer bow of the blanket stack on a free-standing wafer.

Three estimates side by side, all for the *unpatterned* stack of the case on
its full substrate thickness (lattice and thermal eigenstrain included):

finite elements
    A square, free-standing piece of the wafer (half-width :data:`PLATE_HALF_WIDTH`
    substrate thicknesses) with triquadratic bricks, held only against
    rigid-body motion (three points, six components: a 3-2-1 support, which
    carries no load because the eigenstrain load is self-equilibrated). The
    curvature is fitted to the bottom-surface deflection within one substrate
    thickness of the centre, well away from the free edges.
Stoney
    kappa = 6 sum(sigma_i h_i) / (M_s h_s^2) (Stoney, Proc. R. Soc. Lond. A 82,
    172, 1909; M_s the substrate biaxial modulus), with sigma_i the blanket
    (rigid-substrate) stress of each layer; and the same with the film force
    of the bent finite-element wafer, the form used to infer stress from a
    measured curvature.
laminate
    Classical lamination theory for any number of anisotropic layers (in-plane
    strain linear through the thickness, sigma_zz = 0); for one layer on an
    in-plane isotropic substrate it is Timoshenko's bimetal result (J. Opt.
    Soc. Am. 11, 233, 1925, with biaxial moduli), also reported.

Sign: curvature positive when the film side is concave (a tensile film).
Units: curvature 1/m, radius m, bow height (sagitta over the wafer diameter)
um; stresses MPa; lengths in the case nm.
"""

from __future__ import annotations

import copy
import hashlib
import logging
import threading
import time
from collections import OrderedDict

import numpy as np

from mesastrain.derived.relaxation import blanket_state
from mesastrain.fem.assembly import assemble
from mesastrain.fem.discretisation import discretise
from mesastrain.fem.fields import evaluate_at_points
from mesastrain.fem.solve import solve_condensed
from mesastrain.model.regions import stack_of
from mesastrain.physics.thinfilm import (
    bow_height,
    radius_of_curvature,
    stoney_curvature,
    timoshenko_curvature,
)
from mesastrain.run.result import Derived

log = logging.getLogger(__name__)

#: Half-width of the modelled free plate, in substrate thicknesses.
PLATE_HALF_WIDTH = 3.0
#: Radius (in substrate thicknesses) of the central region the curvature is fitted over.
FIT_RADIUS = 1.0
#: Elements across the plate (each direction) and through the substrate.
PLATE_ELEMENTS = 8
SUBSTRATE_ELEMENTS = 2
#: Free-plate solutions kept in memory, keyed by every input: the bow is a property of the
#: blanket stack alone, so a sweep over the feature's shape or mesh solves its wafer once per
#: worker process instead of once per case (0.1-0.3 s each, most of a small case's run).
PLATE_MEMO = 16

_plate_memo: OrderedDict = OrderedDict()
_plate_lock = threading.Lock()

_IN = np.array([0, 1, 5])      # Voigt 11, 22, 12
_OUT = np.array([2, 3, 4])     # Voigt 33, 23, 13


def reduced_stiffness(c6: np.ndarray) -> np.ndarray:
    """In-plane stiffness with sigma_zz = sigma_yz = sigma_xz = 0, (3, 3), GPa.

    Acts on (eps_xx, eps_yy, gamma_xy) and gives (sigma_xx, sigma_yy, sigma_xy).
    """
    c = np.asarray(c6, dtype=float)
    return (c[np.ix_(_IN, _IN)]
            - c[np.ix_(_IN, _OUT)] @ np.linalg.solve(c[np.ix_(_OUT, _OUT)], c[np.ix_(_OUT, _IN)]))


def _in_plane(e: np.ndarray) -> np.ndarray:
    e = np.asarray(e, dtype=float)
    return np.array([e[0, 0], e[1, 1], 2.0 * e[0, 1]])


def laminate_curvature(stiffness, eigenstrain, z_bottom, z_top) -> dict:
    """Curvature of a free, laterally infinite laminate (classical lamination theory).

    The in-plane strain is eps0 + z k; the resultant force and moment vanish.

    Parameters
    ----------
    stiffness : sequence of (6, 6)
        Sample-frame stiffness of each region, GPa.
    eigenstrain : sequence of (3, 3)
        Sample-frame eigenstrain of each region.
    z_bottom, z_top : sequence of float
        Region bounds, nm.

    Returns
    -------
    dict
        ``curvature`` (2x2, 1/m, film-side-concave positive), ``mean``
        (1/m), ``mid_plane_strain`` (eps_xx, eps_yy, gamma_xy of z = 0).
    """
    A = np.zeros((3, 3))
    B = np.zeros((3, 3))
    D = np.zeros((3, 3))
    N = np.zeros(3)
    M = np.zeros(3)
    for c6, e, zb, zt in zip(stiffness, eigenstrain, z_bottom, z_top):
        Q = reduced_stiffness(c6)
        ev = _in_plane(e)
        h1, h2, h3 = zt - zb, (zt ** 2 - zb ** 2) / 2.0, (zt ** 3 - zb ** 3) / 3.0
        A += Q * h1
        B += Q * h2
        D += Q * h3
        N += Q @ ev * h1
        M += Q @ ev * h2
    K = np.block([[A, B], [B, D]])
    sol = np.linalg.solve(K, np.concatenate([N, M]))
    eps0, k = sol[:3], sol[3:]                     # k = d(eps)/dz = -d2w/dx2, 1/nm
    kap = -np.array([[k[0], k[2] / 2.0], [k[2] / 2.0, k[1]]]) * 1e9
    return {"curvature": kap, "mean": float(np.trace(kap) / 2.0), "mid_plane_strain": eps0}


def biaxial_modulus(c6: np.ndarray) -> float:
    """Equi-biaxial modulus (sigma_xx + sigma_yy)/(2 eps) of a film with this stiffness, GPa."""
    Q = reduced_stiffness(c6)
    s = Q @ np.array([1.0, 1.0, 0.0])
    return float((s[0] + s[1]) / 2.0)


# --------------------------------------------------------------------------
# finite-element free plate
# --------------------------------------------------------------------------
def _plate_mesh(z_bounds: np.ndarray, half: float, n_xy: int, n_sub: int):
    """Brick mesh of the free plate and the region of each element."""
    from skfem import MeshHex

    xs = np.linspace(-half, half, n_xy + 1)
    zs = [np.linspace(z_bounds[0], z_bounds[1], n_sub + 1)]
    for zt in z_bounds[2:]:
        zs.append(np.array([zt]))
    z = np.concatenate(zs)
    mesh = MeshHex.init_tensor(xs, xs, z)
    zmid = mesh.p[2, mesh.t].mean(axis=0)
    region = np.searchsorted(np.asarray(z_bounds[1:-1]), zmid, side="right").astype(np.int32)
    return mesh, region


def _brick_containing(mesh, pts: np.ndarray) -> np.ndarray:
    """Index of an axis-aligned brick containing each point (bounding-box test)."""
    box = mesh.p[:, mesh.t]                                   # (3, 8, nel)
    lo, hi = box.min(axis=1), box.max(axis=1)                 # (3, nel)
    tol = 1e-9 * float(np.ptp(mesh.p))
    ok = np.all((pts.T[:, :, None] >= lo[:, None, :] - tol)
                & (pts.T[:, :, None] <= hi[:, None, :] + tol), axis=0)   # (npts, nel)
    return np.argmax(ok, axis=1)


def free_plate_curvature(stiffness, eigenstrain, z_bottom, z_top, *, order: int = 2,
                         half_width: float = PLATE_HALF_WIDTH, n_xy: int = PLATE_ELEMENTS,
                         n_sub: int = SUBSTRATE_ELEMENTS) -> dict:
    """Curvature of a free-standing square piece of the blanket stack, by finite elements.

    The last :data:`PLATE_MEMO` answers are remembered: the same inputs (bit for bit) return
    a copy of the earlier answer without solving again.

    Parameters
    ----------
    stiffness, eigenstrain, z_bottom, z_top
        As for :func:`laminate_curvature`; region 0 is the substrate.
    order : int
        Element order (2: triquadratic bricks, free of shear locking here).
    half_width : float
        Half-width of the plate in substrate thicknesses.
    n_xy, n_sub : int
        Elements across the plate and through the substrate (one per layer).

    Returns
    -------
    dict
        ``curvature`` (2x2, 1/m), ``mean`` (1/m), ``principal`` (1/m),
        ``film_force`` (sum over layers of the mean in-plane stress times
        thickness at the centre, MPa nm), ``unknowns``, ``seconds`` (of this call).
    """
    t0 = time.perf_counter()
    args = [np.asarray(a, dtype=float) for a in (stiffness, eigenstrain, z_bottom, z_top)]
    digest = hashlib.sha256()
    for a in args:
        digest.update(repr(a.shape).encode())
        digest.update(np.ascontiguousarray(a).tobytes())
    key = (digest.hexdigest(), int(order), float(half_width), int(n_xy), int(n_sub))
    with _plate_lock:
        hit = _plate_memo.get(key)
        if hit is not None:
            _plate_memo.move_to_end(key)
    if hit is None:
        hit = _free_plate(*args, order=order, half_width=half_width, n_xy=n_xy, n_sub=n_sub)
        with _plate_lock:
            _plate_memo[key] = hit
            while len(_plate_memo) > PLATE_MEMO:
                _plate_memo.popitem(last=False)
    out = copy.deepcopy(hit)
    out["seconds"] = time.perf_counter() - t0
    return out


def _free_plate(stiffness, eigenstrain, z_bottom, z_top, *, order, half_width, n_xy, n_sub):
    """The solve behind :func:`free_plate_curvature` (same arguments and answer, without
    ``seconds``, which the caller measures)."""
    z_bounds = np.concatenate([[z_bottom[0]], np.asarray(z_top, dtype=float)])
    h_s = z_top[0] - z_bottom[0]
    half = half_width * h_s
    mesh, region = _plate_mesh(z_bounds, half, n_xy, n_sub)
    disc = discretise(mesh, order)
    stiff = np.asarray(stiffness, dtype=float)
    eig = np.asarray(eigenstrain, dtype=float)
    K, f = assemble(disc, region, stiff, eig)
    x = disc.doflocs
    scale = half

    def node(px, py, pz):
        return int(np.argmin((x[0] - px) ** 2 + (x[1] - py) ** 2 + (x[2] - pz) ** 2))

    zb = z_bounds[0]
    c0, cx, cy = node(0, 0, zb), node(half, 0, zb), node(0, half, zb)
    fixed = np.array([3 * c0, 3 * c0 + 1, 3 * c0 + 2, 3 * cx + 1, 3 * cx + 2, 3 * cy + 2])
    u, rep = solve_condensed(K, f, fixed, method="direct")
    U = u.reshape(-1, 3)
    bottom = np.flatnonzero((np.abs(x[2] - zb) <= 1e-9 * scale)
                            & (x[0] ** 2 + x[1] ** 2 <= (FIT_RADIUS * h_s) ** 2 * (1 + 1e-9)))
    px, py, w = x[0, bottom], x[1, bottom], U[bottom, 2]
    G = np.column_stack([np.ones_like(px), px, py, px ** 2, py ** 2, px * py])
    coef, *_ = np.linalg.lstsq(G, w, rcond=None)
    kap = np.array([[2 * coef[3], coef[5]], [coef[5], 2 * coef[4]]]) * 1e9   # 1/nm -> 1/m
    # film force at the centre: in-plane stress integrated over the layers
    force = 0.0
    for k in range(1, len(z_top)):
        g, gw = np.polynomial.legendre.leggauss(3)           # exact for the quadratic field
        h = z_top[k] - z_bottom[k]
        zz = z_bottom[k] + 0.5 * h * (g + 1.0)
        pts = np.column_stack([np.zeros(3), np.zeros(3), zz])
        el = _brick_containing(mesh, pts)
        _, sig, _ = evaluate_at_points(disc, u, el, pts, region, stiff, eig)
        force += 0.5 * h * float(np.sum(gw * 0.5 * (sig[:, 0, 0] + sig[:, 1, 1])))
    return {"curvature": kap, "mean": float(np.trace(kap) / 2.0),
            "principal": np.linalg.eigvalsh(kap)[::-1], "film_force": float(force),
            "unknowns": int(rep.unknowns)}


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def blanket_stack(res):
    """(stiffness, eigenstrain, z_bottom, z_top) of the blanket stack on the full wafer."""
    layers = stack_of(res.layers)       # the liners cover a feature, not the blanket wafer
    h_s = res.case.substrate.thickness
    stiff = [lm.stiffness_sample for lm in layers]
    eig = [lm.eigenstrain_sample for lm in layers]
    zb = [-h_s] + [lm.z_bottom for lm in layers[1:]]
    zt = [0.0] + [lm.z_top for lm in layers[1:]]
    return stiff, eig, zb, zt


def wafer_bow(res, fe: bool | None = None) -> dict:
    """All bow estimates of a result's blanket stack (see the module notes)."""
    case = res.case
    stiff, eig, zb, zt = blanket_stack(res)
    h_s = case.substrate.thickness
    diameter = case.readouts.wafer_diameter
    Q_s = reduced_stiffness(stiff[0])
    iso = np.allclose(Q_s[0, 0], Q_s[1, 1], rtol=1e-9) and abs(Q_s[0, 2]) < 1e-9 * Q_s[0, 0]
    M_s = biaxial_modulus(stiff[0])
    forces = []
    for lm in stack_of(res.layers)[1:]:
        s, _ = blanket_state(lm)
        forces.append(0.5 * (s[0, 0] + s[1, 1]) * (lm.z_top - lm.z_bottom))
    h_f = sum(lm.z_top - lm.z_bottom for lm in stack_of(res.layers)[1:])
    F = float(sum(forces))

    def stoney(force):
        return float(stoney_curvature(force / h_f, h_f, h_s, M_s))

    lam = laminate_curvature(stiff, eig, zb, zt)
    out = {
        "units": {"curvature": "1/m", "radius": "m", "bow_height": "um",
                  "film_force": "N/m", "film_force_blanket": "N/m", "wafer_diameter": "mm",
                  "substrate_thickness": "nm", "film_thickness": "nm",
                  "substrate_biaxial_modulus": "GPa"},
        "film_force_definition": ("in-plane film stress integrated over the film thickness: "
                                  "force per unit length of film edge, N/m (1 MPa nm = "
                                  "1e-3 N/m)"),
        "wafer_diameter": diameter * 1e-6,
        "substrate_thickness": h_s,
        "film_thickness": h_f,
        "substrate_biaxial_modulus": M_s,
        "substrate_in_plane_isotropic": bool(iso),
        "film_force_blanket": F * 1e-3,
        "stoney": _entry(stoney(F), diameter),
        "laminate": _entry(lam["mean"], diameter, lam["curvature"]),
    }
    if len(stack_of(res.layers)) == 2:
        lm = res.layers[1]
        eps = -0.5 * (lm.eigenstrain_sample[0, 0] + lm.eigenstrain_sample[1, 1])
        out["timoshenko"] = _entry(float(timoshenko_curvature(
            eps, h_f, h_s, biaxial_modulus(lm.stiffness_sample), M_s)), diameter)
    if fe is None:
        fe = case.readouts.bow
    if fe:
        r = free_plate_curvature(stiff, eig, zb, zt)
        out["finite_element"] = _entry(r["mean"], diameter, r["curvature"])
        out["finite_element"]["film_force"] = r["film_force"] * 1e-3      # MPa nm -> N/m
        out["finite_element"]["unknowns"] = r["unknowns"]
        out["stoney_with_fe_film_force"] = _entry(stoney(r["film_force"]), diameter)
    out["notes"] = ("curvature positive when the film side is concave (tensile film); Stoney's "
                    "formula (Stoney 1909) with the blanket film stress on a rigid substrate, "
                    "and again with the film force of the bent wafer from the finite-element "
                    "solution; laminate: classical lamination theory (Timoshenko 1925 for one "
                    "layer); film force: in-plane stress times thickness summed over the films, "
                    "per unit length of a cut through the wafer (MPa nm = 0.001 N/m)")
    if not iso:
        out["notes"] += ("; the substrate is not in-plane isotropic for biaxial loading, so "
                         "Stoney uses the mean biaxial modulus and the curvature is "
                         "anisotropic (see the 2x2 tensors)")
    return out


def _entry(kappa: float, diameter: float, tensor=None) -> dict:
    e = {"curvature": kappa, "radius": float(radius_of_curvature(kappa)),
         "bow_height": float(bow_height(kappa, diameter)) * 1e-3}
    if tensor is not None:
        e["curvature_tensor"] = np.asarray(tensor)
        e["principal"] = np.linalg.eigvalsh(np.asarray(tensor))[::-1]
    return e


#: Bow heights above this fraction of the substrate thickness are outside small-deflection
#: plate theory (Stoney, lamination theory and the linear FE plate all assume deflections
#: well below the thickness; Freund & Suresh, Thin Film Materials, 2003, ch. 2, from memory:
#: beyond about the thickness the plate bends nonlinearly and may buckle asymmetrically).
SMALL_DEFLECTION_LIMIT = 0.5


def derive(res) -> Derived:
    """Wafer-bow provider: ``summary["wafer_bow"]``, and a warning when the bow is too large
    for the linear plate models it is computed with."""
    try:
        bow = wafer_bow(res)
    except np.linalg.LinAlgError as exc:     # a degenerate stack; say so, do not stop the run
        return Derived(warnings=[f"wafer bow not computed: {exc}"])
    h_um = res.case.substrate.thickness * 1e-3
    height = abs(bow["laminate"]["bow_height"])
    bow["small_deflection"] = bool(height <= SMALL_DEFLECTION_LIMIT * h_um)
    warnings = []
    if not bow["small_deflection"]:
        warnings.append(
            f"wafer bow: {height:.3g} µm over a {bow['wafer_diameter']:g} mm wafer is "
            f"{height / h_um:.3g} times the {h_um:.4g} µm substrate thickness, beyond "
            f"small-deflection plate theory (valid well below the thickness): the curvature "
            f"and bow height are not meaningful; give the real wafer as the substrate (e.g. "
            f"the buffer as a layer on it) or set [readouts] wafer_diameter")
    return Derived(summary={"wafer_bow": bow}, warnings=warnings)
