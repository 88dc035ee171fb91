"""The headline figures with their error bars: report section and the texts it shares.

Reads ``summary["headline"]`` (:func:`mesastrain.derived.headline.derive`): each
figure's value and the error contributions attached to it, the discretisation
error (``discretisation_error``) and the material-data scatter
(``material_scatter``: the band from the published spreads of the material data,
its dominant constant group). A singular figure (a stress at a sharp corner or
free edge, unbounded under refinement) gets no error bar; it says so instead.

:func:`figure_texts` gives the same strings to the report table and to the
terminal table of ``mesastrain run`` (:mod:`mesastrain.cli.headline_table`).
"""

from __future__ import annotations

import math

from mesastrain.derived.headline import figure_words
from mesastrain.io.markup import esc, table

__all__ = ["SINGULAR_TEXT", "bar", "figure_texts", "section_headline_errors", "value_text"]

#: What a singular figure shows instead of an error bar.
SINGULAR_TEXT = "singular \N{EM DASH} see stand-off values"


def _sig(v: float, digits: int) -> str:
    """``v`` to ``digits`` significant digits, plain notation where it reads well."""
    if v == 0 or not math.isfinite(v):
        return f"{v:g}"
    mag = math.floor(math.log10(abs(v)))
    if -4 <= mag < 6:
        decimals = max(digits - 1 - mag, 0)
        return f"{v:.{decimals}f}"
    return f"{v:.{digits - 1}e}"


def value_text(value: float, unit: str) -> str:
    """A figure's value with 4 significant digits and its unit."""
    return f"{_sig(float(value), 4)} {unit}"


def bar(error) -> str:
    """'+- e' with 2 significant digits, '' when there is no error value."""
    if error is None or not isinstance(error, (int, float)) or not math.isfinite(error):
        return ""
    return f"\N{PLUS-MINUS SIGN} {_sig(float(error), 2)}"


def figure_texts(row: dict) -> dict:
    """Display strings of one ``summary["headline"]`` row.

    Returns
    -------
    dict
        ``name``, ``value`` (with unit), ``discretisation`` and ``scatter``
        (the bars, '' when absent), ``dominant`` (the group that dominates the
        scatter, '' when none), ``singular`` (bool) and ``line``: the one-line
        form, e.g. ``"SiGe centre σxx -1340 MPa +- 45 (mostly SiGe lattice law)"``; the
        name in words (:func:`mesastrain.derived.headline.figure_words`).
    """
    singular = bool(row.get("singular"))
    disc = row.get("discretisation_error") or {}
    scat = row.get("material_scatter") or {}
    out = {"name": figure_words(row["name"]), "value": value_text(row["value"], row["unit"]),
           "singular": singular, "discretisation": "", "scatter": "", "dominant": ""}
    if singular:
        out["line"] = f"{out['name']} {out['value']} ({SINGULAR_TEXT})"
        return out
    out["discretisation"] = bar(disc.get("error"))
    out["scatter"] = bar(scat.get("error"))
    if scat.get("dominant") and scat.get("error"):
        out["dominant"] = scat["dominant"]
    parts = []
    if out["scatter"]:
        parts.append(f"{out['scatter']} material data"
                     + (f", mostly {out['dominant']}" if out["dominant"] else ""))
    if out["discretisation"]:
        parts.append(f"{out['discretisation']} mesh")
    out["line"] = f"{out['name']} {out['value']}" + (f" ({'; '.join(parts)})" if parts else "")
    return out


def section_headline_errors(summary: dict, folder) -> str | None:
    """'Headline figures and error bars' (in :data:`mesastrain.io.report.SECTIONS`).

    One row per headline figure: value, discretisation error, material-data
    scatter with its dominant constant group; singular figures marked. None when
    the summary has no headline figures.
    """
    rows = summary.get("headline") or []
    if not rows:
        return None
    body = []
    for r in rows:
        t = figure_texts(r)
        if t["singular"]:
            body.append([esc(t["name"]), esc(t["value"]),
                         f'<span class="sing">{esc(SINGULAR_TEXT)}</span>', "", ""])
        else:
            body.append([esc(t["name"]), esc(t["value"]), esc(t["discretisation"] or "-"),
                         esc(t["scatter"] or "-"), esc(t["dominant"] or "-")])
    notes = []
    ms = summary.get("material_scatter")
    if ms:
        groups = ms.get("groups") or {}
        notes.append(
            "Material scatter: the change of each figure when the published spread of the "
            "material data is applied (a second source, half a published range, or the other "
            "lattice law), to first order, root-sum-square over the constant groups "
            f"({esc(', '.join(groups) or 'none')}); the dominant group contributes most. "
            "It is not a confidence interval: the sources are not a statistical sample.")
    de = summary.get("discretisation_error")
    if de and de.get("method"):
        notes.append(f"Discretisation error: {esc(de['method'])}.")
    if not ms and not de:
        notes.append("No error contributions were computed for this run "
                     "([uncertainty] enabled = false).")
    return "\n".join(["<h2>Headline figures and error bars</h2>",
                      table(["figure", "value", "discretisation error", "material scatter",
                             "mostly from"], body),
                      *(f'<p class="note">{n}</p>' for n in notes)])
