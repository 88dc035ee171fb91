"""Raman line parameters: phonon deformation potentials and line coefficients.

The tables of ``physics/data/device_parameters.toml`` as small records: the
optical-phonon frequency and phonon deformation potentials (PDPs) of Si and Ge
per published set (:class:`RamanParameters`), the Si-Si line of SiGe scaled to
its biaxial strain coefficient (:func:`sige_parameters`), and the GaN E2(high)
line's biaxial stress coefficient (:class:`BiaxialLine`). The physics that uses
them (secular equation, Raman tensors, stress factors) is
:mod:`mesastrain.physics.raman`, which re-exports these names.
Units: omega in cm^-1, PDPs in units of omega0^2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import MaterialError
from mesastrain.physics.bands import device_parameters, parameter_entry
from mesastrain.physics.quantities import pdp_words

__all__ = ["BiaxialLine", "RamanParameters", "biaxial_line", "pdp_sets", "raman_parameters",
           "sige_parameters"]


@dataclass(frozen=True)
class RamanParameters:
    """Optical-phonon frequency and phonon deformation potentials.

    Attributes
    ----------
    material : str
    pdp_set : str
        Key of the PDP set in ``device_parameters.toml``.
    p, q, r : float
        PDPs in units of omega0^2.
    omega0 : float
        Unstrained phonon frequency, cm^-1.
    sources : tuple of str
        Citation lines with confidence flags.
    """

    material: str
    pdp_set: str
    p: float
    q: float
    r: float
    omega0: float
    sources: tuple = ()


def pdp_sets(material: str = "Si") -> list[str]:
    """Names of the tabulated PDP sets of a material, the default first.

    Parameters
    ----------
    material : str
        ``"Si"`` or ``"Ge"``.

    Returns
    -------
    list of str

    Raises
    ------
    MaterialError
        No Raman data for the material.
    """
    table = device_parameters()["raman"]
    if material not in table:
        raise MaterialError(f"no Raman data for {material!r}; known: {', '.join(table)}")
    default = table[material]["default"]
    return [default] + [k for k in table[material]["pdp"] if k != default]


def raman_parameters(material: str = "Si", pdp_set: str | None = None,
                     x: float | None = None) -> RamanParameters:
    """Tabulated omega0 and PDPs of a material.

    Parameters
    ----------
    material : str
        ``"Si"``, ``"Ge"`` or ``"SiGe"`` (Si-Si mode, :func:`sige_parameters`).
    pdp_set : str, optional
        One of :func:`pdp_sets`; the default set (Si: Anastassakis, Cantarero
        & Cardona 1990; Ge: Cerdeira et al. 1972) when omitted. For SiGe the
        Si set whose ratios are scaled.
    x : float, optional
        Ge fraction; SiGe only.

    Returns
    -------
    RamanParameters

    Raises
    ------
    MaterialError
        Unknown material or PDP set.
    """
    if material == "SiGe":
        return sige_parameters(x, pdp_set)
    names = pdp_sets(material)
    table = device_parameters()["raman"][material]
    key = names[0] if pdp_set is None else pdp_set
    if key not in names:
        raise MaterialError(f"no PDP set {pdp_set!r} for {material}; known: {', '.join(names)}")
    omega0, cite0 = parameter_entry(table["omega0"], f"raman.{material}.omega0")
    vals, cites = {}, [cite0]
    for k in ("p", "q", "r"):
        vals[k], line = parameter_entry(table["pdp"][key][k], f"raman.{material}.pdp.{key}.{k}")
        cites.append(line)
    return RamanParameters(material=material, pdp_set=key, omega0=omega0,
                           sources=tuple(cites), **vals)


def sige_parameters(x: float, pdp_set: str | None = None) -> RamanParameters:
    """Si-Si mode of relaxed-reference Si(1-x)Ge(x): omega0(x) and scaled PDPs.

    omega0(x) = 520.5 - 62 x cm^-1 (Tsang et al., J. Appl. Phys. 75, 8088
    (1994), from memory). The PDPs are those of Si (``pdp_set``, default the Si
    default set) times one factor chosen so that biaxial (001) strain with a
    traction-free top (eps_zz = -2 C12/C11 eps_par, the alloy's own C11, C12
    by Vegard) gives d omega = b_SiSi eps_par, b_SiSi = -850 cm^-1 (published
    -800 to -900: Tsang et al. 1994; Pezzoli et al., J. Appl. Phys. 103, 093521
    (2008); from memory). Keeping Si's ratios p:q:r is an assumption (it sets
    the response to non-biaxial strain and the mode splitting).

    Parameters
    ----------
    x : float
        Ge fraction, 0 <= x < 1.
    pdp_set : str, optional
        The Si PDP set whose ratios are used.

    Returns
    -------
    RamanParameters
        ``material`` ``"SiGe"``, ``pdp_set`` ``"<Si set> scaled to b_SiSi"``.

    Raises
    ------
    MaterialError
        x outside [0, 1) or unknown set.
    """
    from mesastrain.physics.materials import get_material

    if x is None or not 0.0 <= float(x) < 1.0:
        raise MaterialError(f"the SiGe Si-Si Raman line needs a Ge fraction 0 <= x < 1, got {x!r}")
    x = float(x)
    table = device_parameters()["raman_alloy"]["SiGe"]
    si = raman_parameters(table["pdp_ratios_of"], pdp_set)
    w_si, c1 = parameter_entry(table["omega0_Si"], "raman_alloy.SiGe.omega0_Si")
    slope, c2 = parameter_entry(table["slope"], "raman_alloy.SiGe.slope")
    b, c3 = parameter_entry(table["b"], "raman_alloy.SiGe.b")
    omega0 = w_si + slope * x
    c = get_material("SiGe", x).constants
    b_si = 0.5 * omega0 * (si.p * (-2.0 * c["C12"] / c["C11"]) + 2.0 * si.q)
    s = b / b_si
    note = (f"phonon deformation potentials p, q, r of the alloy = {s:.4f} × those of Si "
            f"({pdp_words(si.pdp_set)}): the ratios of Si kept, scaled so that they give the "
            f"measured biaxial coefficient b of the Si-Si mode with the alloy's C11, C12 [D]")
    return RamanParameters(material="SiGe", pdp_set=f"{si.pdp_set} scaled to b_SiSi",
                           p=s * si.p, q=s * si.q, r=s * si.r, omega0=omega0,
                           sources=(c1, c2, c3, note) + si.sources[1:])


@dataclass(frozen=True)
class BiaxialLine:
    """A Raman line with a single biaxial stress coefficient (GaN E2(high)).

    Attributes
    ----------
    material, mode : str
    omega0 : float
        Unstrained line, cm^-1.
    per_gpa : float
        Shift per GPa of equi-biaxial basal-plane stress (tension positive),
        cm^-1 per GPa.
    sources : tuple of str
    """

    material: str
    mode: str
    omega0: float
    per_gpa: float
    sources: tuple = ()

    @property
    def pdp_set(self) -> str:
        """What stands in for a PDP set in listings: the line and its coefficient."""
        return f"{self.mode} biaxial coefficient"

    def shift(self, stress_crystal) -> np.ndarray:
        """Shift from the mean basal-plane stress in crystal axes (z = c).

        Parameters
        ----------
        stress_crystal : array (..., 3, 3)
            Stress in crystal axes, MPa.

        Returns
        -------
        array (...)
            cm^-1; per_gpa (sigma_11 + sigma_22) / 2 / 1000. sigma_33 and the
            shears are ignored (the coefficient is for biaxial c-plane stress).
        """
        s = np.asarray(stress_crystal, dtype=float)
        return self.per_gpa * 0.5 * (s[..., 0, 0] + s[..., 1, 1]) / 1000.0


def biaxial_line(material: str = "GaN") -> BiaxialLine:
    """The tabulated biaxial-coefficient line of a material (GaN E2(high)).

    Raises
    ------
    MaterialError
        No such line.
    """
    table = device_parameters().get("raman_biaxial", {})
    if material not in table:
        raise MaterialError(f"no biaxial Raman line for {material!r}; known: {', '.join(table)}")
    t = table[material]
    w0, c1 = parameter_entry(t["omega0"], f"raman_biaxial.{material}.omega0")
    k, c2 = parameter_entry(t["per_gpa"], f"raman_biaxial.{material}.per_gpa")
    return BiaxialLine(material, t["mode"], w0, k, (c1, c2))
