"""Design sweeps: many variants of one case, run in parallel on Dask.

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
    figures = ["probes.centre.stress.xx", "layer_figures[1].mean_stress.xx"]

Key paths
---------
Case-file keys are written as in error messages: table and key names joined
by dots, arrays of tables indexed from 0 in brackets: ``pattern.width``,
``layer[0].x``, ``probe[1].at``, ``probe[0].at[2]``. Each resolved case is
validated by :func:`mesastrain.case.parse.parse_case`; a case whose values are
not allowed is recorded as failed with that message, the others run.

Figure paths
------------
A figure is a number inside ``summary.json``, reached by a path of the same
form: names select keys of a table, ``[i]`` an item of a list (from 0). Two
shorthands: in a list of tables that carry a ``name`` (``probes``,
``layer_figures``), a name selects the item with that name
(``probes.centre``); on a 3x3 tensor the components are ``xx yy zz xy yz xz``
(and ``yx zy zx``), on a 3-vector ``x y z``
(``probes.centre.displacement.z``). Units are inferred from the quantity
(stress MPa, lengths and displacements nm, strain dimensionless) or given in
``[collect] units = {"path" = "unit"}``.

Outputs (``--out DIR``)
-----------------------
``DIR/cases/<hash>/``
    each case's full result folder (``summary.json``, ``fields.vtu``, ...)
    plus ``sweep-case.json`` (parameters, run time, worker). ``<hash>`` is a
    hash of the resolved case (:func:`case_hash`); a folder appears only when
    complete, so re-running the sweep skips the cases already done.
``DIR/sweep-table.csv`` (and ``.parquet`` when pyarrow is installed)
    one row per case: parameters, status, run time, figures, error.
``DIR/sweep-meta.json``
    the sweep, column units, counts, failures with their messages, cluster.
``DIR/sweep-log.jsonl``
    one line per event (run started, case finished or failed), appended.
``DIR/plots/*.png``
    each collected figure against each varied parameter.

Execution
---------
Cases run as Dask tasks. Without a scheduler address an embedded
``LocalCluster`` is started on this machine (one single-threaded worker
process per core, loopback only) and stopped at the end; with ``--scheduler
tcp://host:port`` the cases go to an existing scheduler and its workers,
which need mesastrain installed. Workers return the result files to the
driver, which writes them, so the workers need no shared file system.
"""

from __future__ import annotations

import copy
import csv
import hashlib
import io
import itertools
import json
import math
import os
import re
import shutil
import signal
import socket
import sys
import tempfile
import threading
import time
import tomllib
import traceback
import uuid
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from mesastrain import __version__
from mesastrain.case.parse import parse_case
from mesastrain.case.types import Case
from mesastrain.errors import CaseError, MesastrainError
from mesastrain.units import is_number, parse_length, parse_temperature, show_value

__all__ = [
    "Axis", "Sweep", "SweepCase", "CaseOutcome", "load_sweep", "parse_sweep", "expand",
    "case_hash", "parse_path", "set_path", "figure_value", "figure_unit", "run_sweep",
    "solve_case", "plot_sweep", "summary_text", "add_command",
    "CASE_RECORD", "TABLE_CSV", "META_JSON", "LOG_JSONL",
]

#: File written into each completed case folder, next to the result files.
CASE_RECORD = "sweep-case.json"
#: Results table, metadata and event log in the sweep folder.
TABLE_CSV = "sweep-table.csv"
TABLE_PARQUET = "sweep-table.parquet"
META_JSON = "sweep-meta.json"
LOG_JSONL = "sweep-log.jsonl"
CASES_DIR = "cases"
PLOTS_DIR = "plots"
#: Bumped when the hashed content changes meaning, so old folders are not reused.
HASH_SCHEME = 1

_SWEEP_KEYS = ("title", "base", "combine", "set", "vary", "collect")
_VARY_KEYS = ("key", "values", "from", "to", "count", "step", "spacing")
_COLLECT_KEYS = ("figures", "units")
COMBINE_MODES = ("grid", "zip")
SPACINGS = ("linear", "log")

# units of case-file keys by their last name (for table columns and plot axes)
_KEY_UNITS = {
    "thickness": "nm", "width": "nm", "length": "nm", "etch_depth": "nm", "margin": "nm",
    "size": "nm", "edge_size": "nm", "substrate_depth": "nm", "at": "nm", "from": "nm",
    "to": "nm", "standoff": "nm", "wafer_diameter": "nm",
    "growth_temperature": "K", "final_temperature": "K",
    "x": "1", "relaxed": "1", "growth": "1", "tolerance": "1",
}
_TEMPERATURE_KEYS = ("growth_temperature", "final_temperature")

# units of summary.json quantities by name (the nearest named segment of a figure path wins)
_FIGURE_UNITS = {
    "stress": "MPa", "mean_stress": "MPa", "max_von_mises": "MPa", "von_mises": "MPa",
    "hydrostatic": "MPa", "principal_stress": "MPa", "stress_crystal": "MPa",
    "strain": "1", "strain_crystal": "1", "eigenstrain": "1", "eigenstrain_sample": "1",
    "misfit": "1", "total_strain": "1",
    "displacement": "nm", "at": "nm", "max_von_mises_at": "nm", "z_bottom": "nm", "z_top": "nm",
    "volume_nm3": "nm^3", "lattice": "Angstrom", "lattice_in_plane": "Angstrom",
    "constants": "GPa", "stiffness_sample": "GPa",
    "timings": "s", "setup_seconds": "s", "solve_seconds": "s",
}
_UNIT_SUFFIXES = (("_nm3", "nm^3"), ("_nm", "nm"), ("_um", "um"), ("_mpa", "MPa"),
                  ("_gpa", "GPa"), ("_mev", "meV"), ("_ev", "eV"), ("_k", "K"),
                  ("_seconds", "s"), ("_s", "s"), ("_percent", "%"), ("_cm-1", "cm^-1"),
                  ("_per_m", "1/m"), ("_j_m2", "J/m^2"))

