"""The figures an engineer decides on, derived from a solved result.

:func:`derive` is a derived-quantity provider (``derive(res) -> Derived``, see
:mod:`mesastrain.run.pipeline`). For every grown layer it reports

* the blanket stress (exact laterally constrained film,
  :func:`mesastrain.physics.thinfilm.biaxial_response`) next to the stress at the
  feature centre, and the **relaxation length** along each in-plane axis: the
  distance from the sidewall inside which the stress component normal to that
  sidewall is below 90 % of its centre value;
* **peaks** of von Mises, principal and hydrostatic stress per region with
  their locations (element averages; at sharp corners these grow without bound
  under mesh refinement);
* the stress at a stated **stand-off** distance from every edge where an
  interface meets the sidewall and from the reentrant corner where the sidewall
  meets the etch floor (and from the vertical corners of a rectangle), with the
  word "singular" where linear elasticity gives an unbounded stress;
* the **interface tractions** (peel sigma_zz and shear) along every interface
  that reaches the sidewall: profiles (written to ``interface_tractions.csv``
  and ``interface_tractions.png``), peaks, and the force balance of the
  interface plane (a free mesa carries no net force across it);
* the elastic **strain energy per unit area** of each layer, blanket and
  patterned;
* the **critical thickness** of each pseudomorphic cubic layer: Matthews and
  Blakeslee (single layer on a thick substrate, 8 pi form) and, for SiGe or Ge
  grown on Si, People and Bean; a warning when the layer is thicker.

Units: stress MPa, lengths nm, energy per area J/m^2. Sample frame throughout.
Everything is evaluated with ``res.sample`` (exact finite-element fields at
points) or from the element averages in ``res.fields``.
"""

from __future__ import annotations

import csv
import logging
from pathlib import Path

import numpy as np

from mesastrain.fem.fields import hydrostatic, principal, von_mises
from mesastrain.run.pipeline import Derived
from mesastrain.physics.thinfilm import biaxial_response, matthews_blakeslee_thickness, people_bean_thickness

log = logging.getLogger(__name__)

#: Fraction of the centre value that defines the relaxation length.
RECOVERY = 0.9
#: Sample points on each relaxation / traction profile.
PROFILE_POINTS = 240
#: GPa -> MPa.
_MPA = 1000.0
#: MPa * nm -> J/m^2 (1e6 Pa * 1e-9 m).
_MPA_NM_TO_J_M2 = 1e-3

#: People & Bean (1985) took a Burgers vector of 0.4 nm and the Si lattice constant in their
#: energy balance [M] (People & Bean, Appl. Phys. Lett. 47, 322, 1985; see REFERENCES.md 5c).
PB_BURGERS_NM = 0.4
PB_LATTICE_NM = 0.5431

SINGULAR_NOTE = ("stress at a sharp reentrant corner or where a bimaterial interface meets a "
                 "free surface is singular in linear elasticity: a peak there grows under mesh "
                 "refinement and is never a converged number; compare the values at the stated "
                 "stand-off distance between runs")


# --------------------------------------------------------------------------
# sampling helpers
# --------------------------------------------------------------------------
def mirrors_of(res) -> tuple:
    """Mirror axes of the model (0 = x, 1 = y): only the non-negative side is meshed."""
    return tuple(res.mesh.mirrors)


def locate(res, points: np.ndarray) -> np.ndarray:
    """Element index of each point of the whole feature (mirror images mapped), -1 outside."""
    q = np.array(np.atleast_2d(points), dtype=float)
    for a in mirrors_of(res):
        q[:, a] = np.abs(q[:, a])
    return res.mesh.locate(q)


def sample_inside(res, points: np.ndarray):
    """``res.sample`` at points, NaN where a point lies outside the body.

    Returns
    -------
    strain, stress (MPa), displacement, region : as :meth:`Result.sample`,
        region -1 outside.
    """
    pts = np.atleast_2d(np.asarray(points, dtype=float))
    n = len(pts)
    strain = np.full((n, 3, 3), np.nan)
    stress = np.full((n, 3, 3), np.nan)
    disp = np.full((n, 3), np.nan)
    region = np.full(n, -1, dtype=int)
    inside = locate(res, pts) >= 0
    if np.any(inside):
        e, s, u, r = res.sample(pts[inside])
        strain[inside], stress[inside], disp[inside], region[inside] = e, s, u, r
    return strain, stress, disp, region


def element_size_at(res, points: np.ndarray) -> np.ndarray:
    """Cube root of the volume of the element holding each point, nm (NaN outside)."""
    elems = locate(res, points)
    out = np.full(len(elems), np.nan)
    ok = elems >= 0
    out[ok] = np.cbrt(res.fields.cell_volume[elems[ok]])
    return out


def cell_centres(res) -> np.ndarray:
    """(nelems, 3) element centroids (mean of the vertices), nm."""
    m = res.mesh.mesh
    return m.p[:, m.t].mean(axis=1).T


def _model_bounds(res) -> np.ndarray:
    """(3, 2) extent of the whole modelled feature (mirror images included), nm."""
    p = res.mesh.mesh.p
    b = np.stack([p.min(axis=1), p.max(axis=1)], axis=1)
    for a in mirrors_of(res):
        b[a, 0] = min(b[a, 0], -b[a, 1])
    return b


# --------------------------------------------------------------------------
# geometry of the feature
# --------------------------------------------------------------------------
def etch_floor(res) -> float | None:
    """z of the etch floor, nm; None for a blanket stack."""
    pat = res.case.pattern
    if pat.shape == "none" or not getattr(pat, "etch_depth", None):
        return None
    return float(res.case.top - pat.etch_depth)


