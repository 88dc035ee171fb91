"""Mesh convergence: solve on refined meshes and report how the headline figures move.

``mesastrain run CASE --convergence`` (or ``[mesh] convergence = true``)
solves the case on the mesh it asks for and again with every element size
divided by r and by r^2 (``mesh.refine``, a uniform refinement: sizes and the
grading slope shrink together, see :func:`mesastrain.mesh.planning.layout_of`).
For every headline figure f (each probe's normal stresses and von Mises
stress, each region's mean normal stresses and peak von Mises stress) it
reports the values f0, f1, f2, the changes d1 = f1 - f0 and d2 = f2 - f1 and,
when the changes shrink monotonically, the observed order of convergence

    p = ln(|d1| / |d2|) / ln(r)

with the Richardson estimate of the remaining error of f2, |d2| / (r^p - 1)
(Richardson 1911; Roache, Verification and Validation in Computational
Science and Engineering, 1998, from memory). Verdicts:

``converged``       |d2| below :data:`CONVERGED_RTOL` of the figure's scale
``converging``      |d2| < |d1| with the same sign (order p given)
``not converging``  |d2| >= |d1|: typical of a stress at a re-entrant corner,
                    whose exact value is infinite; report a stand-off value
``oscillating``     the changes alternate in sign without shrinking below the
                    tolerance

The result written to the output folder is the case's own mesh (level 0),
with the study in ``summary.json`` (key ``convergence``) and
``convergence.csv``.
"""

from __future__ import annotations

import csv
import dataclasses
import math
import time

import numpy as np

from mesastrain.errors import ResourceError
from mesastrain.fem.fields import von_mises
from mesastrain.mesh.planning import refinement_of
from mesastrain.run.pipeline import run_case
from mesastrain.run.resources import available_memory_gb, estimate
from mesastrain.run.result import Derived
from mesastrain.units import fmt

#: Element sizes are divided by this per refinement level.
DEFAULT_RATIO = 1.5
#: Number of solves (the case's mesh and two refinements).
DEFAULT_LEVELS = 3
#: A figure whose last change is below this fraction of its scale is converged.
CONVERGED_RTOL = 5e-3


def headline_figures(res) -> dict:
    """The figures a convergence study follows, MPa.

    Returns
    -------
    dict of name -> float
        ``probe NAME sxx`` (also syy, szz, von_mises) and ``REGION mean sxx``
        (also syy, szz) and ``REGION peak von_mises``.
    """
    out = {}
    for p in res.probes:
        s = p["stress"]
        for k, c in enumerate(("sxx", "syy", "szz")):
            out[f"probe {p['name']} {c}"] = float(s[k, k])
        out[f"probe {p['name']} von_mises"] = float(p["von_mises"])
    fl = res.fields
    for lm in res.layers:
        m = res.mesh.layer == lm.index
        if not np.any(m):
            continue
        vol = fl.cell_volume[m]
        sig = fl.cell_stress[m]
        mean = np.einsum("n,nij->ij", vol, sig) / vol.sum()
        for k, c in enumerate(("sxx", "syy", "szz")):
            out[f"{lm.name} mean {c}"] = float(mean[k, k])
        out[f"{lm.name} peak von_mises"] = float(np.max(von_mises(sig)))
    return out


def assess(values: list, ratio: float, scale: float) -> dict:
    """Changes, observed order and verdict of one figure over the levels.

    Parameters
    ----------
    values : list of float
        The figure on levels 0, 1 (, 2).
    ratio : float
        Element-size ratio between consecutive levels.
    scale : float
        Magnitude the changes are compared with (MPa), > 0.
    """
    v = [float(x) for x in values]
    d = [b - a for a, b in zip(v[:-1], v[1:])]
    out = {"values": v, "changes": d,
           "relative_changes": [x / scale for x in d],
           "observed_order": None, "error_estimate": None}
    last = abs(d[-1]) if d else 0.0
    if last <= CONVERGED_RTOL * scale:
        out["verdict"] = "converged"
    elif len(d) < 2:
        out["verdict"] = "changing"
    elif d[0] * d[1] > 0 and abs(d[1]) < abs(d[0]):
        p = math.log(abs(d[0]) / abs(d[1])) / math.log(ratio)
        out["observed_order"] = p
        out["error_estimate"] = abs(d[1]) / (ratio ** p - 1.0)
        out["verdict"] = "converging"
    elif abs(d[1]) >= abs(d[0]):
        out["verdict"] = "not converging"
    else:
        out["verdict"] = "oscillating"
    return out


def refined(case, factor: float):
    """The case with every element size divided by ``factor`` more."""
    base = refinement_of(case)
    mesh = dataclasses.replace(case.mesh, refine=base * factor, convergence=False)
    return dataclasses.replace(case, mesh=mesh)