_TENSOR = {"xx": (0, 0), "yy": (1, 1), "zz": (2, 2), "xy": (0, 1), "yz": (1, 2), "xz": (0, 2),
           "yx": (1, 0), "zy": (2, 1), "zx": (2, 0)}
_VECTOR = {"x": 0, "y": 1, "z": 2}


# --------------------------------------------------------------------------
# key paths
# --------------------------------------------------------------------------
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


def _path_text(segs) -> str:
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
    """
    cur = data
    for i, seg in enumerate(segs):
        last = i == len(segs) - 1
        where = _path_text(segs[:i]) or "the case"
        if isinstance(seg, int):
            if not isinstance(cur, list):
                raise CaseError(key, f"{_path_text(segs)}: {where} is not a list in the base case, "
                                     f"so [{seg}] cannot be used")
            if seg >= len(cur):
                raise CaseError(key, f"{_path_text(segs)}: {where} has {len(cur)} item(s) in the "
                                     f"base case (indices from 0), so [{seg}] does not exist")
            if last:
                cur[seg] = value
            else:
                cur = cur[seg]
            continue
        if not isinstance(cur, dict):
            raise CaseError(key, f"{_path_text(segs)}: {where} is not a table in the base case")
        if last:
            cur[seg] = value
        else:
            if seg not in cur:
                if isinstance(segs[i + 1], int):
                    raise CaseError(key, f"{_path_text(segs)}: the base case has no "
                                         f"{_path_text(segs[:i + 1])} list")
                cur[seg] = {}
            cur = cur[seg]


# --------------------------------------------------------------------------
# the sweep file
# --------------------------------------------------------------------------
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
        return _KEY_UNITS.get(names[-1], "")


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
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise CaseError(key, f"{path}: no such {what}") from None
    except IsADirectoryError:
        raise CaseError(key, f"{path}: is a directory, not a {what}") from None
    except OSError as err:
        raise CaseError(key, f"{path}: cannot be read ({err.strerror or err})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise CaseError(key, f"{path}: not UTF-8 text; save the {what} as UTF-8") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise CaseError(key, f"{path}: TOML syntax error: {' '.join(str(err).split())}") from None


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
        if not math.isfinite(value):
            raise CaseError(key, f"expected a finite number, got {show_value(value)}")
        return float(value), None
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
        if not isinstance(n, int) or isinstance(n, bool) or n < 1:
            raise CaseError(f"{where}.count", f"expected an integer >= 1, got {show_value(n)}")
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
        if n > 100000:
            raise CaseError(f"{where}.step", f"gives {n} values; at most 100000")
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


# --------------------------------------------------------------------------
# expansion into cases
# --------------------------------------------------------------------------
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
        if is_number(v):
            unit = _KEY_UNITS.get([s for s in parse_path(key, key) if isinstance(s, str)][-1], "")
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
            if _KEY_UNITS.get(names[-1] if names else "") == "nm":
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


# --------------------------------------------------------------------------
# figures
# --------------------------------------------------------------------------
def figure_value(summary: dict, path: str, key: str = "figure"):
    """The number at a figure path in a ``summary.json`` dict.

    Parameters
    ----------
    summary : dict
    path : str
        See the module docstring (``probes.centre.stress.xx``).
    key : str
        Where the path was written, for the error.

    Returns
    -------
    float or None
        None where the summary holds null (a NaN); true/false give 1/0.

    Raises
    ------
    CaseError
        The path does not lead to a number; the message says what is there.
    """
    segs = parse_path(path, key)
    cur, done = summary, []
    for s in segs:
        here = _path_text(done) or "summary.json"
        if isinstance(s, int):
            if not isinstance(cur, list):
                raise CaseError(key, f"{path}: {here} is not a list")
            if s >= len(cur):
                raise CaseError(key, f"{path}: {here} has {len(cur)} item(s) (from 0)")
            cur = cur[s]
        elif isinstance(cur, dict):
            if s not in cur:
                raise CaseError(key, f"{path}: {here} has no \"{s}\"; it has: "
                                     f"{', '.join(map(str, cur)) or 'nothing'}")
            cur = cur[s]
        elif isinstance(cur, list):
            if s in _TENSOR and _is_matrix(cur):
                i, j = _TENSOR[s]
                cur = cur[i][j]
            elif s in _VECTOR and len(cur) == 3 and all(_is_num_or_none(v) for v in cur):
                cur = cur[_VECTOR[s]]
            else:
                names = [it.get("name") for it in cur if isinstance(it, dict)]
                if s not in names:
                    if _is_matrix(cur):
                        hint = "a 3x3 tensor: use one of xx, yy, zz, xy, yz, xz"
                    elif names and any(n is not None for n in names):
                        hint = f"names: {', '.join(str(n) for n in names if n is not None)}"
                    else:
                        hint = f"a list of {len(cur)}: use [i]"
                    raise CaseError(key, f"{path}: {here} has no \"{s}\" ({hint})")
                cur = cur[names.index(s)]
        else:
            raise CaseError(key, f"{path}: {here} is a number, not a table")
        done.append(s)
    if cur is None:
        return None
    if isinstance(cur, bool):            # a yes/no figure: 1 or 0 in the table
        return float(cur)
    if is_number(cur):
        return float(cur)
    if _is_matrix(cur):
        raise CaseError(key, f"{path} is a 3x3 tensor; add a component, e.g. {path}.xx")
    if isinstance(cur, list) and len(cur) == 3 and all(_is_num_or_none(v) for v in cur):
        raise CaseError(key, f"{path} is a vector; add a component, e.g. {path}.z")
    if isinstance(cur, dict):
        raise CaseError(key, f"{path} is a table; continue with one of: {', '.join(cur)}")
    raise CaseError(key, f"{path} is {show_value(cur)}, not a number")


def _is_num_or_none(v) -> bool:
    return v is None or is_number(v)


def _is_matrix(v) -> bool:
    return (isinstance(v, list) and len(v) == 3
            and all(isinstance(r, list) and len(r) == 3 and all(_is_num_or_none(x) for x in r)
                    for r in v))


def figure_unit(path: str, given: dict | None = None, summary: dict | None = None) -> str:
    """Unit of a figure.

    In order: the unit given in ``[collect] units``; a ``units`` table met on
    the way down ``summary`` that names one of the path's segments (e.g.
    ``readouts.units.length`` for ``readouts.layers[1].relaxation.+x.length``,
    ``summary.json``'s own ``units.stress``); the known quantities of
    ``summary.json`` (``stress`` MPa, ``strain`` dimensionless,
    ``displacement`` nm, ...); names ending in ``_nm``, ``_mpa``, ``_mev``,
    ... or containing ``stress`` (MPa) or ``_over_`` (a ratio). The segment
    nearest the end of the path wins. "" when unknown.

    Parameters
    ----------
    path : str
    given : dict of str -> str, optional
    summary : dict, optional
        A ``summary.json`` that holds the figure.

    Returns
    -------
    str
        ``"1"`` for dimensionless quantities.
    """
    if given and path in given:
        return given[path]
    segs = parse_path(path, "figure")
    tables = []                           # unit tables met on the way, outermost first
    cur = summary
    for s in segs:
        if isinstance(cur, dict) and isinstance(cur.get("units"), dict):
            tables.append(cur["units"])
        if isinstance(cur, dict):
            cur = cur.get(s) if isinstance(s, str) else None
        elif isinstance(cur, list) and isinstance(s, int) and s < len(cur):
            cur = cur[s]
        elif isinstance(cur, list) and isinstance(s, str):
            cur = next((it for it in cur if isinstance(it, dict) and it.get("name") == s), None)
        else:
            cur = None
    for s in reversed(segs):
        if not isinstance(s, str):
            continue
        for t in reversed(tables):
            if isinstance(t.get(s), str):
                return t[s]
        if s in _FIGURE_UNITS:
            return _FIGURE_UNITS[s]
        low = s.lower()
        for suffix, unit in _UNIT_SUFFIXES:
            if low.endswith(suffix):
                return unit
        if "_over_" in low or low.endswith("_ratio"):
            return "1"
        if "stress" in low and "per" not in low:
            return "MPa"
    return ""


def _label(name: str, unit: str) -> str:
    if unit in ("", None):
        return name
    if unit == "1":
        return f"{name} (dimensionless)"
    return f"{name} ({unit})"


# --------------------------------------------------------------------------
# one case on a worker
# --------------------------------------------------------------------------
def _worker_memory_gb():
    try:
        from distributed import get_worker

        limit = get_worker().memory_manager.memory_limit
        return limit / 1e9 if limit else None
    except (ImportError, ValueError, AttributeError):
        return None


def _worker_name() -> str:
    try:
        from distributed import get_worker

        return get_worker().address
    except (ImportError, ValueError):
        return f"{socket.gethostname()}:{os.getpid()}"


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def solve_case(case: Case, case_id: str) -> dict:
    """Run one case and return its result files; never raises for a failed case.

    This is the Dask task. It solves with
    :func:`mesastrain.run.pipeline.run_case` (memory limit: the worker's, when
    run on a Dask worker), writes the folder with
    :func:`mesastrain.io.folder.write_result` into a local temporary folder and
    returns the files' bytes, so the driver can store them without a shared
    file system.

    Parameters
    ----------
    case : Case
    case_id : str
        The case hash (for the record).

    Returns
    -------
    dict
        ``status`` ("ok" or "failed"), ``seconds`` (wall time on the worker),
        ``worker``, ``started``/``finished`` (UTC, ISO 8601), ``files``
        (relative path -> bytes) when ok, ``error`` (one line) and
        ``traceback`` when failed.
    """
    from mesastrain.io.folder import write_result
    from mesastrain.derived import solve_and_derive

    started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    t0 = time.perf_counter()
    rec = {"hash": case_id, "worker": _worker_name(), "started": started,
           "mesastrain": __version__}
    try:
        limit = _worker_memory_gb()
        res = solve_and_derive(case, max_memory_gb=limit)
        with tempfile.TemporaryDirectory(prefix="mesastrain-case-") as tmp:
            folder = write_result(res, Path(tmp) / "case")
            files = {p.relative_to(folder).as_posix(): p.read_bytes()
                     for p in sorted(folder.rglob("*")) if p.is_file()}
        rec.update(status="ok", files=files, timings={k: round(v, 3)
                                                      for k, v in res.timings.items()})
    except MesastrainError as exc:
        rec.update(status="failed", error=_one_line(exc))
    except MemoryError:
        rec.update(status="failed", error="ran out of memory on the worker; coarsen the mesh "
                                          "(mesh.size, mesh.edge_size) or use bigger workers")
    except Exception as exc:   # a bug or a library failure: keep the sweep going, keep the trace
        rec.update(status="failed", error=_one_line(f"{type(exc).__name__}: {exc}"),
                   traceback=traceback.format_exc())
    rec["seconds"] = round(time.perf_counter() - t0, 3)
    rec["finished"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
    return rec


def _worker_version():
    """Run on each worker by the driver: can it import mesastrain, which version?"""
    from mesastrain import __version__ as v

    return v


# --------------------------------------------------------------------------
# the sweep folder
# --------------------------------------------------------------------------
@dataclass
class CaseOutcome:
    """What happened to one row.

    Attributes
    ----------
    case : SweepCase
    status : str
        ``"ok"``, ``"failed"`` or ``"pending"`` (not run: interrupted).
    seconds : float or None
        Wall time of the case on its worker, s.
    error : str or None
    ran_now : bool
        Solved in this run (False: reused from an earlier run, or failed
        validation).
    figures : dict of str -> float or None
    """

    case: SweepCase
    status: str = "pending"
    seconds: float | None = None
    error: str | None = None
    ran_now: bool = False
    figures: dict = field(default_factory=dict)
    worker: str | None = None
    traceback: str | None = None


def _is_complete(folder: Path) -> bool:
    return (folder / CASE_RECORD).is_file() and (folder / "summary.json").is_file()


def _store(cases_dir: Path, rec: dict, sc: SweepCase) -> Path:
    """Write a finished case folder atomically (temporary folder, then rename)."""
    from mesastrain.io.export import write_json

    final = cases_dir / sc.hash
    tmp = Path(tempfile.mkdtemp(prefix=f".tmp-{sc.hash}-", dir=cases_dir))
    try:
        for rel, data in rec["files"].items():
            p = tmp / rel
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_bytes(data)
        record = {k: v for k, v in rec.items() if k not in ("files",)}
        record["parameters"] = {k: v for k, v in sc.params}
        record["resolved"] = sc.resolved()
        write_json(tmp / CASE_RECORD, record)
        if final.exists():              # an incomplete leftover (complete ones are skipped)
            shutil.rmtree(final)
        os.replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def _atomic_write(path: Path, text: str | bytes) -> None:
    tmp = path.with_name(f".{path.name}.tmp-{uuid.uuid4().hex[:8]}")
    try:
        if isinstance(text, bytes):
            tmp.write_bytes(text)
        else:
            tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


class _Log:
    """Append-only JSON-lines event log."""

    def __init__(self, path: Path, run_id: str):
        self.path = path
        self.run_id = run_id

    def __call__(self, event: str, **kw) -> None:
        from mesastrain.io.export import jsonable

        line = {"time": datetime.now(timezone.utc).isoformat(timespec="milliseconds"),
                "run": self.run_id, "event": event, **kw}
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(json.dumps(jsonable(line)) + "\n")
            fh.flush()


@contextmanager
def _locked(out: Path):
    """Hold an exclusive lock on the sweep folder (released even when killed)."""
    try:
        import fcntl
    except ImportError:            # not POSIX: no lock
        yield
        return
    fh = open(out / ".sweep.lock", "a+")
    try:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise CaseError("--out", f"{out} is in use by another running sweep; wait for it "
                                     f"or choose another folder") from None
        yield
    finally:
        fh.close()


@contextmanager
def _sigterm_as_interrupt():
    """Turn SIGTERM into KeyboardInterrupt so a terminated sweep shuts its cluster down."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt

    old = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def _prepare_out(out: Path) -> Path:
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise CaseError("--out", f"{out} is a file; give a folder for the sweep")
    if out.is_dir() and any(out.iterdir()) and not (out / CASES_DIR).is_dir() \
            and not (out / META_JSON).exists():
        raise CaseError("--out", f"{out} exists and is not a sweep folder; choose an empty or "
                                 f"new folder (an earlier sweep folder is resumed)")
    (out / CASES_DIR).mkdir(parents=True, exist_ok=True)
    return out


