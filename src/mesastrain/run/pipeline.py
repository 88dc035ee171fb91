"""From a validated case to solved fields.

    case -> model (materials, frames, eigenstrains) -> symmetry decision
         -> mesh (structured hexahedra, stripe cross-section, gmsh tetrahedra or an
            imported mesh) -> assembly -> supports / periodic ties -> solve
         -> unfold a half/quarter model -> fields -> probes -> derived quantities

:func:`run_case` chains the stages; each is a function of the previous
stage's result. Writing the output folder is :mod:`mesastrain.io.folder`'s job.

The model's eigenstrain is the regions' own plus the sheets of the case's
misfit dislocations (:func:`mesastrain.model.dislocation_plan.dislocation_eigenstrain`),
plus an optional ``extra_eigenstrain`` given to :func:`run_case`.

Derived quantities (readouts, device physics, ...) are the ``providers`` given to
:func:`run_case`: each entry is a function ``derive(result) -> Derived`` that
adds entries to ``summary.json``, arrays to ``fields.vtu``, warnings, and
extra files to the output folder. They run after the solve and never change
the fields.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace

import numpy as np

from mesastrain.case.types import Case
from mesastrain.errors import ResourceError, SolverError
from mesastrain.fem.assembly import SymbolicCache, assemble
from mesastrain.fem.constraints import Boundary
from mesastrain.fem.cost import element_type
from mesastrain.fem.discretisation import Discretisation
from mesastrain.fem.fields import hydrostatic, principal, recover, von_mises
from mesastrain.fem.parallel import limited, thread_count
from mesastrain.fem.solve import solve_model
from mesastrain.mesh.base import ModelMesh
from mesastrain.mesh.kinds import build_mesh
from mesastrain.mesh.unfold import unfold_model
from mesastrain.model.dislocation_plan import dislocation_eigenstrain
from mesastrain.model.regions import LayerModel, build_layers
from mesastrain.model.symmetry import Symmetry
from mesastrain.model.symmetry import decide as decide_symmetry
from mesastrain.run.resources import available_memory_gb, estimate
from mesastrain.run.result import Derived, Result
from mesastrain.run.sensitivity import Sensitivities, groups_of, unfold_sensitivities

log = logging.getLogger(__name__)


def build_model_mesh(case: Case, layers: list, sym: Symmetry) -> ModelMesh:
    """The mesh object of a case, by its kind (:mod:`mesastrain.mesh.kinds`)."""
    return build_mesh(case, mirrors=sym.mirrors)


def run_case(case: Case, progress=None, max_memory_gb: float | None = None,
             providers: Sequence[Callable] = (), extra_eigenstrain: Callable | None = None
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
    extra_eigenstrain : callable(case, layers, mesh) -> ndarray or None, optional
        A further per-element eigenstrain, (nelems, 3, 3) sample frame, added to
        the regions' own and to the dislocation sheets (checks and studies; None
        adds nothing). Like the sheets, it need not share the mirror planes: a
        non-None answer on a mirrored mesh makes the run solve the whole feature.

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
    if not est.memory_gb <= limit:      # a NaN limit or estimate refuses too
        raise ResourceError(
            f"mesh: the case needs about {est.memory_gb:.1f} GB ({est.unknowns:,} unknowns) but "
            f"{limit:.1f} GB are allowed; raise mesh.size / mesh.edge_size or use mesh.order = 1")
    t = time.perf_counter()
    layers = build_layers(case)
    sym = decide_symmetry(case, layers)
    sm = build_model_mesh(case, layers, sym)
    stiff = np.array([lm.stiffness_sample for lm in layers])
    eig = np.array([lm.eigenstrain_sample for lm in layers])
    extra = _cell_eigenstrain(case, layers, sm, extra_eigenstrain)
    if extra is not None and sym.mirrors:
        # dislocation sheets (or an extra eigenstrain) need not share the mirror planes:
        # solve the whole feature
        sym = decide_symmetry(case, layers, extra_eigenstrain=True)
        sm = build_model_mesh(case, layers, sym)
        extra = _cell_eigenstrain(case, layers, sm, extra_eigenstrain)
    disc = sm.discretise(case.mesh.order)
    timings["mesh"] = time.perf_counter() - t
    solved = solved_system(sm, sym, disc)
    say(f"mesh: {solved['unknowns']:,} unknowns, {solved['nodes']:,} nodes, "
        f"{solved['elements']:,} {solved['element_type']}; {sym.name} model")
    t = time.perf_counter()
    cache = SymbolicCache(disc)
    K, f = assemble(disc, sm.region, stiff, eig, extra, cache=cache)
    timings["assembly"] = time.perf_counter() - t
    say(f"assembly: {K.nnz:,} nonzeros in {timings['assembly']:.1f} s")
    t = time.perf_counter()
    solver = case.solver
    if sm.kind == "section" and solver.method == "auto":
        # a cross-section factorises cheaply (2-D fill-in); multigrid gains nothing there
        solver = replace(solver, method="direct")
    sens = None
    if case.uncertainty.enabled:
        groups = groups_of(case, layers)
        if groups:
            sens = Sensitivities(case, groups, disc, sm.region, stiff, eig, extra, progress=say)
    u, rep = solve_model(K, f, disc, sm.boundary(), solver, progress=say,
                         spaces=cache.deferred_spaces(sm.region), follow_up=sens)
    timings["solve"] = time.perf_counter() - t
    if sens is not None:
        timings["sensitivities"] = float(sens.wall)
        timings["solve"] -= timings["sensitivities"]
    say(f"solve: {rep.method}, {rep.iterations} iterations, residual {rep.residual:.1e}, "
        f"{timings['solve']:.1f} s")
    del K, cache
    t = time.perf_counter()
    model = model_summary(sm, sym, disc)
    du = {} if sens is None else sens.du
    if sym.mirrors:   # reflect the solved part: everything downstream sees the whole body
        sm, disc, u = unfold_model(sm, disc, u)
        du = unfold_sensitivities(disc, du)
    fl = recover(disc, u, sm.region, stiff, eig, sm.solve_nnodes, sm.solve_mesh.t, extra)
    fl = sm.expand_fields(fl)
    if not (np.all(np.isfinite(fl.cell_stress)) and np.all(np.isfinite(fl.displacement))):
        raise SolverError("the recovered fields contain NaN or Inf; nothing was written")
    res = Result(case=case, layers=layers, mesh=sm, disc=disc, u=u, fields=fl,
                 cell_eigenstrain=extra, solver=rep, timings=timings, solved=solved,
                 sensitivities=du, scatter_groups=tuple(sens.groups) if sens is not None else ())
    res.derived.append(Derived(summary={"model": model}))
    res.probes.extend(evaluate_probes(res))
    timings["recovery"] = time.perf_counter() - t
    if providers:
        t = time.perf_counter()
        run_providers(res, providers, say)
        timings["derived"] = time.perf_counter() - t
    return res


def provider_name(provider) -> str:
    """A provider's name for progress lines: its module's last part (``readouts``)."""
    name = getattr(provider, "__module__", "").rsplit(".", 1)[-1] or "derived"
    return getattr(provider, "label", name)


def run_providers(res: Result, providers: Sequence[Callable], say=None,
                  workers: int | None = None) -> None:
    """Run derived-quantity providers on a result, side by side where they may.

    A provider's ``stage`` attribute (default 0) says what it reads: stage 0 only the
    solved result, stage k also the :class:`Derived` parts of every provider of a lower
    stage. The providers of one stage run at the same time on ``workers`` threads (numpy,
    scipy and LAPACK release the interpreter lock in their array work: two threads ran
    stage 0 of the demo mesa at 300k unknowns in 0.56 of the time on two cores); their
    parts are appended in the order of ``providers`` whatever the order they finish in,
    so ``summary.json`` and the warnings do not depend on the timing. The first failure
    is raised once the stage has finished. Within a stage the providers start heaviest
    first (their ``weight`` attribute: relative cost, default 1).

    Parameters
    ----------
    res : Result
        Receives ``derived`` parts and warnings.
    providers : sequence of callable(Result) -> Derived
        In output order; the stages must not decrease along it.
    say : callable(str), optional
    workers : int, optional
        Threads (default: the usable cores, or the environment variable
        ``MESASTRAIN_THREADS`` when set; 1 runs them one after the other).
    """
    say = say or (lambda msg: None)
    stages = [int(getattr(p, "stage", 0)) for p in providers]
    if stages != sorted(stages):
        raise ValueError("providers must be listed in the order of their stages")
    workers = thread_count() if workers is None else max(1, int(workers))
    n = len(providers)
    pool = ThreadPoolExecutor(workers) if workers > 1 else None
    try:
        for stage in sorted(set(stages)):
            idx = [i for i, s in enumerate(stages) if s == stage]
            for i in idx:
                say(f"derived quantities {i + 1} of {n}: {provider_name(providers[i])}")
            if pool is None or len(idx) == 1:
                parts = [providers[i](res) for i in idx]
            else:
                # the heaviest first (``weight``, default 1), so that the longest does not
                # start last and leave the other threads idle at the end of the stage
                order = sorted(idx, key=lambda i: -float(getattr(providers[i], "weight", 1)))
                futures = {i: pool.submit(_alongside, providers[i], res) for i in order}
                parts = [futures[i].result() for i in idx]
            for d in parts:
                res.derived.append(d)
                res.warnings.extend(d.warnings)
    finally:
        if pool is not None:
            pool.shutdown(wait=True)


def _alongside(provider, res: Result):
    """Run a provider on a pool thread beside others: its own array work is not split
    over threads again (:func:`mesastrain.fem.parallel.limited`)."""
    with limited(1):
        return provider(res)


def _cell_eigenstrain(case, layers, sm, extra_eigenstrain=None):
    """Per-element eigenstrain beyond the regions' own: dislocation sheets + the extra one.

    Returns
    -------
    ndarray (nelems, 3, 3) or None
        Sample frame; None when there is neither.
    """
    parts = [dislocation_eigenstrain(case, layers, sm)]
    if extra_eigenstrain is not None:
        parts.append(extra_eigenstrain(case, layers, sm))
    parts = [e for e in parts if e is not None]
    if not parts:
        return None
    return parts[0] if len(parts) == 1 else parts[0] + parts[1]


def solved_system(sm, sym: Symmetry, disc: Discretisation) -> dict:
    """The system that is solved (before a half/quarter model is unfolded).

    Returns
    -------
    dict
        ``unknowns`` (displacement degrees of freedom), ``nodes`` (mesh vertices),
        ``elements``, ``element_type`` in words (``"27-node hexahedra"``), ``order``
        and ``symmetry`` (``"full"``, ``"half"``, ``"quarter"``).
    """
    m = sm.solve_mesh
    shape = {(3, 8): "hexahedra", (3, 4): "tetrahedra", (2, 4): "quadrilaterals",
             (2, 3): "triangles"}.get((m.p.shape[0], m.t.shape[0]), sm.element_name)
    return {"unknowns": int(disc.ndofs), "nodes": int(sm.solve_nnodes),
            "elements": int(m.t.shape[1]),
            "element_type": element_type(shape, disc.order, section=m.p.shape[0] == 2),
            "order": int(disc.order), "symmetry": sym.name}


def model_summary(sm, sym: Symmetry, disc: Discretisation) -> dict:
    """What was modelled: mesh kind, symmetry, periodic ties, boundary conditions."""
    b = sm.boundary()
    out = {"mesh_kind": sm.kind, **sym.to_dict(),
           "periodic_axes": ["xyz"[p[0]] for p in b.periodic],
           "element_order": disc.order,
           "boundary_conditions": _bc_text(b)}
    if sm.description:
        out["description"] = sm.description
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
            "name": p.name, "at": list(p.at), "region": lay.name,
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
