"""Stiffness matrices of every crystal symmetry system, and their physical checks.

A material's stiffness is given in its own crystal Cartesian axes by a few
independent constants (GPa); :func:`stiffness_from_constants` expands them to
the 6x6 Voigt matrix and :func:`validate_stiffness` checks that the result is
symmetric positive definite (the elastic energy of any strain is positive),
naming the constant or condition that breaks it.

Symmetry systems and their constants
------------------------------------
``isotropic``     E (GPa), nu. Amorphous and untextured polycrystalline films.
                  lambda = E nu/((1 + nu)(1 - 2 nu)), mu = E/(2 (1 + nu));
                  C11 = lambda + 2 mu, C12 = lambda, C44 = mu.
``cubic``         C11, C12, C44; axes along the cube edges.
``hexagonal``     C11, C12, C13, C33, C44; z along c = [0001], x along
                  a1 = [2-1-10]; C66 = (C11 - C12)/2 (transversely isotropic).
``trigonal``      C11, C12, C13, C14, C33, C44 (classes 32, 3m, -3m; sapphire,
                  LiNbO3, quartz). Axes as for hexagonal crystals in the
                  hexagonal setting: z along c = [0001], x along the a axis
                  a1 = [2-1-10] (a two-fold axis of -3m), y = z cross x. The
                  matrix is that of Nye, *Physical Properties of Crystals*
                  (Oxford 1957), appendix B, and of the IEEE Standard on
                  Piezoelectricity (176-1987) for these classes [M]:
                  C24 = -C14, C56 = C14, C66 = (C11 - C12)/2, every other
                  off-diagonal term zero except C12, C13, C23 = C13.
                  Sign of C14: it belongs to the frame. Rotating the axes by
                  60 (or 180) degrees about c, i.e. taking the opposite sense
                  of a1 as +x, turns C14 into -C14; 120 degrees leaves the
                  matrix unchanged. The value in the database (sapphire
                  -22 GPa, after Gieske & Barsch 1968) is for the frame of
                  that publication as recalled; give the sign for the
                  frame in which the wafer's x_axis is written.
``tetragonal``    C11, C12, C13, C33, C44, C66 (classes 4mm, -42m, 422, 4/mmm);
                  z along c = [001], x along a = [100].
``orthorhombic``  C11, C22, C33, C12, C13, C23, C44, C55, C66; x, y, z along
                  a, b, c.
``anisotropic``   C: the full symmetric 6x6 Voigt matrix (rows of 6) in the
                  crystal axes, for anything else (monoclinic, triclinic, a
                  textured film with measured constants).

Voigt order 11, 22, 33, 23, 13, 12 as in :mod:`mesastrain.physics.crystal`.

Positive-definiteness conditions (Born stability) per system follow Mouhat &
Coudert, Phys. Rev. B 90, 224104 (2014) [M]; for ``anisotropic`` it is
Sylvester's criterion on the leading principal minors.
"""

from __future__ import annotations

import math

import numpy as np

from mesastrain.errors import MaterialError

__all__ = [
    "STIFFNESS_KEYS",
    "SYMMETRY_SYSTEMS",
    "check_constants",
    "isotropic_constants_to_cubic",
    "stiffness_from_constants",
    "validate_stiffness",
]

#: Independent stiffness constants of each system, in the order they are printed.
STIFFNESS_KEYS = {
    "isotropic": ("E", "nu"),
    "cubic": ("C11", "C12", "C44"),
    "hexagonal": ("C11", "C12", "C13", "C33", "C44"),
    "trigonal": ("C11", "C12", "C13", "C14", "C33", "C44"),
    "tetragonal": ("C11", "C12", "C13", "C33", "C44", "C66"),
    "orthorhombic": ("C11", "C22", "C33", "C12", "C13", "C23", "C44", "C55", "C66"),
    "anisotropic": ("C",),
}
SYMMETRY_SYSTEMS = tuple(STIFFNESS_KEYS)

#: Relative tolerance of the symmetry check of a full 6x6 matrix.
_SYM_RTOL = 1e-9


def _fmt(v: float) -> str:
    return f"{v:.6g}"