def sidewall_distance(res, direction: np.ndarray, z: float, origin=(0.0, 0.0)) -> float | None:
    """Distance from ``origin`` along an in-plane ``direction`` to the free sidewall at height z.

    Uses the rectangle's own size where the pattern is a rectangle, otherwise a
    bisection on ``res.mesh.locate``. None when the ray reaches the model
    boundary without meeting a free surface (no sidewall that way).
    """
    d = np.asarray(direction, dtype=float)
    d = d / np.linalg.norm(d)
    floor = etch_floor(res)
    if floor is None or z <= floor:
        return None
    bounds = _model_bounds(res)
    o = np.array([origin[0], origin[1], z])
    d3 = np.array([d[0], d[1], 0.0])
    t_box = min(((bounds[k, 1] if d[k] > 0 else bounds[k, 0]) - o[k]) / d[k]
                for k in (0, 1) if abs(d[k]) > 1e-12)
    t = np.linspace(0.0, t_box * (1 - 1e-9), 801)
    inside = locate(res, o + t[:, None] * d3) >= 0
    if not inside[0]:
        return None
    out = np.flatnonzero(~inside)
    if out.size == 0:
        return None                  # the model boundary (a roller or periodic face), not free
    lo, hi = t[out[0] - 1], t[out[0]]
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if locate(res, (o + mid * d3)[None, :])[0] >= 0:
            lo = mid
        else:
            hi = mid
    # locate() accepts points up to 1e-9 of the model size outside an element; step back so that
    # the sidewall point lies inside its element
    return float(max(lo - 1e-8 * t_box, 0.0))


def _directions():
    """(label, unit vector, normal-stress index) of the four in-plane rays."""
    return (("+x", np.array([1.0, 0.0]), 0), ("-x", np.array([-1.0, 0.0]), 0),
            ("+y", np.array([0.0, 1.0]), 1), ("-y", np.array([0.0, -1.0]), 1))


def _profile_distances(extent: float, n: int = PROFILE_POINTS) -> np.ndarray:
    """Distances from the sidewall, 0 .. extent, dense near the sidewall."""
    t = np.linspace(0.0, 1.0, n)
    return extent * t ** 2


def column_profile(res, d: np.ndarray, ext: float, z: float, side: int = 0):
    """Distances from the sidewall of the element centres met along a ray at height z.

    Element-average positions are where the stress of low-order elements is most
    accurate (no saw-tooth from the jumps between elements). The ray runs from
    the centre (0, 0) along ``d`` to the sidewall at ``ext``.

    Parameters
    ----------
    side : int
        0: the elements holding the points; +1 / -1: the elements just above /
        below the height z (for an interface).

    Returns
    -------
    s : ndarray
        Distances from the sidewall, increasing (the last is the centre).
    zc : ndarray
        Height of the centre of each of those elements, nm.
    """
    s_dense = _profile_distances(ext, 4 * PROFILE_POINTS)
    eps = 1e-6 * max(res.case.top, 1.0)
    pts = np.column_stack([d[0] * (ext - s_dense), d[1] * (ext - s_dense),
                           np.full_like(s_dense, z + side * eps)])
    el = locate(res, pts)
    ok = el >= 0
    pts, el = pts[ok], el[ok]
    first = np.concatenate([[True], el[1:] != el[:-1]])
    el = el[first]
    cen = cell_centres(res)[el]
    along = np.abs(cen[:, 0] * d[0]) + np.abs(cen[:, 1] * d[1])   # mirror-safe |coordinate|
    s = ext - along
    order = np.argsort(s)
    s, zc = s[order], cen[order, 2]
    keep = np.concatenate([[True], np.diff(s) > 1e-9 * max(ext, 1.0)])
    s, zc = s[keep], zc[keep]
    s = np.clip(s, 0.0, ext)
    if s[-1] < ext:                                       # the feature centre itself
        s, zc = np.append(s, ext), np.append(zc, zc[-1])
    return s, zc


# --------------------------------------------------------------------------
# blanket film and relaxation
# --------------------------------------------------------------------------
def blanket_state(lm) -> tuple[np.ndarray, np.ndarray]:
    """Stress (MPa) and elastic strain of a layer in the unpatterned stack.

    Every layer is coherent with the (thick, flat) substrate, so its in-plane
    elastic strain is minus its in-plane eigenstrain; the out-of-plane
    components follow from a traction-free top (exact, any anisotropy).
    """
    e0 = np.asarray(lm.eigenstrain_sample)
    stress, strain = biaxial_response(lm.stiffness_sample, -e0[0, 0], -e0[1, 1], -e0[0, 1])
    return stress * _MPA, strain


def relaxation_length(s: np.ndarray, ratio: np.ndarray, recovery: float = RECOVERY) -> float:
    """Distance from the sidewall beyond which ``ratio`` stays at or above ``recovery``.

    Parameters
    ----------
    s : ndarray
        Increasing distances from the sidewall, nm (the last is the centre).
    ratio : ndarray
        Stress over its centre value at each distance.
    recovery : float

    Returns
    -------
    float
        nm, linearly interpolated at the crossing; 0 when the ratio never
        drops below ``recovery``.
    """
    below = np.flatnonzero(~(ratio >= recovery))
    if below.size == 0:
        return 0.0
    k = below[-1]                    # outermost-from-centre point still below
    if k == len(s) - 1:
        return float(s[-1])
    r0, r1 = ratio[k], ratio[k + 1]
    f = (recovery - r0) / (r1 - r0) if r1 != r0 else 0.0
    return float(s[k] + f * (s[k + 1] - s[k]))


