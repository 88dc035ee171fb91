"""The ``Material`` record and the reader of the general material-table format.

:class:`Material` is what :func:`mesastrain.physics.materials.get_material`
returns; :func:`build_material` turns one table of the general format (any
symmetry system of :mod:`mesastrain.physics.elastic`) into a Material, naming
the key of any error. The database module and
:func:`mesastrain.physics.materials.material_from_table` use it; the format is
documented there.

Units: stiffness GPa, lattice constants Angstrom, thermal expansion 1e-6/K.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from mesastrain.errors import MaterialError
from mesastrain.physics.elastic import (
    STIFFNESS_KEYS,
    SYMMETRY_SYSTEMS,
    stiffness_from_constants,
)

__all__ = ["Material", "Spread", "build_material", "parse_spreads", "varied"]


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
        Symmetry system, one of ``isotropic``, ``cubic``, ``hexagonal``,
        ``trigonal``, ``tetragonal``, ``orthorhombic``, ``anisotropic``
        (axes and conventions in :mod:`mesastrain.physics.elastic`).
    constants : dict
        Independent stiffness constants: GPa (``E`` GPa and ``nu`` for
        isotropic; ``C``, a 6x6 array, for anisotropic), e.g. C11, C12, C44
        (cubic) or C11, C12, C13, C33, C44 (hexagonal).
    stiffness : ndarray (6, 6)
        Voigt stiffness in crystal axes, GPa (read-only).
    a : float or None
        Lattice constant a, Angstrom; None for a material without a lattice
        to match (amorphous or polycrystalline films).
    c : float or None
        Lattice constant c, Angstrom (uniaxial and orthorhombic crystals).
    alpha : tuple
        Linear thermal expansion, 1e-6/K: ``(alpha,)`` for isotropic and
        cubic, ``(alpha_a, alpha_c)`` for hexagonal, trigonal and tetragonal,
        ``(alpha_a, alpha_b, alpha_c)`` along crystal x, y, z for
        orthorhombic and anisotropic; empty if not given.
    sources : tuple of str
        Citation strings with confidence flags ([C], [M], [D]).
    structure : str
        E.g. ``"diamond"``, ``"zincblende"``, ``"wurtzite"``, ``"corundum"``,
        ``"amorphous"``, ``"polycrystalline"``; may be empty.
    lattice_law : str or None
        Alloys: ``"vegard"`` or ``"dismukes1964"``; None for a compound.
    members : tuple of str
        Alloys: (first, second) member names; empty for a compound.
    b : float or None
        Lattice constant b, Angstrom (orthorhombic and anisotropic only).
    group : str
        Database group (``"material"``, ``"alloy"``, ``"substrate"``,
        ``"dielectric"``, ``"metal"``) or ``"user"`` for a table of one's own.
    spreads : tuple of Spread
        The published scatter of its quantities (at most one per quantity);
        empty when none is known.
    """

    name: str
    x: float | None
    system: str
    constants: dict
    stiffness: np.ndarray
    a: float | None
    c: float | None
    alpha: tuple
    sources: tuple
    structure: str = ""
    lattice_law: str | None = None
    members: tuple = ()
    label_template: str = ""
    b: float | None = None
    group: str = "material"
    spreads: tuple = ()

    def spread(self, quantity: str):
        """The :class:`Spread` of one quantity, or None."""
        return next((s for s in self.spreads if s.quantity == quantity), None)

    @property
    def c_over_a(self) -> float | None:
        """Axial ratio c/a (dimensionless), None for cubic crystals and without a lattice."""
        return None if self.c is None or self.a is None else self.c / self.a

    @property
    def has_lattice(self) -> bool:
        """True if the material gives a lattice constant (can be epitaxial)."""
        return self.a is not None

    @property
    def label(self) -> str:
        """Composition label, e.g. ``"Si0.8Ge0.2"``; the name for a compound."""
        if self.x is None:
            return self.name
        return (self.label_template.replace("{1-x}", _fmt_fraction(1.0 - self.x))
                .replace("{x}", _fmt_fraction(self.x)))

    def __repr__(self) -> str:
        if self.a is None:
            return f"Material({self.label}, {self.system}, no lattice)"
        lat = (f"a={self.a:.5g} A" + ("" if self.b is None else f", b={self.b:.5g} A")
               + ("" if self.c is None else f", c={self.c:.5g} A"))
        return f"Material({self.label}, {self.system}, {lat})"



#: The quantities a spread may describe, and the keys each may change.
SPREAD_QUANTITIES = ("stiffness", "lattice", "lattice law", "alpha")


