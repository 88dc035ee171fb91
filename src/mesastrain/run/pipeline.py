"""From a validated case to solved fields.

    case -> model (materials, frames, eigenstrains) -> symmetry decision
         -> mesh (structured hexahedra, stripe cross-section, gmsh tetrahedra or an
            imported mesh) -> assembly -> supports / periodic ties -> solve
         -> unfold a half/quarter model -> fields -> probes -> derived quantities

:func:`run_case` chains the stages; each is a function of the previous
stage's result. Writing the output folder is :mod:`mesastrain.io.folder`'s job.

Derived quantities (readouts, device physics, ...) are the ``providers`` given to
:func:`run_case`: each entry is a function ``derive(result) -> Derived`` that
adds entries to ``summary.json``, arrays to ``fields.vtu``, warnings, and
extra files to the output folder. They run after the solve and never change
the fields.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np

from mesastrain.fem.assembly import Discretisation, assemble, rigid_body_modes
from mesastrain.case.types import Case
from mesastrain.errors import CaseError, ResourceError, SolverError
from mesastrain.fem.fields import Fields, evaluate_at_points, hydrostatic, principal, recover, von_mises
from mesastrain.fem.discretisation import discretise_mesh
from mesastrain.mesh.structured import Boundary, StackMesh, build_stack_mesh
from mesastrain.model.regions import LayerModel, build_layers
from mesastrain.fem.constraints import reduce_dofs, reduce_system, tie_faces
from mesastrain.run.resources import available_memory_gb, estimate, geometry_of, mesh_kind
from mesastrain.fem.solve import SolverReport, solve_condensed, solver_options
from mesastrain.model.symmetry import Symmetry, reflect_points, reflect_tensors
from mesastrain.model.symmetry import decide as decide_symmetry
from mesastrain.mesh.unfold import unfold_model

log = logging.getLogger(__name__)


@dataclass
class Derived:
    """What one derived-quantity provider adds to a result.

    Attributes
    ----------
    summary : dict
        Top-level entries merged into ``summary.json``.
    probe_entries : dict of str -> list
        Per-probe entries (one list item per probe, in probe order) merged into
        each ``summary.json`` probe.
    cell_data, point_data : dict of str -> ndarray
        Arrays added to ``fields.vtu`` (tensors already as 6 components).
    warnings : list of str
    files : dict of str -> callable(Path)
        Extra files: name in the output folder -> function that writes it.
    """

    summary: dict = field(default_factory=dict)
    probe_entries: dict = field(default_factory=dict)
    cell_data: dict = field(default_factory=dict)
    point_data: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    files: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Result:
    """Everything a run produced, in memory.

    Attributes
    ----------
    case : Case
    layers : list of LayerModel
        Substrate first.
    mesh : StackMesh, UnstructuredMesh or SectionMesh
        The whole modelled body (a half or quarter model is unfolded after
        the solve). ``mesh.mesh`` is a 3-D scikit-fem mesh (a cross-section
        is exported as a thin slab), ``mesh.layer`` the region per element.
    disc : Discretisation
        Of the whole body (for a mirrored model a
        :class:`mesastrain.mesh.unfold.MirroredDiscretisation`).
    u : ndarray (ndofs,)
        Displacement, nm, node-major (a cross-section: per node of the section).
    fields : Fields
    solver : SolverReport
    probes : list of dict
    timings : dict of str -> float, s
    warnings : list of str
    derived : list of Derived
    """

    case: Case
    layers: list
    mesh: StackMesh
    disc: Discretisation
    u: np.ndarray = field(repr=False)
    fields: Fields = field(repr=False)
    cell_eigenstrain: np.ndarray | None = field(default=None, repr=False)
    solver: SolverReport = None
    probes: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    derived: list = field(default_factory=list)

    @property
    def order(self) -> int:
        return self.disc.order

    @property
    def stiffness(self) -> np.ndarray:
        """(nregions, 6, 6) sample-frame stiffness per region, GPa."""
        return np.array([lm.stiffness_sample for lm in self.layers])

    @property
    def eigenstrain(self) -> np.ndarray:
        """(nregions, 3, 3) sample-frame eigenstrain per region."""
        return np.array([lm.eigenstrain_sample for lm in self.layers])

    def sample(self, points: np.ndarray, key: str = "point"):
        """Exact fields at points.

        Parameters
        ----------
        points : array (npts, 3), nm
        key : str
            Name used in the error message for a point outside the body.

        Returns
        -------
        strain : ndarray (npts, 3, 3)
            Elastic strain, sample frame.
        stress : ndarray (npts, 3, 3)
            MPa, sample frame.
        displacement : ndarray (npts, 3)
            nm.
        region : ndarray of int (npts,)
            Region index (0 substrate, i layer i).
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        mirrors = tuple(getattr(self.mesh, "mirrors", ()))
        q, signs = reflect_points(pts, mirrors)
        elems = self.mesh.locate(q)
        bad = np.flatnonzero(elems < 0)
        if bad.size:
            raise CaseError(key, f"{pts[bad[0]].tolist()} nm lies outside the modelled body "
                                 f"({_extent_text(self.mesh)})")
        evaluate = getattr(self.mesh, "evaluate", None) or evaluate_at_points
        strain, stress, disp = evaluate(self.disc, self.u, elems, q, self.mesh.layer,
                                        self.stiffness, self.eigenstrain, self.cell_eigenstrain)
        if mirrors:
            strain = reflect_tensors(strain, signs)
            stress = reflect_tensors(stress, signs)
            disp = disp * signs
        return strain, stress, disp, self.mesh.layer[elems]