def _edge_relaxation(res, lm, zmid: float, centre_stress: np.ndarray) -> tuple[dict, list]:
    """Relaxation length per in-plane ray, and the profiles for the CSV."""
    out, profiles = {}, []
    for label, d, comp in _directions():
        ext = sidewall_distance(res, d, zmid)
        if ext is None:
            out[label] = None
            continue
        s, _ = column_profile(res, d, ext, zmid)
        pts = np.column_stack([d[0] * (ext - s), d[1] * (ext - s), np.full_like(s, zmid)])
        _, sig, _, _ = sample_inside(res, pts)
        c = centre_stress[comp, comp]
        normal = sig[:, comp, comp]
        along = sig[:, 1 - comp, 1 - comp]
        if not abs(c) > 1e-6:
            out[label] = None
            continue
        length = relaxation_length(s, normal / c)
        out[label] = {"length": length, "sidewall_at": ext,
                      "normal_component": "xx" if comp == 0 else "yy",
                      "nearest_point_from_sidewall": float(s[0]),
                      "normal_stress_nearest_sidewall": float(normal[0]),
                      "along_edge_stress_nearest_sidewall": float(along[0])}
        for sk, nk, ak in zip(s, normal, along):
            profiles.append((lm.index, label, float(sk), float(nk), float(ak), float(c)))
    return out, profiles


# --------------------------------------------------------------------------
# peaks
# --------------------------------------------------------------------------
def region_peaks(res, region: int, centres: np.ndarray) -> dict:
    """Peak von Mises, principal and hydrostatic element stresses of one region (MPa)."""
    m = np.flatnonzero(res.mesh.layer == region)
    if m.size == 0:
        return {}
    sig = res.fields.cell_stress[m]
    vm = von_mises(sig)
    pr = principal(sig)
    hy = hydrostatic(sig)

    def at(k):
        return [float(v) for v in centres[m[k]]]

    i_vm, i_pmax, i_pmin = int(np.argmax(vm)), int(np.argmax(pr[:, 0])), int(np.argmin(pr[:, 2]))
    i_hmax, i_hmin = int(np.argmax(hy)), int(np.argmin(hy))
    return {
        "von_mises": {"value": float(vm[i_vm]), "at": at(i_vm)},
        "principal_max": {"value": float(pr[i_pmax, 0]), "at": at(i_pmax)},
        "principal_min": {"value": float(pr[i_pmin, 2]), "at": at(i_pmin)},
        "hydrostatic_max": {"value": float(hy[i_hmax]), "at": at(i_hmax)},
        "hydrostatic_min": {"value": float(hy[i_hmin]), "at": at(i_hmin)},
    }


# --------------------------------------------------------------------------
# corners and edges
# --------------------------------------------------------------------------
def _differs(a, b) -> bool:
    """True when two regions differ in stiffness or eigenstrain (an interface is singular)."""
    return (not np.allclose(a.stiffness_sample, b.stiffness_sample, rtol=1e-9, atol=1e-9)
            or not np.allclose(a.eigenstrain_sample, b.eigenstrain_sample, rtol=1e-9,
                               atol=1e-12))


def _free_edge_interfaces(res) -> list[tuple[int, float]]:
    """(index k, z) of interfaces z_k that reach the sidewall: floor <= z_k < top.

    Interface k lies between region k (below) and k + 1 (above).
    """
    floor = etch_floor(res)
    if floor is None:
        return []
    zs = res.case.interfaces
    top = res.case.top
    tol = 1e-9 * max(top, 1.0)
    return [(k, float(z)) for k, z in enumerate(zs[:-1]) if z >= floor - tol and z < top - tol]


