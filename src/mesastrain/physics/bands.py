"""Band-edge shifts of cubic semiconductors under strain (deformation potentials).

All functions take strain tensors of shape ``(..., 3, 3)`` written in the
**crystal** cube axes (rotate sample-frame fields first, e.g. with
``mesastrain.physics.crystal.Frame.to_crystal``) and work on whole stacks at once.

Energy convention
-----------------
Energies are electron energies in eV (up = higher electron energy). Every
returned shift is the strained energy of a band minus the energy of the SAME
band in the unstrained crystal, on an absolute scale: the hydrostatic part
moves the average valence band by ``a_v tr(eps)`` (Van de Walle's sign, see
``data/device_parameters.toml``). Differences between a conduction and a
valence shift are gap changes and depend only on the tabulated relative
potentials (``Xi_d + Xi_u/3 - a_v``, ``Xi_u``, ``b``, ``d``, ``a_c - a_v``),
not on the less certain absolute ``a_v``.

Models
------
Delta (X) valleys of Si, Ge, SiGe, valley along axis i
    dE_i = Xi_d tr(eps) + Xi_u eps_ii   (Herring & Vogt 1956 form),
    with Xi_d = (Xi_d + Xi_u/3 - a_v) + a_v - Xi_u/3 from Van de Walle (1989).
L valleys, valley along n = <111>/sqrt(3)
    dE_n = Xi_d^L tr(eps) + Xi_u^L n.eps.n.
Valence band (heavy hole, light hole, split-off)
    The 6x6 Bir-Pikus Hamiltonian with spin-orbit coupling, built in the
    p-orbital basis (X, Y, Z) x spin::

        H_orb = (a_v - b) tr(eps) 1 + 3 b diag(eps) + sqrt(3) d offdiag(eps)
        H     = H_orb (x) 1_spin + (Delta_0 / 3) L.sigma

    i.e. the Kleiner-Roth constants l = a_v + 2b, m = a_v - b, n = sqrt(3) d
    (a_v = (l + 2m)/3, b = (l - m)/3, d = n/sqrt(3), tensor shear strain).
    Zero of H = average valence band; unstrained edges are +Delta_0/3 (hh, lh)
    and -2 Delta_0/3 (so). The six eigenvalues (three Kramers pairs) are
    found with ``numpy.linalg.eigvalsh``. The keys ``hh``, ``lh``, ``so`` name
    the pairs in ENERGY order (top, middle, bottom): under biaxial compression
    in (001) the top pair is heavy-hole-like, under biaxial tension it is
    light-hole-like along [001].
Gamma conduction band of zinc blende
    dE = a_c tr(eps).

SiGe
    Si(1-x)Ge(x) parameters are linear interpolations in x between Si and Ge
    (every entry, including Delta_0 and the unstrained E_v,av offset).
"""

from __future__ import annotations

import functools
import importlib.resources
import tomllib
from dataclasses import dataclass, replace

import numpy as np

from mesastrain.errors import MaterialError, MesastrainError

__all__ = [
    "BandParameters",
    "BandSummary",
    "L_DIRECTIONS",
    "band_edge_shifts",
    "band_parameters",
    "band_summary",
    "device_parameters",
    "has_second_source",
    "parameter_entry",
    "valence_hamiltonian",
]

#: The four L-valley axes <111> (one per +/- pair), keyed by their names.
L_DIRECTIONS = {
    "L_111": (1, 1, 1),
    "L_-111": (-1, 1, 1),
    "L_1-11": (1, -1, 1),
    "L_11-1": (1, 1, -1),
}
_DELTA_KEYS = ("delta_x", "delta_y", "delta_z")
_VALENCE_KEYS = ("hh", "lh", "so")


# --------------------------------------------------------------------------
# parameter file
# --------------------------------------------------------------------------
@functools.lru_cache(maxsize=1)
def device_parameters() -> dict:
    """The parsed ``data/device_parameters.toml`` (read once, cached).

    Returns
    -------
    dict
        Top-level tables ``sources``, ``bands``, ``piezo``, ``raman``. Do not
        modify it: it is shared between callers.
    """
    text = importlib.resources.files("mesastrain.physics").joinpath(
        "data/device_parameters.toml").read_text("utf-8")
    return tomllib.loads(text)