def _default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


@contextmanager
def _dask_client(scheduler: str | None, workers: int | None, wait: float, say):
    """A Dask client: on an existing scheduler, or on an embedded LocalCluster."""
    import logging

    import distributed  # noqa: F401  (its first import sets its loggers' levels)

    # distributed logs every start/stop at INFO; keep the terminal for our progress line
    dlog = logging.getLogger("distributed")
    old_level = dlog.level
    dlog.setLevel(logging.INFO if logging.getLogger().isEnabledFor(logging.DEBUG)
                  else logging.ERROR)
    try:
        with _client_on(scheduler, workers, wait, say) as got:
            yield got
    finally:
        dlog.setLevel(old_level)


@contextmanager
def _client_on(scheduler, workers, wait, say):
    import logging

    from distributed import Client, LocalCluster

    cluster = None
    if scheduler:
        address = scheduler if "://" in scheduler else f"tcp://{scheduler}"
        try:
            client = Client(address, timeout=f"{wait}s", set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise CaseError("--scheduler", f"cannot reach a Dask scheduler at {address} within "
                                           f"{wait:g} s ({_one_line(exc)}); start one with "
                                           f"`dask scheduler` and give the address it prints"
                            ) from None
        desc = f"Dask scheduler {address}"
    else:
        n = workers or _default_workers()
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                               silence_logs=logging.ERROR)
        client = Client(cluster, set_as_default=False)
        desc = f"embedded Dask cluster, {n} worker process(es) x 1 thread, loopback"
    try:
        try:
            client.wait_for_workers(1, timeout=wait)
        except (TimeoutError, OSError):
            raise CaseError("--scheduler", f"no Dask worker joined {desc} within {wait:g} s; "
                                           f"start workers with `dask worker {scheduler}`"
                            ) from None
        try:
            versions = client.run(_worker_version)
        except Exception as exc:
            raise CaseError("--scheduler", f"the Dask workers cannot run mesastrain "
                                           f"({_one_line(f'{type(exc).__name__}: {exc}')}); "
                                           f"install mesastrain {__version__} in the workers' "
                                           f"Python environment") from None
        other = sorted({v for v in versions.values() if v != __version__})
        if other:
            say(f"warning: workers run mesastrain {', '.join(other)}, this is {__version__}")
        yield client, desc, len(versions)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