def check_constants(system: str, constants: dict, who: str = "material") -> dict:
    """Check that ``constants`` holds exactly the finite numbers ``system`` needs.

    Parameters
    ----------
    system : str
        One of :data:`SYMMETRY_SYSTEMS`.
    constants : dict
        Constants as in the data file (GPa; ``nu`` dimensionless; ``C`` a
        6x6 list for ``anisotropic``). Other keys are ignored here.
    who : str, default: "material"
        Name used at the start of error messages, e.g. ``"material.SiN"``.

    Returns
    -------
    dict
        The constants as floats (``C`` as a 6x6 float array).

    Raises
    ------
    MaterialError
        Unknown system, a missing constant, or a value that is not a finite
        number.
    """
    if system not in STIFFNESS_KEYS:
        raise MaterialError(f"{who}.system must be one of {', '.join(SYMMETRY_SYSTEMS)}, "
                            f"got {system!r}")
    keys = STIFFNESS_KEYS[system]
    missing = [k for k in keys if k not in constants]
    if missing:
        raise MaterialError(f"{who}: a {system} material needs {', '.join(keys)}; "
                            f"missing {', '.join(missing)}")
    out = {}
    if system == "anisotropic":
        try:
            c = np.array(constants["C"], dtype=float)
        except (TypeError, ValueError):
            raise MaterialError(f"{who}.C must be 6 rows of 6 numbers (GPa), "
                                f"got {constants['C']!r}") from None
        if c.shape != (6, 6) or not np.all(np.isfinite(c)):
            raise MaterialError(f"{who}.C must be 6 rows of 6 finite numbers (GPa), "
                                f"got shape {c.shape}")
        return {"C": c}
    for k in keys:
        v = constants[k]
        if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
            raise MaterialError(f"{who}.{k} must be a number "
                                f"({'dimensionless' if k == 'nu' else 'GPa'}), got {v!r}")
        if not math.isfinite(float(v)):
            raise MaterialError(f"{who}.{k} must be finite, got {v!r}")
        out[k] = float(v)
    return out


def isotropic_constants_to_cubic(E: float, nu: float) -> tuple[float, float, float]:
    """(C11, C12, C44) of an isotropic solid from Young's modulus and Poisson's ratio.

    Parameters
    ----------
    E : float
        Young's modulus, GPa (any stiffness unit).
    nu : float
        Poisson's ratio, -1 < nu < 0.5.

    Returns
    -------
    tuple of float
        C11 = lambda + 2 mu, C12 = lambda, C44 = mu, in the unit of E.
    """
    lam = E * nu / ((1.0 + nu) * (1.0 - 2.0 * nu))
    mu = E / (2.0 * (1.0 + nu))
    return lam + 2.0 * mu, lam, mu


def _matrix(system: str, k: dict) -> np.ndarray:
    """6x6 Voigt matrix from checked constants (no stability check)."""
    if system == "anisotropic":
        return np.array(k["C"], dtype=float)
    c = np.zeros((6, 6))
    if system in ("isotropic", "cubic"):
        c11, c12, c44 = (isotropic_constants_to_cubic(k["E"], k["nu"]) if system == "isotropic"
                         else (k["C11"], k["C12"], k["C44"]))
        c[:3, :3] = c12
        c[[0, 1, 2], [0, 1, 2]] = c11
        c[[3, 4, 5], [3, 4, 5]] = c44
        return c
    if system == "orthorhombic":
        for (i, j), key in {(0, 0): "C11", (1, 1): "C22", (2, 2): "C33", (0, 1): "C12",
                            (0, 2): "C13", (1, 2): "C23", (3, 3): "C44", (4, 4): "C55",
                            (5, 5): "C66"}.items():
            c[i, j] = c[j, i] = k[key]
        return c
    # hexagonal, trigonal, tetragonal: x-y plane symmetric, C13 = C23, C44 = C55
    c[0, 0] = c[1, 1] = k["C11"]
    c[0, 1] = c[1, 0] = k["C12"]
    c[0, 2] = c[2, 0] = c[1, 2] = c[2, 1] = k["C13"]
    c[2, 2] = k["C33"]
    c[3, 3] = c[4, 4] = k["C44"]
    c[5, 5] = k["C66"] if system == "tetragonal" else 0.5 * (k["C11"] - k["C12"])
    if system == "trigonal":
        c14 = k["C14"]
        c[0, 3] = c[3, 0] = c14
        c[1, 3] = c[3, 1] = -c14
        c[4, 5] = c[5, 4] = c14
    return c


