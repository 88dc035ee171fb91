"""Derived quantities: readouts computed from a solved :class:`mesastrain.run.result.Result`.

Each provider is a pure function ``derive(result) -> Derived``. The pipeline runs the
providers it is given by stage (:func:`mesastrain.run.pipeline.run_providers`) and keeps
their parts in the order given; :data:`PROVIDERS` is the standard list, passed by the
command line, the sweep workers and the convergence study. Add a provider by writing
its module here and adding its ``derive`` to :data:`PROVIDERS`, with a ``stage``
attribute when it reads other providers' parts (see
:func:`mesastrain.run.pipeline.run_providers`: a stage's providers run side by side).
"""

from mesastrain.derived import (
    bow,
    cuts,
    device,
    discretisation,
    headline,
    misfit,
    readouts,
    scatter,
    tilt,
)
from mesastrain.run.pipeline import run_case

#: The standard derived-quantity providers, in output order (the order of the entries in
#: ``summary.json`` and of the warnings); a stage's providers run side by side.
PROVIDERS = (
    # stage 0: read only the solved result; they run side by side
    device.derive,      # band edges, Raman shift, piezoresistance
    readouts.derive,    # relaxation, corners, tractions, energy, critical thickness
    discretisation.energy,  # energy-norm error of the stress field
    discretisation.coarse_solve,  # the coarser solve of the figures' error bars
    bow.derive,         # free-standing blanket wafer: FE, Stoney, laminate
    cuts.derive,        # [[cut]] -> CSV + PNG
    misfit.derive,      # dislocation contribution, overlay, relaxation
    tilt.derive,        # layer tilt against the substrate lattice (arcsec)
    # stage 1: read the headline figures of stage 0
    scatter.derive,     # material-data scatter of the headline figures
    discretisation.derive,  # discretisation error of each headline figure
    # stage 2
    headline.derive,    # the headline figures with their error contributions (last)
)


def solve_and_derive(case, progress=None, max_memory_gb: float | None = None):
    """Solve a case and compute every standard derived quantity.

    :func:`mesastrain.run.pipeline.run_case` with :data:`PROVIDERS`: what
    ``mesastrain run`` computes before writing.

    Parameters
    ----------
    case : Case
    progress : callable(str), optional
    max_memory_gb : float, optional

    Returns
    -------
    Result
    """
    return run_case(case, progress=progress, max_memory_gb=max_memory_gb, providers=PROVIDERS)


__all__ = ["PROVIDERS", "solve_and_derive"]
