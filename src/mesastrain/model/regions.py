"""Resolved materials, crystal frames and eigenstrains of every region of a stack.

For each region (the substrate, then each grown layer) this gives the
material, its sample frame, its stiffness rotated into the sample frame and
its eigenstrain: the stress-free strain relative to the substrate's lattice.
A layer is coherent with the actual in-plane lattice of the layer below (a
chain from the substrate up), moved toward its own lattice by its ``relaxed``
fraction.

Thermal mismatch
----------------
With a ``[thermal]`` table the eigenstrain gains a thermal part. The tabulated
lattice constants hold at :data:`LATTICE_TABLE_TEMPERATURE`. Write
D_i(T) = int_{300 K}^{T} (alpha_i - alpha_substrate) dT, a tensor in the sample
frame with each material's alphas rotated from its crystal axes
(:func:`mesastrain.physics.deposited.thermal_mismatch_eigenstrain`). The in-plane
lattice each layer takes is set at its own deposition (growth) temperature T_i
(coherent with the layer below, moved toward its own lattice by ``relaxed``;
a deposited, non-epitaxial film counts as r = 1) and afterwards follows the
substrate. To first order the stress-free strain relative to the substrate at
the final temperature then gains

    D_i(T_final) - q_i,   q_i = (1 - r_i) q_(i-1) + r_i D_i(T_i),  q_0 = 0,

so a pseudomorphic layer (r = 0) keeps the lattice mismatch of the final
temperature, and a fully relaxed single layer gains
int_{T_growth}^{T_final} (alpha_layer - alpha_substrate) dT (Ge on Si cooled
from growth: about -0.23 %, i.e. about +0.23 % tensile elastic strain).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.case.names import SUBSTRATE, region_names
from mesastrain.case.types import Case
from mesastrain.errors import CaseError, MaterialError
from mesastrain.physics.crystal import INDEX_SYSTEMS, Frame, miscut_rotation, sample_frame
from mesastrain.physics.deposited import deposited_film_eigenstrain, thermal_mismatch_eigenstrain
from mesastrain.physics.materials import Material

#: Temperature at which the materials table gives lattice constants, K.
LATTICE_TABLE_TEMPERATURE = 300.0

@dataclass(frozen=True)
class LayerModel:
    """One material region of the stack, resolved.

    Attributes
    ----------
    index : int
        0 for the substrate, i for the i-th grown layer.
    material : Material
    frame : Frame
        Sample frame in this layer's crystal axes.
    z_bottom, z_top : float
        nm.
    relaxed : float
    lattice_in_plane : tuple
        The layer's actual lattice parameters (a, c) in the blanket state,
        Angstrom (c is None for cubic).
    eigenstrain_crystal : ndarray (3, 3)
        Stress-free strain relative to the reference lattice, crystal axes.
    misfit : float
        In-plane lattice strain of the blanket layer, (a_eff - a)/a.
    stiffness_sample : ndarray (6, 6)
        GPa.
    eigenstrain_sample : ndarray (3, 3)
        Total eigenstrain (lattice plus thermal) in the sample frame.
    thermal_eigenstrain : ndarray (3, 3) or None
        The thermal part of ``eigenstrain_crystal`` (crystal axes); None when
        the case has no ``[thermal]`` table.
    epitaxial : bool
        False for a deposited film (no lattice mismatch).
    builtin_stress : float or None
        The layer's built-in blanket stress, MPa (tensile positive), if given.
    deposition_temperature : float or None
        K; None without a ``[thermal]`` table.
    liner : int
        0 for the substrate and the grown layers; k for the k-th ``[[liner]]``
        (then ``z_bottom``, ``z_top`` are the liner's extent over the feature top).
    name : str
        The region's name in every output: ``"substrate"``, the layer's or the liner's
        ``name`` (:mod:`mesastrain.case.names`). The one source of region names downstream.
    """

    index: int
    material: Material
    frame: Frame
    z_bottom: float
    z_top: float
    relaxed: float
    lattice_in_plane: tuple
    eigenstrain_crystal: np.ndarray
    misfit: float
    stiffness_sample: np.ndarray
    eigenstrain_sample: np.ndarray
    thermal_eigenstrain: np.ndarray | None = None
    epitaxial: bool = True
    builtin_stress: float | None = None
    deposition_temperature: float | None = None
    liner: int = 0
    name: str = ""

    def __post_init__(self):
        if not self.name:       # built by hand (tests, the API): the default names
            object.__setattr__(self, "name", SUBSTRATE if self.index == 0 else
                               f"liner {self.liner}" if self.liner else f"layer {self.index}")


def stack_of(layers: list) -> list:
    """The substrate and the grown layers of a region list (the liners left out)."""
    return [lm for lm in layers if not lm.liner]


def _reference_lattice(below: tuple, below_system: str, mat: Material, key: str) -> tuple:
    """Lattice (a, c) that ``mat`` would take if fully coherent with ``below``.

    Same structure: the lattice below itself. Hexagonal on a cubic (111)
    surface: a_hex matches the surface net spacing a_cubic/sqrt(2); cubic on
    hexagonal: a_cubic/sqrt(2) matches a_hex. Hexagonal on trigonal (GaN or
    AlN on c-plane sapphire, rotated 30 degrees in-plane): a_hex matches
    a_trig/sqrt(3), the oxygen sublattice spacing. The c of a hexagonal layer on
    another structure scales with a (only the in-plane part produces stress).
    """
    a_b, c_b = below
    if mat.system == below_system and mat.system in ("cubic", "hexagonal", "trigonal"):
        return (a_b, c_b if mat.system != "cubic" else None)
    if mat.system == "hexagonal" and below_system in ("cubic", "trigonal"):
        a_ref = a_b / (np.sqrt(2.0) if below_system == "cubic" else np.sqrt(3.0))
        return (a_ref, mat.c * a_ref / mat.a)
    if mat.system == "cubic" and below_system == "hexagonal":
        return (a_b * np.sqrt(2.0), None)
    raise CaseError(key, f"no coherent epitaxial relationship is known for {mat.label} "
                         f"({mat.system}) on a {below_system} lattice; set relaxed = 1 (its "
                         f"stress then comes from the thermal history) or epitaxial = false")


def _frame(mat: Material, normal, x_axis) -> Frame:
    return sample_frame(normal, x_axis, INDEX_SYSTEMS[mat.system], mat.c_over_a)


def build_layers(case: Case, material=None) -> list[LayerModel]:
    """Resolve materials, orientations and eigenstrains of every region.

    Parameters
    ----------
    case : Case
    material : callable(name, x) -> Material, optional
        Resolves the material names (default ``case.material``); the material-data
        scatter passes one that returns materials with varied constants.

    Returns
    -------
    list of LayerModel
        The substrate, then each layer bottom to top.
    """
    sub = case.substrate
    resolve = case.material if material is None else material
    try:
        smat = resolve(sub.material, sub.x)
    except Exception as exc:  # validated already; keep a clear message anyway
        raise CaseError("substrate.material", str(exc)) from exc
    sframe = _frame(smat, sub.normal, sub.x_axis)
    tilt = None
    if sub.miscut is not None:
        # a vicinal wafer: every frame of the stack turns by the same rotation
        tilt = miscut_rotation(sframe, sub.miscut[0], sub.miscut[1], smat.c_over_a)
        sframe = sframe.tilted(tilt, sub.miscut[0])
    out = [LayerModel(0, smat, sframe, -sub.thickness, 0.0, 1.0, (smat.a, smat.c),
                      np.zeros((3, 3)), 0.0, sframe.stiffness_to_sample(smat.stiffness),
                      np.zeros((3, 3)))]
    below_lat, below_sys = (smat.a, smat.c), smat.system
    q_below = np.zeros((3, 3))    # thermal lattice shift of the layer below (sample frame)
    taken: dict = {}
    names = region_names("layer", [(lay.name, lay.material) for lay in case.layers], taken)
    liner_names = region_names("liner", [(lin.name, lin.material) for lin in case.liners], taken)
    z = 0.0
    for i, lay in enumerate(case.layers, start=1):
        key = f"layer[{i - 1}]"
        mat = resolve(lay.material, lay.x)
        if lay.normal is not None:
            frame = _frame(mat, lay.normal, lay.x_axis)
        else:
            frame = _frame(mat, sub.normal, sub.x_axis)
        if tilt is not None:
            frame = frame.tilted(tilt, sub.miscut[0])
        epitaxial = mat.has_lattice if lay.epitaxial is None else bool(lay.epitaxial)
        r = lay.relaxed if epitaxial else 1.0
        if not epitaxial:
            a_eff, c_eff, eig_c = mat.a, mat.c, np.zeros((3, 3))
        elif r >= 1.0:      # fully relaxed: its own lattice, whatever lies below
            a_eff, c_eff, eig_c = mat.a, mat.c, np.zeros((3, 3))
        else:
            a_ref, c_ref = _reference_lattice(below_lat, below_sys, mat, f"{key}.relaxed")
            a_eff = a_ref + r * (mat.a - a_ref)
            e_a = (mat.a - a_eff) / mat.a
            if mat.c is not None and mat.system != "cubic":
                c_eff = c_ref + r * (mat.c - c_ref)
                eig_c = np.diag([e_a, e_a, (mat.c - c_eff) / mat.c])
            else:
                c_eff = None
                eig_c = e_a * np.eye(3)
        stiff = frame.stiffness_to_sample(mat.stiffness)
        eig_s = frame.to_sample(eig_c)
        thermal_c = None
        if case.thermal is not None:
            th_s, q_below = _thermal_part(case, lay, key, mat, frame, smat, sframe, r, q_below)
            thermal_c = frame.to_crystal(th_s)
            eig_s = eig_s + th_s
        if lay.stress is not None:
            eig_s = eig_s + deposited_film_eigenstrain(stiff, lay.stress)
        misfit = 0.0 if a_eff is None else (a_eff - mat.a) / mat.a
        out.append(LayerModel(i, mat, frame, z, z + lay.thickness, r, (a_eff, c_eff),
                              frame.to_crystal(eig_s), misfit, stiff, eig_s, thermal_c,
                              epitaxial=epitaxial, builtin_stress=lay.stress,
                              deposition_temperature=_deposition_temperature(case, lay),
                              name=names[i - 1]))
        z += lay.thickness
        below_lat, below_sys = (a_eff, c_eff), mat.system
    for k, lin in enumerate(case.liners, start=1):
        out.append(_liner_model(case, lin, k, len(out), z, smat, sframe, tilt, resolve,
                                liner_names[k - 1]))
        z += lin.thickness
    return out


def liner_eigenstrain(stiffness_sample: np.ndarray, stress: float) -> np.ndarray:
    """Eigenstrain that gives a conformal liner its built-in stress, sample frame.

    The in-plane part is that of a deposited layer
    (:func:`mesastrain.physics.deposited.deposited_film_eigenstrain`: a blanket
    film carries exactly ``stress`` equi-biaxially); the zz part is the mean of
    xx and yy. For an isotropic liner this is the dilatation e I with
    e = -stress (1 - nu) / E: the same biaxial stress on the top and the floor,
    and in the plane of every sidewall whatever its angle (the out-of-plane
    part of an eigenstrain does not stress a film with a free surface).
    """
    eps0 = deposited_film_eigenstrain(stiffness_sample, stress)
    eps0[2, 2] = 0.5 * (eps0[0, 0] + eps0[1, 1])
    return eps0


def _liner_model(case: Case, lin, k: int, index: int, z: float, smat: Material,
                 sframe: Frame, tilt, resolve=None, name: str = "") -> LayerModel:
    """The region of the k-th liner: a deposited film (no lattice mismatch)."""
    key = f"liner[{k - 1}]"
    sub = case.substrate
    mat = (case.material if resolve is None else resolve)(lin.material, None)
    if INDEX_SYSTEMS[mat.system] == INDEX_SYSTEMS[smat.system]:
        frame = _frame(mat, sub.normal, sub.x_axis)
    else:       # a crystal of another system: a textured film, its c (or [001]) along z
        frame = _frame(mat, (0, 0, 1), (1, 0, 0))
    if tilt is not None:
        frame = frame.tilted(tilt, sub.miscut[0])
    stiff = frame.stiffness_to_sample(mat.stiffness)
    eig_s = np.zeros((3, 3))
    thermal_c = None
    if case.thermal is not None:
        th_s, _ = _thermal_part(case, lin, key, mat, frame, smat, sframe, 1.0, np.zeros((3, 3)))
        thermal_c = frame.to_crystal(th_s)
        eig_s = eig_s + th_s
    if lin.stress is not None:
        eig_s = eig_s + liner_eigenstrain(stiff, lin.stress)
    return LayerModel(index, mat, frame, z, z + lin.thickness, 1.0, (mat.a, mat.c),
                      frame.to_crystal(eig_s), 0.0, stiff, eig_s, thermal_c, epitaxial=False,
                      builtin_stress=lin.stress,
                      deposition_temperature=_deposition_temperature(case, lin), liner=k,
                      name=name)


def _deposition_temperature(case: Case, lay) -> float | None:
    if case.thermal is None:
        return None
    if lay.deposition_temperature is not None:
        return lay.deposition_temperature
    return case.thermal.growth_temperature


def _thermal_part(case: Case, lay, key: str, mat: Material, frame: Frame, smat: Material,
                  sframe: Frame, r: float, q_below: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Thermal eigenstrain of one layer (sample frame) and its lattice shift Q_i.

    Implements D_i(T_final) - Q_i of the module notes, with D_i(T) the
    sample-frame thermal mismatch against the substrate from the table
    temperature to T (:func:`mesastrain.physics.deposited.thermal_mismatch_eigenstrain`,
    alpha(T) fits where both materials have one) and T_i the layer's own
    deposition temperature.
    """
    t0 = LATTICE_TABLE_TEMPERATURE
    tg, tf = _deposition_temperature(case, lay), case.thermal.final_temperature
    same = mat.name == smat.name and mat.x == smat.x and mat.group == smat.group

    def mismatch(temperature: float) -> np.ndarray:
        if same:
            return np.zeros((3, 3))
        try:
            return thermal_mismatch_eigenstrain(mat, smat, t0, temperature, frame, sframe,
                                                fit="auto")
        except MaterialError as exc:
            where = (f"{key}.deposition_temperature" if lay.deposition_temperature is not None
                     and temperature == tg else "thermal.growth_temperature" if temperature == tg
                     else "thermal.final_temperature")
            raise CaseError(where, f"{key} ({mat.label} on {smat.label}): {exc}") from None

    q = (1.0 - r) * q_below + r * mismatch(tg)
    return mismatch(tf) - q, q
