"""The headline figures: the handful of numbers an engineer decides on.

:func:`headline_figures` picks them out of a solved :class:`~mesastrain.run.result.Result`
whose earlier derived-quantity providers have run (it reads their summaries), so that
every consumer names and orders them the same way: error estimates
(discretisation error, material-data scatter), the terminal table, the report and
sweeps. :func:`derive` is the provider that writes them to ``summary.json`` under
``headline``, together with whatever error contributions earlier providers attached
to them (a summary key listed in :data:`CONTRIBUTIONS`, whose ``figures`` entry is a
dict keyed by figure name).

Figures, in this order:

* each grown layer's stress at the feature centre, ``NAME centre sxx`` and
  ``syy`` (MPa), and its edge relaxation length per sidewall axis,
  ``NAME relaxation length x`` (nm, the +x / +y side);
* the stand-off values at each kind of edge and corner feature, the largest in
  magnitude over the feature's sides: ``standoff FEATURE REGION von_mises`` and
  ``... peel`` (MPa; finite at a finite stand-off, so not singular; ``at`` says
  which side);
* each interface's peel and shear peaks next to the sidewall,
  ``interface A/B peel peak`` (MPa; at a free edge these grow without bound
  under refinement and are marked singular);
* each probe's normal stresses and von Mises stress, and, when device physics
  ran, its Raman shift (cm⁻¹) and band-gap shift (eV);
* the finite-element wafer bow height (µm).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from mesastrain.run.result import Derived

__all__ = ["CONTRIBUTIONS", "Figure", "derive", "figure_words", "headline_figures",
           "merged_summary"]

#: Summary keys of providers that attach an error contribution to headline figures:
#: ``summary[key]["figures"][figure name] = {"error": float, ...}`` (same unit as the
#: figure; ``summary[key]`` may hold other entries, such as its method and units).
CONTRIBUTIONS = ("discretisation_error", "material_scatter")

#: Relative difference below which two candidate values of one figure count as equal (the
#: first in reading order is kept): mirror images differ by round-off only.
TIE = 1e-9


@dataclass(frozen=True)
class Figure:
    """One headline figure.

    Attributes
    ----------
    name : str
        Unique within a run, e.g. ``"SiGe centre sxx"``.
    value : float
        In ``unit``.
    unit : str
        ``"MPa"``, ``"nm"``, ``"cm⁻¹"``, ``"eV"`` or ``"µm"``.
    kind : str
        ``"centre"``, ``"relaxation"``, ``"standoff"``, ``"interface"``,
        ``"probe"``, ``"raman"``, ``"band"`` or ``"bow"``.
    singular : bool
        The exact value is unbounded (a stress at a sharp corner or free edge):
        no error bar is meaningful.
    region : str
        Name of the region the figure belongs to ("" for whole-model figures).
    at : tuple of float or None
        Point (nm, sample frame) the figure is evaluated at, when it is one.
    """

    name: str
    value: float
    unit: str
    kind: str
    singular: bool = False
    region: str = ""
    at: tuple | None = None


#: Tokens of figure names shown in words on the terminal and in the report (the names
#: themselves stay ASCII: sweeps and scripts address figures by them).
_WORDS = {"sxx": "σxx", "syy": "σyy", "szz": "σzz", "von_mises": "von Mises",
          "standoff": "stand-off"}


def figure_words(name: str) -> str:
    """A figure name for reading: ``"standoff A/B edge A von_mises"`` -> ``"stand-off A/B edge
    A von Mises"``, ``"SiGe centre sxx"`` -> ``"SiGe centre σxx"`` (whole words only)."""
    return " ".join(_WORDS.get(w, w) for w in name.split(" "))


def merged_summary(res) -> dict:
    """The top-level ``summary.json`` entries the providers so far produced."""
    out = {}
    for d in res.derived:
        out.update(d.summary)
    return out


def _point(x) -> tuple | None:
    return None if x is None else tuple(float(v) for v in np.asarray(x, dtype=float).ravel())


def _without_side(name: str) -> str:
    """A feature name without its trailing side, e.g. ``"A/B edge +x"`` -> ``"A/B edge"``."""
    head, _, last = name.rpartition(" ")
    return head if head and last[:1] in "+-(" else name


