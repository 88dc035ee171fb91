"""Elastic, lattice and thermal-expansion data of materials.

The numbers live in ``mesastrain/data/materials.toml``, one table per material,
each quantity with its published source and a confidence flag. This module
reads that file once, builds 6x6 Voigt stiffness matrices in crystal axes and
interpolates binary alloys.

Groups of the database: ``[material.*]`` the epitaxial semiconductors (cubic
and hexagonal, the alloy members), ``[alloy.*]``, and ``[substrate.*]``,
``[dielectric.*]``, ``[metal.*]`` in the general format of
:func:`material_from_table`, which takes any symmetry system of
:mod:`mesastrain.physics.elastic` (isotropic, cubic, hexagonal, trigonal,
tetragonal, orthorhombic, anisotropic). A case file's ``[material.NAME]``
table or the Python API can build a material of its own the same way.

Alloys are named by their members, ``x`` being the fraction of the **second**
member: ``SiGe`` is Si(1-x)Ge(x), ``InGaAs`` is In(x)Ga(1-x)As (members GaAs,
InAs). The lattice constant follows the law named in the data file
(``"vegard"``: linear; ``"dismukes1964"``: the Dismukes, Ekstrom & Paff
quadratic fit for SiGe); stiffness and thermal expansion are linear in x.

Units: stiffness GPa, lattice constants Angstrom, thermal expansion 1e-6/K.
"""

from __future__ import annotations

import functools
import importlib.resources
import textwrap
import tomllib

import numpy as np

from mesastrain.errors import MaterialError
from mesastrain.physics.elastic import (  # noqa: F401 (re-exported)
    SYMMETRY_SYSTEMS,
    stiffness_from_constants,
    validate_stiffness,
)
from mesastrain.physics.material_record import Material, Spread, build_material, parse_spreads

_CUBIC_KEYS = ("C11", "C12", "C44")
_HEX_KEYS = ("C11", "C12", "C13", "C33", "C44")
_LATTICE_LAWS = ("vegard", "dismukes1964")
#: Database groups in the general format, in the order they are listed.
GENERAL_GROUPS = ("substrate", "dielectric", "metal")
_GROUP_TITLES = {"substrate": "Substrates", "dielectric": "Dielectrics (deposited films)",
                 "metal": "Metals (polycrystalline films)"}


# --------------------------------------------------------------------------
# stiffness matrices
# --------------------------------------------------------------------------
def cubic_stiffness(C11, C12, C44) -> np.ndarray:
    """Voigt stiffness of a cubic crystal in its cube axes.

    Parameters
    ----------
    C11, C12, C44 : float or array_like
        Independent constants, any stiffness unit (GPa in mesastrain);
        arrays broadcast together.

    Returns
    -------
    ndarray (..., 6, 6)
        Voigt matrix in the order 11, 22, 33, 23, 13, 12.

    Raises
    ------
    MaterialError
        If the matrix is not positive definite (Born stability:
        C44 > 0, C11 > |C12|, C11 + 2 C12 > 0).
    """
    C11, C12, C44 = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (C11, C12, C44)))
    ok = (C44 > 0) & (C11 > np.abs(C12)) & (C11 + 2 * C12 > 0)
    if not np.all(ok):
        raise MaterialError("cubic stiffness is not positive definite: "
                            "need C44 > 0, C11 > |C12| and C11 + 2*C12 > 0 (GPa)")
    c = np.zeros(C11.shape + (6, 6))
    c[..., [0, 1, 2], [0, 1, 2]] = C11[..., None]
    c[..., [0, 0, 1, 1, 2, 2], [1, 2, 0, 2, 0, 1]] = C12[..., None]
    c[..., [3, 4, 5], [3, 4, 5]] = C44[..., None]
    return c


