"""Registration of the optional stages: derived quantities and extra eigenstrain sources.

:func:`register` fills :data:`mesastrain.run.pipeline.DERIVED` and
:data:`mesastrain.run.pipeline.EIGENSTRAIN_SOURCES` once, in a fixed order (so runs
are deterministic). Add a provider by importing it here and appending it in
``_providers`` below; keep the order stable.
"""

from __future__ import annotations

_done = False


def _providers():
    """(derived providers, eigenstrain sources), in run order."""
    from mesastrain.derived.device import derive as device_readouts

    derived = []
    sources = []
    derived.append(device_readouts)      # band edges, Raman shift, piezoresistance
    from mesastrain.derived.bow import derive as wafer_bow
    from mesastrain.derived.cuts import derive as line_cuts
    from mesastrain.derived.readouts import derive as engineering_readouts

    derived.append(engineering_readouts)  # relaxation, corners, tractions, energy, h_c
    derived.append(wafer_bow)             # free-standing blanket wafer: FE, Stoney, laminate
    derived.append(line_cuts)             # [[cut]] -> CSV + PNG
    from mesastrain.derived.misfit import derive as misfit_dislocations
    from mesastrain.derived.misfit import eigenstrain_source as dislocation_sheets

    derived.append(misfit_dislocations)   # dislocation contribution, overlay, relaxation
    sources.append(dislocation_sheets)    # [[dislocations]] -> eigenstrain sheets
    return derived, sources


def register() -> None:
    """Register every provider once (idempotent)."""
    global _done
    if _done:
        return
    from mesastrain.run import pipeline

    derived, sources = _providers()
    pipeline.DERIVED.extend(d for d in derived if d not in pipeline.DERIVED)
    pipeline.EIGENSTRAIN_SOURCES.extend(s for s in sources if s not in pipeline.EIGENSTRAIN_SOURCES)
    _done = True