def edge_features(res, standoff: float) -> list[dict]:
    """Singular and near-singular places of the feature with their stand-off points.

    Each item: ``name``, ``kind``, ``singular`` (bool), ``at`` (the edge or
    corner point, nm), ``points`` (label -> stand-off point, nm) and ``note``.
    """
    floor = etch_floor(res)
    if floor is None:
        return []
    layers = res.layers
    feats = []
    tol = 1e-9 * max(res.case.top, 1.0)
    ifaces = _free_edge_interfaces(res)
    floor_on_interface = any(abs(z - floor) <= tol for _, z in ifaces)
    eps = 1e-6 * max(standoff, 1.0)
    for label, d, _ in _directions():
        for k, z in ifaces:
            ext = sidewall_distance(res, d, z + eps)
            if ext is None:
                continue
            below, above = layers[k], layers[k + 1]
            edge = np.array([d[0] * ext, d[1] * ext, z])
            inward = np.array([-d[0], -d[1], 0.0])
            p = edge + standoff * inward
            at_floor = abs(z - floor) <= tol
            sing = _differs(below, above) or at_floor
            kind = ("reentrant corner at an interface (sidewall meets etch floor)" if at_floor
                    else "interface meets sidewall (free edge)")
            feats.append({
                "name": f"{above.name}/{below.name} edge {label}", "kind": kind,
                "singular": bool(sing), "at": edge.tolist(), "side": label, "z": z,
                "points": {above.name: (p + [0, 0, eps]).tolist(),
                           below.name: (p - [0, 0, eps]).tolist()},
                "direction": "along the interface, into the feature",
            })
        if not floor_on_interface:
            ext = sidewall_distance(res, d, floor + eps)
            if ext is None:
                continue
            edge = np.array([d[0] * ext, d[1] * ext, floor])
            p = edge + standoff * np.array([-d[0], -d[1], -1.0]) / np.sqrt(2.0)
            region = int(np.searchsorted(np.asarray(res.case.interfaces[:-1]), floor - eps,
                                         side="right"))
            feats.append({
                "name": f"etch-floor corner {label}", "kind": "reentrant corner (sidewall meets "
                "etch floor)", "singular": True, "at": edge.tolist(), "side": label, "z": floor,
                "points": {layers[region].name: p.tolist()},
                "direction": "bisector of the 270 degree material angle",
            })
    pat = res.case.pattern
    sharp = not (getattr(pat, "corner_radius", None) or getattr(pat, "sidewall_angle", None))
    if pat.shape == "rectangle" and sharp:
        hx, hy = pat.width / 2.0, pat.length / 2.0
        for sx in (1, -1):
            for sy in (1, -1):
                lab = f"({'+' if sx > 0 else '-'}x,{'+' if sy > 0 else '-'}y)"
                diag = np.array([-sx, -sy, 0.0]) / np.sqrt(2.0)
                for k, z in ifaces:
                    below, above = layers[k], layers[k + 1]
                    corner = np.array([sx * hx, sy * hy, z])
                    p = corner + standoff * diag
                    feats.append({
                        "name": f"{above.name}/{below.name} corner {lab}",
                        "kind": "interface meets a vertical mesa corner (3-D vertex)",
                        "singular": bool(_differs(below, above) or abs(z - floor) <= tol),
                        "at": corner.tolist(), "side": lab, "z": z,
                        "points": {above.name: (p + [0, 0, eps]).tolist(),
                                   below.name: (p - [0, 0, eps]).tolist()},
                        "direction": "along the in-plane diagonal, into the feature"})
                if not floor_on_interface:
                    corner = np.array([sx * hx, sy * hy, floor])
                    p = corner + standoff * np.array([-sx, -sy, -1.0]) / np.sqrt(3.0)
                    region = int(np.searchsorted(np.asarray(res.case.interfaces[:-1]),
                                                 floor - eps, side="right"))
                    feats.append({
                        "name": f"etch-floor vertex {lab}",
                        "kind": "reentrant 3-D vertex (mesa corner meets etch floor)",
                        "singular": True, "at": corner.tolist(), "side": lab, "z": floor,
                        "points": {layers[region].name: p.tolist()},
                        "direction": "into the substrate, equally inward in x, y and down"})
    return feats


def standoff_values(res, feats: list[dict]) -> list[dict]:
    """Evaluate the stress at every stand-off point of :func:`edge_features`."""
    keys, pts = [], []
    for i, f in enumerate(feats):
        for side, p in f["points"].items():
            keys.append((i, side))
            pts.append(p)
    if not pts:
        return []
    pts = np.array(pts)
    _, sig, _, region = sample_inside(res, pts)
    h = element_size_at(res, pts)
    out = [dict(f, values={}) for f in feats]
    for (i, side), p, s, r, hk in zip(keys, pts, sig, region, h):
        if r < 0:
            continue
        pr = principal(s)
        out[i]["values"][side] = {
            "at": p.tolist(), "stress": s, "von_mises": float(von_mises(s)),
            "principal_max": float(pr[0]), "principal_min": float(pr[2]),
            "hydrostatic": float(hydrostatic(s)),
            "peel": float(s[2, 2]),
            "element_size": float(hk)}
    for f in out:
        f.pop("points", None)
    return out


def nearest_feature(point, feats: list[dict]) -> tuple[str | None, float]:
    """Name of the feature (edge line point or corner) closest to ``point`` and the distance."""
    if not feats:
        return None, float("nan")
    p = np.asarray(point, dtype=float)
    best, dist = None, np.inf
    for f in feats:
        a = np.asarray(f["at"], dtype=float)
        if f["side"] in ("+x", "-x"):
            dd = np.hypot(p[0] - a[0], p[2] - a[2])        # an edge line along y
        elif f["side"] in ("+y", "-y"):
            dd = np.hypot(p[1] - a[1], p[2] - a[2])        # an edge line along x
        else:
            dd = np.linalg.norm(p - a)
        if dd < dist:
            best, dist = f, dd
    return best["name"], float(dist)


# --------------------------------------------------------------------------
# interface tractions
# --------------------------------------------------------------------------
def interface_stress(res, pts: np.ndarray) -> np.ndarray:
    """Stress on an interface plane, MPa: linear in z through the element centres on both sides.

    At each point the stress is evaluated at the centre height of the element
    above and of the element below (where low-order elements are most
    accurate) and interpolated to the interface; where only one side exists
    its value is used.
    """
    pts = np.atleast_2d(np.asarray(pts, dtype=float))
    eps = 1e-6 * max(res.case.top, 1.0)
    cen = cell_centres(res)
    e_up = locate(res, pts + [0.0, 0.0, eps])
    e_dn = locate(res, pts - [0.0, 0.0, eps])
    zu = np.where(e_up >= 0, cen[np.maximum(e_up, 0), 2], np.nan)
    zd = np.where(e_dn >= 0, cen[np.maximum(e_dn, 0), 2], np.nan)
    both = (e_up >= 0) & (e_dn >= 0)
    _, su, _, _ = sample_inside(res, np.column_stack([pts[:, :2], np.where(e_up >= 0, zu,
                                                                           pts[:, 2])]))
    _, sd, _, _ = sample_inside(res, np.column_stack([pts[:, :2], np.where(e_dn >= 0, zd,
                                                                           pts[:, 2])]))
    out = np.where((e_up >= 0)[:, None, None], su, sd)
    w = np.zeros(len(pts))
    w[both] = (pts[both, 2] - zd[both]) / (zu[both] - zd[both])
    out[both] = sd[both] + w[both, None, None] * (su[both] - sd[both])
    return out