def hexagonal_stiffness(C11, C12, C13, C33, C44) -> np.ndarray:
    """Voigt stiffness of a hexagonal crystal, z along the c axis [0001].

    Parameters
    ----------
    C11, C12, C13, C33, C44 : float or array_like
        Independent constants, any stiffness unit (GPa in mesastrain);
        arrays broadcast together. C66 = (C11 - C12)/2.

    Returns
    -------
    ndarray (..., 6, 6)
        Voigt matrix in the order 11, 22, 33, 23, 13, 12; transversely
        isotropic about z.

    Raises
    ------
    MaterialError
        If the matrix is not positive definite (Born stability:
        C44 > 0, C11 > |C12|, C33 (C11 + C12) > 2 C13^2).
    """
    C11, C12, C13, C33, C44 = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (C11, C12, C13, C33, C44)))
    ok = (C44 > 0) & (C11 > np.abs(C12)) & (C33 > 0) & (C33 * (C11 + C12) > 2 * C13**2)
    if not np.all(ok):
        raise MaterialError("hexagonal stiffness is not positive definite: need C44 > 0, "
                            "C11 > |C12| and C33*(C11 + C12) > 2*C13^2 (GPa)")
    c = np.zeros(C11.shape + (6, 6))
    c[..., [0, 1], [0, 1]] = C11[..., None]
    c[..., [0, 1], [1, 0]] = C12[..., None]
    c[..., [0, 1, 2, 2], [2, 2, 0, 1]] = C13[..., None]
    c[..., 2, 2] = C33
    c[..., [3, 4], [3, 4]] = C44[..., None]
    c[..., 5, 5] = 0.5 * (C11 - C12)
    return c


def material_from_table(name: str, table: dict, replace_builtin: bool = False) -> Material:
    """Build a material from a table in the database's general format.

    The format of a case file's ``[material.NAME]`` table and of the
    ``[substrate.*]``, ``[dielectric.*]`` and ``[metal.*]`` tables of
    ``data/materials.toml``::

        system = "trigonal"          # isotropic | cubic | hexagonal | trigonal |
                                     # tetragonal | orthorhombic | anisotropic
        C11 = 497.0                  # the system's constants, GPa (isotropic: E GPa, nu;
        ...                          # anisotropic: C = 6 rows of 6 numbers, crystal axes)
        a = 4.758                    # optional lattice constants, Angstrom (a; a and c;
        c = 12.991                   # a, b and c), none for isotropic
        alpha = [7.5, 8.5]           # optional, 1e-6/K: one value, or per axis
        structure = "corundum"       # optional
        source = "..."               # optional: a string, or a table per quantity

    Parameters
    ----------
    name : str
        Name the layers use, e.g. ``"myNitride"``.
    table : dict
        The table, as parsed from TOML (constants in GPa, lattice in
        Angstrom, alpha in 1e-6/K).
    replace_builtin : bool, default: False
        Allow ``name`` to shadow a built-in material or alloy.

    Returns
    -------
    Material
        ``group = "user"``, ``x = None``.

    Raises
    ------
    MaterialError
        One line naming the key: a name that shadows a built-in material,
        an unknown system or key, a missing constant, a stiffness that is not
        positive definite (the failing condition and its constants), lattice
        constants missing, not allowed or not positive, or a badly shaped
        alpha.
    """
    if not isinstance(name, str) or not name:
        raise MaterialError(f"material name must be a non-empty string, got {name!r}")
    who = f"material.{name}"
    if not replace_builtin and (name in builtin_materials() or is_alloy(name)):
        raise MaterialError(f"{who} shadows the built-in material {name!r}; choose another "
                            f"name or say that the replacement is meant")
    return build_material(name, table, "user", who)