def _conditions(system: str, k: dict) -> list[tuple[str, float, str, str]]:
    """(condition, value, unit, constants involved): every value must be > 0."""
    f = _fmt
    if system == "isotropic":
        E, nu = k["E"], k["nu"]
        return [("E > 0", E, " GPa", f"E = {f(E)} GPa"),
                ("nu > -1", nu + 1.0, "", f"nu = {f(nu)}"),
                ("nu < 0.5", 0.5 - nu, "", f"nu = {f(nu)}")]
    if system == "cubic":
        c11, c12, c44 = k["C11"], k["C12"], k["C44"]
        return [("C11 - C12 > 0", c11 - c12, " GPa", f"C11 = {f(c11)}, C12 = {f(c12)}"),
                ("C11 + 2*C12 > 0", c11 + 2 * c12, " GPa", f"C11 = {f(c11)}, C12 = {f(c12)}"),
                ("C44 > 0", c44, " GPa", f"C44 = {f(c44)}")]
    if system in ("hexagonal", "trigonal", "tetragonal"):
        c11, c12, c13, c33, c44 = (k[n] for n in ("C11", "C12", "C13", "C33", "C44"))
        c66 = k["C66"] if system == "tetragonal" else 0.5 * (c11 - c12)
        out = [("C11 - C12 > 0", c11 - c12, " GPa", f"C11 = {f(c11)}, C12 = {f(c12)}"),
               ("C33 > 0", c33, " GPa", f"C33 = {f(c33)}"),
               ("C33*(C11 + C12) - 2*C13^2 > 0", c33 * (c11 + c12) - 2 * c13**2, " GPa^2",
                f"C11 = {f(c11)}, C12 = {f(c12)}, C13 = {f(c13)}, C33 = {f(c33)}"),
               ("C44 > 0", c44, " GPa", f"C44 = {f(c44)}")]
        if system == "tetragonal":
            out.append(("C66 > 0", c66, " GPa", f"C66 = {f(c66)}"))
        if system == "trigonal":
            c14 = k["C14"]
            out.append(("C44*(C11 - C12)/2 - C14^2 > 0", c44 * c66 - c14**2, " GPa^2",
                        f"C11 = {f(c11)}, C12 = {f(c12)}, C14 = {f(c14)}, C44 = {f(c44)}"))
        return out
    if system == "orthorhombic":
        g = {n: k[n] for n in STIFFNESS_KEYS["orthorhombic"]}
        det3 = (g["C11"] * g["C22"] * g["C33"] + 2 * g["C12"] * g["C13"] * g["C23"]
                - g["C11"] * g["C23"]**2 - g["C22"] * g["C13"]**2 - g["C33"] * g["C12"]**2)
        normal = ("C11", "C22", "C33", "C12", "C13", "C23")
        return [("C11 > 0", g["C11"], " GPa", f"C11 = {f(g['C11'])}"),
                ("C11*C22 - C12^2 > 0", g["C11"] * g["C22"] - g["C12"]**2, " GPa^2",
                 f"C11 = {f(g['C11'])}, C22 = {f(g['C22'])}, C12 = {f(g['C12'])}"),
                ("det(C11..C33 block) > 0", det3, " GPa^3",
                 ", ".join(f"{n} = {f(g[n])}" for n in normal)),
                ("C44 > 0", g["C44"], " GPa", f"C44 = {f(g['C44'])}"),
                ("C55 > 0", g["C55"], " GPa", f"C55 = {f(g['C55'])}"),
                ("C66 > 0", g["C66"], " GPa", f"C66 = {f(g['C66'])}")]
    return []


def _check_symmetric(C: np.ndarray, who: str) -> None:
    scale = max(float(np.abs(C).max()), 1e-300)
    for i in range(6):
        for j in range(i + 1, 6):
            if abs(C[i, j] - C[j, i]) > _SYM_RTOL * scale:
                raise MaterialError(
                    f"{who}: stiffness is not symmetric: C{i + 1}{j + 1} = {_fmt(C[i, j])} but "
                    f"C{j + 1}{i + 1} = {_fmt(C[j, i])} GPa")


