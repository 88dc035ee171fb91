"""The terminal table of the headline figures with their error bars (``mesastrain run``)."""

from __future__ import annotations

from mesastrain.io.report_headline import figure_texts

__all__ = ["headline_table"]


#: Probe stress components left out of the terminal's short table: the probe table above it
#: gives their values, and summary.json and report.html give their error bars.
_COMPONENTS = (" sxx", " syy", " szz")


def headline_table(summary: dict, full: bool = False) -> str:
    """Plain-text table of ``summary["headline"]``: value, mesh and material-data error bars.

    The short form (the terminal's) gives each probe's von Mises stress but not its three
    normal components, and says how many rows it left out; ``full`` gives every row (the
    report always does). Returns '' when the summary has no headline figures.
    """
    rows = summary.get("headline") or []
    if not rows:
        return ""
    left = []
    if not full:
        left = [r for r in rows if r.get("kind") == "probe" and r["name"].endswith(_COMPONENTS)]
        rows = [r for r in rows if r not in left]
    texts = [figure_texts(r) for r in rows]
    w = max(len(t["name"]) for t in texts)
    wv = max(len(t["value"]) for t in texts)
    lines = [f"{'headline figure':<{w}}  {'value':>{wv}}  {'mesh':>10}  material data"]
    for t in texts:
        if t["singular"]:
            tail = "singular \N{EM DASH} see stand-off values"
            lines.append(f"{t['name']:<{w}}  {t['value']:>{wv}}  {tail}")
            continue
        scat = t["scatter"] + (f" (mostly {t['dominant']})" if t["dominant"] else "")
        lines.append(f"{t['name']:<{w}}  {t['value']:>{wv}}  {t['discretisation'] or '-':>10}  "
                     f"{scat or '-'}")
    if summary.get("material_scatter"):
        lines.append("material data: change for the published spread of each constant group, "
                     "first order, root-sum-square over groups")
    if left:
        lines.append(f"{len(left)} more rows (the probes' σxx, σyy, σzz with their bars) in "
                     f"report.html and summary.json \N{RIGHTWARDS ARROW} headline")
    return "\n".join(lines)