class _Progress:
    """One progress line on stderr: rewritten in place on a terminal, a line per case otherwise."""

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total = total
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.tty = enabled and getattr(self.stream, "isatty", lambda: False)()
        self.t0 = time.perf_counter()
        self.done = self.failed = 0
        self._width = 0
        self._last = ""

    def message(self, text: str) -> None:
        if self.enabled:
            self._clear()
            print(f"[{time.perf_counter() - self.t0:6.1f} s] {text}", file=self.stream,
                  flush=True)

    def _clear(self):
        if self.tty and self._width:
            self.stream.write("\r" + " " * self._width + "\r")
            self._width = 0

    def update(self, last: str = "") -> None:
        if not self.enabled:
            return
        self._last = last
        if not last and not self.tty:
            return
        n = self.done + self.failed
        frac = n / self.total if self.total else 1.0
        bar = "#" * int(round(24 * frac))
        line = (f"[{time.perf_counter() - self.t0:6.1f} s] [{bar:<24}] {n}/{self.total} "
                f"({self.failed} failed)")
        if last:
            line += f"  {last}"
        if self.tty:
            cols = shutil.get_terminal_size((100, 20)).columns - 1
            line = line[:cols]
            self.stream.write("\r" + line.ljust(self._width))
            self.stream.flush()
            self._width = len(line)
        else:
            print(line, file=self.stream, flush=True)

    def tick(self) -> None:
        """Redraw the bar (elapsed time) on a terminal; nothing otherwise."""
        if self.tty:
            self.update(self._last)

    def close(self) -> None:
        if self.tty and self._width:
            self.stream.write("\n")
            self.stream.flush()
            self._width = 0


