"""Elastic, lattice and thermal-expansion data of crystalline materials.

The numbers live in ``mesastrain/data/materials.toml``, one table per material,
each quantity with its published source and a confidence flag. This module
reads that file once, builds 6x6 Voigt stiffness matrices in crystal axes and
interpolates binary alloys.

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
from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError

_CUBIC_KEYS = ("C11", "C12", "C44")
_HEX_KEYS = ("C11", "C12", "C13", "C33", "C44")
_LATTICE_LAWS = ("vegard", "dismukes1964")


@dataclass(frozen=True, eq=False)
class Material:
    """One material, or one alloy at one composition.

    Attributes
    ----------
    name : str
        Name as in the database, e.g. ``"Si"``, ``"SiGe"``, ``"GaN"``.
    x : float or None
        Alloy fraction of the second member (SiGe: Ge); None for a compound.
    system : str
        ``"cubic"`` or ``"hexagonal"``.
    constants : dict
        Independent stiffness constants in GPa: C11, C12, C44 (cubic) or
        C11, C12, C13, C33, C44 (hexagonal).
    stiffness : ndarray (6, 6)
        Voigt stiffness in crystal axes, GPa (read-only).
    a : float
        Lattice constant a, Angstrom.
    c : float or None
        Lattice constant c, Angstrom (hexagonal only).
    alpha : tuple
        Linear thermal expansion near 300 K, 1e-6/K: ``(alpha,)`` for cubic,
        ``(alpha_a, alpha_c)`` for hexagonal.
    sources : tuple of str
        Citation strings with confidence flags ([C], [M], [D]).
    structure : str
        ``"diamond"``, ``"zincblende"`` or ``"wurtzite"``.
    lattice_law : str or None
        Alloys: ``"vegard"`` or ``"dismukes1964"``; None for a compound.
    members : tuple of str
        Alloys: (first, second) member names; empty for a compound.
    """

    name: str
    x: float | None
    system: str
    constants: dict
    stiffness: np.ndarray
    a: float
    c: float | None
    alpha: tuple
    sources: tuple
    structure: str = ""
    lattice_law: str | None = None
    members: tuple = ()
    label_template: str = ""

    @property
    def c_over_a(self) -> float | None:
        """Axial ratio c/a (dimensionless), None for cubic crystals."""
        return None if self.c is None else self.c / self.a

    @property
    def label(self) -> str:
        """Composition label, e.g. ``"Si0.8Ge0.2"``; the name for a compound."""
        if self.x is None:
            return self.name
        return (self.label_template.replace("{1-x}", _fmt_fraction(1.0 - self.x))
                .replace("{x}", _fmt_fraction(self.x)))

    def __repr__(self) -> str:
        lat = f"a={self.a:.5g} A" + ("" if self.c is None else f", c={self.c:.5g} A")
        return f"Material({self.label}, {self.system}, {lat})"


def _fmt_fraction(v: float) -> str:
    return f"{v:.4f}".rstrip("0").rstrip(".") or "0"


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
    """Names accepted by :func:`get_material`, compounds first, then alloys.

    Returns
    -------
    list of str
        Case-sensitive names in data-file order.
    """
    db = _database()
    return list(db["material"]) + list(db["alloy"])


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
    return Material(
        name=name, x=None, system=m["system"], constants=constants, stiffness=stiff,
        a=float(m["a"]), c=float(m["c"]) if "c" in m else None,
        alpha=tuple(float(v) for v in m["alpha"]),
        sources=tuple(f"{name} {q}: {src[q]}" for q in ("stiffness", "lattice", "alpha") if q in src),
        structure=m["structure"])


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
    return Material(
        name=name, x=x, system=m0.system, constants=constants, stiffness=stiff, a=a, c=c,
        alpha=tuple(lin(p, q) for p, q in zip(m0.alpha, m1.alpha)),
        sources=(f"{name} alloy law: {al['source']}",) + m0.sources + m1.sources,
        structure=m0.structure, lattice_law=al["lattice_law"], members=tuple(al["members"]),
        label_template=al["label"])


def get_material(name: str, x: float | None = None) -> Material:
    """Look up a material, interpolating alloys at composition ``x``.

    Parameters
    ----------
    name : str
        Case-sensitive name from :func:`known_materials`; alloys are also
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
    raise MaterialError(f"unknown material {name!r}; known: {', '.join(known_materials())}")


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
        wrapped line per source; alloys follow with their laws.
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
    return "\n".join(lines)
