"""What a case asks of the mesher: taper, pitch, mirrors, refinement and the stack layout.

These functions read a validated case and its defaults; the mesh kinds
(:mod:`mesastrain.mesh.kinds`) and the size estimate build on them.
"""

from __future__ import annotations

import numpy as np

from mesastrain.case.outline import taper_of
from mesastrain.case.types import Case
from mesastrain.mesh.grid import GridSpacing, StackLayout
from mesastrain.model.dislocation_plan import blanket_cell
from mesastrain.model.regions import build_layers
from mesastrain.model.symmetry import decide


def pattern_taper(case: Case) -> float:
    """Horizontal offset of the feature's foot relative to its top edge, nm.

    ``etch_depth / tan(sidewall_angle)`` (:func:`mesastrain.case.outline.taper_of`):
    positive for sidewalls that slope outward toward the etch floor (angle
    < 90 degrees), negative for an undercut, 0 for vertical sidewalls.
    """
    return taper_of(case.pattern) if case.pattern.patterned else 0.0


def liner_offsets(case: Case) -> tuple:
    """Cumulative liner thicknesses ((top, side, floor) per liner, bottom to top), nm.

    ``side`` is the horizontal offset of the sidewall plane: the sidewall
    thickness (normal to the wall) over sin(sidewall_angle).
    """
    if not case.liners:
        return ()
    sin_a = np.sin(np.radians(case.pattern.sidewall_angle or 90.0))
    out, t, s, f = [], 0.0, 0.0, 0.0
    for lin in case.liners:
        t, s, f = t + lin.thickness, s + lin.side / sin_a, f + lin.floor
        out.append((float(t), float(s), float(f)))
    return tuple(out)


def pattern_pitch(case: Case) -> tuple:
    """(px, py) of a periodic array in nm, None per axis for an isolated feature."""
    pitch = case.pattern.pitch
    if pitch is None:
        return (None, None)
    return tuple(pitch)


def auto_mirrors(case: Case) -> tuple:
    """Mirror axes chosen automatically (:func:`mesastrain.model.symmetry.decide`)."""
    # misfit dislocations need not share the mirror planes: the run then solves the whole
    # feature (run.pipeline.run_case), and so must the estimate
    return decide(case, build_layers(case),
                  extra_eigenstrain=bool(getattr(case, "dislocations", ()))).mirrors


def film_reaches_side(case: Case) -> bool:
    """True when a grown layer reaches the side faces of a patterned model.

    That is the case when the etch stops above the substrate (``etch_depth``
    smaller than the stack thickness): the layers below the etch floor cover
    the whole modelled cell. Rollers on such a face would forbid the shear
    eps_xz, eps_yz a coherent film takes on a wafer without a mirror plane
    normal to that face, so :func:`layout_of` ties that pair of faces
    instead (the isolated feature then repeats with the cell width, as it
    effectively did with rollers, which mirror it).
    """
    pat = case.pattern
    return bool(pat.patterned and pat.etch_depth < case.stack_thickness)


def refinement_of(case: Case) -> float:
    """The ``mesh.refine`` factor (1 when the case does not set it)."""
    return float(case.mesh.refine or 1.0)


#: Elements wanted between a singular edge and the stand-off point where readouts are taken.
STANDOFF_ELEMENTS = 3


def case_standoff(case: Case) -> float:
    """Stand-off distance of the edge readouts, nm: ``[readouts] standoff`` or half the
    thinnest layer (the rule of :func:`mesastrain.derived.corners.default_standoff`)."""
    return float(case.readouts.standoff or 0.5 * min(lay.thickness for lay in case.layers))


def standoff_edge_size(case: Case, elements: int = STANDOFF_ELEMENTS) -> float:
    """Edge element size (before ``refine``) that puts ``elements`` elements within the stand-off.

    The grid grows from the edge size h0 linearly, h(s) = h0 + (g - 1) s
    (:func:`mesastrain.mesh.grid.graded_coordinates`), so the number of elements
    within a distance d of the edge is ln(1 + (g - 1) d / h0) / (g - 1); setting it
    to n gives h0 = (g - 1) d / (exp(n (g - 1)) - 1) (d / n for g = 1). With
    ``refine`` = r both h0 and g - 1 are divided by r, which gives r n elements.
    """
    d = case_standoff(case)
    g1 = float(case.mesh.growth) - 1.0
    if g1 <= 1e-9:
        return d / elements
    return g1 * d / np.expm1(elements * g1)


