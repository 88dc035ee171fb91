"""From a validated case to solved fields.

    case -> model (materials, frames, eigenstrains) -> mesh -> assembly
         -> solve -> fields -> probes -> derived quantities

:func:`run_case` chains the stages; each is a function of the previous
stage's result. Writing the output folder is :mod:`mesastrain.output`'s job.

Derived quantities (readouts, device physics, ...) plug in through
:data:`DERIVED`: each entry is a function ``derive(result) -> Derived`` that
adds entries to ``summary.json``, arrays to ``fields.vtu``, warnings, and
extra files to the output folder. They run after the solve and never change
the fields.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .assembly import Discretisation, assemble, discretise, rigid_body_modes
from .casefile import Case
from .errors import CaseError, ResourceError, SolverError
from .fields import Fields, evaluate_at_points, hydrostatic, principal, recover, von_mises
from .meshing import StackMesh, build_stack_mesh
from .model import LayerModel, build_layers
from .sizing import available_memory_gb, estimate, geometry_of
from .solve import SolverReport, solve_condensed

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
    mesh : StackMesh
    disc : Discretisation
    u : ndarray (ndofs,)
        Displacement, nm, node-major.
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
        elems = self.mesh.locate(pts)
        bad = np.flatnonzero(elems < 0)
        if bad.size:
            sm = self.mesh
            raise CaseError(key, f"{pts[bad[0]].tolist()} nm lies outside the modelled body "
                                 f"(x in [{sm.xs[0]:g}, {sm.xs[-1]:g}], y in [{sm.ys[0]:g}, "
                                 f"{sm.ys[-1]:g}], z in [{sm.zs[0]:g}, {sm.zs[-1]:g}] nm)")
        strain, stress, disp = evaluate_at_points(self.disc, self.u, elems, pts, self.mesh.layer,
                                                  self.stiffness, self.eigenstrain,
                                                  self.cell_eigenstrain)
        return strain, stress, disp, self.mesh.layer[elems]


#: Derived-quantity providers run after every solve, in order.
DERIVED: list[Callable[[Result], Derived]] = []

#: Extra eigenstrain sources: ``source(case, layers, mesh) -> (nelems, 3, 3) or None``,
#: sample frame, added to the regions' eigenstrains (e.g. misfit dislocations).
EIGENSTRAIN_SOURCES: list[Callable] = []


def _boundary_dofs(disc, bounds) -> np.ndarray:
    """Roller conditions: u_z = 0 on the bottom, u_n = 0 on the four sides."""
    x = disc.doflocs
    (x0, x1), (y0, y1), z0 = bounds
    tol = 1e-9 * max(x1 - x0, y1 - y0)
    bottom = np.flatnonzero(np.abs(x[2] - z0) <= tol) * 3 + 2
    xside = np.flatnonzero((np.abs(x[0] - x0) <= tol) | (np.abs(x[0] - x1) <= tol)) * 3
    yside = np.flatnonzero((np.abs(x[1] - y0) <= tol) | (np.abs(x[1] - y1) <= tol)) * 3 + 1
    return np.unique(np.concatenate([bottom, xside, yside]))


def run_case(case: Case, progress=None, max_memory_gb: float | None = None,
             derive: bool = True) -> Result:
    """Solve a case.

    Parameters
    ----------
    case : Case
    progress : callable(str), optional
        Receives one-line progress messages.
    max_memory_gb : float, optional
        Refuse cases whose estimated peak memory exceeds this (default: the
        memory the system reports as available).
    derive : bool
        Run the derived-quantity providers of :data:`DERIVED`.

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
    from .plugins import register

    register()
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
    disc = discretise(sm.mesh, case.mesh.order)
    timings["mesh"] = time.perf_counter() - t
    say(f"mesh: {sm.nnodes:,} nodes, {sm.nelems:,} hexahedra, order {disc.order}, "
        f"{disc.ndofs:,} unknowns")
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    extra = None
    for source in EIGENSTRAIN_SOURCES:
        e = source(case, layers, sm)
        if e is not None:
            extra = e if extra is None else extra + e
    t = time.perf_counter()
    K, f = assemble(disc, sm.layer, stiff, eig, extra)
    timings["assembly"] = time.perf_counter() - t
    say(f"assembly: {K.nnz:,} nonzeros in {timings['assembly']:.1f} s")
    fixed = _boundary_dofs(disc, ((sm.xs[0], sm.xs[-1]), (sm.ys[0], sm.ys[-1]), sm.zs[0]))
    t = time.perf_counter()
    u, rep = solve_condensed(K, f, fixed, rigid_body_modes(disc.doflocs),
                             method=case.solver.method, tol=case.solver.tolerance,
                             maxiter=case.solver.max_iterations, progress=say)
    timings["solve"] = time.perf_counter() - t
    say(f"solve: {rep.method}, {rep.iterations} iterations, residual {rep.residual:.1e}, "
        f"{timings['solve']:.1f} s")
    del K
    t = time.perf_counter()
    fl = recover(disc, u, sm.layer, stiff, eig, sm.nnodes, sm.mesh.t, extra)
    if not (np.all(np.isfinite(fl.cell_stress)) and np.all(np.isfinite(fl.displacement))):
        raise SolverError("the recovered fields contain NaN or Inf; nothing was written")
    res = Result(case=case, layers=layers, mesh=sm, disc=disc, u=u, fields=fl,
                 cell_eigenstrain=extra, solver=rep, timings=timings)
    res.probes.extend(evaluate_probes(res))
    timings["recovery"] = time.perf_counter() - t
    if derive:
        t = time.perf_counter()
        for provider in DERIVED:
            d = provider(res)
            res.derived.append(d)
            res.warnings.extend(d.warnings)
        timings["derived"] = time.perf_counter() - t
    return res


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