def _check_leading_minors(C: np.ndarray, who: str) -> None:
    """Sylvester's criterion: every leading principal minor of C must be > 0."""
    scale = float(np.abs(np.diag(C)).max()) or 1.0
    for n in range(1, 7):
        d = float(np.linalg.det(C[:n, :n] / scale))
        if not d > 1e-12:
            block = "C11" if n == 1 else f"C11..C{n}{n}"
            raise MaterialError(
                f"{who}: stiffness is not positive definite: the leading minor of order {n} "
                f"(the {block} block) is {d * scale**n:.4g} GPa^{n}, it must be > 0")


def validate_stiffness(C, system: str, constants: dict | None = None,
                       who: str = "material") -> None:
    """Check that a stiffness is symmetric positive definite; name what breaks it.

    Parameters
    ----------
    C : array_like (6, 6)
        Voigt stiffness in crystal axes, GPa.
    system : str
        One of :data:`SYMMETRY_SYSTEMS`; selects the conditions that are
        checked on ``constants`` (see :func:`stiffness_from_constants`).
    constants : dict, optional
        The independent constants the matrix was built from (GPa; E and nu
        for isotropic). Without them only the general checks run.
    who : str, default: "material"
        Name at the start of the error message.

    Raises
    ------
    MaterialError
        One line naming the failing condition and the constants in it, e.g.
        ``"material.X: cubic stiffness is not positive definite: need
        C11 - C12 > 0, got -20 GPa (C11 = 100, C12 = 120)"``; for a general
        matrix, the asymmetric pair or the first leading minor that is not
        positive.

    Notes
    -----
    Conditions: isotropic E > 0 and -1 < nu < 0.5; cubic C11 - C12 > 0,
    C11 + 2 C12 > 0, C44 > 0 (the three distinct eigenvalues); hexagonal,
    trigonal and tetragonal C11 - C12 > 0, C33 > 0, C33 (C11 + C12) > 2 C13^2,
    C44 > 0, plus C66 > 0 (tetragonal) and C44 (C11 - C12)/2 > C14^2
    (trigonal); orthorhombic the leading minors of the normal block and
    C44, C55, C66 > 0 (Mouhat & Coudert, Phys. Rev. B 90, 224104 (2014) [M]).
    A final eigenvalue / Sylvester check runs for every system.
    """
    C = np.asarray(C, dtype=float)
    if C.shape != (6, 6) or not np.all(np.isfinite(C)):
        raise MaterialError(f"{who}: stiffness must be a finite 6x6 matrix, got shape {C.shape}")
    if constants is not None and system != "anisotropic":
        for cond, value, unit, involved in _conditions(system, constants):
            if not value > 0:
                what = ("isotropic constants are not physical" if system == "isotropic"
                        else f"{system} stiffness is not positive definite")
                raise MaterialError(f"{who}: {what}: need {cond}, got {_fmt(value)}{unit} "
                                    f"({involved})")
    _check_symmetric(C, who)
    _check_leading_minors(C, who)
    if np.linalg.eigvalsh(C).min() <= 0:  # pragma: no cover - Sylvester already failed
        raise MaterialError(f"{who}: stiffness is not positive definite")


def stiffness_from_constants(system: str, constants: dict, who: str = "material") -> np.ndarray:
    """Voigt stiffness (crystal axes) of any symmetry system, checked.

    Parameters
    ----------
    system : str
        One of :data:`SYMMETRY_SYSTEMS` (see the module notes for the axes
        and the sign convention of trigonal C14).
    constants : dict
        The system's constants (:data:`STIFFNESS_KEYS`): GPa, ``nu``
        dimensionless, ``C`` a 6x6 nested list for ``anisotropic``.
    who : str, default: "material"
        Name at the start of error messages.

    Returns
    -------
    ndarray (6, 6)
        Voigt stiffness in GPa, order 11, 22, 33, 23, 13, 12.

    Raises
    ------
    MaterialError
        Unknown system, missing or non-numeric constants, or a stiffness
        that is not symmetric positive definite (see :func:`validate_stiffness`).
    """
    k = check_constants(system, constants, who)
    if system == "isotropic":       # check E and nu before they enter a division
        validate_stiffness(np.eye(6), system, k, who)
    C = _matrix(system, k)
    validate_stiffness(C, system, k, who)
    return C