def parameter_entry(entry: dict, where: str) -> tuple[float, str]:
    """Value and citation line of one ``{value, source, flag}`` entry.

    Parameters
    ----------
    entry : dict
        An inline table of ``device_parameters.toml``.
    where : str
        Dotted key of the entry, used in the citation line and in errors.

    Returns
    -------
    value : float
    citation : str
        ``"<where>: <source text> [<flag>]"``.
    """
    try:
        value = float(entry["value"])
        src = device_parameters()["sources"][entry["source"]]
        flag = entry["flag"]
    except (KeyError, TypeError, ValueError):
        raise MaterialError(
            f"device_parameters.toml: {where} must be {{value, source, flag}} with a "
            f"source named in [sources]") from None
    return value, f"{where}: {src} [{flag}]"


# --------------------------------------------------------------------------
# band parameters
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class BandParameters:
    """Deformation potentials and unstrained edges of one material (eV).

    Attributes
    ----------
    name : str
        ``"Si"``, ``"Ge"``, ``"SiGe"``, ``"GaAs"``, ...
    x : float or None
        Ge fraction for SiGe, None otherwise.
    structure : str
        ``"diamond"`` or ``"zincblende"``.
    a_v, b, d : float
        Valence-band hydrostatic (absolute, dE_v,av = a_v tr) and shear
        potentials, eV.
    delta_so : float
        Spin-orbit splitting Delta_0, eV.
    a_c : float or None
        Gamma conduction-band hydrostatic potential (zinc blende), eV.
    xi_u_delta, hydro_delta, xi_u_L, hydro_L : float or None
        Delta- and L-valley Xi_u and Xi_d + Xi_u/3 - a_v (diamond), eV.
    e_v_av : float or None
        Unstrained average valence band on the common scale ``scale``, eV.
    eg_delta, eg_L, eg_gamma : float or None
        Unstrained conduction-valley edges above the unstrained valence-band
        maximum, eV (near 300 K).
    scale : str
        Name of the common energy scale of ``e_v_av``.
    sources : tuple of str
        One citation line per number, with its flag.
    """

    name: str
    x: float | None
    structure: str
    a_v: float
    b: float
    d: float
    delta_so: float
    a_c: float | None = None
    xi_u_delta: float | None = None
    hydro_delta: float | None = None
    xi_u_L: float | None = None
    hydro_L: float | None = None
    e_v_av: float | None = None
    eg_delta: float | None = None
    eg_L: float | None = None
    eg_gamma: float | None = None
    scale: str = "none"
    sources: tuple = ()

    @property
    def xi_d_delta(self) -> float | None:
        """Absolute Delta-valley dilation potential Xi_d, eV."""
        if self.hydro_delta is None:
            return None
        return self.hydro_delta - self.xi_u_delta / 3.0 + self.a_v

    @property
    def xi_d_L(self) -> float | None:
        """Absolute L-valley dilation potential Xi_d^L, eV."""
        if self.hydro_L is None:
            return None
        return self.hydro_L - self.xi_u_L / 3.0 + self.a_v


_NUMERIC = ("a_v", "b", "d", "delta_so", "a_c", "xi_u_delta", "hydro_delta", "xi_u_L",
            "hydro_L", "e_v_av", "eg_delta", "eg_L", "eg_gamma")


@functools.cache
def _tabulated(name: str, second: bool = False) -> BandParameters:
    table = device_parameters()["bands"][name]
    values, cites = {}, []
    for key in _NUMERIC:
        if key in table:
            entry = table[key]
            if second and isinstance(entry.get("second"), dict):
                entry = entry["second"]
            values[key], line = parameter_entry(entry, f"bands.{name}.{key}")
            cites.append(line)
    for key in ("a_v", "b", "d", "delta_so"):
        if key not in values:
            raise MaterialError(f"device_parameters.toml: bands.{name} needs {key}")
    return BandParameters(name=name, x=None, structure=table["structure"],
                          scale=table.get("scale", "none"), sources=tuple(cites), **values)


def has_second_source(material: str) -> bool:
    """True when some band entry of a material (SiGe: of Si or Ge) gives a ``second`` value."""
    names = ("Si", "Ge") if material == "SiGe" else (material,)
    bands = device_parameters()["bands"]
    return any(isinstance(e, dict) and isinstance(e.get("second"), dict)
               for n in names if n in bands for e in bands[n].values())