def _extent_text(mesh) -> str:
    """The modelled extent in words, for error messages (mirrored axes shown whole)."""
    b = np.array(mesh.bounds, dtype=float)
    for a in getattr(mesh, "mirrors", ()):
        b[a, 0] = -b[a, 1]
    parts = []
    for a, name in enumerate("xyz"):
        if np.all(np.isfinite(b[a])):
            parts.append(f"{name} in [{b[a, 0]:g}, {b[a, 1]:g}]")
    return ", ".join(parts) + " nm"


def _boundary_dofs(disc, bounds) -> np.ndarray:
    """Roller conditions: u_z = 0 on the bottom, u_n = 0 on the four sides."""
    x = disc.doflocs
    (x0, x1), (y0, y1), z0 = bounds
    tol = 1e-9 * max(x1 - x0, y1 - y0)
    bottom = np.flatnonzero(np.abs(x[2] - z0) <= tol) * 3 + 2
    xside = np.flatnonzero((np.abs(x[0] - x0) <= tol) | (np.abs(x[0] - x1) <= tol)) * 3
    yside = np.flatnonzero((np.abs(x[1] - y0) <= tol) | (np.abs(x[1] - y1) <= tol)) * 3 + 1
    return np.unique(np.concatenate([bottom, xside, yside]))


def support_dofs(doflocs: np.ndarray, boundary: Boundary) -> np.ndarray:
    """Vector dofs held at zero by a :class:`mesastrain.mesh.structured.Boundary`.

    A dof is on a support plane when its coordinate is within 1e-9 of the
    model size of the plane. ``boundary.pin`` components are held at the one
    bottom dof nearest the vertical axis (removes the rigid translations a
    periodic cell or a cross-section would otherwise have).
    """
    x = np.asarray(doflocs, dtype=float)
    tol = 1e-9 * (float(np.max(np.ptp(x, axis=1))) or 1.0)
    parts = []
    for comp, axis, value in boundary.supports:
        parts.append(np.flatnonzero(np.abs(x[axis] - value) <= tol) * 3 + comp)
    if boundary.pin:
        bottom = np.flatnonzero(np.abs(x[2] - x[2].min()) <= tol)
        k = bottom[np.argmin(x[0, bottom] ** 2 + x[1, bottom] ** 2)]
        parts.append(np.array([3 * k + c for c in boundary.pin]))
    return np.unique(np.concatenate(parts)) if parts else np.zeros(0, dtype=np.int64)