# --------------------------------------------------------------------------
# database
# --------------------------------------------------------------------------
@functools.lru_cache(maxsize=1)
def _database() -> dict:
    """Parse and check ``data/materials.toml`` once."""
    text = importlib.resources.files("mesastrain.physics").joinpath("data/materials.toml").read_text("utf-8")
    db = tomllib.loads(text)
    compounds, alloys = db.get("material", {}), db.get("alloy", {})
    for name, m in compounds.items():
        keys = _CUBIC_KEYS if m.get("system") == "cubic" else _HEX_KEYS
        hexa = m.get("system") == "hexagonal"
        need = keys + ("structure", "a", "alpha", "source") + (("c",) if hexa else ())
        missing = [k for k in need if k not in m]
        if m.get("system") not in ("cubic", "hexagonal") or missing:
            raise MaterialError(f"materials.toml: material.{name} needs system = cubic|hexagonal "
                                f"and {', '.join(need)}; missing {', '.join(missing) or 'system'}")
        if len(m["alpha"]) != (1 if m["system"] == "cubic" else 2):
            raise MaterialError(f"materials.toml: material.{name}.alpha must have one value (cubic) "
                                f"or two (hexagonal: alpha_a, alpha_c)")
    for name, al in alloys.items():
        mem = al.get("members", ())
        if len(mem) != 2 or any(m not in compounds for m in mem):
            raise MaterialError(f"materials.toml: alloy.{name}.members must name two materials "
                                f"of {', '.join(compounds)}")
        if compounds[mem[0]]["system"] != compounds[mem[1]]["system"]:
            raise MaterialError(f"materials.toml: alloy.{name} mixes crystal systems")
        law = al.get("lattice_law")
        if law not in _LATTICE_LAWS or (law == "dismukes1964" and "lattice_poly" not in al):
            raise MaterialError(f"materials.toml: alloy.{name}.lattice_law must be one of "
                                f"{', '.join(_LATTICE_LAWS)} (dismukes1964 needs lattice_poly)")
        if law == "dismukes1964" and compounds[mem[0]]["system"] != "cubic":
            raise MaterialError(f"materials.toml: alloy.{name}: dismukes1964 applies to cubic SiGe only")
        if al.get("stiffness_law") != "linear" or al.get("alpha_law") != "linear":
            raise MaterialError(f"materials.toml: alloy.{name}: stiffness_law and alpha_law "
                                f"must be 'linear'")
    seen = set(compounds) | set(alloys)
    for group in GENERAL_GROUPS:
        for name, table in db.get(group, {}).items():
            if name in seen:
                raise MaterialError(f"materials.toml: {group}.{name} repeats a name")
            seen.add(name)
            if not isinstance(table.get("source"), dict):
                raise MaterialError(f"materials.toml: {group}.{name} needs a [source] table")
            build_material(name, table, group, f"materials.toml: {group}.{name}")
    return db


@functools.lru_cache(maxsize=1)
def _aliases() -> dict:
    """Formula spellings of the alloys, e.g. 'Si1-xGex' and 'Si(1-x)Ge(x)' -> 'SiGe'."""
    out = {}
    for name, al in _database()["alloy"].items():
        t = al["label"]
        out[t.replace("{1-x}", "1-x").replace("{x}", "x")] = name
        out[t.replace("{1-x}", "(1-x)").replace("{x}", "(x)")] = name
    return out


def known_materials() -> list[str]:
    """Names of the epitaxial semiconductors, compounds first, then alloys.

    Substrates, dielectrics and metals are listed by :func:`builtin_materials`.

    Returns
    -------
    list of str
        Case-sensitive names in data-file order.
    """
    db = _database()
    return list(db["material"]) + list(db["alloy"])


def builtin_materials(group: str | None = None) -> list[str]:
    """Every name :func:`get_material` accepts, or those of one group.

    Parameters
    ----------
    group : str, optional
        ``"material"`` (epitaxial semiconductors), ``"alloy"``,
        ``"substrate"``, ``"dielectric"`` or ``"metal"``; all groups if None.

    Returns
    -------
    list of str
        Case-sensitive names in data-file order; :func:`known_materials` is
        the first two groups.
    """
    db = _database()
    groups = ("material", "alloy") + GENERAL_GROUPS
    if group is not None and group not in groups:
        raise MaterialError(f"group must be one of {', '.join(groups)}, got {group!r}")
    return [n for g in groups if group in (None, g) for n in db.get(g, {})]


def _general_group(name: str) -> str | None:
    db = _database()
    return next((g for g in GENERAL_GROUPS if name in db.get(g, {})), None)


def is_alloy(name: str) -> bool:
    """True if ``name`` (or one of its formula spellings) is an alloy.

    Parameters
    ----------
    name : str
        Material name, e.g. ``"SiGe"`` or ``"Si1-xGex"``.

    Returns
    -------
    bool
        False for compounds and for unknown names.
    """
    return _aliases().get(name, name) in _database()["alloy"]


def _formula(al: dict) -> str:
    return al["label"].replace("{1-x}", "(1-x)").replace("{x}", "(x)")


