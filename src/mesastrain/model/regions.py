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
D_i(T) = int_{300 K}^{T} (alpha_i - alpha_substrate) dT (axis a or c,
:func:`mesastrain.physics.thermal.thermal_mismatch_strain`). The in-plane lattice each
layer takes is set at the growth temperature (coherent with the layer below,
moved toward its own lattice by ``relaxed``) and afterwards follows the
substrate. To first order the stress-free strain relative to the substrate at
the final temperature then gains

    D_i(T_final) - q_i,   q_i = (1 - r_i) q_(i-1) + r_i D_i(T_growth),  q_0 = 0,

so a pseudomorphic layer (r = 0) keeps the lattice mismatch of the final
temperature, and a fully relaxed single layer gains
int_{T_growth}^{T_final} (alpha_layer - alpha_substrate) dT (Ge on Si cooled
from growth: about -0.23 %, i.e. about +0.23 % tensile elastic strain).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.case.types import Case
from mesastrain.errors import CaseError, MaterialError
from mesastrain.physics.crystal import Frame, miscut_rotation, sample_frame
from mesastrain.physics.materials import Material, get_material
from mesastrain.physics.thermal import thermal_mismatch_strain

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

    @property
    def name(self) -> str:
        return "substrate" if self.index == 0 else f"layer {self.index}"


def _reference_lattice(below: tuple, below_system: str, mat: Material) -> tuple:
    """Lattice (a, c) that ``mat`` would take if fully coherent with ``below``.

    Same structure: the lattice below itself. Hexagonal on a cubic (111)
    surface: a_hex matches the surface net spacing a_cubic/sqrt(2); cubic on
    hexagonal: a_cubic/sqrt(2) matches a_hex. The c of a hexagonal layer on a
    cubic one scales with a (only the in-plane part produces stress).
    """
    a_b, c_b = below
    if mat.system == below_system:
        return (a_b, c_b if mat.system == "hexagonal" else None)
    if mat.system == "hexagonal":      # hexagonal on cubic
        a_ref = a_b / np.sqrt(2.0)
        return (a_ref, mat.c * a_ref / mat.a)
    return (a_b * np.sqrt(2.0), None)  # cubic on hexagonal


def build_layers(case: Case) -> list[LayerModel]:
    """Resolve materials, orientations and eigenstrains of every region."""
    sub = case.substrate
    try:
        smat = get_material(sub.material, sub.x)
    except Exception as exc:  # validated already; keep a clear message anyway
        raise CaseError("substrate.material", str(exc)) from exc
    sframe = sample_frame(sub.normal, sub.x_axis, smat.system, smat.c_over_a)
    tilt = None
    if sub.miscut is not None:
        # a vicinal wafer: every frame of the stack turns by the same rotation
        tilt = miscut_rotation(sframe, sub.miscut[0], sub.miscut[1], smat.c_over_a)
        sframe = sframe.tilted(tilt, sub.miscut[0])
    out = [LayerModel(0, smat, sframe, -sub.thickness, 0.0, 1.0, (smat.a, smat.c),
                      np.zeros((3, 3)), 0.0, sframe.stiffness_to_sample(smat.stiffness),
                      np.zeros((3, 3)))]
    below_lat, below_sys = (smat.a, smat.c), smat.system
    q_below = (0.0, 0.0)          # thermal lattice shift (a, c) of the layer below, see module notes
    z = 0.0
    for i, lay in enumerate(case.layers, start=1):
        mat = get_material(lay.material, lay.x)
        if lay.normal is not None:
            frame = sample_frame(lay.normal, lay.x_axis, mat.system, mat.c_over_a)
        else:
            frame = sample_frame(sub.normal, sub.x_axis, mat.system, mat.c_over_a)
        if tilt is not None:
            frame = frame.tilted(tilt, sub.miscut[0])
        a_ref, c_ref = _reference_lattice(below_lat, below_sys, mat)
        r = lay.relaxed
        a_eff = a_ref + r * (mat.a - a_ref)
        e_a = (mat.a - a_eff) / mat.a
        if mat.system == "hexagonal":
            c_eff = c_ref + r * (mat.c - c_ref)
            e_c = (mat.c - c_eff) / mat.c
            eig_c = np.diag([e_a, e_a, e_c])
        else:
            c_eff = None
            eig_c = e_a * np.eye(3)
        thermal_c = None
        if case.thermal is not None:
            thermal_c, q_below = _thermal_part(case, i, mat, smat, r, q_below, below_sys)
            eig_c = eig_c + thermal_c
        out.append(LayerModel(i, mat, frame, z, z + lay.thickness, r, (a_eff, c_eff), eig_c,
                              (a_eff - mat.a) / mat.a, frame.stiffness_to_sample(mat.stiffness),
                              frame.to_sample(eig_c), thermal_c))
        z += lay.thickness
        below_lat, below_sys = (a_eff, c_eff), mat.system
    return out


def _thermal_part(case: Case, i: int, mat: Material, smat: Material, r: float,
                  q_below: tuple, below_sys: str) -> tuple[np.ndarray, tuple]:
    """Thermal eigenstrain of layer ``i`` (crystal axes) and its lattice shift (a, c).

    Implements D_i(T_final) - q_i of the module notes for the a axis (and the
    c axis of a hexagonal layer, whose reference follows the c chain below a
    hexagonal layer and the a chain below a cubic one).
    """
    t0 = LATTICE_TABLE_TEMPERATURE
    tg, tf = case.thermal.growth_temperature, case.thermal.final_temperature
    same = mat.name == smat.name and mat.x == smat.x

    def mismatch(axis: str, temperature: float) -> float:
        if same:
            return 0.0
        try:
            return float(thermal_mismatch_strain(mat, smat, t0, temperature, axis=axis))
        except MaterialError as exc:
            key = ("thermal.growth_temperature" if temperature == tg
                   else "thermal.final_temperature")
            raise CaseError(key, f"layer[{i - 1}] ({mat.label} on {smat.label}): {exc}") from None

    q_a = (1.0 - r) * q_below[0] + r * mismatch("a", tg)
    add_a = mismatch("a", tf) - q_a
    if mat.system == "hexagonal":
        ref_c = q_below[1] if below_sys == "hexagonal" else q_below[0]
        q_c = (1.0 - r) * ref_c + r * mismatch("c", tg)
        add_c = mismatch("c", tf) - q_c
        return np.diag([add_a, add_a, add_c]), (q_a, q_c)
    return add_a * np.eye(3), (q_a, q_a)