@dataclass(frozen=True, eq=False)
class Spread:
    """The published scatter of one quantity of a material: a direction in its constants.

    The change ``delta`` is what separates the adopted values from a second
    published source (``kind = "second source"``: the second source minus the
    adopted value, so correlated constants move together as they do between
    the sources), half the width of a published range (``kind = "range"``:
    every constant of the range moved up by half its width), or the difference
    between two published laws (``kind = "law"``: the SiGe lattice constant of
    Vegard's law minus that of the Dismukes fit at the alloy's x).

    Attributes
    ----------
    quantity : str
        ``"stiffness"`` (GPa; ``E`` GPa and ``nu`` for isotropic), ``"lattice"``
        (a, b, c in Angstrom), ``"lattice law"`` (a in Angstrom) or ``"alpha"``
        (1e-6/K, one entry per stored axis).
    delta : dict of str -> float or tuple
        Change of each affected constant, e.g. ``{"C11": -3.3, "C12": -2.9}``;
        ``alpha`` maps to a tuple as long as :attr:`Material.alpha`.
    kind : str
        ``"second source"``, ``"range"`` or ``"law"``.
    source : str
        Citation of the second source, range or law, with its flag.
    """

    quantity: str
    delta: dict
    kind: str
    source: str

    def relative(self, material) -> float:
        """Largest relative change of a constant, |delta| / |value| (for tables)."""
        vals = {**material.constants, "a": material.a, "b": material.b, "c": material.c}
        out = 0.0
        for k, d in self.delta.items():
            if k == "alpha":
                ref = np.asarray(material.alpha, dtype=float)
                d = np.asarray(d, dtype=float)
                ok = ref != 0
                if np.any(ok):
                    out = max(out, float(np.max(np.abs(d[ok] / ref[ok]))))
            elif k == "a" and self.quantity == "lattice law":
                out = max(out, abs(d / material.a))
            elif vals.get(k):
                out = max(out, abs(float(d) / float(vals[k])))
        return out

    def to_dict(self) -> dict:
        return {"quantity": self.quantity, "kind": self.kind, "source": self.source,
                "delta": {k: (list(v) if isinstance(v, tuple) else v)
                          for k, v in self.delta.items()}}


def parse_spreads(table, system: str, values: dict, alpha: tuple, who: str) -> tuple:
    """Read a material's ``spread`` table into :class:`Spread` records.

    Format (each quantity optional)::

        [NAME.spread]
        stiffness = { C11 = 118.8, C12 = 53.7, C44 = 59.4, source = "..." }  # second source
        stiffness = { E = [150.0, 250.0], source = "..." }                 # a published range
        lattice = { a = 5.6533, source = "..." }
        alpha = { alpha = [5.0, 7.0], source = "..." }

    A number is the second source's value; a two-number array ``[low, high]`` a
    published range (the spread is half its width). Every entry needs a ``source``.

    Parameters
    ----------
    table : dict or None
        The ``spread`` table.
    system : str
        The material's symmetry system.
    values : dict
        The adopted constants (``C11`` ..., ``E``, ``nu``, ``a``, ``b``, ``c``).
    alpha : tuple
        The adopted alpha per stored axis (1e-6/K).
    who : str
        Prefix of error messages.

    Returns
    -------
    tuple of Spread

    Raises
    ------
    MaterialError
        A quantity or key the material does not have, a value that is not a
        number or a [low, high] pair, or a missing source.
    """
    if table is None:
        return ()
    if not isinstance(table, dict):
        raise MaterialError(f"{who}.spread must be a table of quantities "
                            f"(stiffness, lattice, alpha), got {table!r}")
    allowed = {"stiffness": [k for k in STIFFNESS_KEYS[system] if k != "C"],
               "lattice": [k for k in ("a", "b", "c") if values.get(k) is not None],
               "alpha": ["alpha"] if alpha else []}
    out = []
    for q, entry in table.items():
        where = f"{who}.spread: {q}"
        if q not in allowed or not allowed[q]:
            ok = [k for k, v in allowed.items() if v]
            raise MaterialError(f"{where} is not a quantity this material has; allowed: "
                                f"{', '.join(ok)}")
        if not isinstance(entry, dict) or not isinstance(entry.get("source"), str):
            raise MaterialError(f"{where} must be a table of values with a source string, "
                                f"e.g. {{ {allowed[q][0]} = ..., source = \"...\" }}")
        delta, kinds = {}, set()
        for k, v in entry.items():
            if k == "source":
                continue
            if k not in allowed[q]:
                raise MaterialError(f"{where}.{k} is not a constant of this quantity; allowed: "
                                    f"{', '.join(allowed[q])}")
            ref = np.asarray(alpha if k == "alpha" else values[k], dtype=float)
            delta[k], kind = _spread_delta(where + "." + k, v, ref)
            kinds.add(kind)
        if not delta:
            raise MaterialError(f"{where} gives no value; give one of {', '.join(allowed[q])}")
        if len(kinds) > 1:
            raise MaterialError(f"{where} mixes second-source values and ranges; give one kind")
        out.append(Spread(q, delta, kinds.pop(), entry["source"]))
    return tuple(out)


