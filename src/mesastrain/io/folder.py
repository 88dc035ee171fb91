"""The output folder: summary.json, fields.vtu and extra files, written atomically."""

from __future__ import annotations

import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from mesastrain import __version__
from mesastrain.derived.sampling import cell_centres
from mesastrain.fem.fields import hydrostatic, von_mises
from mesastrain.fem.parallel import thread_count
from mesastrain.io.destination import Destination, claim_output, write_failure
from mesastrain.io.export import to_vtk6, write_json, write_vtu
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
        "name": lm.name, "region": lm.index, "material": mat.name, "composition": mat.x,
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
        "liner": getattr(lm, "liner", 0),
    }


def layer_figures(res: Result) -> dict:
    """Per-region volume averages and extremes of the element stresses (MPa), keyed by name.

    ``region`` is the region's id in the ``region`` cell array of ``fields.vtu``.
    """
    fl = res.fields
    out = {}
    for lm in res.layers:
        m = res.mesh.layer == lm.index
        if not np.any(m):
            continue
        vol = fl.cell_volume[m]
        sig = fl.cell_stress[m]
        mean = np.einsum("n,nij->ij", vol, sig) / vol.sum()
        vm = von_mises(sig)
        k = int(np.argmax(vm))
        at = cell_centres(res, np.flatnonzero(m)[[k]])[0]
        out[lm.name] = {"region": lm.index, "label": lm.material.label,
                        "volume": float(vol.sum()),
                        "mean_stress": mean, "max_von_mises": float(vm[k]),
                        "max_von_mises_at": at}
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


def mesh_summary(res: Result) -> dict:
    """``summary.json`` ``mesh``: the solved system and the exported body, by name.

    ``solved`` is what the solver saw (a half or quarter model, a 2-D section);
    ``exported`` the whole body written to ``fields.vtu``. ``grid`` (cells along x, y,
    z) only for the structured grid, where it means something.
    """
    m = res.mesh
    exported = {"nodes": int(m.mesh.p.shape[1]), "elements": int(m.mesh.t.shape[1])}
    solved = dict(res.solved) or {"unknowns": int(res.u.size), "nodes": exported["nodes"],
                                  "elements": exported["elements"], "order": res.order}
    out = {"solved": solved, "exported": exported}
    if getattr(m, "kind", "") == "structured":
        out["grid"] = [len(m.xs) - 1, len(m.ys) - 1, len(m.zs) - 1]
    out["model_extent"] = {"x": [m.xs[0], m.xs[-1]], "y": [m.ys[0], m.ys[-1]],
                           "z": [m.zs[0], m.zs[-1]]}
    out["size"], out["edge_size"] = m.spacing.size, m.spacing.edge_size
    return out


def summary_of(res: Result) -> dict:
    """The content of ``summary.json``."""
    case = res.case
    return _mark_singular({
        "program": {"name": "mesastrain", "version": __version__},
        "title": case.title,
        "units": {"length": "nm", "stress": "MPa", "strain": "1", "stiffness": "GPa",
                  "lattice": "Angstrom", "displacement": "nm", "volume": "nm^3",
                  "timings": "s", "z_bottom": "nm", "z_top": "nm", "misfit": "1",
                  "eigenstrain": "1", "max_von_mises": "MPa", "mean_stress": "MPa",
                  "sidewall_angle": "deg", "pitch": "nm", "temperature": "K"},
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
        "case_as_written": dict(getattr(case, "written", ())),
        "layers": [layer_summary(lm) for lm in res.layers],
        "mesh": mesh_summary(res),
        "boundary_conditions": boundary_text(res.mesh),
        "solver": res.solver.to_dict(),
        "timings": {k: round(v, 3) for k, v in res.timings.items()},
        "layer_figures": layer_figures(res),
        "probes": _probes_with_derived(res),
        "warnings": list(res.warnings),
        "caution": CAUTION,
        **_derived_summary(res),
    })


def _derived_summary(res: Result) -> dict:
    out = {}
    for d in res.derived:
        out.update(d.summary)
    return out