def traction_profiles(res, k: int, z: float) -> tuple[dict, list]:
    """Peel and shear traction along interface k from the centre to each sidewall."""
    eps = 1e-6 * max(res.case.top, 1.0)
    out, rows = {}, []
    for label, d, comp in _directions():
        ext = sidewall_distance(res, d, z + eps)
        if ext is None:
            continue
        s, _ = column_profile(res, d, ext, z, +1)
        pts = np.column_stack([d[0] * (ext - s), d[1] * (ext - s), np.full_like(s, z)])
        sig = interface_stress(res, pts)
        peel = sig[:, 2, 2]
        # shear toward the sidewall: traction component along the outward direction d
        shear = d[0] * sig[:, 0, 2] + d[1] * sig[:, 1, 2]
        cross = -d[1] * sig[:, 0, 2] + d[0] * sig[:, 1, 2]
        ip, ish = int(np.nanargmax(np.abs(peel))), int(np.nanargmax(np.abs(shear)))
        out[label] = {"peel_peak": float(peel[ip]), "peel_peak_from_sidewall": float(s[ip]),
                      "shear_peak": float(shear[ish]),
                      "shear_peak_from_sidewall": float(s[ish]),
                      "peel_centre": float(peel[-1]), "sidewall_at": ext}
        for row in zip(s, peel, shear, cross):
            rows.append((k, z, label) + tuple(float(v) for v in row))
    return out, rows


def _facet_points(res, z: float):
    """Quadrature points and weights covering the mesh faces that lie on the plane z.

    Quadrilateral faces are split into two triangles; each triangle uses the
    3-point rule exact for quadratics. Returns (points (n, 3), weights (n,)).
    """
    m = res.mesh.mesh
    f = m.facets
    pz = m.p[2, f]
    span = float(np.ptp(m.p[2])) or 1.0
    on = np.all(np.abs(pz - z) <= 1e-9 * span, axis=0)
    if not np.any(on):
        return np.zeros((0, 3)), np.zeros(0)
    fac = f[:, on]
    xy = m.p[:2, fac]                                        # (2, nv, nf)
    if fac.shape[0] == 4:                                    # order the quad around its centre
        c = xy.mean(axis=1, keepdims=True)
        ang = np.arctan2(xy[1] - c[1], xy[0] - c[0])         # (4, nf)
        order = np.argsort(ang, axis=0)
        xy = np.take_along_axis(xy, order[None, :, :], axis=1)
        tris = [xy[:, [0, 1, 2], :], xy[:, [0, 2, 3], :]]
    else:
        tris = [xy[:, :3, :]]
    bary = np.array([[2 / 3, 1 / 6, 1 / 6], [1 / 6, 2 / 3, 1 / 6], [1 / 6, 1 / 6, 2 / 3]])
    pts, wts = [], []
    for t in tris:                                           # t: (2, 3, nf)
        a = 0.5 * np.abs((t[0, 1] - t[0, 0]) * (t[1, 2] - t[1, 0])
                         - (t[0, 2] - t[0, 0]) * (t[1, 1] - t[1, 0]))
        for b in bary:
            q = np.einsum("v,cvn->nc", b, t)
            pts.append(np.column_stack([q, np.full(len(q), z)]))
            wts.append(a / 3.0)
    return np.vstack(pts), np.concatenate(wts)


def interface_balance(res, z: float) -> dict:
    """Net force across the whole interface plane z inside the body.

    The part of a free feature above the plane carries no load, so the
    integrals of sigma_zz, sigma_xz and sigma_yz over the plane vanish; the
    result is each integral divided by the integral of |sigma_zz| (and of the
    shear magnitude), a measure of the discretisation error.
    """
    eps = 1e-6 * max(res.case.top, 1.0)
    pts, w = _facet_points(res, z)
    if not len(w):
        return {}
    up = res.mesh.locate(pts + [0.0, 0.0, eps]) >= 0     # material above: the feature's plane
    pts, w = pts[up], w[up]
    for a in mirrors_of(res):                             # add the mirror images
        img = pts.copy()
        img[:, a] = -img[:, a]
        keep = img[:, a] < 0
        pts, w = np.vstack([pts, img[keep]]), np.concatenate([w, w[keep]])
    sig = interface_stress(res, pts)
    szz, sxz, syz = sig[:, 2, 2], sig[:, 0, 2], sig[:, 1, 2]
    area = float(w.sum())
    peel_abs = float(np.sum(w * np.abs(szz)))
    shear_abs = float(np.sum(w * np.hypot(sxz, syz)))
    return {"area": area,
            "peel_force": float(np.sum(w * szz)),
            "peel_force_relative": float(np.sum(w * szz) / peel_abs) if peel_abs else 0.0,
            "shear_force_relative": (float(np.hypot(np.sum(w * sxz), np.sum(w * syz)) / shear_abs)
                                     if shear_abs else 0.0)}