def _spread_delta(where: str, v, ref: np.ndarray):
    """Change of one constant: (second value - adopted) or half a [low, high] range."""
    if isinstance(v, (list, tuple)) and len(v) == 2 and ref.ndim == 0:
        lo, hi = (_number(where, "", x, "same unit as the constant", positive=False) for x in v)
        if not lo < hi:
            raise MaterialError(f"{where} range must be [low, high] with low < high, got {v!r}")
        return 0.5 * (hi - lo), "range"
    if ref.ndim == 1:     # alpha: one value or one per stored axis; or a range per axis
        if isinstance(v, (list, tuple)) and len(v) == 2 and ref.size != 2 and all(
                isinstance(x, (int, float)) for x in v):
            lo, hi = (float(x) for x in v)
            if not lo < hi:
                raise MaterialError(f"{where} range must be [low, high] with low < high")
            return (0.5 * (hi - lo),) * ref.size, "range"
        vals = list(v) if isinstance(v, (list, tuple)) else [v]
        if len(vals) not in (1, ref.size):
            raise MaterialError(f"{where} takes one value or {ref.size} (1e-6/K), got {v!r}")
        nums = np.array([_number(where, "", x, "1e-6/K", positive=False) for x in vals])
        return tuple(float(d) for d in np.broadcast_to(nums, ref.shape) - ref), "second source"
    x = _number(where, "", v, "same unit as the constant", positive=False)
    return x - float(ref), "second source"


def varied(material: Material, spread: Spread, t: float) -> Material:
    """The material with one quantity moved by ``t`` times its spread.

    Parameters
    ----------
    material : Material
    spread : Spread
        One of ``material.spreads``.
    t : float
        Fraction of the spread (1: the full second source / half range / other law).

    Returns
    -------
    Material
        A copy; stiffness recomputed (and checked) for a stiffness spread.
    """
    if spread.quantity == "stiffness":
        consts = {k: v + t * spread.delta.get(k, 0.0) for k, v in material.constants.items()}
        stiff = stiffness_from_constants(material.system, consts, f"{material.name} (varied)")
        stiff.setflags(write=False)
        return replace(material, constants=consts, stiffness=stiff)
    if spread.quantity in ("lattice", "lattice law"):
        new = {k: getattr(material, k) + t * spread.delta[k] for k in ("a", "b", "c")
               if k in spread.delta}
        return replace(material, **new)
    if spread.quantity == "alpha":
        d = spread.delta["alpha"]
        return replace(material, alpha=tuple(a + t * e for a, e in zip(material.alpha, d)))
    raise MaterialError(f"unknown spread quantity {spread.quantity!r}")


def _fmt_fraction(v: float) -> str:
    return f"{v:.4f}".rstrip("0").rstrip(".") or "0"


# --------------------------------------------------------------------------
# materials from a table (general format; data file, case file, Python API)
# --------------------------------------------------------------------------
#: Lattice constants each system may give: (required together, allowed).
_LATTICE_KEYS = {
    "isotropic": ((), ()),
    "cubic": (("a",), ("a",)),
    "hexagonal": (("a", "c"), ("a", "c")),
    "trigonal": (("a", "c"), ("a", "c")),
    "tetragonal": (("a", "c"), ("a", "c")),
    "orthorhombic": (("a", "b", "c"), ("a", "b", "c")),
    "anisotropic": ((), ("a", "b", "c")),
}
#: Number of alpha values stored per system; a single value is spread over the axes.
_ALPHA_COUNT = {"isotropic": 1, "cubic": 1, "hexagonal": 2, "trigonal": 2, "tetragonal": 2,
                "orthorhombic": 3, "anisotropic": 3}
_ALPHA_NAMES = {1: "one value", 2: "one value or two (alpha_a, alpha_c)",
                3: "one value or three (alpha along crystal x, y, z)"}
_OTHER_KEYS = ("system", "a", "b", "c", "alpha", "source", "structure", "spread")


