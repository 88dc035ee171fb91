"""A short, self-contained HTML report of a run (``report.html``, images embedded).

:func:`write_report` reads ``summary.json`` of a result folder, draws the
stack, draws the standard maps the folder lacks from ``fields.vtu``
(:mod:`mesastrain.io.maps`; a run has drawn them already, and nothing is drawn
twice) and assembles one HTML file whose pictures are embedded as data URIs,
so the file can be mailed or archived on its own.

The body is built from :data:`SECTIONS`: functions
``section(summary: dict, folder: Path) -> str | None`` returning an HTML
fragment (or None to leave the section out), listed explicitly in order
(:mod:`mesastrain.io.report_sections`, :mod:`mesastrain.io.report_misfit`,
:mod:`mesastrain.io.report_device`; HTML helpers in
:mod:`mesastrain.io.markup`); the warnings come first and the caution text
(:data:`mesastrain.io.wording.CAUTION`) always closes the report.
"""

from __future__ import annotations

import json
import logging
from collections.abc import Callable
from pathlib import Path

from mesastrain.io.markup import esc, image, mpa, num, table
from mesastrain.io.report_device import section_device
from mesastrain.io.report_headline import section_headline_errors
from mesastrain.io.report_misfit import section_misfit
from mesastrain.io.report_sections import (
    section_bow,
    section_convergence,
    section_headline,
    section_inputs,
    section_pictures,
    section_probes,
    section_stack,
)
from mesastrain.io.wording import CAUTION

log = logging.getLogger(__name__)

__all__ = ["REPORT_NAME", "SECTIONS", "esc", "image", "mpa", "num", "render_pictures", "table",
           "write_report"]


REPORT_NAME = "report.html"

_CSS = """
body { font-family: "DejaVu Sans", Arial, sans-serif; margin: 0 auto; max-width: 1100px;
       padding: 1.2em 2em 3em; color: #1d2630; line-height: 1.45; }
h1 { font-size: 1.55em; margin-bottom: 0.1em; }
h2 { font-size: 1.2em; border-bottom: 2px solid #4a6f8a; padding-bottom: 0.15em; margin-top: 1.8em; }
h3 { font-size: 1.0em; margin-bottom: 0.3em; }
.sub { color: #5a6874; margin-top: 0; }
table { border-collapse: collapse; margin: 0.4em 0 0.8em; font-size: 0.88em; }
th, td { border: 1px solid #c4ccd3; padding: 0.22em 0.55em; text-align: right; }
th { background: #e8eef3; text-align: center; }
td.l, th.l { text-align: left; }
.warn { background: #fff4e0; border-left: 5px solid #d98a00; padding: 0.5em 1em; }
.warn li { margin: 0.25em 0; }
.ok { background: #eaf5ea; border-left: 5px solid #4c9a4c; padding: 0.4em 1em; }
.caution { background: #f0f0f0; border-left: 5px solid #777; padding: 0.6em 1em; margin-top: 2em; }
.note { color: #4d5a66; font-size: 0.86em; }
.sing { color: #b03a2e; font-weight: bold; }
figure { margin: 0.8em 0 1.4em; }
figure img { max-width: 100%; height: auto; border: 1px solid #d5dbe0; }
figcaption { font-size: 0.92em; color: #36424d; max-width: 62em; }
.oor { color: #8a5a00; }
td.oor { background: #fff4e0; }
dl.legend { font-size: 0.86em; color: #4d5a66; }
dl.legend dt { float: left; font-weight: bold; margin-right: 0.4em; }
"""


#: Report sections in order: ``section(summary, folder) -> HTML fragment or None``.
SECTIONS: tuple[Callable[[dict, Path], str | None], ...] = (
    section_inputs, section_headline_errors, section_stack, section_headline, section_bow,
    section_probes,
    section_misfit, section_device, section_convergence, section_pictures)