def headline_figures(res) -> list[Figure]:
    """The headline figures of a result, in a fixed order (see the module text).

    Parameters
    ----------
    res : mesastrain.run.result.Result
        With the standard providers' :class:`Derived` parts already in ``res.derived``
        (figures whose provider did not run are left out).

    Returns
    -------
    list of Figure
    """
    s = merged_summary(res)
    figs: list[Figure] = []
    readouts = s.get("readouts") or {}
    for name, entry in readouts.get("layers", {}).items():
        c = entry.get("centre_stress")
        if c is not None:
            c = np.asarray(c, dtype=float)
            for k, comp in ((0, "sxx"), (1, "syy")):
                figs.append(Figure(f"{name} centre {comp}", float(c[k, k]), "MPa", "centre",
                                   region=name, at=_point(entry.get("centre_at"))))
        for side in ("+x", "+y"):
            rl = (entry.get("relaxation") or {}).get(side)
            if rl and rl.get("length") is not None:
                figs.append(Figure(f"{name} relaxation length {side[1]}", float(rl["length"]),
                                   "nm", "relaxation", region=name))
    worst: dict = {}
    for edge in readouts.get("edges", []):
        base = _without_side(edge["name"])
        for region, v in (edge.get("values") or {}).items():
            for q in ("von_mises", "peel"):
                if v.get(q) is None:
                    continue
                key = f"standoff {base} {region} {q}"
                # mirror-image corners carry the same value up to round-off: a later one
                # replaces the first only when larger beyond that, so the position quoted
                # does not hop between images from one build of the code to the next
                if key not in worst or abs(v[q]) > abs(worst[key].value) * (1 + TIE):
                    worst[key] = Figure(key, float(v[q]), "MPa", "standoff", region=region,
                                        at=_point(v.get("at")))
    figs.extend(worst.values())
    for itf in readouts.get("interfaces", []):
        sides = itf.get("sides") or {}
        side = next((k for k in ("+x", "+y", "-x", "-y") if k in sides), None)
        if side is None:
            continue
        label = "/".join(itf["between"][::-1])
        for q in ("peel", "shear"):
            v = sides[side].get(f"{q}_peak")
            if v is not None:
                figs.append(Figure(f"interface {label} {q} peak", float(v), "MPa", "interface",
                                   singular=True, region=label))
    for p in res.probes:
        st = np.asarray(p["stress"], dtype=float)
        at = _point(p.get("at"))
        for k, comp in enumerate(("sxx", "syy", "szz")):
            figs.append(Figure(f"probe {p['name']} {comp}", float(st[k, k]), "MPa", "probe", at=at))
        figs.append(Figure(f"probe {p['name']} von_mises", float(p["von_mises"]), "MPa", "probe",
                           at=at))
    # per-probe entries of the device provider live in its Derived.probe_entries
    for d in res.derived:
        for key, unit, kind, pick in (("raman_shift", "cm⁻¹", "raman", lambda v: v),
                                      ("band_edges", "eV", "band",
                                       lambda v: (v or {}).get("gap_shift"))):
            for p, v in zip(res.probes, d.probe_entries.get(key, [])):
                val = pick(v)
                if val is not None and np.isfinite(val):
                    label = "Raman shift" if kind == "raman" else "band-gap shift"
                    figs.append(Figure(f"probe {p['name']} {label}", float(val), unit, kind,
                                       at=_point(p.get("at"))))
    bow = (s.get("wafer_bow") or {}).get("finite_element")
    if bow and bow.get("bow_height") is not None:
        figs.append(Figure("wafer bow height", float(bow["bow_height"]), "µm", "bow"))
    return figs


def derive(res) -> Derived:
    """``summary["headline"]``: the headline figures with their error contributions.

    Runs after every provider that attaches a contribution (:data:`CONTRIBUTIONS`).

    Returns
    -------
    Derived
        ``summary["headline"]``: a list of dicts with ``name``, ``value``, ``unit``,
        ``kind``, ``singular``, ``region``, ``at`` and, for each contribution present,
        its entry under the contribution's key.
    """
    s = merged_summary(res)
    rows = []
    for f in headline_figures(res):
        row = asdict(f)
        for key in CONTRIBUTIONS:
            c = (s.get(key) or {}).get("figures", {}).get(f.name)
            if c is not None:
                row[key] = c
        rows.append(row)
    return Derived(summary={"headline": rows})


derive.stage = 2   # reads every other provider's part
