"""The output folder: summary.json, fields.vtu and extra files, written atomically."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mesastrain import __version__
from mesastrain.fem.fields import hydrostatic, von_mises
from mesastrain.io.destination import Destination, claim_output, write_failure
from mesastrain.io.export import to_vtk6, write_json, write_vtu
from mesastrain.io.render import render_section
from mesastrain.io.report import write_report
from mesastrain.io.wording import CAUTION
from mesastrain.model.regions import LayerModel
from mesastrain.physics.crystal import format_indices
from mesastrain.run.result import Result

__all__ = ["CAUTION", "layer_figures", "layer_summary", "summary_of", "vtu_data",
           "write_result"]


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
        "thermal_eigenstrain": getattr(lm, "thermal_eigenstrain", None),
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


def boundary_text(mesh) -> str:
    """One line saying how the model is held (from its :class:`Boundary`)."""
    bc = mesh.boundary()
    tied = sorted({a for a, _, _ in bc.periodic})
    held = sorted({a for c, a, _ in bc.supports if a in (0, 1) and a == c} - set(tied))
    parts = ["substrate bottom held in z"]
    if tied:
        parts.append(f"faces normal to {' and '.join('xy'[a] for a in tied)} tied periodically "
                     f"(rigid translation pinned at one bottom node)")
    if held:
        parts.append(f"faces normal to {' and '.join('xy'[a] for a in held)} held normal to "
                     f"themselves (rollers: mirror planes or substrate-only faces)")
    return "; ".join(parts + ["top and sidewalls free"])


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
            "eigenstrain": "stress-free strain relative to the substrate's lattice, = (a - a_eff)/a, "
                           "plus thermal_eigenstrain (crystal axes) when [thermal] is given",
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
        "boundary_conditions": boundary_text(res.mesh),
        "solver": res.solver.to_dict(),
        "timings": {k: round(v, 3) for k, v in res.timings.items()},
        "layer_figures": layer_figures(res),
        "probes": _probes_with_derived(res),
        "warnings": list(res.warnings),
        "caution": CAUTION,
        **_derived_summary(res),
    }


def _derived_summary(res: Result) -> dict:
    out = {}
    for d in res.derived:
        out.update(d.summary)
    return out


def _probes_with_derived(res: Result) -> list:
    probes = [dict(p) for p in res.probes]
    for d in res.derived:
        for name, values in d.probe_entries.items():
            for p, v in zip(probes, values):
                p[name] = v
    return probes


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
    for d in res.derived:
        pd.update(d.point_data)
        cd.update(d.cell_data)
    return pd, cd


def write_result(res: Result, out, overwrite: bool = False) -> Path:
    """Write the output folder atomically.

    Everything goes into a partial folder beside the target first; only when every
    file is complete is it swapped into place (replacing an earlier result when
    ``overwrite``), so an interrupted or failed run leaves the old result or nothing.
    See :mod:`mesastrain.io.destination` for what may be replaced.

    Parameters
    ----------
    res : Result
    out : Path or Destination
        Result folder, or a location claimed before the solve with
        :func:`mesastrain.io.destination.claim_output` (checked and locked).
    overwrite : bool
        Replace an existing previous result (ignored for a Destination).

    Returns
    -------
    Path
        The result folder.

    Raises
    ------
    OutputError
        The location is refused or in use, or writing failed (a full disk, ...).
    """
    if not isinstance(out, Destination):
        with claim_output(out, overwrite) as dest:
            return write_result(res, dest)
    dest = out
    try:
        tmp = dest.partial()
        write_json(tmp / "summary.json", summary_of(res))
        if res.case.output.vtu:
            pd, cd = vtu_data(res)
            write_vtu(tmp / "fields.vtu", res.mesh.mesh, pd, cd)
        for d in res.derived:
            for name, writer in d.files.items():
                writer(tmp / name)
        if res.case.output.vtu:     # pictures the providers ask for, drawn from fields.vtu
            for d in res.derived:
                for name, kwargs in d.section_maps.items():
                    render_section(tmp / "fields.vtu", tmp / name, **kwargs)
        if getattr(res.case.output, "report", False):   # last: it embeds the files above
            write_report(tmp)
        return dest.commit(tmp)
    except OSError as exc:
        raise write_failure(exc, dest.shown) from None