def _mark_singular(summary: dict) -> dict:
    """Flag each region's largest von Mises stress when it sits at a singular corner or edge.

    The readouts (:mod:`mesastrain.derived.readouts`) find the same element peak and say
    whether it lies within two elements of a singular place; the flag follows it to
    ``layer_figures`` (``max_von_mises_singular``) for the terminal table and the report.
    """
    peaks = {name: (e.get("peaks") or {}).get("von_mises") or {}
             for name, e in (summary.get("readouts") or {}).get("layers", {}).items()}
    for name, lf in summary.get("layer_figures", {}).items():
        pk = peaks.get(name, {})
        if pk and abs(pk.get("value", float("nan")) - lf["max_von_mises"]) <= (
                1e-6 * max(1.0, abs(lf["max_von_mises"]))):
            lf["max_von_mises_singular"] = bool(pk.get("singular"))
            if pk.get("nearest_feature"):
                lf["max_von_mises_near"] = pk["nearest_feature"]
    return summary


def _probes_with_derived(res: Result) -> list:
    probes = [dict(p) for p in res.probes]
    for d in res.derived:
        for name, values in d.probe_entries.items():
            for p, v in zip(probes, values):
                p[name] = v
    return probes


def vtu_data(res: Result) -> tuple[dict, dict]:
    """Point and cell data written to ``fields.vtu``: ``region`` and ``[output] fields``.

    ``region`` is the integer region id per element (0 the substrate, i the i-th layer);
    the names belong to the ids through the file's field data (:func:`region_table`) and
    ``summary.json`` ``layers`` (``name``, ``region``).

    The default set (displacement, nodal and element stress, nodal strain and
    von Mises, single precision) keeps the file near 80 bytes per node once compressed;
    strain, crystal-frame tensors and derived fields are written on request.
    """
    fl = res.fields
    out = res.case.output
    want = set(getattr(out, "fields", ()))
    ft = np.float64 if getattr(out, "precision", "single") == "double" else np.float32

    def f(a):
        return np.ascontiguousarray(a, dtype=ft)

    layer = res.mesh.layer
    pd: dict = {}
    cd: dict = {"region": layer.astype(np.int32)}
    if "displacement" in want:
        pd["displacement"] = f(fl.displacement)
    if "stress" in want:
        pd["stress"] = f(to_vtk6(fl.node_stress))
        cd["stress"] = f(to_vtk6(fl.cell_stress))
    if "von_mises" in want:
        pd["von_mises"] = f(von_mises(fl.node_stress))
    if "strain" in want:
        pd["strain"] = f(to_vtk6(fl.node_strain))
    if "element_strain" in want:
        cd["strain"] = f(to_vtk6(fl.cell_strain))
    if "total_strain" in want:
        cd["total_strain"] = f(to_vtk6(fl.cell_total_strain))
    if "hydrostatic" in want:
        pd["hydrostatic"] = f(hydrostatic(fl.node_stress))
    crystal = [q for q in ("stress_crystal", "strain_crystal") if q in want]
    if out.crystal_frame and crystal:
        Rs = np.array([lm.frame.R for lm in res.layers])[layer]   # sample axes in crystal
        for q in crystal:    # crystal-frame tensor: T_c = R^T T_s R
            t = fl.cell_stress if q == "stress_crystal" else fl.cell_strain
            cd[q] = f(to_vtk6(np.einsum("nai,nab,nbj->nij", Rs, t, Rs)))
    if "derived" in want:
        for d in res.derived:
            pd.update({k: f(v) if np.issubdtype(np.asarray(v).dtype, np.floating) else v
                       for k, v in d.point_data.items()})
            cd.update({k: f(v) if np.issubdtype(np.asarray(v).dtype, np.floating) else v
                       for k, v in d.cell_data.items()})
    return pd, cd


def region_table(res: Result) -> dict:
    """Field data of ``fields.vtu``: one integer per region, named ``region <name>``."""
    return {f"region {lm.name}": np.array([lm.index], dtype=np.int32) for lm in res.layers}


def _timed(res: Result, key: str, progress, what: str):
    """Context manager that reports a writing stage and records its time in ``res.timings``."""
    import contextlib

    @contextlib.contextmanager
    def stage():
        if progress is not None:
            progress(what)
        t0 = time.perf_counter()
        try:
            yield
        finally:
            res.timings[key] = res.timings.get(key, 0.0) + time.perf_counter() - t0
    return stage()


def _map_source(res: Result):
    """The in-memory fields the maps are drawn from (plus derived element data)."""
    from mesastrain.io.maps import FieldSource

    extra = {}
    for d in res.derived:
        extra.update(d.cell_data)
    return FieldSource.from_result(res, extra)


