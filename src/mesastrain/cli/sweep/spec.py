"""The sweep file: reading and validating it, and key paths into a case file.

A sweep file (TOML) names a base case, the case-file keys to vary and the
figures to collect from each result's ``summary.json``::

    title = "Stressor mesa width"
    base = "mesa_width_base.toml"     # a case file, relative to the sweep file
    combine = "grid"                  # "grid": every combination; "zip": i-th values together

    [set]                             # optional: fixed changes to the base for every case
    "mesh.edge_size" = "15 nm"

    [[vary]]                          # one table per varied key
    key = "pattern.width"             # a key path into the case file
    from = "0.1 um"                   # a range: from, to and count (or step) ...
    to = "5 um"
    count = 6
    spacing = "log"                   # "linear" (default) or "log"

    [[vary]]
    key = "layer[0].x"
    values = [0.2, 0.3]               # ... or a list of values as the case file takes them

    [collect]
    figures = ["probes.centre.stress.xx", "layer_figures.SiGe.mean_stress.xx"]

Key paths
---------
Case-file keys are written as in error messages: table and key names joined
by dots, arrays of tables indexed from 0 in brackets: ``pattern.width``,
``layer[0].x``, ``probe[1].at``, ``probe[0].at[2]``. Each resolved case is
validated by :func:`mesastrain.case.parse.parse_case`; a case whose values are
not allowed is recorded as failed with that message, the others run.
Figure paths (``[collect] figures``) are described in
:mod:`mesastrain.cli.sweep.figures`.
"""

from __future__ import annotations

import copy
import math
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from mesastrain.case.parse import parse_case, read_toml
from mesastrain.case.renames import current_path, modernise
from mesastrain.errors import CaseError
from mesastrain.units import finite_float, is_number, parse_length, parse_temperature, show_value

_SWEEP_KEYS = ("title", "base", "combine", "set", "vary", "collect")
#: Most values of one [[vary]] axis, and most cases of a sweep: 10000 cases of even a
#: one-second solve take hours on a workstation; a larger study is several sweeps.
MAX_VALUES = 10000
MAX_CASES = 10000

_VARY_KEYS = ("key", "values", "from", "to", "count", "step", "spacing")
_COLLECT_KEYS = ("figures", "units")
COMBINE_MODES = ("grid", "zip")
SPACINGS = ("linear", "log")

#: Units of case-file keys by their last name (for table columns and plot axes).
KEY_UNITS = {
    "thickness": "nm", "width": "nm", "length": "nm", "etch_depth": "nm", "margin": "nm",
    "size": "nm", "edge_size": "nm", "substrate_depth": "nm", "at": "nm", "from": "nm",
    "to": "nm", "standoff": "nm", "wafer_diameter": "nm",
    "growth_temperature": "K", "final_temperature": "K",
    "x": "1", "composition": "1", "relaxed": "1", "growth": "1", "tolerance": "1",
}
#: Old-name notes already printed (once per path and process).
_NOTED: set = set()


_NAME = r"[^.\[\]\s](?:[^.\[\]]*[^.\[\]\s])?"
_PATH_FORM = re.compile(rf"^{_NAME}(?:\.{_NAME}|\[\d+\])*$")
_PATH_TOKEN = re.compile(rf"\[(\d+)\]|({_NAME})")


def parse_path(path, key: str) -> tuple:
    """Split a key path into segments.

    Parameters
    ----------
    path : str
        ``"layer[0].x"``, ``"probes.centre.stress.xx"``: names joined by dots,
        list items as ``[i]`` (from 0).
    key : str
        Where the path was written (for the error), e.g. ``"vary[0].key"``.

    Returns
    -------
    tuple of str and int
        Names as str, indices as int.

    Raises
    ------
    CaseError
        Not a string, or not of that form.
    """
    if not isinstance(path, str) or not _PATH_FORM.match(path.strip()):
        raise CaseError(key, f"{show_value(path)} is not a key path; write names joined by "
                             f"dots and list items as [i] from 0, e.g. \"pattern.width\", "
                             f"\"layer[0].x\"")
    return tuple(int(i) if i else name
                 for i, name in _PATH_TOKEN.findall(path.strip()))


def path_text(segs) -> str:
    """Key path segments back to text: ``("layer", 0, "x")`` -> ``"layer[0].x"``."""
    return "".join(f"[{s}]" if isinstance(s, int) else (f".{s}" if i else s)
                   for i, s in enumerate(segs))