def solve_model(K, f, disc: Discretisation, boundary: Boundary, solver, progress=None):
    """Apply supports and periodic ties, solve, and return the full displacement.

    Parameters
    ----------
    K, f : assembled stiffness and load
    disc : Discretisation
    boundary : Boundary
    solver : SolverSettings
        method, tolerance, max_iterations.
    progress : callable(str), optional

    Returns
    -------
    u : ndarray (ndofs,)
    report : SolverReport
    """
    fixed = support_dofs(disc.doflocs, boundary)
    modes = rigid_body_modes(disc.doflocs)
    if not boundary.periodic:
        return solve_condensed(K, f, fixed, modes, progress=progress, **solver_options(solver))
    ties = tie_faces(disc.doflocs, boundary.periodic)
    Kr, fr, P = reduce_system(K, f, ties)
    rows = (ties.independent[:, None] * 3 + np.arange(3)).ravel()
    ur, rep = solve_condensed(Kr, fr, reduce_dofs(fixed, ties), modes[rows], progress=progress,
                              **solver_options(solver))
    return P @ ur, rep


def build_model_mesh(case: Case, layers: list, sym: Symmetry):
    """The mesh object of a case, by pattern shape (see :func:`mesastrain.run.resources.mesh_kind`)."""
    kind = mesh_kind(case)
    if kind == "section":
        from mesastrain.mesh.section import build_section_mesh

        return build_section_mesh(case, mirrors=sym.mirrors)
    if kind == "gmsh":
        from mesastrain.mesh.shapes import build_shape_mesh

        return build_shape_mesh(case, mirrors=sym.mirrors)
    if kind == "file":
        from mesastrain.mesh.imported import case_mesh_from_file

        return case_mesh_from_file(case)
    geom, spacing = geometry_of(case, mirrors=sym.mirrors)
    return build_stack_mesh(geom, spacing)