def draw_pictures(res: Result, folder: Path) -> list[str]:
    """The maps of ``[output] maps`` and the providers' section maps, from memory.

    For each component of ``output.maps`` a cross-section and a plan view (and
    the sidewall close-up of the first one for a patterned case); then every
    ``section_maps`` picture a derived provider asks for. Drawn with matplotlib
    (:mod:`mesastrain.io.maps`): no OpenGL, nothing read back from disk.

    Returns
    -------
    list of str
        Names of the pictures written.
    """
    from mesastrain.io.maps import draw_map

    folder = Path(folder)
    src = _map_source(res)
    written = []
    if not res.case.output.vtu:     # as before: no maps without fields (the report says so)
        return written
    for i, name in enumerate(res.case.output.maps):
        for view in ("section", "plan") + (("edge",) if i == 0 and src.patterned else ()):
            png = folder / f"map_{view}_{name}.png"
            try:
                draw_map(src, png, name, view)
            except ValueError as exc:     # the plane misses the body (e.g. a plan above it)
                res.warnings.append(f"picture {png.name} not drawn: {exc}")
                continue
            written.append(png.name)
    for d in res.derived:
        for png, kw in d.section_maps.items():
            q = kw.get("quantity", "stress")
            comp = kw.get("component")
            name = f"{q}_{comp.lower()}" if comp else q
            draw_map(src, folder / png, name, "section", position=kw.get("y"),
                     depth=kw.get("depth"), note=kw.get("note"), words=kw.get("words"),
                     valid=kw.get("valid"))
            written.append(png)
    return written


def write_result(res: Result, out, overwrite: bool = False, quick: bool = False,
                 progress=None) -> Path:
    """Write the output folder atomically.

    Everything goes into a partial folder beside the target first; only when every
    file is complete is it swapped into place (replacing an earlier result when
    ``overwrite``), so an interrupted or failed run leaves the old result or nothing.
    See :mod:`mesastrain.io.destination` for what may be replaced.

    The writing stages are timed into ``summary.json`` ``timings``:
    ``write_fields`` (fields.vtu), ``write_tables`` (CSV files),
    ``write_pictures`` (every PNG) and ``write_report`` (report.html, which
    embeds the PNGs already written and draws none of its own).

    Parameters
    ----------
    res : Result
    out : Path or Destination
        Result folder, or a location claimed before the solve with
        :func:`mesastrain.io.destination.claim_output` (checked and locked).
    overwrite : bool
        Replace an existing previous result (ignored for a Destination).
    quick : bool
        Write ``summary.json``, ``fields.vtu`` and the CSV tables only (no
        pictures, no report), whatever ``[output]`` says.
    progress : callable(str), optional
        Told the start of each writing stage.

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
            return write_result(res, dest, quick=quick, progress=progress)
    dest = out
    o = res.case.output
    pictures = getattr(o, "pictures", True) and not quick
    report = getattr(o, "report", False) and not quick
    try:
        tmp = dest.partial()
        t0 = time.perf_counter()

        def fields() -> None:
            with _timed(res, "write_fields", progress, "writing fields.vtu"):
                pd, cd = vtu_data(res)
                write_vtu(tmp / "fields.vtu", res.mesh.mesh, pd, cd,
                          field_data=region_table(res))

        # fields.vtu is written on a second thread while the tables and pictures are drawn:
        # its zlib compression releases the interpreter lock, matplotlib mostly holds it
        beside = ThreadPoolExecutor(1) if o.vtu and pictures and thread_count() > 1 else None
        try:
            vtu = beside.submit(fields) if beside is not None else None
            if o.vtu and vtu is None:
                fields()
            files = [(n, w) for d in res.derived for n, w in d.files.items()]
            with _timed(res, "write_tables", progress, "writing tables"):
                for name, writer in files:
                    if not name.endswith(".png"):
                        writer(tmp / name)
            if pictures:
                with _timed(res, "write_pictures", progress, "drawing pictures"):
                    for name, writer in files:
                        if name.endswith(".png"):
                            writer(tmp / name)
                    draw_pictures(res, tmp)
            if vtu is not None:
                vtu.result()
        finally:
            if beside is not None:
                beside.shutdown(wait=True)
        res.timings["writing"] = time.perf_counter() - t0
        write_json(tmp / "summary.json", summary_of(res))
        if report:      # last: it embeds the files above
            with _timed(res, "write_report", progress, "writing report.html"):
                write_report(tmp, pictures=False)
            res.timings["writing"] = time.perf_counter() - t0
            write_json(tmp / "summary.json", summary_of(res))   # with the report's time
        return dest.commit(tmp)
    except OSError as exc:
        raise write_failure(exc, dest.shown) from None
