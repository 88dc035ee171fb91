"""From a validated case to fields and an output folder.

    case -> model (materials, frames, eigenstrains, geometry)
         -> mesh -> assembly -> solve -> fields -> summary / VTU

Each stage is a function of the previous stage's result; :func:`run_case`
chains them and :func:`write_result` writes the output folder atomically
(into a temporary folder that is renamed into place at the end).
"""

from __future__ import annotations

import logging
import os
import shutil
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .assembly import assemble, discretise, rigid_body_modes
from .casefile import Case
from .crystal import Frame, format_indices, sample_frame
from .errors import CaseError, MeshError, ResourceError
from .export import to_vtk6, write_json, write_vtu
from .fields import Fields, evaluate_at_points, hydrostatic, principal, recover, von_mises
from .materials import Material, get_material
from .meshing import GridSpacing, StackGeometry, StackMesh, build_stack_mesh, axis_coordinates
from .solve import SolverReport, choose_method, solve_condensed

log = logging.getLogger(__name__)

CAUTION = ("Linear-elastic estimates: they do not replace measurement, qualification, "
           "local codes or the judgement of a licensed professional.")


# --------------------------------------------------------------------------
# model: materials, frames, eigenstrains
# --------------------------------------------------------------------------
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
    out = [LayerModel(0, smat, sframe, -sub.thickness, 0.0, 1.0, (smat.a, smat.c),
                      np.zeros((3, 3)), 0.0, sframe.stiffness_to_sample(smat.stiffness),
                      np.zeros((3, 3)))]
    below_lat, below_sys = (smat.a, smat.c), smat.system
    z = 0.0
    for i, lay in enumerate(case.layers, start=1):
        mat = get_material(lay.material, lay.x)
        if lay.normal is not None:
            frame = sample_frame(lay.normal, lay.x_axis, mat.system, mat.c_over_a)
        else:
            frame = sample_frame(sub.normal, sub.x_axis, mat.system, mat.c_over_a)
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
        out.append(LayerModel(i, mat, frame, z, z + lay.thickness, r, (a_eff, c_eff), eig_c,
                              (a_eff - mat.a) / mat.a, frame.stiffness_to_sample(mat.stiffness),
                              frame.to_sample(eig_c)))
        z += lay.thickness
        below_lat, below_sys = (a_eff, c_eff), mat.system
    return out


# --------------------------------------------------------------------------
# geometry and mesh sizes
# --------------------------------------------------------------------------
def geometry_of(case: Case) -> tuple[StackGeometry, GridSpacing]:
    """Modelled geometry and element sizes from the case and its defaults."""
    pat = case.pattern
    stack = case.stack_thickness
    thick = [lay.thickness for lay in case.layers]
    patterned = pat.shape != "none"
    order = case.mesh.order
    if patterned:
        W, L = pat.width, pat.length
        etch = pat.etch_depth
        if etch > stack:                    # etched into the substrate
            thick.append(etch - stack)
        feature = max(W, L)
        margin = pat.margin if pat.margin is not None else max(0.5 * feature, 4.0 * etch)
        depth_default = max(1.5 * feature, 4.0 * etch)
    else:
        W = L = None
        etch = 0.0
        margin = max(stack, 1.0)
        depth_default = max(2.0 * stack, 10.0)
    depth = case.mesh.substrate_depth or min(case.substrate.thickness, depth_default)
    t_min = min(thick)
    per_layer = 4.0 if order == 1 else 2.0
    size = case.mesh.size or t_min * 2.0 / per_layer
    edge = case.mesh.edge_size or min(size, t_min / per_layer)
    if patterned:
        lateral_cap = case.mesh.size or max(size, min(W, L) / (16.0 if order == 1 else 8.0))
    else:
        lateral_cap = size
    geom = StackGeometry(interfaces=tuple(case.interfaces), substrate_depth=float(depth),
                         half_width=None if W is None else W / 2.0,
                         half_length=None if L is None else L / 2.0,
                         etch_depth=float(etch), margin=float(margin))
    return geom, GridSpacing(size=float(size), edge_size=float(edge),
                             growth=float(case.mesh.growth), lateral_cap=float(lateral_cap))


