"""Discretisation error of the run: an energy-norm estimate and an error bar per headline figure.

Two estimates, both a-posteriori (from the run itself, no reference solution):

1. **Energy norm, recovery based** (Zienkiewicz & Zhu, Int. J. Numer. Meth. Eng.
   24, 337 (1987); superconvergent patch recovery: Zienkiewicz & Zhu, Int. J.
   Numer. Meth. Eng. 33, 1331 (1992)). With sigma_h the finite-element stress and
   sigma* the recovered one (:mod:`mesastrain.fem.recovery`, per region, never
   averaged across an interface), the error of element e is

       eta_e^2 = int_e (sigma* - sigma_h) : S : (sigma* - sigma_h) dV,

   S the compliance of the element's material, integrated with a Gauss rule of
   degree 2 x order. The global relative error is

       eta = sqrt(sum eta_e^2 / (sum ||sigma_h||_e^2 + sum eta_e^2))

   (the percentage error of Zienkiewicz & Zhu 1987). ``eta_e^2 / V_e`` goes to
   ``fields.vtu`` as ``error_energy_density`` (MPa, i.e. MJ/m^3): where the mesh
   should be finer. It measures the whole stress field, including the
   singular edges and corners, and is no error bar for a single figure.

2. **Per figure: one coarser solve and one-level Richardson extrapolation**
   (Richardson, Phil. Trans. R. Soc. A 210, 307 (1911); Roache, Verification
   and Validation in Computational Science and Engineering, 1998, from memory).
   The case is solved again with every element size multiplied by
   :data:`COARSENING` = r (``mesh.refine`` divided by r: about 1/r^3 of the
   unknowns, 1/r^2 for a stripe section) and the headline figures are read
   from it the same way (:data:`COARSE_PROVIDERS`: only what the figures read).
   For a figure f converging as C h^p,

       f - f_h ~ (f_h - f_H) / (r^p - 1),

   with r the element-size ratio actually achieved at the figure's point (h_H /
   h_h of the elements holding it; an unstructured mesher need not coarsen a
   thin layer by r; Celik et al., J. Fluids Eng. 130, 078001 (2008)) and p the
   *nominal* rate of the element order k (:func:`nominal_rate`):
   p = k for point stresses and everything linear in them (centre and probe
   stresses, von Mises, Raman and band-gap shifts, the stand-off values and the
   relaxation length read from stress profiles). A dual-weighted-residual
   estimate (Becker & Rannacher, Acta Numerica 10, 1 (2001); Oden & Prudhomme,
   Comput. Math. Appl. 41, 735 (2001)) would need one adjoint solve per
   figure (tens of figures per run); the coarse solve serves all figures at a
   fraction of one solve. The wafer bow comes from its own small plate model
   (:func:`mesastrain.derived.bow.free_plate_curvature`, 27-node bricks,
   independent of the case's mesh); its bar is the same extrapolation with that
   model solved with half the elements through the substrate (where its result
   is most sensitive), rate 2.

The stand-off values are finite by construction but sit near a singular edge
whose field pollutes the convergence (the rate can fall below k); the bar
there is therefore the larger of the extrapolation and the recovery
difference |f(sigma*) - f(sigma_h)| the readouts already give
(``error_estimate``). The stress components at one point (centre, probe) share
one error tensor: each gets the largest of their bars, since one component's
change between the two meshes can vanish by accident. Singular figures (peaks
at sharp edges) get ``{"singular": true}`` and no bar. The effectivity of these bars (estimate /
error against a solve refined 3x) is measured by
``benchmarks/discretisation_validation.py`` (table in README.md) and checked in
``tests/unit/derived/test_discretisation_validation.py``.

Units: each error in its figure's unit.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from mesastrain.derived import device
from mesastrain.derived.bow import (
    PLATE_ELEMENTS,
    SUBSTRATE_ELEMENTS,
    blanket_stack,
    free_plate_curvature,
)
from mesastrain.derived.corners import default_standoff, edge_features, standoff_values
from mesastrain.derived.headline import headline_figures, merged_summary
from mesastrain.derived.relaxation import edge_relaxation
from mesastrain.derived.sampling import etch_floor, locate, sample_inside, stress_sampler
from mesastrain.errors import MesastrainError
from mesastrain.fem.discretisation import solved_elements
from mesastrain.fem.fields import elastic_state
from mesastrain.fem.parallel import map_threads, thread_count
from mesastrain.fem.recovery import recover_at
from mesastrain.mesh.planning import refinement_of
from mesastrain.physics.thinfilm import bow_height
from mesastrain.run.pipeline import run_case
from mesastrain.run.result import Derived

__all__ = ["COARSENING", "COARSE_PROVIDERS", "coarse_case", "coarse_solve", "derive", "energy",
           "energy_norm", "estimate", "figure_readouts", "nominal_rate"]

#: Element sizes of the extra solve are multiplied by this.
COARSENING = 2.0

#: Effective size ratios below this are taken as this (the coarse solve barely changed the
#: mesh there: the bar becomes large rather than infinite).
MIN_RATIO = 1.1

#: The wafer-bow plate model is small and independent of the case's mesh: its bar comes
#: from one solve with this many times fewer elements through the substrate.
BOW_COARSENING = 2


def figure_readouts(res) -> Derived:
    """The part of :func:`mesastrain.derived.readouts.derive` the headline figures read.

    Centre stress and relaxation lengths per layer and the stand-off values, from the
    same functions and with the same arguments (a test checks that they agree); none of
    the peaks, tractions, energies and critical thicknesses the coarse solve does not need.
    """
    case = res.case
    standoff = case.readouts.standoff if case.readouts.standoff else default_standoff(case)
    floor = etch_floor(res)
    feats = standoff_values(res, edge_features(res, standoff)) if floor is not None else []
    layers = {}
    for lm in res.layers:
        entry = {"region": lm.index}
        if lm.index > 0:
            lo = lm.z_bottom if floor is None else max(lm.z_bottom, floor)
            zmid = 0.5 * (lo + lm.z_top)
            _, c_sig, _, c_reg = sample_inside(res, [[0.0, 0.0, zmid]])
            if c_reg[0] >= 0:
                entry["centre_at"] = [0.0, 0.0, zmid]
                entry["centre_stress"] = c_sig[0]
                if floor is not None and lm.z_top > floor:
                    entry["relaxation"] = edge_relaxation(res, lm, zmid, c_sig[0])[0]
        layers[lm.name] = entry
    return Derived(summary={"readouts": {"layers": layers, "edges": feats}})


#: The providers the coarse solve runs: those whose summaries the headline figures read.
COARSE_PROVIDERS = (device.probe_readouts, figure_readouts)

METHOD = ("energy norm: superconvergent patch recovery, Zienkiewicz & Zhu 1987/1992; "
          "per figure: one extra solve with element sizes x2 and one-level Richardson "
          "extrapolation with the element order's nominal rate at the element-size ratio "
          "achieved there (stand-off values: the larger of that and the recovery difference; "
          "stress components at one point: the largest of their bars)")


def nominal_rate(kind: str, order: int) -> int:
    """Nominal convergence rate p of a headline figure of ``kind`` for elements of ``order``.

    Point stresses and anything linear in them converge as h^k for elements of
    order k in a smooth region (Strang & Fix, An Analysis of the Finite Element
    Method, 1973, from memory). The bow of the plate model (27-node bricks) is
    taken at rate 2 through the substrate thickness; against plate models with 2x
    the elements each way this gave effectivities of 1.2-1.3 for two stacks (a SiGe
    layer on 50 um Si and the demo stack).
    """
    if kind == "bow":
        return 2
    return int(order)


def coarse_case(case, ratio: float = COARSENING):
    """The case with every element size multiplied by ``ratio`` (no further studies: no
    convergence study, error estimate or material-scatter solves of its own)."""
    mesh = dataclasses.replace(case.mesh, refine=refinement_of(case) / ratio,
                               convergence=False, error_estimate=False)
    return dataclasses.replace(case, mesh=mesh,
                               uncertainty=dataclasses.replace(case.uncertainty, enabled=False))


# --------------------------------------------------------------------------
# energy norm (Zienkiewicz & Zhu)
# --------------------------------------------------------------------------
_REFDOM = {"hex": "RefHex", "quad": "RefQuad", "tet": "RefTet", "tri": "RefTri"}

#: Elements per batch of the energy-norm integration (bounds the temporaries, about 1 kB
#: per element; each batch also builds the vertex-element incidence of the whole mesh).
CHUNK = 100000


def _voigt(s: np.ndarray) -> np.ndarray:
    """(..., 3, 3) -> (..., 6) in the order 11, 22, 33, 23, 13, 12."""
    return np.stack([s[..., 0, 0], s[..., 1, 1], s[..., 2, 2],
                     s[..., 1, 2], s[..., 0, 2], s[..., 0, 1]], axis=-1)


def _brick_rule(disc):
    """(points (3, nq), weights (nq,)) of a brick discretisation's Gauss rule, else None.

    A mirrored discretisation answers for its parent (the images keep the local node
    order, so the same reference points apply).
    """
    d = getattr(disc, "parent", None) or disc
    b = getattr(d, "bricks", None)
    return None if b is None else (b.points, b.qweights)


def _brick_stress(res, el: np.ndarray) -> np.ndarray:
    """Finite-element stress (n, nq, 9), MPa, at the Gauss points of brick elements."""
    disc = res.disc
    g = disc.gradients(el)                                               # (n, nq, a, 3)
    ue = np.take(res.u.reshape(-1, 3), disc.element_dofs[:, el].T, axis=0)  # (n, a, 3)
    grad = np.einsum("nai,nqaj->nqij", ue, g, optimize=True)        # (3.5x faster, measured)
    tot = 0.5 * (grad + grad.transpose(0, 1, 3, 2))
    nq = g.shape[1]
    _, sig = elastic_state(tot.reshape(-1, 3, 3), np.repeat(el, nq), np.asarray(res.mesh.region),
                           res.stiffness, res.eigenstrain, res.cell_eigenstrain)
    return sig.reshape(el.size, nq, 9)


def energy_norm(res, closed_form: bool = True, use_mirrors: bool = True) -> dict:
    """Recovery-based energy-norm error of the whole stress field.

    ``closed_form`` and ``use_mirrors`` (the fast paths: brick Gauss points, the solved
    part of a mirrored model only) are switched off only by the tests that check them.

    Returns
    -------
    dict
        ``relative`` (eta, a fraction), ``elements`` (eta_e^2 per element,
        MPa nm^3), ``volume`` (nm^3, the element volumes the integrals used; per
        unit thickness on a cross-section), ``energy`` (sum of ||sigma_h||_e^2,
        MPa nm^3), ``seconds``.
    """
    import skfem.refdom as refdom
    from skfem.quadrature import get_quadrature

    t0 = time.perf_counter()
    sm = stress_sampler(res)
    m = sm.mesh
    nel = m.t.shape[1]
    region = np.asarray(res.mesh.region)
    X, W = get_quadrature(getattr(refdom, _REFDOM[sm.kind]), 2 * res.order)
    nq = W.size
    # compliance per region, 1/MPa, engineering shear (Voigt)
    S = np.linalg.inv(np.asarray(res.stiffness, dtype=float) * 1e3)
    err = np.zeros(nel)
    nrm = np.zeros(nel)
    vol = np.zeros(nel)
    bricks = _brick_rule(res.disc) if closed_form else None
    if bricks is not None:         # closed-form gradients at the bricks' own Gauss points
        X, W = bricks
        nq = W.size
    # a mirrored model: integrate over the solved part only (the images are its
    # reflections, with the same element errors), then copy
    n_own = solved_elements(res.disc) if use_mirrors else nel
    emap = res.disc.elem_map if n_own < nel else None

    def integrate(start: int, step: int) -> None:
        """eta_e^2, ||sigma_h||_e^2 and volumes of one block of elements (written in place)."""
        el = np.arange(start, min(start + step, n_own))
        Xr = np.repeat(X[:, None, :], el.size, axis=1)                  # (dim, n, nq)
        if bricks is not None:
            sig = _brick_stress(res, el)
            dw = res.disc.weights(el)
        else:
            _, sig = sm.sample(el, Xr)                                   # (n, nq, 9)
            dw = np.abs(sm.mapping.detDF(Xr, tind=el)) * W[None, :]      # (n, nq)
        e_q = np.repeat(el, nq)
        X_q = np.tile(X, (1, el.size))                                   # (dim, n*nq)
        xq = np.moveaxis(sm.mapping.F(Xr, tind=el), 0, -1).reshape(-1, X.shape[0])
        rec, _ = recover_at(m.p, m.t[:len(sm.vertex_ref)], region, e_q, X_q, sm.kind,
                            res.order, sm.vertex_ref, sm.sample, coords=xq, symmetric=True)
        s6 = _voigt(sig.reshape(-1, 3, 3))
        d6 = _voigt(rec.reshape(-1, 3, 3)) - s6
        ed, en = np.empty(len(e_q)), np.empty(len(e_q))
        rq = region[e_q]
        for r in np.unique(rq):                  # sigma : S : sigma, one compliance per region
            sel = rq == r
            ed[sel] = np.einsum("qi,qi->q", d6[sel] @ S[r], d6[sel])
            en[sel] = np.einsum("qi,qi->q", s6[sel] @ S[r], s6[sel])
        err[el] = (ed.reshape(el.size, nq) * dw).sum(axis=1)
        nrm[el] = (en.reshape(el.size, nq) * dw).sum(axis=1)
        vol[el] = dw.sum(axis=1)

    # blocks are independent: on several cores they run side by side, half as large (so the
    # temporaries held at once stay those of one full block)
    threads = thread_count()
    step = CHUNK if threads == 1 else max(CHUNK // threads, 1)
    map_threads(lambda s0: integrate(s0, step), range(0, n_own, step), threads)
    if n_own < nel:
        err, nrm, vol = err[emap], nrm[emap], vol[emap]
    total = float(err.sum() + nrm.sum())
    rel = float(np.sqrt(err.sum() / total)) if total > 0 else 0.0
    return {"relative": rel, "elements": err, "volume": vol, "energy": float(nrm.sum()),
            "seconds": time.perf_counter() - t0}


# --------------------------------------------------------------------------
# per figure: one coarser solve
# --------------------------------------------------------------------------
def _local_size(res, points: np.ndarray, dim: int) -> np.ndarray:
    """Element size at points, nm: the dim-th root of the holding element's measure."""
    v = np.full(len(points), np.nan)
    if len(points):
        e = locate(res, points)
        ok = e >= 0
        v[ok] = res.fields.cell_volume[e[ok]]
    return v ** (1.0 / dim)