def _compound(name: str) -> Material:
    m = _database()["material"][name]
    keys = _CUBIC_KEYS if m["system"] == "cubic" else _HEX_KEYS
    constants = {k: float(m[k]) for k in keys}
    build = cubic_stiffness if m["system"] == "cubic" else hexagonal_stiffness
    stiff = build(*constants.values())
    stiff.setflags(write=False)
    src = m["source"]
    a, c = float(m["a"]), float(m["c"]) if "c" in m else None
    alpha = tuple(float(v) for v in m["alpha"])
    spreads = parse_spreads(m.get("spread"), m["system"], {**constants, "a": a, "c": c}, alpha,
                            f"materials.toml: material.{name}")
    return Material(
        name=name, x=None, system=m["system"], constants=constants, stiffness=stiff,
        a=a, c=c, alpha=alpha,
        sources=tuple(f"{name} {q}: {src[q]}" for q in ("stiffness", "lattice", "alpha") if q in src),
        structure=m["structure"], spreads=spreads)


def _alloy(name: str, x: float) -> Material:
    al = _database()["alloy"][name]
    m0, m1 = (_compound(n) for n in al["members"])

    def lin(p, q):
        return (1.0 - x) * p + x * q

    constants = {k: lin(m0.constants[k], m1.constants[k]) for k in m0.constants}
    build = cubic_stiffness if m0.system == "cubic" else hexagonal_stiffness
    stiff = build(*constants.values())
    stiff.setflags(write=False)
    if al["lattice_law"] == "dismukes1964":
        a = float(np.polynomial.polynomial.polyval(x, al["lattice_poly"]))
    else:
        a = lin(m0.a, m1.a)
    c = None if m0.c is None else lin(m0.c, m1.c)
    spreads = _alloy_spreads(name, al, m0, m1, x, a)
    return Material(
        name=name, x=x, system=m0.system, constants=constants, stiffness=stiff, a=a, c=c,
        alpha=tuple(lin(p, q) for p, q in zip(m0.alpha, m1.alpha)),
        sources=(f"{name} alloy law: {al['source']}",) + m0.sources + m1.sources,
        structure=m0.structure, lattice_law=al["lattice_law"], members=tuple(al["members"]),
        label_template=al["label"], group="alloy", spreads=spreads)


def _alloy_spreads(name: str, al: dict, m0: Material, m1: Material, x: float,
                   a: float) -> tuple:
    """Spreads of an alloy at x: the members' spreads interpolated like the quantity itself.

    Stiffness and alpha (and the lattice constant of a Vegard alloy) are linear in x,
    so their change is the same mix of the members' changes. An alloy whose table
    has ``spread.lattice_law`` (SiGe: Vegard's law against the adopted Dismukes fit)
    gains a ``"lattice law"`` spread: the other law's a(x) minus the adopted one.
    """
    out = []
    quantities = ["stiffness", "alpha"] + (["lattice"] if al["lattice_law"] == "vegard" else [])
    for q in quantities:
        s0, s1 = m0.spread(q), m1.spread(q)
        if s0 is None and s1 is None:
            continue
        keys = list(dict.fromkeys([*(s0.delta if s0 else {}), *(s1.delta if s1 else {})]))
        delta = {}
        for k in keys:
            d0 = np.asarray(s0.delta.get(k, 0.0) if s0 else 0.0, dtype=float)
            d1 = np.asarray(s1.delta.get(k, 0.0) if s1 else 0.0, dtype=float)
            d = (1.0 - x) * d0 + x * d1
            delta[k] = tuple(float(v) for v in np.ravel(d)) if k == "alpha" else float(d)
        kinds = {s.kind for s in (s0, s1) if s is not None}
        src = "; ".join(f"{m.name}: {s.source}" for m, s in ((m0, s0), (m1, s1)) if s)
        out.append(Spread(q, delta, kinds.pop() if len(kinds) == 1 else "mixed",
                          f"members interpolated linearly in x ({src})"))
    law = (al.get("spread") or {}).get("lattice_law")
    if law is not None:
        if law.get("law") != "vegard" or al["lattice_law"] == "vegard":
            raise MaterialError(f"materials.toml: alloy.{name}.spread.lattice_law.law must be "
                                f"'vegard' against another adopted law")
        a_other = (1.0 - x) * m0.a + x * m1.a
        out.append(Spread("lattice law", {"a": a_other - a}, "law", law["source"]))
    return tuple(out)