def band_parameters(material: str, x: float | None = None,
                    second: bool = False) -> BandParameters:
    """Band deformation potentials of a material, from ``device_parameters.toml``.

    Parameters
    ----------
    material : str
        ``"Si"``, ``"Ge"``, ``"SiGe"`` or a zinc-blende binary with tabulated
        Gamma-valley data (``"GaAs"``, ``"AlAs"``, ``"InAs"``, ``"InP"``, ``"GaP"``).
    x : float, optional
        Ge fraction of Si(1-x)Ge(x), 0 <= x <= 1; required for ``"SiGe"`` and
        not allowed otherwise.
    second : bool, default: False
        Take each entry's ``second`` published value where it gives one (the
        material-data scatter of the deformation potentials).

    Returns
    -------
    BandParameters
        For SiGe every number is the linear interpolation between Si and Ge, plus the
        quadratic bowing ``c x (1 - x)`` of the entries listed in ``[bands_bowing.SiGe]``
        (today E_v,av, fitted to Rieger & Vogl 1993).

    Raises
    ------
    MaterialError
        Unknown material, or a missing / out-of-range / unexpected ``x``.
    """
    known = list(device_parameters()["bands"])
    if material == "SiGe":
        try:
            xf = float(x)
        except (TypeError, ValueError):
            xf = float("nan")
        if not 0.0 <= xf <= 1.0:
            raise MaterialError(f"SiGe needs the Ge fraction x with 0 <= x <= 1, got x = {x!r}")
        x = xf
        si, ge = _tabulated("Si", second), _tabulated("Ge", second)
        mixed = {k: (1.0 - x) * getattr(si, k) + x * getattr(ge, k)
                 for k in _NUMERIC if getattr(si, k) is not None and getattr(ge, k) is not None}
        bowed = []
        for key, entry in device_parameters().get("bands_bowing", {}).get("SiGe", {}).items():
            c, line = parameter_entry(entry, f"bands_bowing.SiGe.{key}")
            mixed[key] += c * x * (1.0 - x)
            bowed.append(line)
        return replace(si, name="SiGe", x=x, sources=si.sources + ge.sources + tuple(bowed) + (
            "SiGe: every other entry linear in x between Si and Ge (common practice for the "
            "deformation potentials; rough for the gaps)",), **mixed)
    if material not in known:
        raise MaterialError(f"no band parameters for {material!r}; known: "
                            f"{', '.join(known + ['SiGe'])}")
    if x is not None:
        raise MaterialError(f"{material} is not an alloy: give no x (got x = {x!r})")
    return _tabulated(material, second)


# --------------------------------------------------------------------------
# valence band: 6x6 Bir-Pikus Hamiltonian
# --------------------------------------------------------------------------
def _spin_orbit_matrix() -> np.ndarray:
    """L.sigma in the basis (X, Y, Z) x (up, down), index 2*orbital + spin."""
    lk = np.zeros((3, 3, 3), dtype=complex)          # (L_k)_ij = -i eps_kij
    for k, i, j in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
        lk[k, i, j] = -1j
        lk[k, j, i] = 1j
    pauli = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]], dtype=complex)
    return sum(np.kron(lk[k], pauli[k]) for k in range(3))


_L_DOT_SIGMA = _spin_orbit_matrix()


def _as_strain(strain) -> np.ndarray:
    eps = np.asarray(strain, dtype=float)
    if eps.ndim < 2 or eps.shape[-2:] != (3, 3):
        raise MesastrainError(f"strain must have shape (..., 3, 3), got {eps.shape}")
    if not np.all(np.isfinite(eps)):
        raise MesastrainError("strain contains NaN or Inf; only finite strains are allowed")
    asym = np.abs(eps - np.swapaxes(eps, -1, -2))
    if asym.size and asym.max() > 1e-9 * max(1.0, float(np.abs(eps).max())):
        raise MesastrainError("strain tensors must be symmetric (eps_ij = eps_ji)")
    return 0.5 * (eps + np.swapaxes(eps, -1, -2))