def run_sweep(sweep: Sweep, out, scheduler: str | None = None, workers: int | None = None,
              progress: bool = True, wait: float = 60.0, stream=None) -> dict:
    """Run (or resume) a sweep into a folder.

    Cases whose folder ``out/cases/<hash>/`` is complete are skipped; the
    others are solved as Dask tasks; failed cases are recorded with their
    message and the rest continue. At the end the table, metadata and plots
    are (re)written from every completed case folder.

    Parameters
    ----------
    sweep : Sweep
    out : path
        The sweep folder (created; an earlier sweep folder is resumed).
    scheduler : str, optional
        Address of an existing Dask scheduler (``tcp://host:port``); default:
        an embedded LocalCluster on this machine.
    workers : int, optional
        Worker processes of the embedded cluster (default: one per core).
    progress : bool
        Print progress lines on ``stream``.
    wait : float
        Seconds to wait for the scheduler and the first worker.
    stream : file, optional
        Where progress goes (default stderr).

    Returns
    -------
    dict
        The metadata written to ``sweep-meta.json`` (``counts``, ``failures``,
        ``files``, ...), plus ``outcomes`` (list of :class:`CaseOutcome`).

    Notes
    -----
    The embedded cluster starts worker processes with the "spawn" method:
    a script that calls this must guard its top level with
    ``if __name__ == "__main__":``.

    Raises
    ------
    CaseError
        Bad ``--out``/``--scheduler``/``--workers``; a folder in use.
    KeyboardInterrupt
        Ctrl-C or SIGTERM: the cluster is shut down, completed cases are kept
        and the table is written for them first.
    """
    if scheduler and workers:
        raise CaseError("--workers", "only for the embedded cluster; the scheduler at "
                                     f"{scheduler} has its own workers")
    if workers is not None and workers < 1:
        raise CaseError("--workers", f"expected an integer >= 1, got {workers}")
    out = _prepare_out(Path(out))
    cases_dir = out / CASES_DIR
    cases = expand(sweep)
    prog = _Progress(len(cases), progress, stream)
    started = datetime.now(timezone.utc)
    t0 = time.perf_counter()
    run_id = started.strftime("%Y%m%dT%H%M%S") + "-" + uuid.uuid4().hex[:6]
    with _locked(out), _sigterm_as_interrupt():
        for stale in cases_dir.glob(".tmp-*"):     # left by a killed run
            shutil.rmtree(stale, ignore_errors=True)
        log = _Log(out / LOG_JSONL, run_id)
        outcomes = [CaseOutcome(sc) for sc in cases]
        todo: dict[str, list[CaseOutcome]] = {}
        for oc in outcomes:
            sc = oc.case
            if sc.case is None:
                oc.status, oc.error = "failed", sc.error
            elif _is_complete(cases_dir / sc.hash):
                oc.status = "ok"
                rec = _read_json(cases_dir / sc.hash / CASE_RECORD)
                oc.seconds, oc.worker = rec.get("seconds"), rec.get("worker")
            else:
                todo.setdefault(sc.hash, []).append(oc)
        reused = sum(oc.status == "ok" for oc in outcomes)
        invalid = sum(oc.case.case is None for oc in outcomes)
        log("start", cases=len(cases), to_run=len(todo), reused=reused, invalid=invalid,
            sweep=sweep.source, scheduler=scheduler or "embedded")
        prog.done, prog.failed = reused, invalid
        prog.message(f"sweep \"{sweep.title}\": {len(cases)} case(s), {reused} already done, "
                     f"{invalid} invalid, {len(todo)} to run")
        for oc in outcomes:
            if oc.case.case is None:
                log("case", hash=oc.case.hash, index=oc.case.index, status="failed",
                    error=oc.error, parameters=dict(oc.case.params))
        cluster_desc, n_workers = "none needed", 0
        interrupted = False
        if todo:
            try:
                with _dask_client(scheduler, workers, wait, prog.message) as (client, desc, nw):
                    cluster_desc, n_workers = desc, nw
                    prog.message(f"running on {desc} ({nw} worker(s) connected)")
                    _run_on(client, todo, cases_dir, log, prog, out, sweep, outcomes)
            except KeyboardInterrupt:
                interrupted = True
            finally:
                prog.close()
        meta = _finish(sweep, out, outcomes, started, time.perf_counter() - t0, cluster_desc,
                       n_workers, interrupted, run_id, plots=not interrupted)
        log("end", counts=meta["counts"], interrupted=interrupted)
    if interrupted:
        raise KeyboardInterrupt
    meta["outcomes"] = outcomes
    return meta