# --------------------------------------------------------------------------
# the whole report
# --------------------------------------------------------------------------
def _warnings_block(summary: dict) -> str:
    """The case's own ``about`` text (when given), then the warnings."""
    about = (summary.get("case") or {}).get("about")
    head = f'<p class="about">{esc(about)}</p>' if about else ""
    w = summary.get("warnings") or []
    if not w:
        return head + '<div class="ok">No warnings.</div>'
    return (head + '<div class="warn"><b>Warnings</b><ul>'
            + "".join(f"<li>{esc(x)}</li>" for x in w) + "</ul></div>")


def render_pictures(folder: Path, maps) -> str | None:
    """Draw the standard maps that the folder lacks; returns a note when they could not be drawn.

    A run draws its maps from memory before the report is written, so nothing is
    drawn twice: only a folder without them (e.g. written with ``run --quick``)
    gets them here, from ``fields.vtu`` with matplotlib (no OpenGL needed).
    """
    folder = Path(folder)
    vtu = folder / "fields.vtu"
    if not maps:
        return None
    missing = [m for m in maps if not (folder / f"map_section_{m}.png").is_file()]
    if not missing:
        return None
    if not vtu.is_file():
        return "No maps: fields.vtu was not written (output.vtu = false)."
    try:
        from mesastrain.io.maps import FieldSource, standard_maps

        standard_maps(FieldSource.from_vtu(vtu), folder, tuple(missing))
    except Exception as exc:   # keep the rest of the report
        log.warning("maps not drawn: %s", exc)
        return f"Maps not drawn ({type(exc).__name__}: {exc})."
    return None


def write_report(folder: Path, maps=None, pictures: bool = True,
                 sections: tuple = SECTIONS) -> Path:
    """Write ``report.html`` into a result folder.

    Parameters
    ----------
    folder : Path
        A result folder holding ``summary.json`` (and ``fields.vtu`` for maps).
    maps : sequence of str, optional
        Components drawn as maps; default: the case's ``output.maps``.
    pictures : bool
        Draw the maps the folder lacks from ``fields.vtu`` (matplotlib). A run
        draws them beforehand from memory (:func:`mesastrain.io.folder.draw_pictures`)
        and passes False; pictures already in the folder are embedded, never redrawn.
    sections : tuple of callable(summary, folder) -> str or None, default: SECTIONS
        The body, in order.

    Returns
    -------
    Path
        The report file.
    """
    folder = Path(folder)
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    if maps is None:
        maps = summary.get("case", {}).get("output", {}).get("maps", ())
    if pictures:
        note = render_pictures(folder, maps)
    else:
        note = ("No maps: fields.vtu was not written (output.vtu = false)."
                if maps and not (folder / "fields.vtu").is_file() else None)
    if note:
        summary["_pictures_note"] = note
    body = []
    for section in sections:
        try:
            frag = section(summary, folder)
        except Exception as exc:  # one broken section must not lose the others
            log.warning("report section %s failed: %s", getattr(section, "__name__", section),
                        exc)
            frag = (f'<p class="warn">Section {esc(getattr(section, "__name__", section))} '
                    f'could not be written: {esc(exc)}</p>')
        if frag:
            body.append(frag)
    prog = summary.get("program", {})
    title = summary.get("title", "mesastrain result")
    doc = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>{esc(title)} - mesastrain report</title>
<style>{_CSS}</style></head>
<body>
<h1>{esc(title)}</h1>
<p class="sub">mesastrain {esc(prog.get("version", ""))} &middot; linear-elastic
finite-element estimate</p>
{_warnings_block(summary)}
{"".join(body)}
<div class="caution"><b>Caution.</b> {esc(CAUTION)} Stresses at sharp reentrant corners and at
the edges of bimaterial interfaces are singular in linear elasticity: read them at the stated
stand-off distance and compare runs on different meshes; never treat a corner peak as a
converged number.</div>
</body></html>
"""
    out = folder / REPORT_NAME
    out.write_text(doc, encoding="utf-8")
    return out