def study(case, levels: int = DEFAULT_LEVELS, ratio: float = DEFAULT_RATIO, progress=None,
          max_memory_gb: float | None = None, providers=()):
    """Solve a case on ``levels`` meshes and assess its headline figures.

    Parameters
    ----------
    case : Case
    levels : int
        2 or more (3 gives observed orders).
    ratio : float
        Element-size ratio between levels (> 1).
    progress : callable(str), optional
    max_memory_gb : float, optional
        Levels whose estimate exceeds this are skipped (reported).
    providers : sequence of callables
        As for :func:`mesastrain.run.pipeline.run_case`; they run on the case's
        own mesh only.

    Returns
    -------
    result : Result
        The solve on the case's own mesh, with the study attached as a
        derived quantity (summary key ``convergence``, file ``convergence.csv``).
    report : dict
    """
    say = progress or (lambda msg: None)
    limit = max_memory_gb if max_memory_gb is not None else available_memory_gb()
    results, info = [], []
    first = None
    for k in range(levels):
        c = refined(case, ratio ** k) if k else case
        est = estimate(c)
        if k and est.memory_gb > limit:
            info.append({"level": k, "refine": ratio ** k, "skipped":
                         f"needs about {est.memory_gb:.1f} GB, {limit:.1f} GB allowed"})
            say(f"convergence: level {k} skipped ({est.memory_gb:.1f} GB needed)")
            break
        say(f"convergence: level {k + 1} of {levels} running: element sizes / "
            f"{ratio ** k:.3g}, {est.solved_unknowns or est.unknowns:,} unknowns, about "
            f"{est.seconds:.0f} s")
        t = time.perf_counter()
        inner = progress if k == 0 or progress is None else (
            lambda msg, k=k: progress(f"  level {k + 1}: {msg}"))
        res = run_case(c, progress=inner, max_memory_gb=max_memory_gb,
                       providers=providers if k == 0 else ())
        if first is None:
            first = res
        solved = res.solved or {"unknowns": int(res.u.size), "elements": int(res.mesh.nelems)}
        info.append({"level": k, "refine": ratio ** k, "unknowns": solved["unknowns"],
                     "elements": solved["elements"],
                     "seconds": round(time.perf_counter() - t, 2)})
        say(f"convergence: level {k + 1} of {levels} done in {info[-1]['seconds']:.1f} s")
        results.append(headline_figures(res))
        del res
    if first is None:
        raise ResourceError("convergence: not even the case's own mesh fits in memory")
    names = [n for n in results[0] if all(n in r for r in results)]
    probe_scale = max([abs(results[0][n]) for n in names if n.startswith("probe ")] or [0.0])
    all_scale = max([abs(v) for v in results[0].values()] or [1.0])
    figures = []
    for n in names:
        vals = [r[n] for r in results]
        scale = max(abs(vals[0]), 1e-3 * (probe_scale if n.startswith("probe ") else all_scale),
                    1e-9)
        figures.append({"name": n, "unit": "MPa", **assess(vals, ratio, scale)})
    report = {"ratio": ratio, "levels": info, "tolerance": CONVERGED_RTOL,
              "figures": figures,
              "note": "changes between successive meshes, each with element sizes divided by "
                      "the ratio; 'not converging' marks values at singular points"}
    warnings = [f"convergence: {f['name']} is {f['verdict']} (last change "
                f"{100 * f['relative_changes'][-1]:+.2g} %)"
                for f in figures if f["name"].startswith("probe ") and f["relative_changes"]
                and f["verdict"] in ("not converging", "oscillating")]
    d = Derived(summary={"convergence": report}, warnings=warnings,
                files={"convergence.csv": lambda path: write_csv(path, report)})
    first.derived.append(d)
    first.warnings.extend(warnings)
    return first, report


def write_csv(path, report: dict) -> None:
    """One row per figure: values per level, changes, order, verdict."""
    n = max(len(f["values"]) for f in report["figures"]) if report["figures"] else 0
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["figure", "unit"] + [f"level{k}" for k in range(n)]
                   + [f"change{k}" for k in range(1, n)]
                   + ["observed_order", "error_estimate", "verdict"])
        for f in report["figures"]:
            order = "" if f["observed_order"] is None else fmt(f['observed_order'], ".3g")
            err = "" if f["error_estimate"] is None else fmt(f['error_estimate'], ".4g")
            w.writerow([f["name"], f["unit"]] + [fmt(v, ".6g") for v in f["values"]]
                       + [fmt(c, ".4g") for c in f["changes"]] + [order, err, f["verdict"]])


def table(report: dict) -> str:
    """Plain-text table of a convergence study (MPa)."""
    lv = report["levels"]
    done = [x for x in lv if "unknowns" in x]
    head = (f"mesh convergence: {len(done)} meshes, element sizes divided by "
            f"{report['ratio']:g} per level (unknowns "
            + ", ".join(f"{x['unknowns']:,}" for x in done) + ")")
    lines = [head, f"{'figure':<34}{'value':>11}{'last change':>13}{'order':>7}  verdict"]
    for f in report["figures"]:
        order = "" if f["observed_order"] is None else fmt(f['observed_order'], ".2f")
        change = f"{100 * f['relative_changes'][-1]:+.2f} %" if f["relative_changes"] else ""
        lines.append(f"{f['name'][:33]:<34}{f['values'][0]:>11.1f}{change:>13}{order:>7}  "
                     f"{f['verdict']}")
    for x in lv:
        if "skipped" in x:
            lines.append(f"level {x['level']} skipped: {x['skipped']}")
    return "\n".join(lines)