def _read_json(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


def _run_on(client, todo, cases_dir, log, prog, out, sweep, outcomes) -> None:
    from distributed import as_completed

    token = uuid.uuid4().hex[:8]
    futures = {}
    for h, ocs in todo.items():
        sc = ocs[0].case
        fut = client.submit(solve_case, sc.case, h, key=f"mesastrain-case-{h}-{token}",
                            retries=0)
        futures[fut] = h
    last_table = last_tick = time.perf_counter()
    ac = as_completed(list(futures), loop=client.loop)
    prog.update("")
    try:
        while not ac.is_empty():
            batch = ac.next_batch(block=False)
            if not batch:                   # nothing finished: keep the clock moving
                time.sleep(0.1)
                if time.perf_counter() - last_tick > 1.0:
                    prog.tick()
                    last_tick = time.perf_counter()
                continue
            for fut in batch:
                _take(fut, futures, todo, cases_dir, log, prog)
            if time.perf_counter() - last_table > 15.0:   # a readable table while it runs
                _collect_figures(sweep, out, outcomes)
                _write_table(sweep, out, outcomes)
                last_table = time.perf_counter()
    except BaseException:
        client.cancel(list(futures), force=True)
        raise


def _take(fut, futures, todo, cases_dir, log, prog) -> None:
    """Record one finished (or failed) task: store its folder, log it, move the bar."""
    h = futures.pop(fut)
    ocs = todo[h]
    sc = ocs[0].case
    if fut.status == "finished":
        rec = fut.result()
    else:
        try:
            exc = fut.exception()
            msg = _one_line(f"{type(exc).__name__}: {exc}")
        except Exception as err:          # cancelled
            msg = _one_line(f"{type(err).__name__}: {err}")
        if "KilledWorker" in msg:
            msg = ("the worker running this case died (out of memory?) and the case "
                   f"was given up: {msg}")
        rec = {"status": "failed", "error": msg, "seconds": None, "worker": None}
    fut.release()
    if rec["status"] == "ok":
        _store(cases_dir, rec, sc)
    for oc in ocs:
        oc.status = rec["status"]
        oc.seconds = rec.get("seconds")
        oc.worker = rec.get("worker")
        oc.ran_now = True
        oc.error = rec.get("error")
        oc.traceback = rec.get("traceback")
    if rec["status"] == "ok":
        prog.done += len(ocs)
    else:
        prog.failed += len(ocs)
    log("case", hash=h, index=[oc.case.index for oc in ocs], status=rec["status"],
        seconds=rec.get("seconds"), worker=rec.get("worker"), error=rec.get("error"),
        parameters=dict(sc.params))
    state = "ok" if rec["status"] == "ok" else "FAILED"
    secs = f" {rec['seconds']:.1f} s" if rec.get("seconds") is not None else ""
    prog.update(f"case {sc.index} ({sc.label()}) {state}{secs}")


# --------------------------------------------------------------------------
# table, metadata, plots
# --------------------------------------------------------------------------
def _collect_figures(sweep: Sweep, out: Path, outcomes) -> tuple[dict, dict]:
    """Fill each ok outcome's figures from its summary.json.

    Returns
    -------
    errors : dict
        Figure path -> first error, for paths that no case resolves.
    units : dict
        Figure path -> unit (:func:`figure_unit` with the first summary).
    """
    errors, resolved = {}, {f: False for f in sweep.figures}
    first = None
    for oc in outcomes:
        if oc.status != "ok":
            continue
        summary = _read_json(out / CASES_DIR / oc.case.hash / "summary.json")
        first = first if first is not None else summary
        for k, f in enumerate(sweep.figures):
            try:
                oc.figures[f] = figure_value(summary, f, f"collect.figures[{k}]")
                resolved[f] = True
            except CaseError as err:
                oc.figures[f] = None
                errors.setdefault(f, str(err))
    units = {f: figure_unit(f, sweep.units, first) for f in sweep.figures}
    return {f: e for f, e in errors.items() if not resolved[f]}, units


def _columns(sweep: Sweep, units: dict | None = None) -> list[dict]:
    cols = [{"name": "case", "unit": "", "meaning": "row number in expansion order (from 0)"},
            {"name": "hash", "unit": "", "meaning": "resume key; the case folder is cases/<hash>"},
            {"name": "status", "unit": "", "meaning": "ok | failed | pending (not run yet)"},
            {"name": "seconds", "unit": "s", "meaning": "wall time of the case on its worker"}]
    for ax in sweep.axes:
        cols.append({"name": ax.key, "unit": ax.unit, "meaning": "varied case-file key "
                     "(resolved value: lengths nm, temperatures K)"})
    for f in sweep.figures:
        cols.append({"name": f, "unit": (units or {}).get(f, figure_unit(f, sweep.units)),
                     "meaning": "figure from the case's summary.json"})
    cols.append({"name": "error", "unit": "", "meaning": "why the case failed"})
    return cols


def _rows(sweep: Sweep, outcomes) -> list[list]:
    rows = []
    for oc in outcomes:
        res = oc.case.resolved()
        row = [oc.case.index, oc.case.hash, oc.status, oc.seconds]
        row += [res[ax.key] for ax in sweep.axes]
        row += [oc.figures.get(f) for f in sweep.figures]
        row.append(oc.error or "")
        rows.append(row)
    return rows


def _write_table(sweep: Sweep, out: Path, outcomes) -> list[str]:
    cols = [c["name"] for c in _columns(sweep)]
    rows = _rows(sweep, outcomes)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow(["" if v is None else (f"{v:.10g}" if isinstance(v, float) else v)
                    for v in r])
    _atomic_write(out / TABLE_CSV, buf.getvalue())
    files = [TABLE_CSV]
    import importlib.util

    if importlib.util.find_spec("pyarrow") is not None:   # optional; never a dependency
        import pyarrow as pa
        import pyarrow.parquet as pq

        data = {}
        for j, name in enumerate(cols):
            vals = [r[j] for r in rows]
            if all(v is None or (is_number(v)) for v in vals):
                data[name] = pa.array([None if v is None else float(v) for v in vals],
                                      type=pa.float64())
            else:
                data[name] = pa.array(["" if v is None else str(v) for v in vals])
        tmp = out / f".{TABLE_PARQUET}.tmp-{uuid.uuid4().hex[:8]}"
        pq.write_table(pa.table(data), tmp)
        os.replace(tmp, out / TABLE_PARQUET)
        files.append(TABLE_PARQUET)
    return files


def _finish(sweep, out, outcomes, started, wall, cluster_desc, n_workers, interrupted, run_id,
            plots=True) -> dict:
    from mesastrain.io.export import write_json
    from mesastrain.io.folder import CAUTION

    fig_errors, units = _collect_figures(sweep, out, outcomes)
    files = _write_table(sweep, out, outcomes)
    plot_files = []
    if plots:
        plot_dir = out / PLOTS_DIR
        plot_files = [str(p.relative_to(out))
                      for p in plot_sweep(sweep, outcomes, plot_dir, units)]
    counts = {"cases": len(outcomes),
              "ok": sum(oc.status == "ok" for oc in outcomes),
              "failed": sum(oc.status == "failed" for oc in outcomes),
              "pending": sum(oc.status == "pending" for oc in outcomes),
              "ran_now": sum(oc.ran_now for oc in outcomes),
              "reused": sum(oc.status == "ok" and not oc.ran_now for oc in outcomes)}
    meta = {
        "program": {"name": "mesastrain", "version": __version__},
        "title": sweep.title,
        "sweep": sweep.to_dict(),
        "run": {"id": run_id, "started": started.isoformat(timespec="seconds"),
                "wall_seconds": round(wall, 3), "cluster": cluster_desc,
                "workers": n_workers, "interrupted": interrupted},
        "counts": counts,
        "columns": _columns(sweep, units),
        "files": {"table": files, "log": LOG_JSONL, "cases": f"{CASES_DIR}/<hash>/",
                  "plots": plot_files},
        "figure_errors": fig_errors,
        "failures": [{"case": oc.case.index, "hash": oc.case.hash,
                      "parameters": dict(oc.case.params), "error": oc.error,
                      **({"traceback": oc.traceback} if oc.traceback else {})}
                     for oc in outcomes if oc.status == "failed"],
        "hash": "SHA-256 of the canonical JSON of the resolved case (Case.to_dict() without "
                "the title), first 16 hex digits",
        "caution": CAUTION,
    }
    tmp = out / f".{META_JSON}.tmp-{uuid.uuid4().hex[:8]}"
    write_json(tmp, meta)
    os.replace(tmp, out / META_JSON)
    return meta


def _numeric(values) -> bool:
    return all(is_number(v) for v in values)


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name.replace("[", "_").replace("]", "")).strip("_")


