"""Tractions on the interfaces that reach the sidewall: peel and shear profiles, force balance.

Peel is σzz on the interface plane (positive opens it); shear is the
traction component pointing toward the sidewall. A free feature carries no
net force across an interface plane, so the balance measures the
discretisation error. Plotted to ``interface_tractions.png``.

Units: stress MPa, lengths nm, sample frame.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain.derived.sampling import (
    column_profile,
    directions,
    locate_in_region,
    mirrors_of,
    recovered_stress,
    sidewall_distance,
)
from mesastrain.fem.fields import reference_coordinates
from mesastrain.fem.mapping import fast_mapping
from mesastrain.model.symmetry import reflect_tensors

__all__ = [
    "interface_balance",
    "interface_stress",
    "plot_tractions",
    "tractions_figure",
    "traction_profiles",
]


# --------------------------------------------------------------------------
# interface tractions
# --------------------------------------------------------------------------
def interface_stress(res, pts: np.ndarray, k: int | None = None, with_jump: bool = False):
    """Stress on interface k (between regions k and k + 1), MPa: the mean of the two sides.

    Each side is the recovered stress of its region at the point
    (:func:`mesastrain.derived.sampling.recovered_stress`: superconvergent
    patch recovery one-sided per region), so the point itself is sampled,
    never a point above or below it that may lie outside a sloped sidewall.
    Where only one side exists its value is used. The traction sigma . e_z
    of the exact solution is continuous across the interface; the in-plane
    components are not, so only the traction columns of the mean are
    meaningful on the plane.

    Parameters
    ----------
    pts : array (npts, 3), nm, on the interface plane
    k : int, optional
        Interface index (default: the interface nearest to the first point).
    with_jump : bool
        Also return |t_above - t_below| per point (NaN where a side is missing).
    """
    pts = np.atleast_2d(np.asarray(pts, dtype=float))
    if k is None:
        zs = np.asarray(res.case.interfaces)
        k = int(np.argmin(np.abs(zs - pts[0, 2])))
    up, _, _, _ = recovered_stress(res, pts, k + 1)
    dn, _, _, _ = recovered_stress(res, pts, k)
    has_up, has_dn = np.isfinite(up[:, 0, 0]), np.isfinite(dn[:, 0, 0])
    out = np.where(has_up[:, None, None], up, dn)
    both = has_up & has_dn
    out[both] = 0.5 * (up[both] + dn[both])
    if not with_jump:
        return out
    return out, np.linalg.norm(up[:, :, 2] - dn[:, :, 2], axis=1)


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
        sig, jump = interface_stress(res, pts, k, with_jump=True)
        peel = sig[:, 2, 2]
        # shear toward the sidewall: traction component along the outward direction d
        shear = d[0] * sig[:, 0, 2] + d[1] * sig[:, 1, 2]
        cross = -d[1] * sig[:, 0, 2] + d[0] * sig[:, 1, 2]
        ip, ish = int(np.nanargmax(np.abs(peel))), int(np.nanargmax(np.abs(shear)))
        out[label] = {"peel_peak": float(peel[ip]), "peel_peak_from_sidewall": float(s[ip]),
                      "shear_peak": float(shear[ish]),
                      "shear_peak_from_sidewall": float(s[ish]),
                      "peel_centre": float(peel[-1]), "sidewall_at": ext,
                      "traction_jump_max": float(np.nanmax(jump)) if np.any(np.isfinite(jump))
                      else None}
        for row in zip(s, peel, shear, cross):
            rows.append((k, z, label) + tuple(float(v) for v in row))
    return out, rows


def _facet_points(res, z: float):
    """Quadrature points and weights covering the mesh faces that lie on the plane z.

    Quadrilateral faces are split into two triangles; each triangle uses the
    3-point rule exact for quadratics. Returns (points (n, 3), weights (n,)).
    """
    m = res.mesh.mesh
    span = float(np.ptp(m.p[2])) or 1.0
    # the faces of the elements with a vertex on the plane (not every face of the mesh)
    touch = np.any(np.abs(m.p[2, m.t] - z) <= 1e-9 * span, axis=0)
    if not np.any(touch):
        return np.zeros((0, 3)), np.zeros(0)
    f = type(m)(m.p, np.ascontiguousarray(m.t[:, touch])).facets
    pz = m.p[2, f]
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


def _fe_interface_stress(res, pts: np.ndarray, k: int) -> np.ndarray:
    """Finite-element stress on interface k, linear in z between the elements' mid-heights.

    At each point the stress is evaluated in the element above and in the
    element below at their mid-height (reference coordinate of the vertical
    axis 1/2, the same lateral reference coordinates as the point, so the
    sample lies inside the element also on a sloped sidewall) and
    interpolated to the plane; where one side is missing the other is used.
    """
    m = res.mesh
    mesh = res.disc.basis.mesh
    dim = mesh.p.shape[0]
    mapping = fast_mapping(mesh)
    cols = [0, 1, 2] if dim == 3 else [0, 2]
    vals, heights = [], []
    for r in (k + 1, k):
        el = locate_in_region(res, pts, r)
        sig = np.full((len(pts), 3, 3), np.nan)
        zc = np.full(len(pts), np.nan)
        ok = np.flatnonzero(el >= 0)
        if ok.size:
            e = el[ok]
            X = reference_coordinates(mapping, pts[ok][:, cols].T[:, :, None], e)
            if "Affine" in type(mapping).__name__:
                q = pts[ok]                               # simplices: the point itself
            else:
                DF = mapping.DF(X, tind=e)[dim - 1, :, :, 0]  # d z / d X_i  (dim, n)
                ax = np.argmax(np.abs(DF), axis=0)
                X[ax, np.arange(ok.size), 0] = 0.5
                x = mapping.F(X, tind=e)[:, :, 0].T
                q = x if dim == 3 else np.column_stack([x[:, 0], pts[ok, 1], x[:, 1]])
            sig[ok] = m.evaluate(res.disc, res.u, e, q, m.region, res.stiffness,
                                 res.eigenstrain, res.cell_eigenstrain)[1]
            zc[ok] = q[:, 2]
        vals.append(sig)
        heights.append(zc)
    (su, sd), (zu, zd) = vals, heights
    out = np.where(np.isfinite(su), su, sd)
    both = np.isfinite(zu) & np.isfinite(zd) & (zu > zd)
    w = (pts[both, 2] - zd[both]) / (zu[both] - zd[both])
    out[both] = sd[both] + w[:, None, None] * (su[both] - sd[both])
    return out


def _net(w, sig) -> dict:
    szz, sxz, syz = sig[:, 2, 2], sig[:, 0, 2], sig[:, 1, 2]
    peel_abs = float(np.sum(w * np.abs(szz)))
    shear_abs = float(np.sum(w * np.hypot(sxz, syz)))
    return {"peel_force": float(np.sum(w * szz)),
            "peel_force_relative": float(np.sum(w * szz) / peel_abs) if peel_abs else 0.0,
            "shear_force_relative": (float(np.hypot(np.sum(w * sxz), np.sum(w * syz)) / shear_abs)
                                     if shear_abs else 0.0)}


def interface_balance(res, z: float) -> dict:
    """Net force across the whole interface plane z inside the body.

    The part of a free feature above the plane carries no load, so the
    integrals of sigma_zz, sigma_xz and sigma_yz over the plane vanish. Two
    versions, each divided by the integral of |sigma_zz| (and of the shear
    magnitude):

    * ``peel_force``, ``peel_force_relative``, ``shear_force_relative``: from
      the finite-element stress (the mean of the elements above and below at
      each point). This is an equilibrium check of the solve: on brick meshes
      it holds identically whatever the mesh, so it is **not** a measure of
      the discretisation error.
    * ``recovered``: the same from the recovered interface tractions
      (:func:`interface_stress`), which are not bound by that identity: their
      net force is an a-posteriori indicator of the discretisation error of
      the interface tractions.
    """
    pts, w = _facet_points(res, z)
    if not len(w):
        return {}
    k = int(np.argmin(np.abs(np.asarray(res.case.interfaces) - z)))
    up = locate_in_region(res, pts, k + 1) >= 0          # material above: the feature's plane
    pts, w = pts[up], w[up]
    # the mirror images: their stresses are the reflections S sigma S of the modelled
    # points' (S = diag(signs)), so each point is sampled once and the images reuse it
    src, signs = np.arange(len(w)), np.ones((len(w), 3))
    for a in mirrors_of(res):
        keep = pts[src, a] > 0                            # off the mirror plane
        img = signs[keep]
        img[:, a] = -1.0
        src, signs = np.concatenate([src, src[keep]]), np.vstack([signs, img])
        w = np.concatenate([w, w[keep]])
    out = {"area": float(w.sum())}
    out.update(_net(w, reflect_tensors(_fe_interface_stress(res, pts, k)[src], signs)))
    out["recovered"] = _net(w, reflect_tensors(interface_stress(res, pts, k)[src], signs))
    return out


# --------------------------------------------------------------------------
# plot (matplotlib, Agg)
# --------------------------------------------------------------------------
def tractions_figure(rows: list, layers, standoff: float):
    """The figure of :func:`plot_tractions` (not saved; an Agg canvas for measuring text)."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    ks = sorted({r[0] for r in rows})
    stack = layers[-1].z_top
    fig = Figure(figsize=(10, 4.6), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, 2, sharex=True)
    smax = max(r[3] for r in rows)
    xmax = min(smax, 6.0 * stack)
    for i, k in enumerate(ks):
        for side, style in (("+x", "-"), ("+y", ":")):
            sel = [r for r in rows if r[0] == k and r[2] == side]
            if not sel:
                continue
            a = np.array([r[3:6] for r in sel])
            lab = f"{layers[k + 1].name} on {layers[k].name} (z = {sel[0][1]:g} nm), {side}"
            axes[0].plot(a[:, 0], a[:, 1], style, color=f"C{i}", marker=".", ms=3, label=lab)
            axes[1].plot(a[:, 0], a[:, 2], style, color=f"C{i}", marker=".", ms=3, label=lab)
    for ax, what in zip(axes, ("peel traction σzz (MPa)",
                               "shear traction toward the sidewall (MPa)")):
        ax.axhline(0.0, color="0.3", lw=0.8)
        ax.axvline(standoff, color="0.5", lw=0.8, ls="--", label="stand-off distance")
        ax.set_xlim(0, xmax)
        ax.set_xlabel("distance from the sidewall (nm)", fontsize=10.5)
        ax.set_ylabel(what, fontsize=10.5)
        ax.tick_params(labelsize=10)
        ax.grid(alpha=0.3)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=9, loc="outside lower center", ncol=2)
    fig.suptitle("Interface tractions near the sidewall (points at element centres)\nsingular "
                 "at a sharp edge: values next to the sidewall grow as the mesh is refined",
                 fontsize=10.5)
    return fig


def plot_tractions(path: Path, rows: list, layers, standoff: float) -> None:
    """Peel and shear traction along each interface near the sidewall (MPa)."""
    tractions_figure(rows, layers, standoff).savefig(path)
