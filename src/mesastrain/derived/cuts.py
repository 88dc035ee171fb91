"""Line cuts: ``[[cut]]`` -> a CSV of every field component and a PNG plot of the chosen ones.

Each cut is sampled at ``points`` equally spaced points from ``from`` to ``to``
with the exact finite-element fields (``res.sample``). The CSV holds, per
point, the distance along the cut, the coordinates, the region and its
material, and every component of :data:`mesastrain.case.parse.FIELD_COMPONENTS`
with its unit in the column name. The plot shows the cut's ``components``
(default :data:`mesastrain.case.parse.DEFAULT_CUT_COMPONENTS`), one panel per
unit, with the layer boundaries crossed by the cut drawn as vertical lines.

Stress in MPa (positive in tension), strain dimensionless (plotted in %),
displacement in nm, all in the sample frame.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from mesastrain.case.schema import FIELD_COMPONENTS
from mesastrain.derived.sampling import sample_inside
from mesastrain.fem.fields import hydrostatic, principal, von_mises
from mesastrain.physics.quantities import describe
from mesastrain.run.result import Derived
from mesastrain.units import fmt, safe_name

_AX = {"x": 0, "y": 1, "z": 2}

#: Unit of each family of components (CSV column suffix and plot axis).
UNITS = {"stress": "MPa", "strain": "1", "displacement": "nm"}


def family(name: str) -> str:
    """``"stress"``, ``"strain"`` or ``"displacement"``: the panel a component is drawn in."""
    if name.startswith("strain"):
        return "strain"
    if name.startswith("displacement"):
        return "displacement"
    return "stress"


def unit_of(name: str) -> str:
    """Unit of a component name of :data:`FIELD_COMPONENTS`: MPa, 1 (strain) or nm."""
    return {"stress": "MPa", "strain": "1", "displacement": "nm"}[family(name)]


def components(strain: np.ndarray, stress: np.ndarray, disp: np.ndarray,
               names=FIELD_COMPONENTS) -> dict:
    """Named scalar components of sampled fields.

    Parameters
    ----------
    strain, stress : ndarray (n, 3, 3)
        Elastic strain and stress (MPa), sample frame.
    disp : ndarray (n, 3)
        Displacement, nm.
    names : sequence of str
        Names from :data:`mesastrain.case.parse.FIELD_COMPONENTS`.

    Returns
    -------
    dict of str -> ndarray (n,)
    """
    out = {}
    pr = None
    for name in names:
        if name.startswith(("stress_", "strain_")):
            q, c = name.split("_")
            t = stress if q == "stress" else strain
            out[name] = t[:, _AX[c[0]], _AX[c[1]]]
        elif name.startswith("displacement_"):
            out[name] = disp[:, _AX[name[-1]]]
        elif name == "von_mises":
            out[name] = von_mises(stress)
        elif name == "hydrostatic":
            out[name] = hydrostatic(stress)
        elif name in ("principal_max", "principal_min"):
            if pr is None:
                pr = np.full((len(stress), 3), np.nan)
                ok = np.all(np.isfinite(stress), axis=(1, 2))
                pr[ok] = principal(stress[ok])
            out[name] = pr[:, 0] if name == "principal_max" else pr[:, 2]
        else:
            raise KeyError(name)
    return out


def sample_cut(res, start, end, points: int):
    """Sample the fields along a straight line.

    Returns
    -------
    distance : ndarray (n,), nm
    pts : ndarray (n, 3), nm
    strain, stress, disp : sampled fields (NaN outside the body)
    region : ndarray of int (n,), -1 outside
    """
    a, b = np.asarray(start, dtype=float), np.asarray(end, dtype=float)
    t = np.linspace(0.0, 1.0, int(points))
    pts = a + t[:, None] * (b - a)
    strain, stress, disp, region = sample_inside(res, pts)
    return t * np.linalg.norm(b - a), pts, strain, stress, disp, region


def write_cut_csv(path: Path, dist, pts, region, labels, comps: dict) -> None:
    """CSV with one row per sample point; units in the column names.

    ``region`` is the region's name and ``material`` its material ("outside" and empty
    for a point outside the body).
    """
    names = list(comps)
    header = (["distance_nm", "x_nm", "y_nm", "z_nm", "region", "material"]
              + [f"{n}_{unit_of(n)}" if unit_of(n) != "1" else n for n in names])
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for k in range(len(dist)):
            r = int(region[k])
            row = [fmt(dist[k], ".9g"), *(fmt(v, ".9g") for v in pts[k]),
                   *(labels[r].partition(": ")[::2] if r >= 0 else ("outside", ""))]
            row += [fmt(comps[n][k], ".9g") for n in names]
            w.writerow(row)


def cut_figure(title: str, dist, region, labels, comps: dict, chosen):
    """The figure of :func:`plot_cut` (not saved; an Agg canvas for measuring text)."""
    import matplotlib
    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    groups = []
    for fam in ("stress", "strain", "displacement"):
        names = [n for n in chosen if family(n) == fam]
        if names:
            groups.append((fam, names))
    fig = Figure(figsize=(8.0, 3.0 * len(groups) + 1.0), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(len(groups), 1, sharex=True, squeeze=False)
    changes = np.flatnonzero(np.diff(region) != 0)
    for ax, (fam, names) in zip(axes[:, 0], groups):
        scale, unit = (100.0, "%") if fam == "strain" else (1.0, UNITS[fam])
        for n in names:
            ax.plot(dist, comps[n] * scale, label=describe(n).words)
        ax.axhline(0.0, color="0.3", lw=0.7)
        for k in changes:
            ax.axvline(0.5 * (dist[k] + dist[k + 1]), color="0.5", lw=0.8, ls="--")
        ax.set_ylabel(f"{fam} ({unit})", fontsize=10.5)
        ax.tick_params(labelsize=10)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8.5, ncol=min(len(names), 3))
    top = axes[0, 0]
    # region names above the top panel
    edges = np.concatenate([[0], changes + 1, [len(dist)]])
    for j, (i0, i1) in enumerate(zip(edges[:-1], edges[1:])):
        r = int(region[i0])
        mid = 0.5 * (dist[i0] + dist[i1 - 1])
        text = labels[r].split(": ", 1)[-1] if r >= 0 else "outside"
        top.annotate(text, (mid, 1.01 + 0.07 * (j % 2)), xycoords=("data", "axes fraction"),
                     ha="center", va="bottom", fontsize=8.5, color="0.3")
    axes[-1, 0].set_xlabel("distance along the cut (nm)", fontsize=10.5)
    fig.suptitle(title + "\nregions along the cut above the first panel; dashed lines: "
                 "boundaries", fontsize=10.5)
    return fig


def plot_cut(path: Path, title: str, dist, region, labels, comps: dict, chosen) -> None:
    """Plot the chosen components along the cut, one panel per unit, layer boundaries marked."""
    cut_figure(title, dist, region, labels, comps, chosen).savefig(path)


def derive(res) -> Derived:
    """Sample every ``[[cut]]`` of the case; files ``cut_<name>.csv`` and ``cut_<name>.png``."""
    cuts = getattr(res.case, "cuts", ())
    if not cuts:
        return Derived()
    labels = {lm.index: f"{lm.name}: {lm.material.label}" for lm in res.layers}
    files, items, warnings = {}, [], []
    for cut in cuts:
        dist, pts, strain, stress, disp, region = sample_cut(res, cut.start, cut.end, cut.points)
        comps = components(strain, stress, disp)
        chosen = tuple(getattr(cut, "components", ()) or ())
        base = f"cut_{safe_name(cut.name)}"
        outside = int(np.sum(region < 0))
        if outside:
            warnings.append(f"cut {cut.name!r}: {outside} of {len(region)} points lie outside "
                            f"the body (left empty in {base}.csv)")
        files[f"{base}.csv"] = (lambda p, d=dist, q=pts, r=region, c=comps:
                                write_cut_csv(p, d, q, r, labels, c))
        title = (f"cut {cut.name}: ({', '.join(f'{v:g}' for v in cut.start)}) to "
                 f"({', '.join(f'{v:g}' for v in cut.end)}) nm, sample frame")
        files[f"{base}.png"] = (lambda p, t=title, d=dist, r=region, c=comps, ch=chosen:
                                plot_cut(p, t, d, r, labels, c, ch))
        ext = {}
        for n in chosen:
            v = comps[n]
            if np.any(np.isfinite(v)):
                ext[n] = {"min": float(np.nanmin(v)), "max": float(np.nanmax(v)),
                          "unit": unit_of(n)}
        items.append({"name": cut.name, "from": list(cut.start), "to": list(cut.end),
                      "points": int(cut.points), "components": list(chosen),
                      "csv": f"{base}.csv", "plot": f"{base}.png", "range": ext})
    return Derived(summary={"cuts": items}, files=files, warnings=warnings)