def plot_sweep(sweep: Sweep, outcomes, folder: Path, units: dict | None = None) -> list[Path]:
    """One PNG per collected figure and varied key.

    The figure is drawn against the key's resolved value (a logarithmic axis
    when positive values span more than a factor of 20); with several varied
    keys, one line per combination of the others. Failed cases leave gaps and
    are counted in the title; a zero line is drawn when the values change
    sign.

    Parameters
    ----------
    sweep : Sweep
    outcomes : list of CaseOutcome
        With their figures collected.
    folder : Path
        Where the PNGs go (created).
    units : dict of str -> str, optional
        Figure path -> unit (default: :func:`figure_unit` from the path).

    Returns
    -------
    list of Path
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.ticker import FuncFormatter, NullFormatter
    from matplotlib.figure import Figure

    folder = Path(folder)
    written = []
    resolved = [oc.case.resolved() for oc in outcomes]
    for ax in sweep.axes:
        xs_all = [r[ax.key] for r in resolved]
        distinct = list(dict.fromkeys(xs_all))
        if len(distinct) < 2:
            continue
        numeric = _numeric(distinct)
        others = [a for a in sweep.axes if a is not ax]
        for f in sweep.figures:
            groups: dict[tuple, list] = {}
            failed = 0
            for oc, r in zip(outcomes, resolved):
                y = oc.figures.get(f) if oc.status == "ok" else None
                if oc.status == "failed":
                    failed += 1
                gk = tuple(r[a.key] for a in others) if sweep.combine == "grid" else ()
                groups.setdefault(gk, []).append((r[ax.key], y))
            if not any(y is not None for pts in groups.values() for _, y in pts):
                continue
            fig = Figure(figsize=(6.4, 4.4), dpi=110)
            FigureCanvasAgg(fig)
            pl = fig.add_subplot()
            allx, ally = [], []
            for gk, pts in groups.items():
                if numeric:
                    pts = sorted(pts, key=lambda p: p[0])
                    x = [p[0] for p in pts]
                else:
                    x = [distinct.index(p[0]) for p in pts]
                y = [np.nan if p[1] is None else p[1] for p in pts]
                lab = ", ".join(f"{a.key} = {v:g}" + (f" {a.unit}" if a.unit not in ("", "1")
                                                          else "")
                                if is_number(v) else f"{a.key} = {v}"
                                for a, v in zip(others, gk)) or None
                pl.plot(x, y, marker="o", label=lab)
                allx += [xi for xi, yi in zip(x, y) if np.isfinite(yi)]
                ally += [yi for yi in y if np.isfinite(yi)]
            if numeric and min(distinct) > 0 and max(distinct) / min(distinct) > 20:
                pl.set_xscale("log")
                pl.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
                pl.xaxis.set_minor_formatter(NullFormatter())
            if not numeric:
                pl.set_xticks(range(len(distinct)))
                pl.set_xticklabels([str(d) for d in distinct], rotation=30, ha="right")
            if ally and min(ally) < 0 < max(ally):
                pl.axhline(0.0, color="0.5", lw=0.8)
            pl.set_xlabel(_label(ax.key, ax.unit))
            pl.set_ylabel(_label(f, (units or {}).get(f) or figure_unit(f, sweep.units)))
            title = f"{f} against {ax.key}"
            if failed:
                title += f"\n({failed} failed case(s) not shown)"
            pl.set_title(title, fontsize=10)
            fig.suptitle(sweep.title, fontsize=8, color="0.35")
            pl.grid(True, which="both", alpha=0.3)
            if len(groups) > 1 and len(groups) <= 10:
                pl.legend(fontsize=8)
            fig.tight_layout()
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / f"{_safe(f)}--vs--{_safe(ax.key)}.png"
            tmp = path.with_name(f".{path.name}.tmp.png")
            fig.savefig(tmp)
            os.replace(tmp, path)
            written.append(path)
    return written


def summary_text(sweep: Sweep, meta: dict, outcomes, max_rows: int = 40) -> str:
    """Short plain-text table of a finished sweep (what the command prints)."""
    units = {c["name"]: c["unit"] for c in meta["columns"]}
    cols = [("case", ""), *[(ax.key, ax.unit) for ax in sweep.axes], ("status", ""),
            ("time", "s"), *[(f, units.get(f, "")) for f in sweep.figures]]
    head = [_label(n, u) if u not in ("", "1") else n for n, u in cols]
    body = []
    for oc in outcomes[:max_rows]:
        res = oc.case.resolved()
        cells = [str(oc.case.index)]
        cells += [(f"{res[ax.key]:.6g}" if is_number(res[ax.key]) else str(res[ax.key]))
                  for ax in sweep.axes]
        cells.append(oc.status + ("" if oc.ran_now or oc.status != "ok" else "*"))
        cells.append("" if oc.seconds is None else f"{oc.seconds:.1f}")
        for f in sweep.figures:
            v = oc.figures.get(f)
            cells.append("" if v is None else f"{v:.6g}")
        body.append(cells)
    widths = [max(len(h), *(len(r[j]) for r in body)) if body else len(h)
              for j, h in enumerate(head)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(head, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in body]
    if len(outcomes) > max_rows:
        lines.append(f"... {len(outcomes) - max_rows} more row(s) in {TABLE_CSV}")
    c = meta["counts"]
    lines.append(f"{c['cases']} case(s): {c['ok']} ok ({c['ran_now']} run now, {c['reused']} "
                 f"reused, marked *), {c['failed']} failed"
                 + (f", {c['pending']} not run" if c["pending"] else "")
                 + f"; {meta['run']['wall_seconds']:.1f} s wall time")
    for fl in meta["failures"][:10]:
        lines.append(f"case {fl['case']} failed: {fl['error']}")
    if len(meta["failures"]) > 10:
        lines.append(f"... {len(meta['failures']) - 10} more failure(s) in {META_JSON}")
    for f, e in meta["figure_errors"].items():
        lines.append(f"warning: {e}")
    return "\n".join(lines)


# --------------------------------------------------------------------------
# command line
# --------------------------------------------------------------------------
def add_command(subparsers) -> None:
    """Add ``mesastrain sweep`` to the command line."""
    p = subparsers.add_parser(
        "sweep", help="run many variants of a case in parallel (Dask) and tabulate figures",
        description="Run every case of a sweep file on Dask (an embedded local cluster, or an "
                    "existing scheduler), keep each case's result folder, and write one table, "
                    "a metadata file and plots. Re-running resumes: finished cases are skipped.")
    p.add_argument("sweep", help="sweep file (TOML)")
    p.add_argument("--out", help="sweep folder (default: <sweep name>-sweep); an earlier "
                                 "sweep folder is resumed")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="existing Dask scheduler, e.g. tcp://10.0.0.5:8786 (default: start a "
                        "local cluster on this machine)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of the local cluster (default: one per core)")
    p.add_argument("--wait", type=float, default=60.0, metavar="SECONDS",
                   help="how long to wait for the scheduler and a first worker (default 60)")
    p.add_argument("--dry-run", action="store_true",
                   help="list the cases, their hashes and what is done; run nothing")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress and no table")
    p.set_defaults(func=cmd_sweep)


def cmd_sweep(args) -> int:
    """``mesastrain sweep``: 0 all cases ok, 1 some failed, 2 bad input, 130 interrupted."""
    sweep = load_sweep(args.sweep)
    out = Path(args.out) if args.out else Path(Path(args.sweep).stem + "-sweep")
    if args.dry_run:
        for sc in expand(sweep):
            if sc.case is None:
                state = f"invalid: {sc.error}"
            elif _is_complete(out / CASES_DIR / sc.hash):
                state = "done"
            else:
                state = "to run"
            print(f"{sc.index:4d}  {sc.hash}  {sc.label()}  [{state}]")
        return 0
    try:
        meta = run_sweep(sweep, out, scheduler=args.scheduler, workers=args.workers,
                         progress=not args.quiet, wait=args.wait)
    except KeyboardInterrupt:
        print(f"mesastrain: sweep interrupted; finished cases are kept in {out}/{CASES_DIR} and "
              f"listed in {out}/{TABLE_CSV}; run the same command again to finish",
              file=sys.stderr)
        return 130
    if not args.quiet:
        print(summary_text(sweep, meta, meta["outcomes"]))
        plots = meta["files"]["plots"]
        print(f"table {out}/{TABLE_CSV}, metadata {out}/{META_JSON}, case folders "
              f"{out}/{CASES_DIR}/<hash>/" + (f", {len(plots)} plot(s) in {out}/{PLOTS_DIR}/"
                                              if plots else ""))
    return 0 if meta["counts"]["failed"] == 0 and not meta["figure_errors"] else 1