def get_material(name: str, x: float | None = None) -> Material:
    """Look up a material, interpolating alloys at composition ``x``.

    Parameters
    ----------
    name : str
        Case-sensitive name from :func:`builtin_materials`; alloys are also
        accepted by their formula, e.g. ``"Si1-xGex"`` or ``"In(x)Ga(1-x)As"``.
    x : float, optional
        Alloy fraction of the second member, 0 <= x <= 1 (SiGe: Ge,
        InGaAs and InGaN: In, AlGaAs and AlGaN: Al). Must be omitted for
        compounds.

    Returns
    -------
    Material
        Stiffness in GPa, lattice constants in Angstrom, alpha in 1e-6/K.

    Raises
    ------
    MaterialError
        Unknown name, alloy without ``x``, ``x`` outside [0, 1], or ``x``
        given for a compound.
    """
    db = _database()
    key = _aliases().get(name, name) if isinstance(name, str) else name
    if key in db["material"]:
        if x is not None:
            raise MaterialError(f"{key} is not an alloy: do not give x "
                                f"(alloys: {', '.join(db['alloy'])})")
        return _compound(key)
    if key in db["alloy"]:
        of = db["alloy"][key]["x_of"]
        if x is None:
            raise MaterialError(f"{key} is an alloy: give x (fraction of {of}) between 0 and 1")
        try:
            xf = float(x)
        except (TypeError, ValueError):
            raise MaterialError(f"x for {key} must be a number between 0 and 1 (fraction of {of}), "
                                f"got {x!r}") from None
        if isinstance(x, bool) or not 0.0 <= xf <= 1.0:
            raise MaterialError(f"x = {x!r} for {key} is outside [0, 1] (x is the fraction of {of})")
        return _alloy(key, xf)
    group = _general_group(key) if isinstance(key, str) else None
    if group is not None:
        if x is not None:
            raise MaterialError(f"{key} is not an alloy: do not give x "
                                f"(alloys: {', '.join(db['alloy'])})")
        return build_material(key, db[group][key], group, f"{group}.{key}")
    raise MaterialError(f"unknown material {name!r}; known: {', '.join(builtin_materials())}")


# --------------------------------------------------------------------------
# table for the command line
# --------------------------------------------------------------------------
def materials_table(width: int = 120) -> str:
    """Plain-text table of every material, alloy law and source.

    Parameters
    ----------
    width : int, default: 120
        Maximum line length in characters; source notes are wrapped to fit.

    Returns
    -------
    str
        Stiffness in GPa, a and c in Angstrom, alpha in 1e-6/K, then one
        wrapped line per source; alloys follow with their laws, then the
        substrates, dielectrics and metals.
    """
    db = _database()
    indent = " " * 6

    def wrap(head: str, text: str) -> list[str]:
        return textwrap.wrap(f"{head}: {text}", width=width, initial_indent=indent,
                             subsequent_indent=indent + "  ", break_on_hyphens=False)

    def num(v) -> str:
        return "-" if v is None else f"{v:g}"

    cols = ("name", "structure", "C11", "C12", "C13", "C33", "C44", "C66", "a", "c", "c/a", "alpha")
    fmt = "{:<6}{:<12}{:>7}{:>7}{:>7}{:>7}{:>7}{:>7}{:>10}{:>9}{:>8}  {}"
    lines = ["Materials near 300 K: C_ij in GPa (crystal axes), a and c in Angstrom, "
             "alpha in 1e-6/K (hexagonal: a-axis/c-axis)",
             "Flags: [C] confirmed in a public source, [M] from memory, [D] derived", "",
             fmt.format(*cols), "-" * min(width, 100)]
    for name in db["material"]:
        m = _compound(name)
        k = m.constants
        c66 = m.stiffness[5, 5]
        lines.append(fmt.format(
            name, m.structure, num(k["C11"]), num(k["C12"]), num(k.get("C13")), num(k.get("C33")),
            num(k["C44"]), f"{c66:.4g}", f"{m.a:.6g}", num(m.c),
            "-" if m.c_over_a is None else f"{m.c_over_a:.4f}", "/".join(f"{v:.2f}" for v in m.alpha)))
        for q, text in db["material"][name]["source"].items():
            lines += wrap(q, text)
        lines += _spread_lines(m, wrap)
    lines += ["", "Alloys: x is the fraction of the second member; C_ij and alpha linear in x",
              "-" * min(width, 100)]
    for name, al in db["alloy"].items():
        law = al["lattice_law"]
        if law == "dismukes1964":
            p = al["lattice_poly"]
            law += f" a(x) = {p[0]:g} + {p[1]:g} x + {p[2]:g} x^2 A"
        else:
            hexa = db["material"][al["members"][0]]["system"] == "hexagonal"
            law += " (a and c linear)" if hexa else " (a linear)"
        members = f"{al['members'][0]} .. {al['members'][1]}"
        lines.append(f"{name:<8}{_formula(al):<16}x = {al['x_of']:<4}{members:<14}lattice: {law}")
        lines += wrap("source", al["source"])
        law_spread = (al.get("spread") or {}).get("lattice_law")
        if law_spread:
            lines += wrap("spread lattice law", f"{law_spread['law']} instead: "
                                                f"{law_spread['source']}")
    for group in GENERAL_GROUPS:
        if db.get(group):
            lines += _general_section(group, wrap, num, width)
    return "\n".join(lines)