def valence_hamiltonian(strain_crystal, a_v: float, b: float, d: float,
                        delta_so: float) -> np.ndarray:
    """The 6x6 Bir-Pikus valence-band Hamiltonian at k = 0 (eV).

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Strain tensors in crystal axes (tensor shear).
    a_v, b, d : float
        Hydrostatic (dE_v,av = a_v tr) and shear deformation potentials, eV.
    delta_so : float
        Spin-orbit splitting Delta_0, eV.

    Returns
    -------
    array (..., 6, 6), complex
        Hermitian matrices in the basis (X, Y, Z) x (up, down); zero energy is
        the unstrained average valence band.
    """
    eps = _as_strain(strain_crystal)
    tr = np.trace(eps, axis1=-2, axis2=-1)
    diag = np.eye(3)
    h_orb = (np.sqrt(3.0) * d) * eps * (1.0 - diag) + (3.0 * b) * eps * diag
    h_orb = h_orb + ((a_v - b) * tr)[..., None, None] * diag
    h = np.zeros(eps.shape[:-2] + (3, 2, 3, 2))                 # h_orb (x) identity(spin)
    h[..., :, 0, :, 0] = h_orb
    h[..., :, 1, :, 1] = h_orb
    h = h.reshape(eps.shape[:-2] + (6, 6))
    return h + (delta_so / 3.0) * _L_DOT_SIGMA