def count_unknowns(xs, ys, zs, keep: np.ndarray, order: int) -> tuple[int, int, int]:
    """Exact node, element and unknown counts of a structured grid.

    Parameters
    ----------
    xs, ys, zs : ndarray
        Grid coordinates.
    keep : ndarray of bool (nx-1, ny-1, nz-1)
        Cells that belong to the body.
    order : int
        1 or 2.

    Returns
    -------
    (nodes, elements, unknowns)
    """
    nx, ny, nz = keep.shape
    # on the doubled grid, a point belongs to the body if any adjacent cell does
    k2 = np.zeros((2 * nx + 1, 2 * ny + 1, 2 * nz + 1), dtype=bool)
    for dx in (0, 1, 2):
        for dy in (0, 1, 2):
            for dz in (0, 1, 2):
                k2[dx:dx + 2 * nx:2, dy:dy + 2 * ny:2, dz:dz + 2 * nz:2] |= keep
    vertices = int(k2[::2, ::2, ::2].sum())
    scalar = vertices if order == 1 else int(k2.sum())
    return vertices, int(keep.sum()), 3 * scalar


def keep_mask(geom: StackGeometry, xs, ys, zs) -> np.ndarray:
    """Cells of the full grid that belong to the body (not etched away)."""
    xm, ym, zm = (0.5 * (g[1:] + g[:-1]) for g in (xs, ys, zs))
    keep = np.ones((len(xm), len(ym), len(zm)), dtype=bool)
    if geom.patterned and geom.etch_depth > 0:
        outside = (np.abs(xm)[:, None] > geom.half_width) | (np.abs(ym)[None, :] > geom.half_length)
        keep &= ~(outside[:, :, None] & (zm > geom.etch_floor)[None, None, :])
    return keep


@dataclass(frozen=True)
class Estimate:
    """Size, memory and time expected for a case before solving."""

    nodes: int
    elements: int
    unknowns: int
    order: int
    method: str
    memory_gb: float
    seconds: float

    def to_dict(self) -> dict:
        return {"nodes": self.nodes, "elements": self.elements, "unknowns": self.unknowns,
                "order": self.order, "solver": self.method,
                "memory_gb": round(self.memory_gb, 3), "seconds": round(self.seconds, 1)}


def estimate(case: Case) -> Estimate:
    """Estimate unknowns, peak memory and wall time without building the mesh.

    Memory: the element-matrix array and its COO indices during assembly
    dominate (24 bytes per entry, held once more while summing), plus the
    matrix, its condensed copy and the multigrid hierarchy (about 40 bytes
    per stored nonzero). Time: rates measured on a 2-core machine
    (benchmarks/); a rough guide, not a promise.
    """
    geom, spacing = geometry_of(case)
    xs, ys, zs = axis_coordinates(geom, spacing)
    keep = keep_mask(geom, xs, ys, zs)
    order = case.mesh.order
    nodes, nel, n = count_unknowns(xs, ys, zs, keep, order)
    nd = 24 if order == 1 else 81
    entries = nel * nd * nd
    nnz_per_row = 81 if order == 1 else 200
    nnz = n * nnz_per_row
    mem = (entries * 24 * 1.6 + nnz * 40 + 2e8) / 1e9
    method = choose_method(case.solver.method, n)
    if method == "direct":
        secs = 1.0 + 2e-9 * n ** 1.8
    else:
        secs = 1.0 + n * (6e-5 if order == 1 else 2.5e-4)
    return Estimate(nodes, nel, n, order, method, mem, secs)