def set_path(data: dict, segs: tuple, value, key: str) -> None:
    """Set ``value`` at the key path ``segs`` of a case-file dict, in place.

    Missing tables on the way are created (``thermal.growth_temperature``
    adds a ``[thermal]`` table); list items must exist.

    Raises
    ------
    CaseError
        Named ``key``: an index into something that is not a list or past
        its end, or a name inside something that is not a table.

    Old key names (:mod:`mesastrain.case.renames`, ``layer[0].x``) are set under their
    current names, in a case written either way, with one note on stderr.
    """
    segs, note = current_path(tuple(segs))
    if note is not None and str(note) not in _NOTED:
        _NOTED.add(str(note))
        print(f"note: {note}", file=sys.stderr)
    fresh, _ = modernise(data)      # the base case may still use the old names
    if fresh is not data:
        data.clear()
        data.update(fresh)
    cur = data
    for i, seg in enumerate(segs):
        last = i == len(segs) - 1
        where = path_text(segs[:i]) or "the case"
        if isinstance(seg, int):
            if not isinstance(cur, list):
                raise CaseError(key, f"{path_text(segs)}: {where} is not a list in the base case, "
                                     f"so [{seg}] cannot be used")
            if seg >= len(cur):
                raise CaseError(key, f"{path_text(segs)}: {where} has {len(cur)} item(s) in the "
                                     f"base case (indices from 0), so [{seg}] does not exist")
            if last:
                cur[seg] = value
            else:
                cur = cur[seg]
            continue
        if not isinstance(cur, dict):
            raise CaseError(key, f"{path_text(segs)}: {where} is not a table in the base case")
        if last:
            cur[seg] = value
        else:
            if seg not in cur:
                if isinstance(segs[i + 1], int):
                    raise CaseError(key, f"{path_text(segs)}: the base case has no "
                                         f"{path_text(segs[:i + 1])} list")
                cur[seg] = {}
            cur = cur[seg]


@dataclass(frozen=True)
class Axis:
    """One varied case-file key.

    Attributes
    ----------
    key : str
        Key path into the case file (``"pattern.width"``).
    values : tuple
        The values as the case file takes them (numbers, strings with units,
        lists).
    where : str
        Where it was written in the sweep file (``"vary[0]"``).
    """

    key: str
    values: tuple
    where: str

    @property
    def segments(self) -> tuple:
        return parse_path(self.key, f"{self.where}.key")

    @property
    def unit(self) -> str:
        """Unit of the resolved value in the table ("" when unknown)."""
        names = [s for s in self.segments if isinstance(s, str)]
        return KEY_UNITS.get(names[-1], "")


