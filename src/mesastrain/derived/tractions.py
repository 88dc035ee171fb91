"""Tractions on the interfaces that reach the sidewall: peel and shear profiles, force balance.

Peel is sigma_zz on the interface plane (positive opens it); shear is the
traction component pointing toward the sidewall. A free feature carries no
net force across an interface plane, so the balance measures the
discretisation error. Plotted to ``interface_tractions.png``.

Units: stress MPa, lengths nm, sample frame.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain.derived.sampling import (
    cell_centres,
    column_profile,
    directions,
    locate,
    mirrors_of,
    sample_inside,
    sidewall_distance,
)

__all__ = [
    "interface_balance",
    "interface_stress",
    "plot_tractions",
    "traction_profiles",
]


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
    for label, d, _comp in directions():
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
# plot (matplotlib, Agg)
# --------------------------------------------------------------------------
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