# --------------------------------------------------------------------------
# energy and critical thickness
# --------------------------------------------------------------------------
def layer_energy(res, lm, blanket_stress, blanket_strain) -> dict:
    """Elastic energy per unit area of a layer, blanket and patterned, J/m^2.

    Patterned: the sum over the layer's elements of (1/2) sigma:eps V from
    element averages, divided by the layer's plan area (its volume over its
    thickness).
    """
    h = lm.z_top - lm.z_bottom
    w_blanket = 0.5 * float(np.einsum("ij,ij->", blanket_stress, blanket_strain))   # MPa
    out = {"blanket": w_blanket * h * _MPA_NM_TO_J_M2}
    m = res.mesh.layer == lm.index
    if np.any(m):
        vol = res.fields.cell_volume[m]
        w = 0.5 * np.einsum("nij,nij->n", res.fields.cell_stress[m], res.fields.cell_strain[m])
        area = vol.sum() / h
        out["patterned"] = float(np.sum(w * vol) / area) * _MPA_NM_TO_J_M2
        out["plan_area_nm2"] = float(area)
        out["patterned_over_blanket"] = (out["patterned"] / out["blanket"]
                                         if out["blanket"] > 0 else None)
    return out


def poisson_ratio_100(mat) -> float | None:
    """nu = C12/(C11 + C12) of a cubic material (the <100> value; common practice in MB)."""
    if mat.system != "cubic":
        return None
    c = mat.constants
    return float(c["C12"] / (c["C11"] + c["C12"]))


def critical_thickness(res, lm) -> dict | None:
    """Matthews-Blakeslee and (SiGe/Ge on Si) People-Bean critical thickness of a layer.

    Matthews & Blakeslee, J. Cryst. Growth 27, 118 (1974), single strained
    layer on a thick substrate (8 pi form, REFERENCES.md 5b): 60 degree
    dislocations (alpha = lambda = 60 deg), b = a_layer/sqrt(2),
    nu = C12/(C11 + C12) of the layer, f = the layer's lattice misfit against
    the lattice it is coherent with. People & Bean, Appl. Phys. Lett. 47, 322
    (1985) with their b = 0.4 nm and a = a_Si = 0.5431 nm [M].

    Returns None for relaxed or hexagonal layers.
    """
    mat = lm.material
    if lm.index == 0 or lm.relaxed > 0:
        return None
    if mat.system != "cubic":
        return {"note": "not evaluated: the 60 degree misfit-dislocation form is for cubic "
                        "(diamond, zinc-blende) layers"}
    f = abs(float(lm.misfit))
    h = lm.z_top - lm.z_bottom
    if f < 1e-6:
        return {"misfit": f, "note": "lattice matched: no critical thickness"}
    b = mat.a / 10.0 / np.sqrt(2.0)
    nu = poisson_ratio_100(mat)
    mb = float(matthews_blakeslee_thickness(f, b, nu, 60.0, 60.0, form="single"))
    out = {"misfit": f, "thickness": h,
           "matthews_blakeslee": mb,
           "matthews_blakeslee_parameters": {"b_nm": b, "nu": nu, "alpha_deg": 60.0,
                                             "lambda_deg": 60.0, "form": "single layer, 8 pi"},
           "exceeds_matthews_blakeslee": bool(np.isfinite(mb) and h > mb) or bool(np.isnan(mb))}
    below = res.layers[lm.index - 1].material
    if mat.name in ("SiGe", "Ge") and below.name == "Si" and below.x is None:
        pb = float(people_bean_thickness(f, PB_BURGERS_NM, PB_LATTICE_NM, nu))
        out["people_bean"] = pb
        out["people_bean_parameters"] = {"b_nm": PB_BURGERS_NM, "a_nm": PB_LATTICE_NM, "nu": nu}
        out["exceeds_people_bean"] = bool(np.isfinite(pb) and h > pb) or bool(np.isnan(pb))
    return out


def _critical_warning(lm, ct: dict) -> str | None:
    if not ct or not ct.get("exceeds_matthews_blakeslee"):
        return None
    h, mb = ct["thickness"], ct["matthews_blakeslee"]
    mb_text = f"{mb:.3g} nm" if np.isfinite(mb) else "below one Burgers vector"
    msg = (f"{lm.name} ({lm.material.label}, {h:g} nm, pseudomorphic) is thicker than its "
           f"Matthews-Blakeslee critical thickness ({mb_text}, single-layer form): misfit "
           f"dislocations lower its energy, so the pseudomorphic assumption (relaxed = 0) may "
           f"be wrong")
    if "people_bean" in ct:
        pb = ct["people_bean"]
        if ct["exceeds_people_bean"]:
            msg += (f"; it is also beyond the People-Bean metastable limit ({pb:.3g} nm): expect "
                    f"it to relax (set layer.relaxed)")
        else:
            msg += (f"; it is within the People-Bean metastable limit ({pb:.3g} nm), so it may "
                    f"survive low-temperature growth")
    return msg


# --------------------------------------------------------------------------
# the provider
# --------------------------------------------------------------------------
def default_standoff(case) -> float:
    """Stand-off distance used when ``[readouts] standoff`` is not given: half the thinnest layer."""
    return 0.5 * min(layer.thickness for layer in case.layers)


