"""Size, memory and time of a case before solving, and the memory the machine has.

The mesh kind of the case (:mod:`mesastrain.mesh.kinds`) counts its nodes,
elements and unknowns without meshing (or, for an imported file, by reading
it); the cost model (:mod:`mesastrain.fem.cost`) turns the counts into peak
memory and wall time.
"""

from __future__ import annotations

import dataclasses

from mesastrain.case.types import Case
from mesastrain.errors import MesastrainError
from mesastrain.fem.cost import (
    ERROR_COARSE_SHARE,
    ERROR_S_PER_UNKNOWN,
    Estimate,
)
from mesastrain.mesh.kinds import KINDS, kind_of
from mesastrain.model.regions import build_layers
from mesastrain.run.sensitivity import groups_of


def estimate(case: Case) -> Estimate:
    """Estimate unknowns, peak memory and wall time without building the mesh.

    Counts come from the case's mesh kind (exact on the structured grid, where
    only the mirrored part is solved when symmetry is used). Memory and time
    follow :func:`mesastrain.fem.cost.resources`, whose constants were measured
    with ``benchmarks/solver_scaling.py`` on a 2-core machine: a guide within
    about 30 %, not a promise (other jobs on the machine slow it down).
    """
    est = kind_of(case).estimate(case)
    extra = outline_seconds(case) + error_bar_seconds(case, est)
    return dataclasses.replace(est, seconds=est.seconds + extra) if extra else est


def error_bar_seconds(case: Case, est: Estimate) -> float:
    """Seconds the error bars add (issue 17): the discretisation-error estimate
    (``[mesh] error_estimate``) and the extra right-hand sides of the material scatter
    (``[uncertainty]``, one per constant group that moves the displacement). Constants:
    :mod:`mesastrain.fem.cost` (``ERROR_*``, ``EXTRA_RHS_SHARE``)."""
    secs = 0.0
    if case.mesh.error_estimate:
        secs += ERROR_COARSE_SHARE * est.solver_seconds + ERROR_S_PER_UNKNOWN * est.unknowns
    if case.uncertainty.enabled:
        secs += len(solved_groups(case)) * est.rhs_seconds
    return secs


def solved_groups(case: Case) -> list:
    """The material-scatter groups that need an extra solve (those that load the body:
    stiffness, lattice and thermal expansion; not the Raman or band constants)."""
    try:
        layers = build_layers(case)
    except MesastrainError:       # the run itself will say what is wrong
        return []
    return groups_of(case, layers)


#: Seconds to validate and mesh a polygon outline of n vertices beyond the size-based
#: estimate: a + b n + c n^2. Measured on the 2-core machine (quiet, 2026-12-03) with a 2 um
#: sinusoidal outline, mesh.size 200 nm, edge_size 40 nm (about 25k tetrahedra): 8 vertices
#: 1.1 s, 24 vertices 2.0 s, 48 vertices 3.0 s, 100 vertices 9.6 s of gmsh meshing (each
#: outline edge is refined on its own, and the self-crossing check compares n^2 / 2 edge
#: pairs); the size-based estimate covers about 0.8 s of it.
POLYGON_SECONDS = (0.0, 0.035, 0.0006)


def outline_seconds(case: Case) -> float:
    """Validation and meshing seconds of a polygon outline beyond the size-based estimate."""
    vertices = getattr(case.pattern, "vertices", None)
    if case.pattern.shape != "polygon" or not vertices:
        return 0.0
    a, b, c = POLYGON_SECONDS
    n = len(vertices)
    return a + b * n + c * n * n


def estimate_other_kind(case: Case, kind: str) -> Estimate:
    """Size estimate of a case meshed as the named kind (see :mod:`mesastrain.mesh.kinds`)."""
    return KINDS[kind].estimate(case)


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
