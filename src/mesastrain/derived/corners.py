"""Peaks, free edges and corners of the feature, and the stress at a stand-off from them.

Where an interface meets the sidewall and where the sidewall meets the etch
floor, linear elasticity gives a singular stress: the peak there grows under
mesh refinement. The readout is the stress at a stated stand-off distance
from each such feature, with the element size there.

Units: stress MPa, lengths nm, sample frame.
"""

from __future__ import annotations

import numpy as np

from mesastrain.derived.sampling import (
    cell_centres,
    directions,
    element_size_at,
    etch_floor,
    locate_in_region,
    recovered_stress,
    sidewall_distance,
)
from mesastrain.fem.fields import hydrostatic, principal, von_mises

__all__ = [
    "SINGULAR_NOTE",
    "default_standoff",
    "edge_features",
    "free_edge_interfaces",
    "nearest_feature",
    "region_peaks",
    "elements_between",
    "standoff_values",
    "standoff_warnings",
]

#: Fewest elements between a singular edge and a stand-off point for a resolved value.
MIN_ELEMENTS = 3


SINGULAR_NOTE = ("stress at a sharp reentrant corner or where a bimaterial interface meets a "
                 "free surface is singular in linear elasticity: a peak there grows under mesh "
                 "refinement and is never a converged number; compare the values at the stated "
                 "stand-off distance between runs")


# --------------------------------------------------------------------------
# peaks
# --------------------------------------------------------------------------
def _extreme_principal(sig: np.ndarray, largest: bool) -> tuple[int, float]:
    """The element with the largest (smallest) principal stress, and that stress (MPa).

    Gershgorin's discs bound each element's extreme eigenvalue: the largest one lies
    between its largest diagonal entry and its largest row of diagonal plus off-diagonal
    magnitudes. Only the elements whose bound reaches the best of the others' diagonal
    entries can hold the extreme, and only they are decomposed (the same value and the
    same first element as decomposing every one, at a small fraction of the cost).
    """
    s = sig if largest else -sig
    d = np.diagonal(s, axis1=1, axis2=2)
    reach = d + (np.abs(s).sum(axis=2) - np.abs(d))            # Gershgorin upper bounds
    cand = np.flatnonzero(reach.max(axis=1) >= d.max())
    w = np.linalg.eigvalsh(sig[cand])
    k = int(np.argmax(w[:, -1])) if largest else int(np.argmin(w[:, 0]))
    return int(cand[k]), float(w[k, -1] if largest else w[k, 0])


def region_peaks(res, region: int) -> dict:
    """Peak von Mises, principal and hydrostatic element stresses of one region (MPa);
    each at the centre of its element."""
    m = np.flatnonzero(res.mesh.layer == region)
    if m.size == 0:
        return {}
    sig = res.fields.cell_stress[m]
    vm = von_mises(sig)
    hy = hydrostatic(sig)

    def at(k):
        return [float(v) for v in cell_centres(res, m[[k]])[0]]

    i_vm, i_hmax, i_hmin = int(np.argmax(vm)), int(np.argmax(hy)), int(np.argmin(hy))
    i_pmax, p_max = _extreme_principal(sig, largest=True)
    i_pmin, p_min = _extreme_principal(sig, largest=False)
    return {
        "von_mises": {"value": float(vm[i_vm]), "at": at(i_vm)},
        "principal_max": {"value": p_max, "at": at(i_pmax)},
        "principal_min": {"value": p_min, "at": at(i_pmin)},
        "hydrostatic_max": {"value": float(hy[i_hmax]), "at": at(i_hmax)},
        "hydrostatic_min": {"value": float(hy[i_hmin]), "at": at(i_hmin)},
    }


# --------------------------------------------------------------------------
# free edges and corners, stand-off values
# --------------------------------------------------------------------------
def _differs(a, b) -> bool:
    """True when two regions differ in stiffness or eigenstrain (an interface is singular)."""
    return (not np.allclose(a.stiffness_sample, b.stiffness_sample, rtol=1e-9, atol=1e-9)
            or not np.allclose(a.eigenstrain_sample, b.eigenstrain_sample, rtol=1e-9,
                               atol=1e-12))


def free_edge_interfaces(res) -> list[tuple[int, float]]:
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
    ifaces = free_edge_interfaces(res)
    floor_on_interface = any(abs(z - floor) <= tol for _, z in ifaces)
    eps = 1e-6 * max(standoff, 1.0)
    for label, d, _ in directions():
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
                "points": {above.name: p.tolist(), below.name: p.tolist()},
                "regions": {above.name: above.index, below.name: below.index},
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
                "regions": {layers[region].name: layers[region].index},
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
                        "points": {above.name: p.tolist(), below.name: p.tolist()},
                        "regions": {above.name: above.index, below.name: below.index},
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
                        "regions": {layers[region].name: layers[region].index},
                        "direction": "into the substrate, equally inward in x, y and down"})
    return feats


