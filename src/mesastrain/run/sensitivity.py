"""First-order sensitivities of the displacement to the material data.

For each constant group that carries a published spread (a material's stiffness
constants, its lattice constant or lattice law, its thermal expansion) the
material data move along the spread's direction, p(t) = p + t dp, t = 1 being
the full spread (:class:`mesastrain.physics.material_record.Spread`). The
displacement then moves by t du with

    K du = dF/dt - (dK/dt) u,

one extra right-hand side on the operator of the main solve, solved with its
factorisation or multigrid hierarchy still alive
(:func:`mesastrain.fem.solve.solve_condensed`, ``follow_up``). K is linear in the
region stiffnesses and F bilinear in stiffness and eigenstrain, so dK/dt and dF/dt
come from the region arrays' central differences at t = +-h
(:data:`STEP`): dK/dt is exact, dF/dt exact in the stiffness and second-order
accurate in the eigenstrain (which depends on the lattice constants through a
ratio). (dK/dt) u is applied element by element
(:func:`mesastrain.fem.assembly.apply_stiffness`), so no second matrix is held
beside the main solve's.

:func:`varied_result` gives the :class:`Result` of the varied material data to
first order, u + t du with the varied constants; the derived provider
:mod:`mesastrain.derived.scatter` evaluates the headline figures on it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from mesastrain.case.types import Case
from mesastrain.fem.assembly import apply_stiffness, assemble_load
from mesastrain.fem.parallel import map_threads
from mesastrain.model.regions import build_layers
from mesastrain.physics.material_record import varied
from mesastrain.run.result import Result

__all__ = ["STEP", "Group", "Sensitivities", "groups_of", "unfold_sensitivities",
           "varied_layers", "varied_result"]

#: Step of the central differences of the region arrays, as a fraction of the spread.
STEP = 1e-3

#: Which spread quantities each ``[uncertainty] groups`` kind covers, and the group label.
KIND_OF = {"stiffness": "stiffness", "lattice": "lattice", "lattice law": "lattice",
           "alpha": "alpha"}
_LABEL = {"stiffness": "C_ij", "lattice": "lattice constant", "lattice law": "lattice law",
          "alpha": "thermal expansion"}


@dataclass(frozen=True)
class Group:
    """One constant group: one material's one quantity, moved along its spread.

    Attributes
    ----------
    name : str
        E.g. ``"SiGe lattice law"``, ``"GaAs C_ij"``; unique within a run.
    kind : str
        ``stiffness``, ``lattice`` or ``alpha`` (``[uncertainty] groups``).
    material : str
        The material name the layers use (every region of that name moves).
    quantity : str
        The spread's quantity (``stiffness``, ``lattice``, ``lattice law``, ``alpha``).
    spreads : tuple of dict
        The spread of each distinct composition in the stack (:meth:`Spread.to_dict`
        plus ``label`` and ``relative``), for the summary.
    """

    name: str
    kind: str
    material: str
    quantity: str
    spreads: tuple = ()

    def resolver(self, case: Case, t: float):
        """``(name, x) -> Material`` with this group's constants moved by t spreads."""
        def resolve(name, x=None):
            m = case.material(name, x)
            s = m.spread(self.quantity) if m.name == self.material else None
            return m if s is None else varied(m, s, t)
        return resolve


def groups_of(case: Case, layers: list, kinds=None) -> list[Group]:
    """The constant groups of a run: every (material, quantity) with a spread.

    Parameters
    ----------
    case : Case
    layers : list of LayerModel
    kinds : iterable of str, optional
        Kinds to vary (default ``case.uncertainty.groups``); ``alpha`` only
        counts with a ``[thermal]`` table, ``lattice`` only for epitaxial layers.

    Returns
    -------
    list of Group
        In the order the materials first appear (substrate first).
    """
    kinds = set(case.uncertainty.groups if kinds is None else kinds)
    found: dict = {}
    for lm in layers:
        mat = lm.material
        for s in mat.spreads:
            kind = KIND_OF.get(s.quantity)
            if kind not in kinds or (kind == "alpha" and case.thermal is None):
                continue
            if kind == "lattice" and lm.index > 0 and not lm.epitaxial:
                continue
            if kind == "lattice" and lm.index == 0 and len(layers) > 1 and not any(
                    x.epitaxial and x.relaxed < 1.0 for x in layers[1:]):
                continue
            key = (mat.name, s.quantity)
            entry = {**s.to_dict(), "label": mat.label, "relative": s.relative(mat)}
            if key not in found:
                found[key] = Group(f"{mat.name} {_LABEL[s.quantity]}", kind, mat.name,
                                   s.quantity, (entry,))
            elif all(e["label"] != mat.label for e in found[key].spreads):
                g = found[key]
                found[key] = replace(g, spreads=g.spreads + (entry,))
    return list(found.values())


def varied_layers(case: Case, group: Group, t: float) -> list:
    """The stack's regions with the group's constants moved by ``t`` spreads."""
    return build_layers(case, material=group.resolver(case, t))


def _region_arrays(layers) -> tuple[np.ndarray, np.ndarray]:
    return (np.array([lm.stiffness_sample for lm in layers]),
            np.array([lm.eigenstrain_sample for lm in layers]))