def _number(who: str, key: str, value, unit: str, positive: bool = True) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise MaterialError(f"{who}.{key} must be a number ({unit}), got {value!r}")
    v = float(value)
    if not np.isfinite(v) or (positive and v <= 0):
        raise MaterialError(f"{who}.{key} must be a finite number{' > 0' if positive else ''} "
                            f"({unit}), got {value!r}")
    return v


def build_material(name: str, table: dict, group: str, who: str) -> Material:
    """Material from one general-format table; every check names the key.

    Parameters
    ----------
    name : str
        Material name.
    table : dict
        Keys ``system``, the system's constants (GPa; ``E``, ``nu`` for
        isotropic; ``C`` 6x6 for anisotropic), optional ``a``, ``b``, ``c``
        (Angstrom), ``alpha`` (1e-6/K), ``structure`` and ``source``.
    group : str
        Stored in :attr:`Material.group`.
    who : str
        Prefix of error messages, e.g. ``"material.myfilm"``.

    Returns
    -------
    Material

    Raises
    ------
    MaterialError
        Unknown system or key, missing constants, a stiffness that is not
        positive definite, lattice constants missing, not allowed or not
        positive, a badly shaped alpha, a malformed source.
    """
    if not isinstance(table, dict):
        raise MaterialError(f"{who} must be a table of constants, got {table!r}")
    system = table.get("system")
    if system is None:
        raise MaterialError(f"{who}.system is missing; give one of {', '.join(SYMMETRY_SYSTEMS)}")
    if system not in SYMMETRY_SYSTEMS:
        raise MaterialError(f"{who}.system must be one of {', '.join(SYMMETRY_SYSTEMS)}, "
                            f"got {system!r}")
    allowed = set(STIFFNESS_KEYS[system]) | set(_OTHER_KEYS)
    for key in table:
        if key not in allowed:
            raise MaterialError(f"{who}.{key} is not a key of a {system} material; allowed: "
                                f"{', '.join(k for k in STIFFNESS_KEYS[system] + _OTHER_KEYS)}")
    constants = {k: table[k] for k in STIFFNESS_KEYS[system] if k in table}
    stiff = stiffness_from_constants(system, constants, who)
    stiff.setflags(write=False)
    constants = ({"C": stiff} if system == "anisotropic"
                 else {k: float(table[k]) for k in STIFFNESS_KEYS[system]})

    together, allowed_lat = _LATTICE_KEYS[system]
    given = [k for k in ("a", "b", "c") if k in table]
    for k in given:
        if k not in allowed_lat:
            why = ("an isotropic (amorphous or polycrystalline) material has no lattice to match"
                   if system == "isotropic" else f"a {system} crystal gives {', '.join(allowed_lat)}")
            raise MaterialError(f"{who}.{k} is not allowed: {why}")
    if given and together and set(given) != set(together):
        missing = [k for k in together if k not in given]
        raise MaterialError(f"{who}: a {system} lattice needs {', '.join(together)} together; "
                            f"missing {', '.join(missing)}")
    lat = {k: _number(who, k, table[k], "Angstrom") for k in given}

    alpha = ()
    if "alpha" in table:
        raw = table["alpha"]
        values = list(raw) if isinstance(raw, (list, tuple, np.ndarray)) else [raw]
        n = _ALPHA_COUNT[system]
        if len(values) not in (1, n):
            raise MaterialError(f"{who}.alpha of a {system} material takes {_ALPHA_NAMES[n]} "
                                f"(1e-6/K), got {raw!r}")
        alpha = tuple(_number(who, "alpha", v, "1e-6/K", positive=False) for v in values)
        alpha = alpha * n if len(alpha) == 1 else alpha

    src = table.get("source", ())
    if isinstance(src, str):
        sources = (f"{name}: {src}",)
    elif isinstance(src, dict) and all(isinstance(v, str) for v in src.values()):
        sources = tuple(f"{name} {q}: {text}" for q, text in src.items())
    elif src == ():
        sources = ()
    else:
        raise MaterialError(f"{who}.source must be a string or a table of strings per quantity, "
                            f"got {src!r}")
    structure = table.get("structure", "")
    if not isinstance(structure, str):
        raise MaterialError(f"{who}.structure must be a string, got {structure!r}")
    spreads = parse_spreads(table.get("spread"), system,
                            {**(constants if system != "anisotropic" else {}), **lat},
                            alpha, who)
    return Material(name=name, x=None, system=system, constants=constants, stiffness=stiff,
                    a=lat.get("a"), c=lat.get("c"), b=lat.get("b"), alpha=alpha, sources=sources,
                    structure=structure, group=group, spreads=spreads)
