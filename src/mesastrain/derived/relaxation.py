"""Blanket state of a layer and the relaxation of the stress toward the free sidewalls.

The relaxation length along an in-plane axis is the distance from the
sidewall beyond which the stress component normal to that sidewall stays
within ``1 -`` :data:`RECOVERY` (10 %) of its value at the feature centre (at
mid-height of the layer), on either side: a stress that overshoots its centre
value near the edge (a thin cap pulled over a relaxing film) is not called
relaxed where it passes through the centre value. The overshoot itself, the
largest stress over the centre value and where it sits, is reported beside
the length. Plotted to ``edge_relaxation.png``.

Units: stress MPa, lengths nm, sample frame.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain.derived.sampling import column_profile, directions, sample_inside, sidewall_distance
from mesastrain.physics.thinfilm import biaxial_response

__all__ = [
    "RECOVERY",
    "blanket_state",
    "edge_relaxation",
    "overshoot",
    "plot_relaxation",
    "relaxation_figure",
    "relaxation_length",
]


#: Fraction of the centre value that defines the relaxation length.
RECOVERY = 0.9


#: GPa -> MPa.
_MPA = 1000.0


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
    """Distance from the sidewall beyond which ``ratio`` stays within ``1 ± (1 - recovery)``.

    Parameters
    ----------
    s : ndarray
        Increasing distances from the sidewall, nm (the last is the centre).
    ratio : ndarray
        Stress over its centre value at each distance.
    recovery : float
        0.9: the band is 0.9 ... 1.1 of the centre value.

    Returns
    -------
    float
        nm, linearly interpolated where the ratio enters the band for good; 0
        when it never leaves the band.
    """
    tol = 1.0 - recovery
    outside = np.flatnonzero(~(np.abs(ratio - 1.0) <= tol))
    if outside.size == 0:
        return 0.0
    k = outside[-1]                  # outermost-from-centre point still outside the band
    if k == len(s) - 1:
        return float(s[-1])
    r0, r1 = ratio[k], ratio[k + 1]
    edge = 1.0 + tol if r0 > 1.0 else 1.0 - tol
    f = (edge - r0) / (r1 - r0) if r1 != r0 else 0.0
    return float(s[k] + f * (s[k + 1] - s[k]))


def overshoot(s: np.ndarray, ratio: np.ndarray, recovery: float = RECOVERY) -> dict | None:
    """The largest stress over its centre value, when it exceeds ``2 - recovery`` (1.1).

    Parameters
    ----------
    s, ratio : ndarray
        As for :func:`relaxation_length`.

    Returns
    -------
    dict or None
        ``peak_over_centre`` and ``at`` (distance from the sidewall, nm).
    """
    finite = np.isfinite(ratio)
    if not np.any(finite):
        return None
    k = int(np.argmax(np.where(finite, ratio, -np.inf)))
    if not ratio[k] > 2.0 - recovery:
        return None
    return {"peak_over_centre": float(ratio[k]), "at": float(s[k])}


def edge_relaxation(res, lm, zmid: float, centre_stress: np.ndarray) -> tuple[dict, list]:
    """Relaxation length per in-plane ray, and the profiles for the CSV."""
    out, profiles = {}, []
    for label, d, comp in directions():
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
        out[label] = {"length": length, "overshoot": overshoot(s, normal / c),
                      "sidewall_at": ext,
                      "normal_component": "xx" if comp == 0 else "yy",
                      "nearest_point_from_sidewall": float(s[0]),
                      "normal_stress_nearest_sidewall": float(normal[0]),
                      "along_edge_stress_nearest_sidewall": float(along[0])}
        for sk, nk, ak in zip(s, normal, along):
            profiles.append((lm.index, label, float(sk), float(nk), float(ak), float(c)))
    return out, profiles


# --------------------------------------------------------------------------
# plot (matplotlib, Agg)
# --------------------------------------------------------------------------
def _zoom(values_s: np.ndarray, lengths: list, stack: float) -> float:
    """x-range of a near-sidewall plot: a few relaxation lengths or stack heights."""
    want = max([4.0 * v for v in lengths if v] + [6.0 * stack])
    return float(min(values_s.max(), want))


def relaxation_figure(rows: list, layers, layers_out):
    """The figure of :func:`plot_relaxation` (not saved; an Agg canvas for measuring text)."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    regions = sorted({r[0] for r in rows})
    info = {e["region"]: e for e in layers_out.values()}
    stack = layers[-1].z_top
    fig = Figure(figsize=(8.0, 3.1 * len(regions) + 0.6), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(len(regions), 1, squeeze=False)
    for ax, region in zip(axes[:, 0], regions):
        e = info[region]
        lengths, notes = [], []
        for side, style in (("+x", "-"), ("+y", "--")):
            sel = [r for r in rows if r[0] == region and r[1] == side]
            if not sel:
                continue
            a = np.array([r[2:5] for r in sel])
            normal, along = ("σxx", "σyy") if side == "+x" else ("σyy", "σxx")
            ax.plot(a[:, 0], a[:, 1], style, color="C0", marker=".", ms=3,
                    label=f"{normal}, normal to the {side} sidewall")
            ax.plot(a[:, 0], a[:, 2], style, color="C2", lw=1,
                    label=f"{along}, along the {side} sidewall")
            rl = (e.get("relaxation") or {}).get(side)
            if rl:
                lengths.append(rl["length"])
                ax.axvline(rl["length"], color="C3", lw=0.9, ls=style)
                ov = rl.get("overshoot")
                if ov:
                    k = int(np.argmin(np.abs(a[:, 0] - ov["at"])))
                    ax.plot([a[k, 0]], [a[k, 1]], "v", color="C3", ms=7)
                    notes.append(f"overshoot at the {side} sidewall: {ov['peak_over_centre']:.2g}"
                                 f" × the centre value, {ov['at']:.3g} nm from it")
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
        head = f"{layers[region].name}: {layers[region].material.label}, at mid-height"
        if lengths:
            head += f"; relaxation length {max(lengths):.3g} nm (red line)"
        if notes:
            head += "\n" + notes[0] + " (red triangle)"
        ax.set_title(head, fontsize=10.5, loc="left")
        ax.set_ylabel("stress (MPa)", fontsize=10.5)
        ax.tick_params(labelsize=10)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8.5, loc="best", ncol=2, framealpha=0.9)
    axes[-1, 0].set_xlabel("distance from the sidewall (nm); points at element centres",
                           fontsize=10.5)
    return fig


def plot_relaxation(path: Path, rows: list, layers, layers_out) -> None:
    """Stress normal and parallel to each sidewall against the distance from it (MPa).

    One panel per layer, at mid-height; the relaxation length is a red line and
    an overshoot over the centre value a red triangle, both named in the title.
    """
    relaxation_figure(rows, layers, layers_out).savefig(path)