class Sensitivities:
    """The follow-up of the main solve that computes du for each group.

    Call it as ``follow_up(u, solve)`` (:func:`mesastrain.fem.solve.solve_condensed`);
    afterwards :attr:`du` maps each group name to its displacement derivative
    (ndofs of the solved part, nm per spread), :attr:`seconds` to the time it took
    (groups solved side by side overlap), and :attr:`wall` is the wall time of all.

    Parameters
    ----------
    case : Case
    groups : list of Group
    disc : Discretisation
        Of the solved part.
    region : ndarray of int
    stiffness, eigenstrain : ndarray
        The region arrays of the main solve.
    cell_eigenstrain : ndarray or None
    tol, stress_tol : float
        Tolerances of the extra iterative solves: a band is quoted to two digits,
        so a relative residual of 1e-4 and an estimated energy error of 1 % of du
        suffice; the main solve keeps its own, tighter ones. Measured on the demo
        mesa at 200k unknowns against extra solves to 1e-8: 57 bands moved by at most
        0.3 % (one of 0.098 MPa, a stress at the free top, by 0.002 MPa); over every
        demo case no band entry moved by more than 1 %; 8 instead of 13 iterations at
        1M. Each extra solve starts from the multiple of the main solution closest in
        the energy norm (:func:`mesastrain.fem.solve.solve_condensed`): the lattice-law
        group, whose right-hand side is nearly such a multiple, then takes 2 iterations
        instead of 9 (demo mesa, 300k unknowns), and against solves to 1e-8 the largest
        band difference fell from 0.8 % to 0.09 % (demo mesa) and from 3 % to 0 (the
        strained-Si channel's lattice-law band of a near-zero sigma_zz, 0.31 against
        0.32 MPa). A direct solve is exact either way.
    threads : int, optional
        Groups solved at once (default :func:`mesastrain.fem.parallel.thread_count`).
    """

    def __init__(self, case, groups, disc, region, stiffness, eigenstrain, cell_eigenstrain,
                 tol: float = 1e-4, stress_tol: float = 1e-2, progress=None,
                 threads: int | None = None):
        self.case, self.groups, self.disc, self.region = case, groups, disc, region
        self.threads = threads
        self.stiffness, self.eigenstrain, self.extra = stiffness, eigenstrain, cell_eigenstrain
        self.tol, self.stress_tol = tol, stress_tol
        self.say = progress or (lambda msg: None)
        self.du: dict = {}
        self.seconds: dict = {}
        self.wall = 0.0

    def rhs(self, group: Group, u: np.ndarray) -> np.ndarray:
        """dF/dt - (dK/dt) u of one group (GPa nm^2), full dofs."""
        h = STEP
        sp_, ep = _region_arrays(varied_layers(self.case, group, h))
        sm_, em = _region_arrays(varied_layers(self.case, group, -h))
        dC = (sp_ - sm_) / (2 * h)
        de = (ep - em) / (2 * h)
        r = np.zeros(self.disc.ndofs)
        if np.any(dC):
            r += assemble_load(self.disc, self.region, dC, self.eigenstrain, self.extra)
            r -= apply_stiffness(self.disc, self.region, dC, u)     # no second matrix held
        if np.any(de):
            r += assemble_load(self.disc, self.region, self.stiffness, de, None)
        return r

    def __call__(self, u: np.ndarray, solve) -> None:
        def one(g: Group) -> tuple[np.ndarray, float]:
            t = time.perf_counter()
            du = solve(self.rhs(g, u), self.tol, self.stress_tol)
            return du, time.perf_counter() - t

        t0 = time.perf_counter()
        # the groups' solves run side by side (numpy and scipy's matrix-vector products
        # release the interpreter lock; pyamg's Gauss-Seidel sweeps take turns); each
        # result is that of a solve on its own
        for g, (du, sec) in zip(self.groups, map_threads(one, self.groups, self.threads)):
            self.du[g.name], self.seconds[g.name] = du, sec
            self.say(f"sensitivity: {g.name} in {sec:.1f} s")
        self.wall = time.perf_counter() - t0


def unfold_sensitivities(full, du: dict) -> dict:
    """Reflect each du of a half/quarter model like the displacement itself
    (``full.unfold_vector``, ``full`` the unfolded model's
    :class:`mesastrain.mesh.unfold.MirroredDiscretisation`)."""
    return {k: full.unfold_vector(v) for k, v in du.items()}


def varied_result(res: Result, group: Group, t: float) -> Result:
    """The result with the group's constants moved by ``t`` spreads, to first order.

    Displacement u + t du (du from :class:`Sensitivities`, already unfolded),
    region stiffness and eigenstrain of the varied constants, the same mesh.
    Fields are not recovered again: readouts that sample the exact finite-element
    fields (:meth:`Result.sample`) see the varied state; ``fields`` is the
    unvaried one.
    """
    layers = varied_layers(res.case, group, t)
    du = res.sensitivities.get(group.name)
    u = res.u if du is None else res.u + t * du
    out = replace(res, layers=layers, u=u, probes=[], warnings=[], derived=list(res.derived[:1]),
                  timings={})
    return out
