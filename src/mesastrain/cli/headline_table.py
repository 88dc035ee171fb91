"""The terminal table of the headline figures with their error bars (``mesastrain run``)."""

from __future__ import annotations

from mesastrain.io.report_headline import figure_texts

__all__ = ["headline_table"]


def headline_table(summary: dict) -> str:
    """Plain-text table of ``summary["headline"]``: value, mesh and material-data error bars.

    Returns '' when the summary has no headline figures.
    """
    rows = summary.get("headline") or []
    if not rows:
        return ""
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
    return "\n".join(lines)
