"""The cases of a sweep: every combination (or zip) of the varied values,
validated, and the hash of a resolved case (the resume key)."""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
from dataclasses import dataclass, field
from pathlib import Path

from mesastrain.case.parse import parse_case
from mesastrain.case.types import Case
from mesastrain.cli.sweep.spec import KEY_UNITS, Sweep, parse_path, set_path
from mesastrain.errors import CaseError
from mesastrain.units import finite_float, is_number, parse_length, parse_temperature, show_value

#: Bumped when the hashed content changes meaning, so old folders are not reused.
HASH_SCHEME = 1

_TEMPERATURE_KEYS = ("growth_temperature", "final_temperature")


@dataclass(frozen=True)
class SweepCase:
    """One resolved case of a sweep.

    Attributes
    ----------
    index : int
        Row number, in expansion order (from 0).
    params : tuple of (str, object)
        Varied key path and the value given in the sweep file.
    hash : str
        :func:`case_hash` of the resolved case (of the raw dict when it is
        invalid).
    case : Case or None
        None when the values are not allowed.
    error : str or None
        The validation message when ``case`` is None.
    """

    index: int
    params: tuple
    hash: str
    case: Case | None = field(default=None, repr=False)
    error: str | None = None

    def label(self) -> str:
        """``pattern.width = 218.672 nm``-style description of the varied values."""
        return _params_label(self.params)

    def resolved(self) -> dict:
        """Varied key path -> resolved value (numbers in the table's units)."""
        out = {}
        echo = self.case.to_dict() if self.case is not None else None
        for key, raw in self.params:
            segs = parse_path(key, key)
            value = _get_segments(echo, segs) if echo is not None else _MISSING
            if value is _MISSING:
                value = raw
            out[key] = _table_value(value, segs)
        return out


_MISSING = object()


def _params_label(params) -> str:
    parts = []
    for key, v in params:
        if is_number(v) and finite_float(v) is not None:
            unit = KEY_UNITS.get([s for s in parse_path(key, key) if isinstance(s, str)][-1], "")
            text = f"{v:.6g}" + (f" {unit}" if unit not in ("", "1") else "")
        else:
            text = show_value(v)
        parts.append(f"{key} = {text}")
    return ", ".join(parts)


def _get_segments(data, segs):
    cur = data
    for s in segs:
        if isinstance(s, int):
            if not isinstance(cur, list) or s >= len(cur):
                return _MISSING
            cur = cur[s]
        else:
            if not isinstance(cur, dict) or s not in cur:
                return _MISSING
            cur = cur[s]
    return cur


def _table_value(value, segs):
    """A parameter value as a table cell: a number where it has one, else its TOML text."""
    names = [s for s in segs if isinstance(s, str)]
    if is_number(value):
        return value
    if isinstance(value, str):
        try:
            if names and names[-1] in _TEMPERATURE_KEYS:
                return parse_temperature(value, "")
            if KEY_UNITS.get(names[-1] if names else "") == "nm":
                return parse_length(value, "")
        except CaseError:
            pass
        return value
    return show_value(value)


def case_hash(case: Case) -> str:
    """Stable hash of a resolved case: the resume key of a sweep.

    SHA-256 of the canonical JSON of ``case.to_dict()`` without its title
    (keys sorted, no spaces), prefixed with :data:`HASH_SCHEME`; the first 16
    hex digits. Two spellings of the same case (``"0.1 um"`` and ``100``)
    give the same hash; any change of a resolved value gives another.

    Parameters
    ----------
    case : Case

    Returns
    -------
    str
        16 lowercase hex digits.
    """
    d = case.to_dict()
    d.pop("title", None)
    return _digest(d)


def _digest(d) -> str:
    text = json.dumps({"scheme": HASH_SCHEME, "case": d}, sort_keys=True,
                      separators=(",", ":"), ensure_ascii=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def expand(sweep: Sweep) -> list[SweepCase]:
    """All cases of a sweep, validated, in row order.

    ``grid``: every combination, the last [[vary]] changing fastest.
    ``zip``: the i-th values of every [[vary]] together.

    Returns
    -------
    list of SweepCase
        Invalid combinations are included with ``case=None`` and their
        validation message.
    """
    lists = [ax.values for ax in sweep.axes]
    combos = itertools.product(*lists) if sweep.combine == "grid" else zip(*lists)
    base_title = sweep.base.get("title") if isinstance(sweep.base.get("title"), str) else None
    base_title = base_title or Path(sweep.base_path).stem
    out = []
    for i, combo in enumerate(combos):
        data = copy.deepcopy(sweep.base)
        params = tuple((ax.key, v) for ax, v in zip(sweep.axes, combo))
        for ax, v in zip(sweep.axes, combo):
            set_path(data, ax.segments, copy.deepcopy(v), f"{ax.where}.key")
        label = _params_label(params)
        data["title"] = f"{base_title} [{label}]"
        try:
            case = parse_case(data)
        except CaseError as err:
            raw = copy.deepcopy(data)
            raw.pop("title", None)
            out.append(SweepCase(i, params, "invalid-" + _digest(raw)[:8], None, str(err)))
            continue
        out.append(SweepCase(i, params, case_hash(case), case, None))
    return out
