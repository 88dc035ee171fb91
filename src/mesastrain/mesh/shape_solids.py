"""OpenCASCADE solids of the gmsh shapes: outlines, the feature, liners, periodic faces.

Each function works in the current gmsh model (``gmsh.model.occ``) and takes the shape's
:class:`mesastrain.mesh.shapes.ShapeSpec` as ``spec``. The feature is the prism of its
outline (or the ruled solid between the outline at the etch floor and at the top); liner k
is the same construction for the outline offset by the liners' summed sidewall thickness,
from the floor to the top of liner k, fused with the cell slab up to its floor plane, minus
the feature and the liners below (:func:`region_solids`).
"""

from __future__ import annotations

import numpy as np

from mesastrain.case.outline import Outline
from mesastrain.errors import MeshError

__all__ = ["feature_solid", "region_solids", "set_periodic"]


def _outline_surface(occ, outline: Outline, z: float) -> int:
    """A plane surface of the outline at height z; returns its tag."""
    if outline.kind == "rectangle":
        if outline.radius > 0 and outline.radius >= min(outline.hx, outline.hy) * (1 - 1e-9):
            return _stadium_surface(occ, outline.hx, outline.hy, z)
        return occ.addRectangle(-outline.hx, -outline.hy, z, 2 * outline.hx, 2 * outline.hy,
                                roundedRadius=outline.radius if outline.radius > 0 else 0.0)
    if outline.kind == "disk":
        return occ.addDisk(0.0, 0.0, z, outline.radius, outline.radius)
    v = outline.points
    pts = [occ.addPoint(float(a), float(b), z) for a, b in v]
    lines = [occ.addLine(pts[k], pts[(k + 1) % len(pts)]) for k in range(len(pts))]
    loop = occ.addCurveLoop(lines)
    return occ.addPlaneSurface([loop])


def _stadium_surface(occ, hx: float, hy: float, z: float) -> int:
    """A rectangle rounded by half its shorter side: a stadium, or a disk when square.

    OpenCASCADE's rounded rectangle fails when the radius is exactly half a side
    (the straight edges between the arcs vanish), the largest radius the case
    allows; the stadium is built from its two straight edges and four quarter
    arcs (arcs of less than a half turn, as OpenCASCADE needs).
    """
    r = min(hx, hy)
    if abs(hx - hy) <= 1e-9 * max(hx, hy):
        return occ.addDisk(0.0, 0.0, z, r, r)
    along_x = hx > hy
    c = (hx if along_x else hy) - r          # centres of the end half-disks at +-c

    def pt(u, v):       # (along the long side, across it) -> a point
        return occ.addPoint(u, v, z) if along_x else occ.addPoint(-v, u, z)

    centre_hi, centre_lo = pt(c, 0.0), pt(-c, 0.0)
    p = [pt(-c, -r), pt(c, -r), pt(c + r, 0.0), pt(c, r), pt(-c, r), pt(-c - r, 0.0)]
    curves = [occ.addLine(p[0], p[1]),
              occ.addCircleArc(p[1], centre_hi, p[2]), occ.addCircleArc(p[2], centre_hi, p[3]),
              occ.addLine(p[3], p[4]),
              occ.addCircleArc(p[4], centre_lo, p[5]), occ.addCircleArc(p[5], centre_lo, p[0])]
    surface = occ.addPlaneSurface([occ.addCurveLoop(curves)])
    occ.remove([(0, centre_hi), (0, centre_lo)])
    return surface


def feature_solid(gmsh, spec) -> int:
    """The feature between the etch floor and the top; returns its volume tag."""
    return _ruled_solid(gmsh, spec.foot_outline, spec.top_outline, spec.floor, spec.top,
                        bool(spec.taper))