def layout_of(case: Case, mirrors: tuple | None = None) -> tuple[StackLayout, GridSpacing]:
    """Stack layout and element sizes of a structured model, from the case and its defaults.

    Parameters
    ----------
    case : Case
    mirrors : tuple of int, optional
        Mirror axes of the model; None decides automatically
        (:mod:`mesastrain.model.symmetry`).

    Notes
    -----
    ``width``/``length`` are the feature's size at its top surface. With a
    sloped sidewall the grid is built for the foot at the etch floor, wider
    by ``2 * taper``. ``mesh.refine`` = r divides every element size and the
    grading slope (growth - 1), so the size h(x) at every point is divided
    by r: a uniform refinement, as a convergence study needs.
    """
    pat = case.pattern
    stack = case.stack_thickness
    thick = [lay.thickness for lay in case.layers]
    patterned = pat.shape != "none"
    order = case.mesh.order
    taper = pattern_taper(case)
    pitch = pattern_pitch(case)
    liners = liner_offsets(case)
    margin_y = None
    if patterned:
        W, L = pat.width, (pat.length if pat.length is not None else pat.width)
        etch = pat.etch_depth
        if etch > stack:                    # etched into the substrate
            thick.append(etch - stack)
        feature = max(W, L)
        margin = pat.margin if pat.margin is not None else max(0.5 * feature, 4.0 * etch)
        if liners and pat.margin is None:       # room for the sidewall liners and a floor
            margin = max(margin, 4.0 * liners[-1][1])
        for lin in case.liners:
            thick += [lin.thickness, lin.side, lin.floor]
        if pitch[0] is not None:
            margin = max(0.0, 0.5 * (pitch[0] - W) - taper)
            if pitch[1] is not None:
                margin_y = max(0.0, 0.5 * (pitch[1] - L) - taper)
        depth_default = max(1.5 * feature, 4.0 * etch)
        if pitch[0] is not None:
            depth_default = max(1.5 * max(q for q in pitch if q is not None), 4.0 * etch)
    else:
        W = L = None
        etch = 0.0
        margin = max(stack, 1.0)
        depth_default = max(2.0 * stack, 10.0)
    depth = case.mesh.substrate_depth or min(case.substrate.thickness, depth_default)
    t_min = min(thick)
    per_layer = 4.0 if order == 1 else 2.0
    size = case.mesh.size or t_min * 2.0 / per_layer
    edge = case.mesh.edge_size or min(size, t_min / per_layer,
                                      standoff_edge_size(case) if patterned else size)
    if patterned:
        lateral_cap = case.mesh.size or max(size, min(W, L) / (16.0 if order == 1 else 8.0))
    else:
        lateral_cap = size
    refine = refinement_of(case)
    size, edge, lateral_cap = size / refine, edge / refine, lateral_cap / refine
    if patterned:
        if mirrors is None:
            mirrors = auto_mirrors(case)
        periodic = tuple(a for a in (0, 1) if pitch[a] is not None
                         or (a not in mirrors and film_reaches_side(case)))
    else:
        # a blanket column: side faces tied (a periodic cell), so a film on a low-symmetry
        # wafer takes the shear eps_xz, eps_yz it needs for sigma_i3 = 0
        mirrors, periodic = (), (0, 1)
        if refine != 1.0:   # the blanket column is two elements wide; refine it in z only
            lateral_cap = size
        if case.dislocations:
            # misfit dislocations in a blanket film: a periodic cell of whole line spacings
            (W, L), lateral_cap = blanket_cell(case, lateral_cap)
            size, edge = min(size, 2.0 * lateral_cap), min(edge, lateral_cap)
            margin, margin_y, periodic = 0.0, 0.0, (0, 1)
            depth = case.mesh.substrate_depth or min(case.substrate.thickness,
                                                     max(depth, 1.5 * max(W, L)))
    geom = StackLayout(interfaces=tuple(case.interfaces), substrate_depth=float(depth),
                         half_width=None if W is None else W / 2.0 + taper,
                         half_length=None if L is None else L / 2.0 + taper,
                         etch_depth=float(etch), margin=float(margin),
                         margin_y=None if margin_y is None else float(margin_y),
                       mirrors=tuple(mirrors), periodic=periodic, taper=float(taper),
                       liners=liners)
    return geom, GridSpacing(size=float(size), edge_size=float(edge),
                             growth=1.0 + (float(case.mesh.growth) - 1.0) / refine,
                             lateral_cap=float(lateral_cap), refine=refine)