def elements_between(res, start: np.ndarray, end: np.ndarray, regions,
                     samples: int = 400) -> np.ndarray:
    """Number of elements of ``regions`` crossed by the segments start -> end (ends excluded).

    Counted as the distinct elements holding points along each segment (the
    element of the point's region, lowest cell first on a grid plane).
    """
    start, end = np.atleast_2d(start), np.atleast_2d(end)
    t = (np.arange(samples) + 0.5) / samples
    pts = start[:, None, :] + t[None, :, None] * (end - start)[:, None, :]
    reg = np.repeat(np.asarray(regions), samples)
    q = pts.reshape(-1, 3).copy()
    for a in res.mesh.mirrors:
        q[:, a] = np.abs(q[:, a])
    el = locate_in_region(res, q, reg).reshape(len(start), samples)
    srt = np.sort(el, axis=1)
    return ((np.diff(srt, axis=1) != 0).sum(axis=1) + 1 - (srt[:, 0] < 0)).astype(int)


def standoff_values(res, feats: list[dict]) -> list[dict]:
    """Stress at every stand-off point of :func:`edge_features`, from the recovered field.

    Each value is the superconvergent patch recovery of the stress of the
    named region (:func:`mesastrain.derived.sampling.recovered_stress`), the
    one-sided limit on an interface, never a finite-element value on a face.
    Beside it: ``error_estimate`` (MPa), the Zienkiewicz-Zhu estimate
    |f(recovered) - f(finite element)| of each figure f at the point (the
    error of the finite-element value; the recovered value is normally more
    accurate, so it is a conservative bar for it), ``elements_to_edge`` (the
    elements between the edge or corner and the point; fewer than
    :data:`MIN_ELEMENTS` and the value is not resolved) and, for an
    interface, ``traction_jump``: |t_above - t_below| of the two one-sided
    recovered tractions sigma . e_z, which the exact solution makes zero.
    """
    keys, pts, regs, starts = [], [], [], []
    for i, f in enumerate(feats):
        for side, p in f["points"].items():
            keys.append((i, side))
            pts.append(p)
            regs.append(f["regions"][side])
            starts.append(f["at"])
    if not pts:
        return []
    pts = np.array(pts, dtype=float)
    regs = np.array(regs)
    rec, fe, elems, deg = recovered_stress(res, pts, regs)
    between = elements_between(res, np.array(starts, dtype=float), pts, regs)
    h = element_size_at(res, pts)
    out = [dict(f, values={}) for f in feats]
    for (i, side), p, s, sf, e, nb, hk, dg in zip(keys, pts, rec, fe, elems, between, h, deg):
        if e < 0:
            continue
        pr, prf = principal(s), principal(sf)
        figs = {"von_mises": (float(von_mises(s)), float(von_mises(sf))),
                "principal_max": (float(pr[0]), float(prf[0])),
                "principal_min": (float(pr[2]), float(prf[2])),
                "hydrostatic": (float(hydrostatic(s)), float(hydrostatic(sf))),
                "peel": (float(s[2, 2]), float(sf[2, 2]))}
        val = {"at": p.tolist(), "stress": s}
        val.update({k: v[0] for k, v in figs.items()})
        val["error_estimate"] = {k: abs(v[0] - v[1]) for k, v in figs.items()}
        val["error_estimate"]["stress"] = float(np.max(np.abs(s - sf)))
        val["element_size"] = float(hk)
        val["elements_to_edge"] = int(nb)
        val["resolved"] = bool(nb >= MIN_ELEMENTS)
        if dg < res.order:
            val["recovery_degree"] = int(dg)
        out[i]["values"][side] = val
    for f in out:
        f.pop("points", None)
        f.pop("regions", None)
        v = list(f["values"].values())
        if len(v) == 2 and f["kind"].startswith(("interface", "reentrant corner at an")):
            t = [np.asarray(x["stress"])[:, 2] for x in v]
            f["traction_jump"] = float(np.linalg.norm(t[0] - t[1]))
    return out


def standoff_warnings(feats: list[dict], standoff: float) -> list[str]:
    """One warning when some stand-off values have fewer than MIN_ELEMENTS elements to the edge."""
    few = [(v["elements_to_edge"], v["element_size"], f["name"]) for f in feats
           for v in f["values"].values() if not v["resolved"]]
    if not few:
        return []
    n, hk, name = min(few)
    return [f"{len(few)} stand-off value(s) at {standoff:g} nm have fewer than {MIN_ELEMENTS} "
            f"elements between the edge and the point (fewest: {n} at '{name}', element "
            f"{hk:.3g} nm there): they are not resolved and move under refinement; set "
            f"mesh.edge_size <= {standoff / (MIN_ELEMENTS + 1):.3g} nm or raise "
            f"readouts.standoff"]


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


def default_standoff(case) -> float:
    """Stand-off distance used when ``[readouts] standoff`` is not given: half the thinnest layer."""
    return 0.5 * min(layer.thickness for layer in case.layers)
