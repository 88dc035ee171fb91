"""Blanket state of a layer and the relaxation of the stress toward the free sidewalls.

The relaxation length along an in-plane axis is the distance from the
sidewall inside which the stress component normal to that sidewall is below
:data:`RECOVERY` of its value at the feature centre (at mid-height of the
layer). Plotted to ``edge_relaxation.png``.

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
    "plot_relaxation",
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
        out[label] = {"length": length, "sidewall_at": ext,
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


def plot_relaxation(path: Path, rows: list, layers, layers_out) -> None:
    """Stress normal to each sidewall against the distance from it, one panel per layer (MPa)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    regions = sorted({r[0] for r in rows})
    info = {e["region"]: e for e in layers_out.values()}
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