@dataclass(frozen=True)
class Sweep:
    """A validated sweep file.

    Attributes
    ----------
    title : str
    source : str or None
        The sweep file.
    base_path : str
        The base case file.
    base : dict
        The base case as read from TOML, with ``[set]`` applied.
    combine : str
        ``"grid"`` or ``"zip"``.
    axes : tuple of Axis
    figures : tuple of str
        Figure paths into ``summary.json``.
    units : dict of str -> str
        Units given for figures in ``[collect] units``.
    fixed : dict of str -> object
        The ``[set]`` entries, key path -> value.
    """

    title: str
    source: str | None
    base_path: str
    base: dict = field(repr=False)
    combine: str
    axes: tuple
    figures: tuple
    units: dict = field(default_factory=dict)
    fixed: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-ready description (for the metadata file)."""
        return {"title": self.title, "source": self.source, "base": self.base_path,
                "combine": self.combine, "set": dict(self.fixed),
                "vary": [{"key": a.key, "values": list(a.values)} for a in self.axes],
                "collect": {"figures": list(self.figures), "units": dict(self.units)}}


def _read_toml(path, key: str, what: str) -> dict:
    """:func:`mesastrain.case.parse.read_toml` (regular file, size, nesting), errors under
    ``key`` with the path in the message."""
    try:
        return read_toml(path, what)
    except CaseError as err:
        where = f"{err.key}: " if err.key and key else ""
        what_went = f"no such {what}" if err.message == "no such file" else err.message
        raise CaseError(key or err.key, f"{path}: {where}{what_went}") from None


def load_sweep(path) -> Sweep:
    """Read and validate a sweep file and its base case file.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    Sweep

    Raises
    ------
    CaseError
        Naming the sweep file and the key path: unreadable file, TOML syntax
        error, unknown or missing keys, bad ranges, bad key or figure paths,
        an unreadable base case.
    """
    source = str(path)
    data = _read_toml(path, "", "sweep file")
    try:
        return parse_sweep(data, source, base_dir=Path(path).resolve().parent)
    except CaseError as err:
        if err.source is None:
            raise err.with_source(source) from None
        raise


def _unknown(key: str, name: str, allowed) -> CaseError:
    import difflib

    close = difflib.get_close_matches(name, allowed, n=1)
    hint = f'did you mean "{close[0]}"? ' if close else ""
    return CaseError(key, f"unknown key; {hint}allowed: {', '.join(allowed)}")


def _flatten_set(table, prefix: str, key: str, out: dict) -> None:
    for k, v in table.items():
        path = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            _flatten_set(v, path, key, out)
        else:
            out[path] = v


def parse_sweep(data: dict, source: str | None = None, base_dir: Path | None = None,
                base: dict | None = None) -> Sweep:
    """Validate a sweep given as a dict (as :func:`tomllib.load` returns it).

    Parameters
    ----------
    data : dict
    source : str, optional
        The sweep file, for messages.
    base_dir : Path, optional
        Folder that a relative ``base`` path is taken from (default: the
        current folder).
    base : dict, optional
        The base case content, instead of reading ``base`` from disk.

    Returns
    -------
    Sweep
    """
    if not isinstance(data, dict):
        raise CaseError("", f"expected a table of sweep settings, got {show_value(data)}")
    for name in data:
        if name not in _SWEEP_KEYS:
            raise _unknown(name, name, _SWEEP_KEYS)
    title = data.get("title", Path(source).stem if source else "sweep")
    if not isinstance(title, str):
        raise CaseError("title", f"expected a string, got {show_value(title)}")
    combine = data.get("combine", "grid")
    if combine not in COMBINE_MODES:
        raise CaseError("combine", f"{show_value(combine)} is not allowed; allowed: \"grid\" "
                                   f"(every combination), \"zip\" (the i-th values together)")

    # base case
    if base is None:
        if "base" not in data:
            raise CaseError("base", "required key is missing; give the base case file, "
                                    "e.g. base = \"mesa.toml\" (relative to the sweep file)")
        if not isinstance(data["base"], str):
            raise CaseError("base", f"expected a file name, got {show_value(data['base'])}")
        bp = Path(data["base"])
        if not bp.is_absolute():
            bp = (base_dir or Path.cwd()) / bp
        base = _read_toml(bp, "base", "case file")
        base_path = str(bp)
    else:
        base_path = str(data.get("base", "<given>"))
    base = copy.deepcopy(base)

    # fixed changes
    fixed = {}
    if "set" in data:
        if not isinstance(data["set"], dict):
            raise CaseError("set", f"expected a table of key paths and values, e.g. "
                                   f"[set] \"mesh.size\" = 100, got {show_value(data['set'])}")
        _flatten_set(data["set"], "", "set", fixed)
        for path, value in fixed.items():
            segs = parse_path(path, f"set.{path}")
            set_path(base, segs, copy.deepcopy(value), f"set.{path}")

    # varied keys
    vary = data.get("vary")
    if vary is None:
        raise CaseError("vary", "required key is missing; give at least one [[vary]] table "
                                "with a key and its values (or from/to/count)")
    if not isinstance(vary, list) or not vary or not all(isinstance(v, dict) for v in vary):
        raise CaseError("vary", f"expected one or more [[vary]] tables, got {show_value(vary)}")
    axes, seen = [], {}
    for i, t in enumerate(vary):
        where = f"vary[{i}]"
        ax = _axis(t, where)
        if ax.key in seen:
            raise CaseError(f"{where}.key", f"{show_value(ax.key)} is already varied by "
                                            f"{seen[ax.key]}; vary each key once")
        if ax.key in fixed:
            raise CaseError(f"{where}.key", f"{show_value(ax.key)} is also fixed in [set]; "
                                            f"remove one of them")
        seen[ax.key] = where
        axes.append(ax)
    if combine == "zip":
        n0 = len(axes[0].values)
        for ax in axes[1:]:
            if len(ax.values) != n0:
                raise CaseError(ax.where, f"{len(ax.values)} values but vary[0] has {n0}; "
                                          f"combine = \"zip\" takes the i-th values together, "
                                          f"so every [[vary]] needs the same count")
    else:
        total = math.prod(len(ax.values) for ax in axes)
        if total > MAX_CASES:
            raise CaseError("vary", f"the grid of {' x '.join(str(len(a.values)) for a in axes)} "
                                    f"values is {total} cases; at most {MAX_CASES} (split the "
                                    f"study, or combine = \"zip\")")

    # figures
    collect = data.get("collect", {})
    if not isinstance(collect, dict):
        raise CaseError("collect", f"expected a [collect] table, got {show_value(collect)}")
    for name in collect:
        if name not in _COLLECT_KEYS:
            raise _unknown(f"collect.{name}", name, _COLLECT_KEYS)
    figures = collect.get("figures", [])
    if not isinstance(figures, list):
        raise CaseError("collect.figures", f"expected a list of figure paths, e.g. "
                                           f"[\"probes.centre.stress.xx\"], got "
                                           f"{show_value(figures)}")
    for k, f in enumerate(figures):
        parse_path(f, f"collect.figures[{k}]")
    if len(set(figures)) != len(figures):
        dup = next(f for f in figures if figures.count(f) > 1)
        raise CaseError("collect.figures", f"{show_value(dup)} is listed twice")
    units = collect.get("units", {})
    if not isinstance(units, dict) or not all(isinstance(v, str) for v in units.values()):
        raise CaseError("collect.units", "expected a table of figure path = unit string, e.g. "
                                         "units = { \"probes.centre.stress.xx\" = \"MPa\" }")
    for f in units:
        if f not in figures:
            raise CaseError("collect.units", f"{show_value(f)} is not one of collect.figures")
    sweep = Sweep(title=title, source=source, base_path=base_path, base=base, combine=combine,
                  axes=tuple(axes), figures=tuple(figures), units=dict(units), fixed=fixed)
    _check_keys_exist(sweep)
    return sweep


def _range_number(value, key: str):
    """A range end: (float, kind) with kind None (plain), "length" (nm) or "temperature" (K)."""
    if is_number(value):
        v = finite_float(value)
        if v is None:
            shown = (show_value(value) if not isinstance(value, int)
                     else f"an integer of {len(str(abs(value)))} digits")
            raise CaseError(key, f"expected a finite number, got {shown}")
        return v, None
    if isinstance(value, str):
        try:
            return parse_length(value, key), "length"
        except CaseError:
            pass
        try:
            return parse_temperature(value, key), "temperature"
        except CaseError:
            pass
    raise CaseError(key, f"expected a number, a length such as \"2 um\" or a temperature such "
                         f"as \"20 C\", got {show_value(value)}")


def _clean(v: float) -> float:
    """Round to 12 significant digits (1e-1 * 1e3 -> 100.0, not 100.00000000000001)."""
    return float(f"{v:.12g}")


def _axis(t: dict, where: str) -> Axis:
    for name in t:
        if name not in _VARY_KEYS:
            raise _unknown(f"{where}.{name}", name, _VARY_KEYS)
    if "key" not in t:
        raise CaseError(f"{where}.key", "required key is missing; give the case-file key to "
                                        "vary, e.g. key = \"pattern.width\"")
    key = t["key"]
    parse_path(key, f"{where}.key")
    key = key.strip()
    has_list = "values" in t
    has_range = "from" in t or "to" in t
    if has_list and has_range:
        raise CaseError(f"{where}.values", "give either values = [...] or a range (from, to, "
                                           "count or step), not both")
    if has_list:
        for name in ("count", "step", "spacing"):
            if name in t:
                raise CaseError(f"{where}.{name}", "only for a range (from, to); remove it or "
                                                   "replace values by from/to")
        values = t["values"]
        if not isinstance(values, list) or not values:
            raise CaseError(f"{where}.values", f"expected a non-empty list of values, got "
                                               f"{show_value(values)}")
        if len(values) > MAX_VALUES:
            raise CaseError(f"{where}.values", f"{len(values)} values; at most {MAX_VALUES}")
        return Axis(key, tuple(values), where)
    if not has_range:
        raise CaseError(f"{where}.values", "required key is missing; give values = [...] or a "
                                           "range with from, to and count (or step)")
    for name in ("from", "to"):
        if name not in t:
            raise CaseError(f"{where}.{name}", "required key is missing; a range needs both "
                                               "from and to")
    a, kind_a = _range_number(t["from"], f"{where}.from")
    b, kind_b = _range_number(t["to"], f"{where}.to")
    if kind_a != kind_b:
        raise CaseError(f"{where}.to", f"{show_value(t['to'])} is not the same kind of value as "
                                       f"from = {show_value(t['from'])}; give both as numbers, "
                                       f"both as lengths or both as temperatures")
    spacing = t.get("spacing", "linear")
    if spacing not in SPACINGS:
        raise CaseError(f"{where}.spacing", f"{show_value(spacing)} is not allowed; allowed: "
                                            f"\"linear\", \"log\"")
    if ("count" in t) == ("step" in t):
        raise CaseError(f"{where}.count", "give exactly one of count (number of values, ends "
                                          "included) or step (linear spacing)")
    if "count" in t:
        n = t["count"]
        if not isinstance(n, int) or isinstance(n, bool) or not 1 <= n <= MAX_VALUES:
            shown = (show_value(n) if not isinstance(n, int) or abs(n) < 10**12
                     else f"an integer of {len(str(abs(n)))} digits")
            raise CaseError(f"{where}.count", f"expected an integer >= 1, at most {MAX_VALUES}, "
                                              f"got {shown}")
        if n == 1 and a != b:
            raise CaseError(f"{where}.count", "count = 1 needs from = to; give count >= 2")
        if spacing == "log":
            if not (a > 0 and b > 0):
                raise CaseError(f"{where}.from", "spacing = \"log\" needs from and to > 0 (in "
                                                 "kelvin for temperatures)")
            vals = np.geomspace(a, b, n) if n > 1 else np.array([a])
        else:
            vals = np.linspace(a, b, n)
    else:
        if spacing == "log":
            raise CaseError(f"{where}.step", "step is for linear spacing; with spacing = "
                                             "\"log\" give count")
        if kind_a == "temperature":       # "10 K" would read as an absolute temperature
            if not is_number(t["step"]):
                raise CaseError(f"{where}.step", f"give a temperature step as a number of "
                                                 f"kelvin (= degrees Celsius), got "
                                                 f"{show_value(t['step'])}")
            step = float(t["step"])
        else:
            step, kind_s = _range_number(t["step"], f"{where}.step")
            if kind_s not in (None, kind_a):
                raise CaseError(f"{where}.step", f"{show_value(t['step'])} is not a "
                                                 f"{kind_a or 'plain number'}")
        if not step > 0:
            raise CaseError(f"{where}.step", f"must be > 0, got {show_value(t['step'])}")
        span = abs(b - a)
        n = int(math.floor(span / step * (1 + 1e-12) + 1e-9)) + 1
        if n > MAX_VALUES:
            raise CaseError(f"{where}.step", f"gives {n} values; at most {MAX_VALUES}")
        vals = a + math.copysign(step, b - a if b != a else 1.0) * np.arange(n)
    if kind_a == "temperature":
        values = tuple(f"{_clean(v)!r} K" for v in vals)
    elif kind_a is None and all(isinstance(t.get(k, 0), int) and not isinstance(t.get(k, 0), bool)
                                for k in ("from", "to", "step")) and spacing == "linear" \
            and all(float(v).is_integer() for v in vals):
        values = tuple(int(round(v)) for v in vals)
    else:
        values = tuple(_clean(float(v)) for v in vals)
    return Axis(key, values, where)


def _check_keys_exist(sweep: Sweep) -> None:
    """Each varied key must be a case-file key: try it with its first value."""
    for ax in sweep.axes:
        data = copy.deepcopy(sweep.base)
        set_path(data, ax.segments, copy.deepcopy(ax.values[0]), f"{ax.where}.key")
        try:
            parse_case(data)
        except CaseError as err:
            if err.message.startswith("unknown key") and err.key and (
                    ax.key == err.key or ax.key.startswith((err.key + ".", err.key + "["))):
                raise CaseError(f"{ax.where}.key", f"{show_value(ax.key)} is not a case-file "
                                                   f"key ({err.key}: {err.message})") from None