def _coarse_values(res, ratio: float) -> tuple[dict, dict, dict]:
    """Headline figures of the coarser solve, the effective size ratio per figure, the cost.

    The effective ratio r of a figure at a point is h_coarse / h_fine of the elements
    holding the point; elsewhere (relaxation lengths) the global one, (N_fine /
    N_coarse)^(1/d) with N the unknowns and d the dimension of the mesh (Celik et al.,
    J. Fluids Eng. 130, 078001 (2008)). An unstructured mesher need not scale its
    elements everywhere by the ratio asked for (sizes bounded by thin layers).
    """
    t0 = time.perf_counter()
    early = _handed_off(res, ratio)
    if early is not None:
        coarse, seconds = early
    else:
        coarse, seconds = _solve_coarse(res.case, ratio)
    dim = res.disc.basis.mesh.p.shape[0]
    r_global = float((res.u.size / coarse.u.size) ** (1.0 / dim))
    figs = [f for f in headline_figures(res) if f.at is not None]
    pts = np.array([f.at for f in figs], dtype=float).reshape(-1, 3)
    r_local = _local_size(coarse, pts, dim) / _local_size(res, pts, dim)
    ratios = {f.name: (float(r) if np.isfinite(r) else r_global) for f, r in zip(figs, r_local)}
    vals = {f.name: f.value for f in headline_figures(coarse)}
    info = {"unknowns": int(coarse.u.size), "elements": int(coarse.mesh.nelems),
            "effective_ratio": r_global,
            "seconds": (time.perf_counter() - t0) + (seconds if early is not None else 0.0)}
    return vals, ratios, info


