"""Small HTML helpers for the report: escaping, numbers, tables and embedded pictures."""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path

from mesastrain.units import fmt

__all__ = ["esc", "image", "mpa", "num", "table"]


def esc(text) -> str:
    """HTML-escaped text."""
    return html.escape(str(text))


def num(v, digits: int = 4, unit: str = "") -> str:
    """A number with ``digits`` significant digits (and a unit), '-' for missing."""
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int, float)):
        s = fmt(v, f".{digits}g")
        if "e" in s:
            m, e = s.split("e")
            s = f"{m}&times;10<sup>{int(e)}</sup>"
        return s + (f" {esc(unit)}" if unit else "")
    return esc(v)


def table(header, rows, left: int = 1) -> str:
    """An HTML table; the first ``left`` columns are left-aligned. Cells are HTML already."""
    th = "".join(f'<th class="l">{h}</th>' if i < left else f"<th>{h}</th>"
                 for i, h in enumerate(header))
    body = "".join("<tr>" + "".join(f'<td class="l">{c}</td>' if i < left else f"<td>{c}</td>"
                                    for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><tr>{th}</tr>{body}</table>"


def image(path: Path, caption: str = "") -> str:
    """A figure with the PNG embedded as a data URI ('' if the file is missing)."""
    path = Path(path)
    if not path.is_file():
        return ""
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return f'<figure><img alt="{esc(path.name)}" src="data:image/png;base64,{data}">{cap}</figure>'


def mpa(v, digits: int = 4) -> str:
    """A stress in MPa; round-off below 1e-3 MPa is shown as 0."""
    if isinstance(v, (int, float)) and not isinstance(v, bool) and abs(v) < 1e-3:
        return "0"
    return num(v, digits)
