"""One row of ``mesastrain verify`` (:class:`Check`) and the small case builder the rows share."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Check"]


@dataclass
class Check:
    """One row of the verification table.

    Attributes
    ----------
    quantity : str
        What is compared, with its unit.
    published : float
        The published value (or the published formula evaluated with the
        inputs named in ``source``).
    source : str
        Where the published value comes from (authors, journal, year).
    computed : float
        What this installation computes.
    tolerance : float
        Largest accepted relative error (absolute when ``absolute``).
    absolute : bool
        Compare |computed - published| instead of the relative error.
    low, high : float, optional
        For a range check (a fact of the trade): pass when low <= computed <= high.
    kind : str
        ``"validation"``: compared with a value published independently of this
        tool's inputs (a measured or tabulated number, another code, a signed
        fact of the trade). ``"implementation"``: a published formula evaluated
        with the tool's own inputs (material table, same lattice law), which
        checks the implementation but cannot catch a wrong input or a sign
        shared by formula and model.
    """

    quantity: str
    published: float
    source: str
    computed: float
    tolerance: float
    absolute: bool = False
    low: float | None = None
    high: float | None = None
    kind: str = "validation"

    @property
    def error(self) -> float:
        if self.low is not None:
            return 0.0 if self.low <= self.computed <= self.high else math.inf
        if self.absolute:
            return abs(self.computed - self.published)
        return abs(self.computed - self.published) / abs(self.published)

    @property
    def passed(self) -> bool:
        # plain bool: numpy comparisons give numpy.bool_, which json cannot write
        return bool(np.isfinite(self.computed) and self.error <= self.tolerance)


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def _case(substrate: str, layer: dict, normal=(0, 0, 1), x_axis=(1, 0, 0), thickness=1e5,
          **extra):
    from mesastrain.case.parse import parse_case

    data = {"title": "verify", "substrate": {"material": substrate, "thickness": thickness,
                                             "normal": list(normal), "x_axis": list(x_axis)},
            "layer": [layer], "mesh": {"order": 2}, "output": {"report": False, "vtu": False},
            "readouts": {"bow": False}}
    data.update(extra)
    return parse_case(data)