def derive(res) -> Derived:
    """Edge relaxation, peaks, stand-off stresses, interface tractions, energy, h_c.

    Parameters
    ----------
    res : mesastrain.run.pipeline.Result

    Returns
    -------
    Derived
        ``summary["readouts"]``, warnings, and the files
        ``edge_relaxation.csv``, ``interface_tractions.csv`` and their PNG
        plots (patterned features only).
    """
    case = res.case
    standoff = case.readouts.standoff if case.readouts.standoff else default_standoff(case)
    floor = etch_floor(res)
    centres = cell_centres(res)
    warnings = []
    feats = standoff_values(res, edge_features(res, standoff)) if floor is not None else []

    layers_out, relax_rows = [], []
    for lm in res.layers:
        entry = {"index": lm.index, "name": lm.name, "label": lm.material.label,
                 "z_bottom": lm.z_bottom, "z_top": lm.z_top}
        peaks = region_peaks(res, lm.index, centres)
        for pk in peaks.values():
            name, dist = nearest_feature(pk["at"], feats)
            if name is not None:
                pk["nearest_feature"], pk["distance_to_feature"] = name, dist
        entry["peaks"] = peaks
        if lm.index > 0:
            b_sig, b_eps = blanket_state(lm)
            entry["blanket_stress"] = b_sig
            lo = lm.z_bottom if floor is None else max(lm.z_bottom, floor)
            zmid = 0.5 * (lo + lm.z_top)
            _, c_sig, _, c_reg = sample_inside(res, [[0.0, 0.0, zmid]])
            if c_reg[0] >= 0:
                c = c_sig[0]
                entry["centre_at"] = [0.0, 0.0, zmid]
                entry["centre_stress"] = c
                entry["centre_over_blanket"] = {
                    ax: (float(c[i, i] / b_sig[i, i]) if abs(b_sig[i, i]) > 1e-9 else None)
                    for ax, i in (("xx", 0), ("yy", 1))}
                if floor is not None and lm.z_top > floor:
                    rl, rows = _edge_relaxation(res, lm, zmid, c)
                    entry["relaxation"] = rl
                    relax_rows.extend(rows)
            entry["energy_per_area"] = layer_energy(res, lm, b_sig, b_eps)
            ct = critical_thickness(res, lm)
            if ct is not None:
                entry["critical_thickness"] = ct
                w = _critical_warning(lm, ct)
                if w:
                    warnings.append(w)
        layers_out.append(entry)

    interfaces, traction_rows = [], []
    for k, z in _free_edge_interfaces(res):
        prof, rows = traction_profiles(res, k, z)
        traction_rows.extend(rows)
        item = {"index": k, "z": z, "between": [res.layers[k].name, res.layers[k + 1].name],
                "sides": prof, "balance": interface_balance(res, z)}
        if prof:
            pk = max(prof.values(), key=lambda v: abs(v["peel_peak"]))
            sk = max(prof.values(), key=lambda v: abs(v["shear_peak"]))
            item["peel_peak"] = pk["peel_peak"]
            item["shear_peak"] = sk["shear_peak"]
        interfaces.append(item)

    summary = {"readouts": {
        "units": {"stress": "MPa", "length": "nm", "energy_per_area": "J/m^2"},
        "standoff": standoff,
        "standoff_rule": ("[readouts] standoff" if case.readouts.standoff
                          else "half the thinnest layer (default)"),
        "relaxation_definition": (f"distance from the sidewall inside which the stress normal "
                                  f"to that sidewall is below {RECOVERY:.0%} of its value at the "
                                  f"feature centre, at mid-height of the layer"),
        "traction_definition": ("peel = sigma_zz on the interface plane (positive opens it); "
                                "shear = traction component pointing toward the sidewall; "
                                "sampled below the centre of each element next to the "
                                "interface, interpolated in z between the element centres "
                                "above and below"),
        "peaks_definition": "element-average stresses; location = element centre",
        "singular_note": SINGULAR_NOTE,
        "layers": layers_out,
        "edges": feats,
        "interfaces": interfaces,
    }}
    files = {}
    if relax_rows:
        files["edge_relaxation.csv"] = lambda p, rows=relax_rows: _write_csv(
            p, ("region", "side", "distance_from_sidewall_nm", "normal_stress_MPa",
                "along_edge_stress_MPa", "centre_normal_stress_MPa"), rows)
        files["edge_relaxation.png"] = lambda p, rows=relax_rows: plot_relaxation(
            p, rows, res.layers, layers_out)
    if traction_rows:
        files["interface_tractions.csv"] = lambda p, rows=traction_rows: _write_csv(
            p, ("interface", "z_nm", "side", "distance_from_sidewall_nm", "peel_MPa",
                "shear_toward_sidewall_MPa", "shear_along_edge_MPa"), rows)
        files["interface_tractions.png"] = lambda p, rows=traction_rows: plot_tractions(
            p, rows, res.layers, standoff)
    return Derived(summary=summary, warnings=warnings, files=files)


def convergence_figures(res) -> dict:
    """Readout figures to follow under mesh refinement, by name.

    For a mesh-convergence study (:mod:`mesastrain.run.convergence` follows
    ``headline_figures``): von Mises stress at every stand-off point (MPa),
    peak peel and shear traction of every interface (MPa) and the relaxation
    length of every layer along +x and +y (names end in ``(nm)``). Stand-off
    values should settle as the mesh is refined; the traction peaks next to a
    sharp edge should not (they are singular).

    Returns
    -------
    dict of str -> float
    """
    case = res.case
    standoff = case.readouts.standoff or default_standoff(case)
    out = {}
    if etch_floor(res) is None:
        return out
    for f in standoff_values(res, edge_features(res, standoff)):
        for region, v in f["values"].items():
            out[f"{f['name']} in {region}: von_mises at {standoff:g} nm"] = v["von_mises"]
    for k, z in _free_edge_interfaces(res):
        prof, _ = traction_profiles(res, k, z)
        for side in ("+x", "+y"):
            if side in prof:
                out[f"interface z={z:g} {side}: peak peel"] = prof[side]["peel_peak"]
                out[f"interface z={z:g} {side}: peak shear"] = prof[side]["shear_peak"]
    floor = etch_floor(res)
    for lm in res.layers[1:]:
        if lm.z_top <= floor:
            continue
        zmid = 0.5 * (max(lm.z_bottom, floor) + lm.z_top)
        _, c_sig, _, c_reg = sample_inside(res, [[0.0, 0.0, zmid]])
        if c_reg[0] < 0:
            continue
        rl, _ = _edge_relaxation(res, lm, zmid, c_sig[0])
        for side in ("+x", "+y"):
            if rl.get(side):
                out[f"{lm.name} relaxation length {side} (nm)"] = rl[side]["length"]
    return out