def run_case(case: Case, progress=None, max_memory_gb: float | None = None,
             providers: Sequence[Callable] = (), eigenstrain_sources: Sequence[Callable] = ()
             ) -> Result:
    """Solve a case.

    Parameters
    ----------
    case : Case
    progress : callable(str), optional
        Receives one-line progress messages.
    max_memory_gb : float, optional
        Refuse cases whose estimated peak memory exceeds this (default: the
        memory the system reports as available).
    providers : sequence of callable(Result) -> Derived
        Derived-quantity providers run after the solve, in order
        (:data:`mesastrain.derived.PROVIDERS` is the standard list; empty: none).
    eigenstrain_sources : sequence of callable(case, layers, mesh) -> ndarray or None
        Extra per-element eigenstrains, sample frame, added to the regions' own
        (:data:`mesastrain.derived.EIGENSTRAIN_SOURCES` is the standard list).

    Returns
    -------
    Result

    Raises
    ------
    ResourceError
        The estimate exceeds the memory limit (nothing is allocated).
    SolverError
        The solve failed or produced non-finite values.
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
    sym = decide_symmetry(case, layers)
    sm = build_model_mesh(case, layers, sym)
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    extra = _extra_eigenstrain(eigenstrain_sources, case, layers, sm)
    if extra is not None and sym.mirrors:
        # an extra source need not share the mirror planes: solve the whole feature
        sym = decide_symmetry(case, layers, extra_eigenstrain=True)
        sm = build_model_mesh(case, layers, sym)
        extra = _extra_eigenstrain(eigenstrain_sources, case, layers, sm)
    disc = discretise_mesh(sm, case.mesh.order)
    timings["mesh"] = time.perf_counter() - t
    say(f"mesh: {sm.nnodes:,} nodes, {sm.nelems:,} {_element_word(sm)}, order {disc.order}, "
        f"{disc.ndofs:,} unknowns; {sym.name} model")
    t = time.perf_counter()
    K, f = assemble(disc, sm.layer, stiff, eig, extra)
    timings["assembly"] = time.perf_counter() - t
    say(f"assembly: {K.nnz:,} nonzeros in {timings['assembly']:.1f} s")
    t = time.perf_counter()
    solver = case.solver
    if getattr(sm, "kind", "") == "section" and solver.method == "auto":
        # a cross-section factorises cheaply (2-D fill-in); multigrid gains nothing there
        solver = replace(solver, method="direct")
    u, rep = solve_model(K, f, disc, sm.boundary(), solver, progress=say)
    timings["solve"] = time.perf_counter() - t
    say(f"solve: {rep.method}, {rep.iterations} iterations, residual {rep.residual:.1e}, "
        f"{timings['solve']:.1f} s")
    del K
    t = time.perf_counter()
    model = model_summary(sm, sym, disc)
    if sym.mirrors:   # reflect the solved part: everything downstream sees the whole body
        sm, disc, u = unfold_model(sm, disc, u)
    fl = recover(disc, u, sm.layer, stiff, eig, _n_vertices(sm), _element_vertices(sm), extra)
    expand = getattr(sm, "expand_fields", None)
    if expand is not None:
        fl = expand(fl)
    if not (np.all(np.isfinite(fl.cell_stress)) and np.all(np.isfinite(fl.displacement))):
        raise SolverError("the recovered fields contain NaN or Inf; nothing was written")
    res = Result(case=case, layers=layers, mesh=sm, disc=disc, u=u, fields=fl,
                 cell_eigenstrain=extra, solver=rep, timings=timings)
    res.derived.append(Derived(summary={"model": model}))
    res.probes.extend(evaluate_probes(res))
    timings["recovery"] = time.perf_counter() - t
    if providers:
        t = time.perf_counter()
        for provider in providers:
            d = provider(res)
            res.derived.append(d)
            res.warnings.extend(d.warnings)
        timings["derived"] = time.perf_counter() - t
    return res


def _extra_eigenstrain(sources, case, layers, sm):
    extra = None
    for source in sources:
        e = source(case, layers, sm)
        if e is not None:
            extra = e if extra is None else extra + e
    return extra


def _element_word(sm) -> str:
    return {"structured": "hexahedra", "section": "quadrilaterals (cross-section)"}.get(
        getattr(sm, "kind", ""), "tetrahedra")


def _n_vertices(sm) -> int:
    return int(getattr(sm, "solve_nnodes", sm.nnodes))


def _element_vertices(sm) -> np.ndarray:
    own = getattr(sm, "solve_mesh", None)
    return (own if own is not None else sm.mesh).t


def model_summary(sm, sym: Symmetry, disc: Discretisation) -> dict:
    """What was modelled: mesh kind, symmetry, periodic ties, boundary conditions."""
    b = sm.boundary()
    out = {"mesh_kind": getattr(sm, "kind", "structured"), **sym.to_dict(),
           "periodic_axes": ["xyz"[p[0]] for p in b.periodic],
           "element_order": disc.order,
           "boundary_conditions": _bc_text(b)}
    extra = getattr(sm, "description", "")
    if extra:
        out["description"] = extra
    return out


def _bc_text(b: Boundary) -> str:
    parts = []
    for comp, axis, value in b.supports:
        parts.append(f"u_{'xyz'[comp]} = 0 on {'xyz'[axis]} = {value:.6g} nm")
    for axis, lo, hi in b.periodic:
        parts.append(f"u periodic between {'xyz'[axis]} = {lo:.6g} and {hi:.6g} nm")
    if b.pin:
        parts.append(f"u_{''.join('xyz'[c] for c in b.pin)} = 0 at one bottom node "
                     f"(rigid translation)")
    return "; ".join(parts)


def evaluate_probes(res: Result) -> list[dict]:
    """Tensors at each probe of the case, in the sample and the crystal frame."""
    case = res.case
    if not case.probes:
        return []
    pts = np.array([p.at for p in case.probes], dtype=float)
    out = []
    for k, p in enumerate(case.probes):   # one call per probe: the error names the probe
        strain, stress, disp, region = res.sample(pts[k:k + 1], key=f"probe[{k}].at")
        lay: LayerModel = res.layers[int(region[0])]
        s, e = stress[0], strain[0]
        out.append({
            "name": p.name, "at": list(p.at), "layer": int(lay.index),
            "material": lay.material.label,
            "displacement": disp[0],
            "stress": s, "strain": e,
            "stress_crystal": lay.frame.to_crystal(s),
            "strain_crystal": lay.frame.to_crystal(e),
            "von_mises": float(von_mises(s)),
            "hydrostatic": float(hydrostatic(s)),
            "principal_stress": principal(s),
        })
    return out
