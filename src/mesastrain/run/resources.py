"""Size, memory and time of a case before solving, and the memory the machine has.

The mesh kind of the case (:mod:`mesastrain.mesh.kinds`) counts its nodes,
elements and unknowns without meshing (or, for an imported file, by reading
it); the cost model (:mod:`mesastrain.fem.cost`) turns the counts into peak
memory and wall time.
"""

from __future__ import annotations

from mesastrain.case.types import Case
from mesastrain.fem.cost import Estimate
from mesastrain.mesh.kinds import KINDS, kind_of


def estimate(case: Case) -> Estimate:
    """Estimate unknowns, peak memory and wall time without building the mesh.

    Counts come from the case's mesh kind (exact on the structured grid, where
    only the mirrored part is solved when symmetry is used). Memory and time
    follow :func:`mesastrain.fem.cost.resources`, whose constants were measured
    with ``benchmarks/solver_scaling.py`` on a 2-core machine: a guide within
    about 30 %, not a promise (other jobs on the machine slow it down).
    """
    return kind_of(case).estimate(case)


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