def _write_csv(path: Path, header, rows) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([f"{v:.9g}" if isinstance(v, float) else v for v in r])


# --------------------------------------------------------------------------
# plots (matplotlib, Agg)
# --------------------------------------------------------------------------
def _zoom(values_s: np.ndarray, lengths: list, stack: float) -> float:
    """x-range of a near-sidewall plot: a few relaxation lengths or stack heights."""
    want = max([4.0 * v for v in lengths if v] + [6.0 * stack])
    return float(min(values_s.max(), want))


def plot_relaxation(path: Path, rows: list, layers, layers_out) -> None:
    """Stress normal to each sidewall against the distance from it, one panel per layer (MPa)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    regions = sorted({r[0] for r in rows})
    info = {e["index"]: e for e in layers_out}
    stack = layers[-1].z_top
    fig, axes = plt.subplots(len(regions), 1, figsize=(7.5, 2.6 * len(regions) + 0.5),
                             dpi=110, squeeze=False)
    for ax, region in zip(axes[:, 0], regions):
        e = info[region]
        lengths = []
        for side, style in (("+x", "-"), ("+y", "--")):
            sel = [r for r in rows if r[0] == region and r[1] == side]
            if not sel:
                continue
            a = np.array([r[2:5] for r in sel])
            comp = "xx" if side == "+x" else "yy"
            ax.plot(a[:, 0], a[:, 1], style, color="C0", marker=".", ms=3,
                    label=f"sigma_{comp} (normal to the {side} sidewall)")
            ax.plot(a[:, 0], a[:, 2], style, color="C2", lw=1,
                    label=f"sigma_{'yy' if comp == 'xx' else 'xx'} (along it)")
            rl = (e.get("relaxation") or {}).get(side)
            if rl:
                lengths.append(rl["length"])
                ax.axvline(rl["length"], color="C3", lw=0.9, ls=style)
        c = e.get("centre_stress")
        b = e.get("blanket_stress")
        if c is not None:
            ax.axhline(float(np.asarray(c)[0, 0]), color="0.35", lw=0.8, ls=":",
                       label="centre value")
        if b is not None:
            ax.axhline(float(np.asarray(b)[0, 0]), color="k", lw=0.8, ls="-.",
                       label="blanket value")
        ax.axhline(0.0, color="0.6", lw=0.6)
        xmax = _zoom(np.array([r[2] for r in rows if r[0] == region]), lengths, stack)
        ax.set_xlim(0, xmax)
        if lengths:
            ax.text(max(lengths), ax.get_ylim()[1], f" relaxation length {max(lengths):.3g} nm",
                    color="C3", fontsize=7, va="top")
        ax.set_ylabel("stress (MPa)")
        ax.set_title(f"{layers[region].name}: {layers[region].material.label}, mid-height",
                     fontsize=9)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=6.5, loc="best", ncol=2, framealpha=0.85)
    axes[-1, 0].set_xlabel("distance from the sidewall (nm); points at element centres")
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)


def plot_tractions(path: Path, rows: list, layers, standoff: float) -> None:
    """Peel and shear traction along each interface near the sidewall (MPa)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    ks = sorted({r[0] for r in rows})
    stack = layers[-1].z_top
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.0), dpi=110, sharex=True)
    smax = max(r[3] for r in rows)
    xmax = min(smax, 6.0 * stack)
    for i, k in enumerate(ks):
        for side, style in (("+x", "-"), ("+y", ":")):
            sel = [r for r in rows if r[0] == k and r[2] == side]
            if not sel:
                continue
            a = np.array([r[3:6] for r in sel])
            lab = f"{layers[k + 1].name}/{layers[k].name} (z = {sel[0][1]:g} nm), {side}"
            axes[0].plot(a[:, 0], a[:, 1], style, color=f"C{i}", marker=".", ms=3, label=lab)
            axes[1].plot(a[:, 0], a[:, 2], style, color=f"C{i}", marker=".", ms=3, label=lab)
    for ax, what in zip(axes, ("peel traction sigma_zz (MPa)",
                               "shear traction toward the sidewall (MPa)")):
        ax.axhline(0.0, color="0.3", lw=0.8)
        ax.axvline(standoff, color="0.5", lw=0.8, ls="--")
        ax.set_xlim(0, xmax)
        ax.set_xlabel("distance from the sidewall (nm)")
        ax.set_ylabel(what)
        ax.grid(alpha=0.3)
    axes[0].legend(fontsize=7)
    axes[0].text(standoff, axes[0].get_ylim()[1], " stand-off", fontsize=7, va="top",
                 color="0.4")
    fig.suptitle("Interface tractions near the sidewall; points at element centres. The traction "
                 "of a sharp edge is singular: values next to the sidewall grow as the mesh is "
                 "refined", fontsize=8.5)
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
