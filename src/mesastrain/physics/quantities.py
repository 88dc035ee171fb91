"""Names of the quantities in words, with their display units: one table for every output.

Pictures (colour-bar titles, plot axes), the report (column headers, captions)
and the terminal read the words and units of a field from here, so a quantity
is called the same everywhere: ``stress σxx (MPa)``, never ``stress_xx`` or
``piezo_n_x_long (%)``.

:func:`describe` turns a field name as the arrays carry it (``stress_xx``,
``von_mises``, ``band_gap_shift``, ``piezo_<channel>_long`` ...) into a
:class:`Quantity`: words, unit, the factor from the stored unit to the shown
one (band energies are stored in eV and shown in meV) and whether the
quantity is signed (a colour scale centred on zero).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["DEVICE_PARAMETERS", "PDP_SETS", "Quantity", "describe", "nice_limit",
           "parameter_words", "pdp_words", "valley_words"]


@dataclass(frozen=True)
class Quantity:
    """How a field is shown.

    Attributes
    ----------
    words : str
        Name in words, e.g. ``stress σxx``.
    unit : str
        Display unit (``MPa``, ``nm``, ``meV``, ``%``, ``cm⁻¹``); '' for a pure number.
    scale : float
        Shown value = stored value x scale.
    signed : bool
        Signed quantities get colour scales centred on zero.
    """

    words: str
    unit: str = ""
    scale: float = 1.0
    signed: bool = True

    @property
    def title(self) -> str:
        """Words and unit, e.g. ``stress σxx (MPa)``."""
        return f"{self.words} ({self.unit})" if self.unit else self.words


_GREEK = {"stress": "σ", "strain": "ε", "total_strain": "ε"}
_TENSOR_WORDS = {"stress": "stress", "strain": "elastic strain", "total_strain": "total strain",
                 "stress_crystal": "stress (crystal axes)",
                 "strain_crystal": "elastic strain (crystal axes)"}

#: Whole names: words, unit, scale, signed.
_NAMED = {
    "von_mises": Quantity("von Mises stress", "MPa", 1.0, False),
    "hydrostatic": Quantity("hydrostatic stress", "MPa"),
    "principal_max": Quantity("largest principal stress", "MPa"),
    "principal_min": Quantity("smallest principal stress", "MPa"),
    "raman_shift": Quantity("Raman shift Δω", "cm⁻¹"),
    "band_gap_shift": Quantity("band-gap change", "meV", 1000.0),
    "band_gap": Quantity("band gap", "eV", 1.0, False),
    "band_conduction_edge": Quantity("conduction-band edge", "eV"),
    "band_valence_edge": Quantity("valence-band edge", "eV"),
    "band_conduction_edge_common": Quantity("conduction-band edge, common scale", "eV"),
    "band_valence_edge_common": Quantity("valence-band edge, common scale", "eV"),
    "band_conduction_valleys": Quantity("lowest conduction valleys", "", 1.0, False),
}

_VALLEYS = {"delta_x": "Δ[100]", "delta_y": "Δ[010]", "delta_z": "Δ[001]",
            "L_111": "L[111]", "L_-111": "L[-111]", "L_1-11": "L[1-11]", "L_11-1": "L[11-1]",
            "L_m111": "L[-111]", "L_1m11": "L[1-11]", "L_11m1": "L[11-1]",
            "hh": "heavy hole", "lh": "light hole", "so": "split-off band",
            "gamma": "Γ", "gamma_c": "Γ"}

#: Phonon deformation-potential sets in words (``physics/data/device_parameters.toml``).
PDP_SETS = {"acc1990": "Anastassakis, Cantarero & Cardona 1990",
            "apbpc1970": "Anastassakis, Pinczuk, Burstein, Pollak & Cardona 1970",
            "crc1978": "Chandrasekhar, Renucci & Cardona 1978",
            "cbpc1972": "Cerdeira, Buchenauer, Pollak & Cardona 1972"}


def pdp_words(name: str) -> str:
    """A phonon deformation-potential set in words (``acc1990 scaled to b_SiSi`` included)."""
    base, _, rest = str(name).partition(" scaled to ")
    words = PDP_SETS.get(base, base)
    return words + (", scaled to the alloy's biaxial coefficient" if rest else "")


def nice_limit(v: float) -> float:
    """The smallest round number (1, 1.5, 2, 2.5, 3, 4, 5, 6, 8 x 10^k) not below ``v`` > 0.

    Colour-scale limits of every picture (1.0 for a value that is not positive and finite).
    """
    if not np.isfinite(v) or v <= 0:
        return 1.0
    mag = 10.0 ** np.floor(np.log10(v))
    for m in (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 8.0, 10.0):
        if m * mag >= v * (1 - 1e-9):
            return float(m * mag)
    return float(10 * mag)


def valley_words(names) -> str:
    """Conduction valleys in words, e.g. ``Δ[100], Δ[010]`` for ``["delta_x", "delta_y"]``."""
    if isinstance(names, str):
        names = [n for n in names.split("+") if n]
    return ", ".join(_VALLEYS.get(n, n) for n in names) or "-"


def describe(name: str, channel: str | None = None) -> Quantity:
    """The words and unit of a field name.

    Parameters
    ----------
    name : str
        ``stress_xx`` ... ``strain_xy``, ``displacement_x|y|z``, a name of
        the table (``von_mises``, ``raman_shift``, ``band_gap_shift`` ...),
        ``band_shift_<valley>``, ``piezo_<channel>_long|trans``.
    channel : str, optional
        Words for the channel of a ``piezo_`` field (e.g. ``n-type, current
        along [110]``); default: its name.

    Returns
    -------
    Quantity
        Unknown names get their words with the underscores spaced out, no unit.
    """
    if name in _NAMED:
        return _NAMED[name]
    head, _, comp = name.rpartition("_")
    if head in _TENSOR_WORDS and len(comp) == 2 and set(comp) <= set("xyz"):
        sym = _GREEK.get(head.replace("_crystal", ""), "σ")
        unit = "MPa" if head.startswith("stress") else ""
        return Quantity(f"{_TENSOR_WORDS[head]} {sym}{comp}", unit)
    if name.startswith("displacement_") and name[-1] in "xyz":
        return Quantity(f"displacement u{name[-1]}", "nm")
    if name.startswith("band_shift_"):
        key = name[len("band_shift_"):]
        return Quantity(f"shift of the {_VALLEYS.get(key, key)} edge", "meV", 1000.0)
    if name.startswith("piezo_") and name.endswith(("_long", "_trans")):
        ch, _, way = name[len("piezo_"):].rpartition("_")
        along = "along the current" if way == "long" else "across the current"
        return Quantity(f"resistivity change Δρ/ρ {along}, channel {channel or ch}", "%")
    return Quantity(name.replace("_", " "), "")


#: Device parameters in words and units, by the last part of their dotted key
#: (``bands.Si.a_v`` -> ``a_v``); the table of ``physics/data/device_parameters.toml``.
DEVICE_PARAMETERS = {
    "a_v": ("hydrostatic potential of the average valence band a_v", "eV"),
    "b": ("tetragonal shear potential b", "eV"),
    "d": ("rhombohedral shear potential d", "eV"),
    "a_c": ("hydrostatic potential of the Γ conduction band a_c", "eV"),
    "delta_so": ("spin-orbit splitting Δ0", "eV"),
    "xi_u_delta": ("uniaxial potential Ξu of the Δ valleys", "eV"),
    "xi_u_L": ("uniaxial potential Ξu of the L valleys", "eV"),
    "hydro_delta": ("hydrostatic potential of the Δ valleys (Ξd + Ξu/3 − a_v)", "eV"),
    "hydro_L": ("hydrostatic potential of the L valleys (Ξd + Ξu/3 − a_v)", "eV"),
    "e_v_av": ("average valence band on the common scale", "eV"),
    "eg_delta": ("gap to the Δ valleys", "eV"),
    "eg_L": ("gap to the L valleys", "eV"),
    "eg_gamma": ("gap to the Γ valley", "eV"),
    "pi11": ("piezoresistance coefficient π11", "10⁻¹¹/Pa"),
    "pi12": ("piezoresistance coefficient π12", "10⁻¹¹/Pa"),
    "pi44": ("piezoresistance coefficient π44", "10⁻¹¹/Pa"),
    "omega0": ("optical-phonon frequency ω0", "cm⁻¹"),
    "omega0_Si": ("Si-Si mode of pure Si ω0", "cm⁻¹"),
    "slope": ("Si-Si mode change per Ge fraction", "cm⁻¹"),
    "p": ("phonon deformation potential p", "ω0²"),
    "q": ("phonon deformation potential q", "ω0²"),
    "r": ("phonon deformation potential r", "ω0²"),
    "per_gpa": ("E2(high) shift per GPa of biaxial stress", "cm⁻¹/GPa"),
}

_TABLE_WORDS = {"bands": "band edges", "bands_bowing": "band bowing", "piezo": "piezoresistance",
                "raman": "Raman", "raman_alloy": "Raman (alloy)",
                "raman_biaxial": "Raman (biaxial)"}


def parameter_words(key: str) -> tuple[str, str, str]:
    """A dotted device-parameter key in words.

    Parameters
    ----------
    key : str
        E.g. ``bands.Si.a_v``, ``piezo.n-Si.pi11``, ``raman.Si.pdp.acc1990.p``.

    Returns
    -------
    group, words, unit : str
        E.g. ``("band edges, Si", "hydrostatic potential ... a_v", "eV")``.
    """
    parts = key.split(".")
    last = parts[-1]
    words, unit = DEVICE_PARAMETERS.get(last, (last.replace("_", " "), ""))
    table = _TABLE_WORDS.get(parts[0], parts[0])
    rest = [f"set of {PDP_SETS[p]}" if p in PDP_SETS else p for p in parts[1:-1] if p != "pdp"]
    if parts[0] == "raman_alloy" and last == "b":
        words, unit = "biaxial strain coefficient of the Si-Si mode b", "cm⁻¹"
    if parts[0] == "bands_bowing":
        words, unit = f"bowing of {DEVICE_PARAMETERS.get(last, (last, ''))[0]}", unit
    return ", ".join([table] + rest), words, unit