def _solve_coarse(case, ratio: float):
    """The coarser solve of a case with the providers its figures need, and its seconds."""
    t0 = time.perf_counter()
    coarse = run_case(coarse_case(case, ratio), providers=COARSE_PROVIDERS,
                      max_memory_gb=float("inf"))
    return coarse, time.perf_counter() - t0


def _handed_off(res, ratio: float):
    """(coarse result, seconds) that :func:`coarse_solve` handed over for this ratio, taken
    out of its part (not held any longer), or None. A failure it met is raised here."""
    for d in res.derived:
        got = d.handoff.get(HANDOFF)
        if got is not None and got[0] == ratio:
            del d.handoff[HANDOFF]
            if isinstance(got[1], BaseException):
                raise got[1]
            return got[1], got[2]
    return None


def _bow_values(res) -> tuple[float, float] | None:
    """Bow height (um) of the plate model on its own mesh and with half the elements
    through the substrate.

    The plate model's result moves more with the elements through the substrate than
    with those across it (measured: 1, 2, 4 through and 8, 12, 16, 24 across); one
    element through instead of two costs less than the model itself.
    """
    s = merged_summary(res)
    fe = (s.get("wafer_bow") or {}).get("finite_element")
    if not fe:
        return None
    stiff, eig, zb, zt = blanket_stack(res)
    r = free_plate_curvature(stiff, eig, zb, zt, n_xy=PLATE_ELEMENTS,
                             n_sub=max(1, SUBSTRATE_ELEMENTS // BOW_COARSENING))
    coarse = float(bow_height(r["mean"], res.case.readouts.wafer_diameter)) * 1e-3
    return float(fe["bow_height"]), coarse


def estimate(res, ratio: float = COARSENING) -> dict:
    """The ``discretisation_error`` summary entry of a result (see the module text).

    Parameters
    ----------
    res : Result
        With the readout, device and bow providers already run.
    ratio : float
        Element-size ratio of the extra solve (> 1).

    Returns
    -------
    dict
        ``method``, ``energy_norm`` (``relative`` and how it was obtained),
        ``coarse_solve`` (unknowns, elements, seconds, ratio) and ``figures``:
        name -> ``{"error", "relative", "basis", "rate"}`` for every non-singular
        headline figure, ``{"singular": true}`` for singular ones; the names of
        figures the coarser solve did not give under ``not_on_coarse_mesh``.
    """
    figs = headline_figures(res)
    coarse, ratios, info = _coarse_values(res, ratio)
    info["ratio"] = ratio
    t = time.perf_counter()
    bows = _bow_values(res) if any(f.kind == "bow" for f in figs) else None
    info["bow_seconds"] = time.perf_counter() - t
    recovery = _standoff_recovery_errors(res)
    out, missing = {}, []
    for f in figs:
        if f.singular:
            out[f.name] = {"singular": True}
            continue
        p = nominal_rate(f.kind, res.order)
        if f.kind == "bow":
            if bows is None:
                continue
            fine, crude = bows
            basis = (f"plate model with {BOW_COARSENING}x fewer elements through the "
                     f"substrate, Richardson, rate {p}")
            err = abs(fine - crude) / (BOW_COARSENING ** p - 1.0)
        else:
            crude = coarse.get(f.name)
            if crude is None:
                missing.append(f.name)
                continue
            r = max(ratios.get(f.name, info["effective_ratio"]), MIN_RATIO)
            basis = (f"solve with coarser elements (size ratio {r:.2g} there), Richardson, "
                     f"rate {p}")
            err = abs(f.value - crude) / (r ** p - 1.0)
        if f.kind == "standoff" and recovery.get(f.name) is not None:
            if recovery[f.name] > err:
                basis = "recovered minus finite-element value at the point (larger than " \
                        "the coarse-solve extrapolation)"
            err = max(err, recovery[f.name])
        out[f.name] = {"error": float(err), "relative": float(err / abs(f.value))
                       if f.value else None, "basis": basis, "rate": p}
    _share_within_tensors(figs, out)
    out_ = {"method": METHOD, "coarse_solve": info, "figures": out}
    if missing:       # e.g. a relaxation length the coarser mesh does not resolve
        out_["not_on_coarse_mesh"] = missing
    return out_


#: Figure kinds whose figures at one point are components of one stress tensor.
TENSOR_KINDS = ("centre", "probe")


def _share_within_tensors(figs, out: dict) -> None:
    """Give every stress component at a point the largest bar among them (in place).

    The stress components at a point share one error tensor; a single component's
    change between the meshes can be small by accident (its error changes sign), so
    each gets the largest of the point's bars (von Mises included).
    """
    groups: dict = {}
    for f in figs:
        if f.kind in TENSOR_KINDS and f.at is not None and "error" in out.get(f.name, {}):
            groups.setdefault((f.kind, f.at), []).append(f)
    for members in groups.values():
        big = max(out[f.name]["error"] for f in members)
        for f in members:
            e = out[f.name]
            if e["error"] < big:
                e["error"] = big
                e["relative"] = big / abs(f.value) if f.value else None
                e["basis"] += "; the largest bar of the stress components at the point"


def _standoff_recovery_errors(res) -> dict:
    """The readouts' recovery-based bars of the stand-off figures, by headline name."""
    s = merged_summary(res)
    figs = {f.name: f for f in headline_figures(res) if f.kind == "standoff"}
    out = {}
    for edge in (s.get("readouts") or {}).get("edges", []):
        for region, v in (edge.get("values") or {}).items():
            for q in ("von_mises", "peel"):
                for name, f in figs.items():
                    if (f.region == region and name.endswith(f" {q}") and v.get(q) is not None
                            and f.value == float(v[q])):
                        e = (v.get("error_estimate") or {})
                        e = e.get(q) if isinstance(e, dict) else None
                        if e is not None:
                            out[name] = float(e)
    return out


def energy(res) -> Derived:
    """The energy-norm part of the estimate (stage 0: it reads only the solved fields).

    Its ``summary["discretisation_error"]["energy_norm"]`` is taken over by
    :func:`derive`, which runs after the readouts; the cell array
    ``error_energy_density`` (eta_e^2 / V_e, MPa) goes to ``fields.vtu``.
    """
    if not getattr(res.case.mesh, "error_estimate", True):
        return Derived()
    en = energy_norm(res)
    density = np.divide(en["elements"], en["volume"], out=np.zeros_like(en["volume"]),
                        where=en["volume"] > 0)
    entry = {
        "relative": en["relative"],
        "definition": "sqrt(sum eta_e^2 / (sum ||sigma_h||^2 + sum eta_e^2)), eta_e the "
                      "energy norm of sigma* - sigma_h in element e, sigma* recovered by "
                      "superconvergent patch recovery per region (Zienkiewicz & Zhu 1987, "
                      "1992); it includes the singular edges and corners",
        "seconds": en["seconds"]}
    cell = {"error_energy_density": density} if density.size == res.mesh.nelems else {}
    return Derived(summary={"discretisation_error": {"energy_norm": entry}}, cell_data=cell)


#: Key of the coarser solve in :attr:`Derived.handoff`: (ratio, Result or the exception it
#: raised, seconds).
HANDOFF = "discretisation.coarse_solve"


def coarse_solve(res) -> Derived:
    """The coarser solve of the estimate, run early (stage 0: it reads only the case).

    It runs beside the other stage-0 providers instead of after them, and hands its
    result to :func:`derive` (stage 1), which reads the figures from it; alone after
    stage 0 it kept one core busy and the other idle (3.3 s at 270k unknowns on the
    tetrahedral pad). A failure is handed over too and reported by :func:`derive`.
    """
    if not getattr(res.case.mesh, "error_estimate", True):
        return Derived()
    t0 = time.perf_counter()
    try:
        coarse, seconds = _solve_coarse(res.case, COARSENING)
        return Derived(handoff={HANDOFF: (COARSENING, coarse, seconds)})
    except (MesastrainError, np.linalg.LinAlgError) as exc:
        return Derived(handoff={HANDOFF: (COARSENING, exc, time.perf_counter() - t0)})


def derive(res) -> Derived:
    """``summary["discretisation_error"]`` (with ``mesh.error_estimate``; default on).

    Stage 1 (after the readouts, whose figures it reads). The energy norm comes from
    :func:`energy` when that provider ran before; otherwise it is computed here, with
    the cell array ``error_energy_density``.
    """
    if not getattr(res.case.mesh, "error_estimate", True):
        return Derived()
    t0 = time.perf_counter()
    early = next((d for d in res.derived
                  if "energy_norm" in d.summary.get("discretisation_error", {})), None)
    if early is None:
        early = energy(res)
        cell = early.cell_data
    else:
        cell = {}
    warnings = []
    try:
        summary = estimate(res)
    except (MesastrainError, np.linalg.LinAlgError) as exc:   # the run itself stands
        summary = {"method": METHOD, "figures": {}, "coarse_solve": {"failed": str(exc)}}
        warnings.append(f"discretisation error: the coarser solve failed ({exc}); only the "
                        f"energy norm is given")
    en = early.summary["discretisation_error"]["energy_norm"]
    summary["energy_norm"] = en
    summary["seconds"] = time.perf_counter() - t0 + en["seconds"]
    return Derived(summary={"discretisation_error": summary}, cell_data=cell, warnings=warnings)


coarse_solve.label = "discretisation error (coarser solve)"
coarse_solve.weight = 3   # a whole solve of 1/8 of the unknowns: start it first
energy.label = "discretisation error (energy norm)"
energy.weight = 3     # the heaviest of stage 0 (patch recovery at every Gauss point)
derive.stage = 1