def _liner_body(gmsh, spec, k: int) -> int:
    """Feature plus liners 1..k: liner k's offset solid from the floor to its top, fused
    with the cell slab up to its floor plane; returns the volume tag."""
    occ = gmsh.model.occ
    t_top, _, t_floor = spec.liners[k - 1]
    foot, top = spec.liner_outlines(k)
    solid = _ruled_solid(gmsh, foot, top, spec.floor, spec.top + t_top, bool(spec.taper))
    x0, x1, y0, y1 = spec.box
    slab = occ.addBox(x0, y0, spec.floor, x1 - x0, y1 - y0, t_floor)
    out, _ = occ.fuse([(3, solid)], [(3, slab)])
    vols = [t for d, t in out if d == 3]
    if len(vols) != 1:
        raise MeshError(f"gmsh: liner {k} is not one solid")
    return vols[0]


def _ruled_solid(gmsh, foot_ol: Outline, top_ol: Outline, z0: float, z1: float,
                 tapered: bool) -> int:
    """A prism (``tapered`` False: top_ol extruded) or the ruled solid between outlines."""
    occ = gmsh.model.occ
    if not tapered:
        s = _outline_surface(occ, top_ol, z0)
        out = occ.extrude([(2, s)], 0, 0, z1 - z0)
        return [t for d, t in out if d == 3][0]
    wires = []
    for ol, z in ((foot_ol, z0), (top_ol, z1)):
        s = _outline_surface(occ, ol, z)
        occ.synchronize()
        curves = [t for d, t in gmsh.model.getBoundary([(2, s)], oriented=False)]
        wires.append(occ.addWire(curves))
        occ.remove([(2, s)])
    vols = occ.addThruSections(wires, makeSolid=True, makeRuled=True)
    return [t for d, t in vols if d == 3][0]


def region_solids(gmsh, spec, nlayers: int, interfaces) -> list:
    """The feature and each liner as disjoint solids: [(tag, region)], region -1 for the
    feature (its slabs take the layer of their height), nlayers + k for liner k."""
    occ = gmsh.model.occ
    feature = feature_solid(gmsh, spec)
    out = [(feature, -1)]
    below = feature
    for k in range(1, len(spec.liners) + 1):
        body = _liner_body(gmsh, spec, k)
        cut, _ = occ.cut([(3, body)], [(3, below)], removeObject=False, removeTool=False)
        tags = [t for d, t in cut if d == 3]
        if len(tags) != 1:
            raise MeshError(f"gmsh: liner {k} does not form one solid around the feature")
        out.append((tags[0], nlayers + k))
        if below != feature:
            occ.remove([(3, below)], recursive=True)
        below = body
    if below != feature:
        occ.remove([(3, below)], recursive=True)
    return out


def set_periodic(gmsh, spec, zlo: float, zhi: float) -> None:
    """Tie the cell faces of periodic axes (translation affine maps)."""
    eps = 1e-6 * max(spec.box[1] - spec.box[0], spec.box[3] - spec.box[2], zhi - zlo)
    x0, x1, y0, y1 = spec.box
    for axis in spec.periodic:
        lo, hi = (x0, x1) if axis == 0 else (y0, y1)
        shift = [0.0, 0.0, 0.0]
        shift[axis] = hi - lo

        def faces(v, axis=axis):
            b = [x0 - eps, y0 - eps, zlo - eps, x1 + eps, y1 + eps, zhi + eps]
            b[axis], b[axis + 3] = v - eps, v + eps
            return gmsh.model.getEntitiesInBoundingBox(*b, dim=2)

        for _, slave in faces(hi):
            sb = np.array(gmsh.model.getBoundingBox(2, slave))
            target = sb - np.array(shift + shift)
            match = None
            for _, master in faces(lo):
                mb = np.array(gmsh.model.getBoundingBox(2, master))
                if np.max(np.abs(mb - target)) < 10 * eps:
                    match = master
                    break
            if match is None:
                raise MeshError(f"gmsh: no periodic partner for a cell face at "
                                f"{'xy'[axis]} = {hi:g} nm")
            affine = [1, 0, 0, shift[0], 0, 1, 0, shift[1], 0, 0, 1, shift[2], 0, 0, 0, 1]
            gmsh.model.mesh.setPeriodic(2, [slave], [match], affine)