def _general_section(group: str, wrap, num, width: int) -> list[str]:
    """Lines of :func:`materials_table` for one general-format group."""
    db = _database()
    mats = [build_material(n, t, group, f"{group}.{n}") for n, t in db[group].items()]
    lines = ["", _GROUP_TITLES[group], "-" * min(width, 100)]
    if all(m.system == "isotropic" for m in mats):
        fmt = "{:<14}{:<17}{:>7}{:>7}{:>9}{:>9}{:>9}  {}"
        lines += ["isotropic: C11 = lambda + 2 mu, C12 = lambda, C44 = mu (GPa); no lattice "
                  "constant, no lattice mismatch",
                  fmt.format("name", "structure", "E", "nu", "C11", "C12", "C44", "alpha")]
    else:
        fmt = "{:<10}{:<18}{:>7}{:>7}{:>7}{:>7}{:>7}{:>7}{:>7}{:>8}{:>9}  {}"
        lines += ["trigonal: z along c, x along a1 = [2-1-10]; C14 changes sign under a "
                  "60-degree rotation about c",
                  fmt.format("name", "system/structure", "C11", "C12", "C13", "C14", "C33",
                             "C44", "C66", "a", "c", "alpha")]
    for m in mats:
        k, c = m.constants, m.stiffness
        alpha = "/".join(f"{v:.2f}" for v in m.alpha) or "-"
        if m.system == "isotropic":
            lines.append(fmt.format(m.name, m.structure, num(k["E"]), num(k["nu"]),
                                    f"{c[0, 0]:.4g}", f"{c[0, 1]:.4g}", f"{c[3, 3]:.4g}", alpha))
        else:
            lines.append(fmt.format(
                m.name, f"{m.system}/{m.structure}", *(f"{c[i, j]:.4g}" for i, j in
                ((0, 0), (0, 1), (0, 2), (0, 3), (2, 2), (3, 3), (5, 5))),
                num(m.a), num(m.c), alpha))
        for q, text in db[group][m.name]["source"].items():
            lines += wrap(q, text)
        lines += _spread_lines(m, wrap)
    return lines


def _spread_lines(m: Material, wrap) -> list[str]:
    """Lines of :func:`materials_table` for a material's published spreads."""
    out = []
    for sp in m.spreads:
        change = ", ".join(
            f"{k} {'/'.join(f'{x:+.3g}' for x in v)}" if isinstance(v, tuple) else f"{k} {v:+.3g}"
            for k, v in sp.delta.items())
        what = "half range" if sp.kind == "range" else sp.kind
        out += wrap(f"spread {sp.quantity}", f"{change} ({what}, up to "
                                              f"{100 * sp.relative(m):.2g} %): {sp.source}")
    return out