def available_memory_gb() -> float:
    """Memory the operating system reports as available, GB."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) / 1e6
    except OSError:
        pass
    return float("inf")


# --------------------------------------------------------------------------
# the run
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Result:
    """Everything a run produced, in memory."""

    case: Case
    layers: list
    mesh: StackMesh
    order: int
    fields: Fields
    solver: SolverReport
    probes: list
    timings: dict
    warnings: list = field(default_factory=list)
    u: np.ndarray = field(default=None, repr=False)
    disc: object = field(default=None, repr=False)


def _boundary_dofs(disc, geom_bounds) -> np.ndarray:
    """Roller conditions: u_z = 0 on the bottom, u_n = 0 on the four sides."""
    x = disc.doflocs
    (x0, x1), (y0, y1), z0 = geom_bounds
    tol = 1e-9 * max(x1 - x0, y1 - y0)
    bottom = np.flatnonzero(np.abs(x[2] - z0) <= tol) * 3 + 2
    xside = np.flatnonzero((np.abs(x[0] - x0) <= tol) | (np.abs(x[0] - x1) <= tol)) * 3
    yside = np.flatnonzero((np.abs(x[1] - y0) <= tol) | (np.abs(x[1] - y1) <= tol)) * 3 + 1
    return np.unique(np.concatenate([bottom, xside, yside]))


def run_case(case: Case, progress=None, max_memory_gb: float | None = None) -> Result:
    """Solve a case.

    Parameters
    ----------
    case : Case
    progress : callable(str), optional
        Receives one-line progress messages.
    max_memory_gb : float, optional
        Refuse cases whose estimated peak memory exceeds this (default: the
        memory the system reports as available).

    Returns
    -------
    Result
    """
    say = progress or (lambda msg: None)
    timings = {}
    est = estimate(case)
    limit = max_memory_gb if max_memory_gb is not None else available_memory_gb()
    if est.memory_gb > limit:
        raise ResourceError(
            f"mesh: the case needs about {est.memory_gb:.1f} GB ({est.unknowns:,} unknowns) but "
            f"{limit:.1f} GB are allowed; raise mesh.size / mesh.edge_size or use mesh.order = 1")
    t = time.perf_counter()
    layers = build_layers(case)
    geom, spacing = geometry_of(case)
    sm = build_stack_mesh(geom, spacing)
    order = case.mesh.order
    disc = discretise(sm.mesh, order)
    timings["mesh"] = time.perf_counter() - t
    say(f"mesh: {sm.nnodes:,} nodes, {sm.nelems:,} hexahedra, order {order}, "
        f"{disc.ndofs:,} unknowns")
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    group = sm.layer
    t = time.perf_counter()
    K, f = assemble(disc, group, stiff, eig)
    timings["assembly"] = time.perf_counter() - t
    say(f"assembly: {K.nnz:,} nonzeros in {timings['assembly']:.1f} s")
    bounds = ((sm.xs[0], sm.xs[-1]), (sm.ys[0], sm.ys[-1]), sm.zs[0])
    fixed = _boundary_dofs(disc, bounds)
    t = time.perf_counter()
    u, rep = solve_condensed(K, f, fixed, rigid_body_modes(disc.doflocs),
                             method=case.solver.method, tol=case.solver.tolerance,
                             maxiter=case.solver.max_iterations, progress=say)
    timings["solve"] = time.perf_counter() - t
    say(f"solve: {rep.method}, {rep.iterations} iterations, residual {rep.residual:.1e}, "
        f"{timings['solve']:.1f} s")
    del K
    t = time.perf_counter()
    fl = recover(disc, u, group, stiff, eig, sm.nnodes, sm.mesh.t)
    probes = evaluate_probes(case, sm, disc, u, group, stiff, eig, layers)
    timings["recovery"] = time.perf_counter() - t
    warnings = []
    if np.any(~np.isfinite(fl.cell_stress)):
        from .errors import SolverError
        raise SolverError("the recovered stress contains NaN or Inf; nothing was written")
    return Result(case=case, layers=layers, mesh=sm, order=order, fields=fl, solver=rep,
                  probes=probes, timings=timings, warnings=warnings, u=u, disc=disc)


def evaluate_probes(case, sm, disc, u, group, stiff, eig, layers) -> list[dict]:
    """Tensors at each probe, sample and crystal frame."""
    if not case.probes:
        return []
    pts = np.array([p.at for p in case.probes], dtype=float)
    elems = sm.locate(pts)
    for k, e in enumerate(elems):
        if e < 0:
            raise CaseError(f"probe[{k}].at", f"{list(case.probes[k].at)} nm lies outside the "
                            f"modelled body (x in [{sm.xs[0]:g}, {sm.xs[-1]:g}], y in "
                            f"[{sm.ys[0]:g}, {sm.ys[-1]:g}], z in [{sm.zs[0]:g}, {sm.zs[-1]:g}] nm)")
    strain, stress, disp = evaluate_at_points(disc, u, elems, pts, group, stiff, eig)
    out = []
    for k, p in enumerate(case.probes):
        lay = layers[int(group[elems[k]])]
        R = lay.frame.R
        out.append({
            "name": p.name, "at": list(p.at), "layer": int(lay.index),
            "material": lay.material.label,
            "displacement": disp[k],
            "stress": stress[k], "strain": strain[k],
            "stress_crystal": lay.frame.to_crystal(stress[k]),
            "strain_crystal": lay.frame.to_crystal(strain[k]),
            "von_mises": float(von_mises(stress[k])),
            "hydrostatic": float(hydrostatic(stress[k])),
            "principal_stress": principal(stress[k]),
            "crystal_axes_in_sample": R.T,
        })
    return out


# --------------------------------------------------------------------------
# outputs
# --------------------------------------------------------------------------
def layer_summary(lm: LayerModel) -> dict:
    """JSON-ready description of one resolved region."""
    mat = lm.material
    lattice = {"a": mat.a}
    if mat.c is not None:
        lattice["c"] = mat.c
    return {
        "index": lm.index, "name": lm.name, "material": mat.name, "x": mat.x,
        "label": mat.label, "system": mat.system,
        "z_bottom": lm.z_bottom, "z_top": lm.z_top,
        "normal": format_indices(lm.frame.normal, "()"),
        "x_axis": format_indices(lm.frame.x_axis),
        "constants": dict(mat.constants), "lattice": lattice,
        "relaxed": lm.relaxed,
        "lattice_in_plane": {"a": lm.lattice_in_plane[0], **(
            {"c": lm.lattice_in_plane[1]} if lm.lattice_in_plane[1] is not None else {})},
        "misfit": lm.misfit,
        "eigenstrain": lm.eigenstrain_crystal,
        "eigenstrain_sample": lm.eigenstrain_sample,
        "stiffness_sample": lm.stiffness_sample,
        "sample_axes_in_crystal": lm.frame.R,
        "source": list(mat.sources),
    }


def layer_figures(res: Result) -> list[dict]:
    """Per-region volume averages and extremes of the element stresses (MPa)."""
    fl = res.fields
    out = []
    for lm in res.layers:
        m = res.mesh.layer == lm.index
        if not np.any(m):
            continue
        vol = fl.cell_volume[m]
        sig = fl.cell_stress[m]
        mean = np.einsum("n,nij->ij", vol, sig) / vol.sum()
        vm = von_mises(sig)
        k = int(np.argmax(vm))
        centres = res.mesh.mesh.p[:, res.mesh.mesh.t[:, m]].mean(axis=1).T
        out.append({"index": lm.index, "name": lm.name, "label": lm.material.label,
                    "volume_nm3": float(vol.sum()),
                    "mean_stress": mean, "max_von_mises": float(vm[k]),
                    "max_von_mises_at": centres[k]})
    return out


def summary_of(res: Result) -> dict:
    """The content of ``summary.json``."""
    case = res.case
    nn = res.mesh.nnodes
    return {
        "program": {"name": "mesastrain", "version": __version__},
        "title": case.title,
        "units": {"length": "nm", "stress": "MPa", "strain": "1", "stiffness": "GPa",
                  "lattice": "Angstrom", "displacement": "nm", "volume": "nm^3"},
        "conventions": {
            "frames": "sample: z = wafer normal (up), x = substrate x_axis; crystal: cube axes "
                      "(hexagonal: x = a1, z = c)",
            "strain": "elastic (lattice) strain relative to each material's relaxed lattice",
            "eigenstrain": "stress-free strain relative to the substrate's lattice, = (a - a_eff)/a",
            "misfit": "(a_eff - a)/a: in-plane lattice strain of the blanket layer",
            "stress_sign": "positive in tension",
            "vtu_tensor_order": "XX, YY, ZZ, XY, YZ, XZ",
        },
        "case": case.to_dict(),
        "layers": [layer_summary(lm) for lm in res.layers],
        "mesh": {"nodes": nn, "elements": res.mesh.nelems, "unknowns": int(res.u.size),
                 "order": res.order,
                 "grid": [len(res.mesh.xs) - 1, len(res.mesh.ys) - 1, len(res.mesh.zs) - 1],
                 "model_extent": {"x": [res.mesh.xs[0], res.mesh.xs[-1]],
                                  "y": [res.mesh.ys[0], res.mesh.ys[-1]],
                                  "z": [res.mesh.zs[0], res.mesh.zs[-1]]},
                 "size": res.mesh.spacing.size, "edge_size": res.mesh.spacing.edge_size},
        "boundary_conditions": "substrate bottom held in z; lateral faces of the model held "
                               "normal to themselves (rollers); top and sidewalls free",
        "solver": res.solver.to_dict(),
        "timings": {k: round(v, 3) for k, v in res.timings.items()},
        "layer_figures": layer_figures(res),
        "probes": res.probes,
        "warnings": list(res.warnings),
        "caution": CAUTION,
    }


def vtu_data(res: Result) -> tuple[dict, dict]:
    """Point and cell data written to ``fields.vtu``."""
    fl = res.fields
    pd = {
        "displacement": fl.displacement,
        "strain": to_vtk6(fl.node_strain),
        "stress": to_vtk6(fl.node_stress),
        "von_mises": von_mises(fl.node_stress),
        "hydrostatic": hydrostatic(fl.node_stress),
    }
    layer = res.mesh.layer
    cd = {
        "layer": layer.astype(np.int32),
        "strain": to_vtk6(fl.cell_strain),
        "stress": to_vtk6(fl.cell_stress),
        "total_strain": to_vtk6(fl.cell_total_strain),
        "von_mises": von_mises(fl.cell_stress),
        "hydrostatic": hydrostatic(fl.cell_stress),
    }
    if res.case.output.crystal_frame:
        Rs = np.array([lm.frame.R for lm in res.layers])[layer]   # sample axes in crystal
        # crystal-frame tensor: T_c = R^T T_s R
        cd["stress_crystal"] = to_vtk6(np.einsum("nai,nab,nbj->nij", Rs, fl.cell_stress, Rs))
        cd["strain_crystal"] = to_vtk6(np.einsum("nai,nab,nbj->nij", Rs, fl.cell_strain, Rs))
    return pd, cd


def write_result(res: Result, out: Path, overwrite: bool = False) -> Path:
    """Write the output folder atomically.

    Everything goes into a temporary sibling folder first; only when every file
    is complete is it renamed to ``out`` (replacing an earlier result when
    ``overwrite``), so an interrupted run leaves the old result or nothing.
    """
    out = Path(out)
    if out.exists() and not overwrite:
        raise CaseError("--out", f"{out} already exists; pass --overwrite to replace it")
    parent = out.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=parent))
    try:
        write_json(tmp / "summary.json", summary_of(res))
        if res.case.output.vtu:
            pd, cd = vtu_data(res)
            write_vtu(tmp / "fields.vtu", res.mesh.mesh, pd, cd)
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=parent))
            os.replace(out, old / out.name)
            os.replace(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out