def valence_levels(strain_crystal, a_v: float, b: float, d: float,
                   delta_so: float) -> np.ndarray:
    """The three Kramers-degenerate eigenvalues of :func:`valence_hamiltonian`, ascending (eV).

    Closed form instead of a 6x6 eigensolver per point. With H = h (x) 1 + s L.sigma
    (h the 3x3 orbital strain block, s = Delta_0 / 3) and (L.sigma)^2 = 2 - L.sigma for
    l = 1, the power sums of the three distinct levels mu_k (each twice in H) are, for
    the traceless part h' = h - m 1 (m = tr h / 3):
    sum (mu_k - m)^2 = tr h'^2 + 6 s^2 and sum (mu_k - m)^3 = tr h'^3 - 6 s^3.
    Three real roots with zero sum and these moments are m + 2 r cos(theta + 2 pi k / 3),
    r = sqrt(S2 / 6), cos 3 theta = S3 / (6 r^3) (the trigonometric solution of the
    cubic, from memory). Agrees with ``numpy.linalg.eigvalsh`` of the 6x6 matrix to
    about 1e-9 eV (tests/unit/physics/test_bands.py).

    Returns
    -------
    array (..., 3)
        Split-off, light-hole, heavy-hole levels at k = 0 (ascending).
    """
    eps = _as_strain(strain_crystal)
    tr = np.trace(eps, axis1=-2, axis2=-1)
    diag = np.eye(3)
    h = (np.sqrt(3.0) * d) * eps * (1.0 - diag) + (3.0 * b) * eps * diag
    h = h + ((a_v - b) * tr)[..., None, None] * diag
    m = np.trace(h, axis1=-2, axis2=-1) / 3.0
    hp = h - m[..., None, None] * diag
    s = delta_so / 3.0
    s2 = np.einsum("...ij,...ji->...", hp, hp) + 6.0 * s * s
    s3 = np.einsum("...ij,...jk,...ki->...", hp, hp, hp, optimize=True) - 6.0 * s ** 3
    r = np.sqrt(np.maximum(s2, 0.0) / 6.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.where(r > 0, s3 / (6.0 * r ** 3), 1.0)
    theta = np.arccos(np.clip(c, -1.0, 1.0)) / 3.0
    k = np.array([1.0, 2.0, 0.0]) * (2.0 * np.pi / 3.0)        # ascending: k = 1, 2, 0
    return m[..., None] + 2.0 * r[..., None] * np.cos(theta[..., None] + k)


def _valence_shifts(eps: np.ndarray, p: BandParameters) -> dict:
    levels = valence_levels(eps, p.a_v, p.b, p.d, p.delta_so)
    top = p.delta_so / 3.0
    return {"hh": levels[..., 2] - top,
            "lh": levels[..., 1] - top,
            "so": levels[..., 0] + 2.0 * p.delta_so / 3.0}


# --------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------
def band_edge_shifts(strain_crystal, params: BandParameters) -> dict[str, np.ndarray]:
    """Strain shifts of the band edges (eV), vectorised over a stack of strains.

    Parameters
    ----------
    strain_crystal : array (..., 3, 3)
        Symmetric strain tensors in the crystal cube axes (dimensionless).
    params : BandParameters
        From :func:`band_parameters`.

    Returns
    -------
    dict of str -> array (...)
        Shift of each band edge from its unstrained energy, eV, absolute
        (hydrostatic a_v included; see the module docstring):

        - diamond (Si, Ge, SiGe): ``delta_x``, ``delta_y``, ``delta_z`` (Delta
          valley pairs along [100], [010], [001]), ``L_111``, ``L_-111``,
          ``L_1-11``, ``L_11-1``;
        - zinc blende: ``gamma_c`` (Gamma conduction band);
        - all: ``hh``, ``lh``, ``so``, the valence Kramers pairs in energy order
          (top, middle, bottom), each from its own unstrained edge.

    Raises
    ------
    MesastrainError
        Wrong shape, non-finite or non-symmetric strain.
    """
    eps = _as_strain(strain_crystal)
    tr = np.trace(eps, axis1=-2, axis2=-1)
    out = {}
    if params.xi_u_delta is not None:
        for i, key in enumerate(_DELTA_KEYS):
            out[key] = params.xi_d_delta * tr + params.xi_u_delta * eps[..., i, i]
    if params.xi_u_L is not None:
        for key, n in L_DIRECTIONS.items():
            u = np.asarray(n, dtype=float) / np.sqrt(3.0)
            out[key] = params.xi_d_L * tr + params.xi_u_L * ((eps @ u) @ u)
    if params.a_c is not None:
        out["gamma_c"] = params.a_c * tr
    out.update(_valence_shifts(eps, params))
    return out


@dataclass(frozen=True)
class BandSummary:
    """Lowest conduction and highest valence edge of strained material (eV).

    Attributes
    ----------
    conduction_edge : array (...)
        Lowest modelled conduction edge, eV above the UNSTRAINED valence-band
        maximum of the same material.
    conduction_valley : array (...) of int
        Index into ``valley_names`` of the valley that forms it.
    valley_names : tuple of str
        Conduction keys that were compared.
    valence_edge : array (...)
        Highest valence edge (the ``hh`` key), same reference.
    gap : array (...)
        ``conduction_edge - valence_edge``.
    conduction_edge_common, valence_edge_common : array (...) or None
        The same edges on the common scale ``scale`` (Si/Ge: zero = E_v,av of
        unstrained Si), None where the material has no ``e_v_av``.
    scale : str
        Name of the common scale.
    """

    conduction_edge: np.ndarray
    conduction_valley: np.ndarray
    valley_names: tuple
    valence_edge: np.ndarray
    gap: np.ndarray
    conduction_edge_common: np.ndarray | None
    valence_edge_common: np.ndarray | None
    scale: str


def _unstrained_edge(key: str, params: BandParameters) -> float | None:
    if key.startswith("delta_"):
        return params.eg_delta
    if key.startswith("L_"):
        return params.eg_L
    if key == "gamma_c":
        return params.eg_gamma
    return None


def band_summary(shifts: dict, params: BandParameters) -> BandSummary:
    """Lowest conduction edge and highest valence edge from band shifts.

    Parameters
    ----------
    shifts : dict
        Output of :func:`band_edge_shifts` for ``params``.
    params : BandParameters
        Supplies the unstrained valley edges ``eg_*`` (eV, near 300 K) and the
        common-scale offset ``e_v_av``.

    Returns
    -------
    BandSummary
        Only valleys with tabulated data are compared (Si/Ge: Delta and L;
        zinc blende: Gamma only, so the edge of indirect AlAs and GaP is their
        Gamma edge).

    Raises
    ------
    MesastrainError
        ``shifts`` lacks ``hh`` or has no conduction key with an unstrained edge.
    """
    if "hh" not in shifts:
        raise MesastrainError("shifts must come from band_edge_shifts (no 'hh' key)")
    names = tuple(k for k in shifts if k not in _VALENCE_KEYS
                  and _unstrained_edge(k, params) is not None)
    if not names:
        raise MesastrainError(f"no conduction valley with a tabulated unstrained edge for "
                              f"{params.name}; keys given: {', '.join(shifts)}")
    edges = np.stack([_unstrained_edge(k, params) + np.asarray(shifts[k]) for k in names], axis=-1)
    valley = np.argmin(edges, axis=-1)
    ec = np.min(edges, axis=-1)
    ev = np.asarray(shifts["hh"])
    if params.e_v_av is not None:
        vbm = params.e_v_av + params.delta_so / 3.0
        ec_common, ev_common = ec + vbm, ev + vbm
    else:
        ec_common = ev_common = None
    return BandSummary(conduction_edge=ec, conduction_valley=valley, valley_names=names,
                       valence_edge=ev, gap=ec - ev, conduction_edge_common=ec_common,
                       valence_edge_common=ev_common, scale=params.scale)
