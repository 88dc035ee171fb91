"""Misfit dislocations of a case planned into the finite-element model.

Each ``[[dislocation]]`` entry of a case becomes a :class:`LineFamily`: a
set of straight lines in one interface, each put into the model as a
:class:`mesastrain.model.volterra.VolterraLine` (an eigenstrain sheet).
:func:`dislocation_eigenstrain` is the per-element eigenstrain the pipeline
adds to the regions' own; :func:`blanket_cell` sizes the periodic cell of a
blanket film so that it holds whole line spacings.

Misfit dislocations in a stack
------------------------------
A misfit dislocation lies in an interface. Its slipped half-plane runs
straight up (d = +z) through the layers above to the free surface (the top
of the stack, or of a feature). This is where the physical slipped area ends
too (a misfit segment is left behind by a threading dislocation gliding from
the surface), and a half-plane that ended on a lateral face of the model,
where the model is held by rollers, would meet a constraint it cannot
satisfy. With d = +z the sheet is vertical, nu lies in the interface normal
to the line, and the edge part of b along nu is an extra (or missing)
half-plane of atoms in the layers above: the in-plane plastic strain it
carries along e = z x xi, averaged over a period S, is b_edge / S with
b_edge = b . e, the relaxation of the array.

The plan works on mesh objects only through their attributes (``kind``,
``axis_aligned``, ``mesh``, ``solve_mesh``, ``layout``, ``region``,
``boundary()``, ``mirrors``, ``nelems``): the model layer sits below the
meshes.

Units: lengths nm, Burgers vectors nm (lattice constants Angstrom).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mesastrain.errors import CaseError, MesastrainError
from mesastrain.model.regions import build_layers
from mesastrain.model.volterra import VolterraLine, brick_bounds, lines_eigenstrain, sheet_width
from mesastrain.physics.crystal import format_indices
from mesastrain.physics.dislocations import Dislocation, character_angle, dislocation_from_crystal

__all__ = [
    "MAX_LINES_PER_CELL",
    "LineFamily",
    "blanket_cell",
    "case_families",
    "dislocation_eigenstrain",
    "families_of",
    "model_bounds",
    "resolve_families",
]


# --------------------------------------------------------------------------
# dislocation families of a case
# --------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LineFamily:
    """One ``[[dislocation]]`` entry of a case, resolved in the model.

    Attributes
    ----------
    name : str
    key : str
        Case-file key path, e.g. ``"dislocation[0]"``.
    region : int
        The region (layer index, 1 = first grown layer) just above the
        interface that holds the lines.
    z : float
        Height of the interface, nm.
    template : Dislocation
        Line sense, Burgers vector (nm, sample frame, oriented to relieve the
        mismatch) and a point at the origin of the position axis.
    across : ndarray (3,)
        In-plane unit vector e = z x xi normal to the lines; positions are
        measured along it from the pattern centre.
    burgers_indices : tuple
        The Burgers vector as the case gave it (crystal indices) and its
        fraction of the lattice constant.
    lattice_a : float
        Lattice constant used for b, Angstrom (the relaxed lattice of the
        layer above the interface).
    misfit : float
        In-plane elastic strain along e of that layer in the blanket state
        (without dislocations); negative in compression.
    spacing : float or None
        Line spacing S, nm (None for explicit positions).
    positions : tuple of float
        Positions along e of the lines in the model, nm.
    period : float or None
        Length of the periodic cell along e when the model repeats along e.
    lines : tuple of VolterraLine
        What goes into the model (periodic images included).
    """
    name: str
    key: str
    region: int
    z: float
    template: Dislocation
    across: np.ndarray
    burgers_indices: tuple
    lattice_a: float
    misfit: float
    spacing: float | None
    positions: tuple
    period: float | None
    lines: tuple

    @property
    def b_edge(self) -> float:
        """Edge component of b along ``across`` (the part that relaxes the mismatch), nm."""
        return float(self.template.b @ self.across)

    @property
    def b_screw(self) -> float:
        """Screw component b . xi, nm."""
        return float(self.template.b @ self.template.xi)

    @property
    def b_normal(self) -> float:
        """Component of b along the interface normal (tilts the layers above), nm."""
        return float(self.template.b[2])

    @property
    def relaxation_strain(self) -> float | None:
        """Mean in-plane plastic strain of the array along e, b_edge / S (None without S)."""
        if self.spacing is None:
            return None
        return self.b_edge / self.spacing

    @property
    def relaxation_fraction(self) -> float | None:
        """b_edge / S as a fraction of the layer's misfit (None without S or misfit)."""
        r = self.relaxation_strain
        if r is None or self.misfit == 0:
            return None
        return r / self.misfit

    def to_dict(self) -> dict:
        """JSON-ready description (lengths nm)."""
        d = self.template
        return {
            "name": self.name, "region_above": self.region,
            "layer_above": f"layer[{self.region - 1}]", "interface_z": self.z,
            "line_sample": d.xi, "normal_to_lines": self.across,
            "burgers": f"{self.burgers_indices[1]:g} a {format_indices(self.burgers_indices[0])}",
            "lattice_a_angstrom": self.lattice_a,
            "burgers_sample": d.b, "burgers_length": float(np.linalg.norm(d.b)),
            "character_angle_deg": character_angle(d),
            "b_edge_in_plane": self.b_edge, "b_screw": self.b_screw,
            "b_normal": self.b_normal,
            "layer_misfit_along_normal": self.misfit,
            "spacing": self.spacing, "count": len(self.positions),
            "positions": list(self.positions), "period": self.period,
            "relaxation_strain": self.relaxation_strain,
            "relaxation_fraction": self.relaxation_fraction,
        }


def case_families(case) -> tuple:
    """The case's ``[[dislocation]]`` entries (empty tuple without any)."""
    return tuple(getattr(case, "dislocations", ()) or ())


def _interface_extent(region: int, z: float, e: np.ndarray, group, lo, hi):
    """Range of positions along e where the interface under ``region`` exists in the mesh."""
    ext = hi[:, 2] - lo[:, 2]
    at = (np.asarray(group) == region) & (np.abs(lo[:, 2] - z) <= 1e-7 * np.maximum(ext, 1e-30))
    if not np.any(at):
        return None
    # e.x over the corners, axis by axis (an axis with e_a = 0 may be unbounded)
    c_lo = np.zeros(int(at.sum()))
    c_hi = np.zeros(int(at.sum()))
    for a in (0, 1):
        if abs(e[a]) > 1e-12:
            v1, v2 = lo[at, a] * e[a], hi[at, a] * e[a]
            c_lo = c_lo + np.minimum(v1, v2)
            c_hi = c_hi + np.maximum(v1, v2)
    c = np.concatenate([c_lo, c_hi])
    if not np.all(np.isfinite(c)):
        raise MesastrainError("the interface is unbounded along the direction normal to the "
                              "lines")  # pragma: no cover
    return float(c.min()), float(c.max())


def _periodic_along(boundary, e: np.ndarray):
    """Period of the model along e (None unless e is a tied lateral axis)."""
    if boundary is None:
        return None
    for axis, a, b in getattr(boundary, "periodic", ()):
        if abs(abs(e[axis]) - 1.0) < 1e-9:
            return float(b - a), float(a)
    return None


def resolve_families(case, layers, group, lo, hi, boundary=None) -> list[LineFamily]:
    """Turn the case's ``[[dislocation]]`` entries into lines in a model.

    Parameters
    ----------
    case : Case
    layers : list of LayerModel
        From :func:`mesastrain.model.regions.build_layers`.
    group : ndarray of int (nelems,)
        Region of each element.
    lo, hi : ndarray (nelems, 3)
        Element bounds (:func:`brick_bounds`); for a cross-section mesh the
        coordinate along the section normal is -inf / +inf.
    boundary : mesastrain.mesh.structured.Boundary, optional
        Periodic ties of the model (lines are wrapped across tied faces).

    Returns
    -------
    list of LineFamily

    Raises
    ------
    CaseError
        A family that cannot be placed: a line not in the interface, no
        interface in the model, positions outside it, a relaxation target
        with no mismatch or no edge component to relax it.
    """
    out = []
    for i, ds in enumerate(case_families(case)):
        key = f"dislocation[{i}]"
        region = ds.interface + 1
        if region >= len(layers):
            raise CaseError(f"{key}.interface", f"{ds.interface} is not an interface under a "
                                                f"layer; allowed: 0 to {len(layers) - 2}")
        lm = layers[region]
        mat = lm.material
        z = float(lm.z_bottom)
        try:
            d0 = dislocation_from_crystal(ds.line, ds.burgers, mat.a, lm.frame,
                                          burgers_fraction=ds.burgers_fraction,
                                          point=(0.0, 0.0, z), c_over_a=mat.c_over_a)
        except MesastrainError as err:
            raise CaseError(key, str(err)) from None
        xi = d0.xi
        if abs(xi[2]) > 1e-6:
            ang = np.degrees(np.arcsin(min(1.0, abs(xi[2]))))
            raise CaseError(f"{key}.line", f"the line makes {ang:.3g} deg with the interface; "
                                           "misfit dislocations lie in the interface plane")
        e = np.cross([0.0, 0.0, 1.0], xi)
        e[np.abs(e) < 1e-12] = 0.0          # round-off of crystal -> sample rotations
        e /= np.linalg.norm(e)
        misfit = -float(e @ lm.eigenstrain_sample @ e)
        b = d0.b.copy()
        b_e = float(b @ e)
        if b_e * misfit < 0:           # orient b so that the array relieves the mismatch
            b = -b
            b_e = -b_e
        template = Dislocation(xi=xi, b=b, point=(0.0, 0.0, z))
        extent = _interface_extent(region, z, e, group, lo, hi)
        if extent is None:
            raise CaseError(f"{key}.interface", f"the interface under layer[{ds.interface}] "
                                                "is not in the modelled body")
        per = _periodic_along(boundary, e)
        spacing = ds.spacing
        if ds.relaxation is not None:
            if misfit == 0.0:
                raise CaseError(f"{key}.relaxed", f"layer[{ds.interface}] has no mismatch "
                                                     "to relax; give spacing or positions")
            if abs(b_e) < 1e-9 * np.linalg.norm(b):
                raise CaseError(f"{key}.relaxed", "the Burgers vector has no edge component "
                                                     "normal to the line in the interface, so "
                                                     "the lines relax nothing; give spacing or "
                                                     "positions")
            spacing = abs(b_e) / (ds.relaxation * abs(misfit))
        lo_e, hi_e = extent
        if spacing is not None:
            k0 = int(np.ceil((lo_e - ds.offset) / spacing - 1e-9))
            k1 = int(np.floor((hi_e - ds.offset) / spacing + 1e-9))
            pos = ds.offset + spacing * np.arange(k0, k1 + 1)
            if per is not None:     # one copy per period: drop the far face
                pos = pos[pos < lo_e + per[0] - 1e-9 * per[0]]
            pos = pos[(pos > lo_e - 1e-9 * spacing) & (pos < hi_e + 1e-9 * spacing)]
        else:
            pos = np.asarray(ds.positions, dtype=float)
            for j, p in enumerate(pos):
                if not (lo_e - 1e-9 * abs(hi_e - lo_e) <= p <= hi_e + 1e-9 * abs(hi_e - lo_e)):
                    raise CaseError(f"{key}.positions[{j}]",
                                    f"{p:.6g} nm is outside the interface in the model "
                                    f"(from {lo_e:.6g} to {hi_e:.6g} nm along the normal to "
                                    f"the lines)")
        lines = []
        kept = []
        shifts = (0.0,) if per is None else (-per[0], 0.0, per[0])
        for j, p in enumerate(pos):
            w = sheet_width(VolterraLine(template.shifted(p * e), half_plane=(0.0, 0.0, 1.0)),
                            lo, hi)
            if per is None and min(p - lo_e, hi_e - p) < 0.5 * w * (1 - 1e-9):
                # a line on (or within half a sheet of) the end of the interface: at a free
                # edge it would have left; an explicit position there is an input error
                if spacing is None:
                    raise CaseError(f"{key}.positions[{j}]",
                                    f"{p:.6g} nm is within half an element ({0.5 * w:.3g} nm) "
                                    f"of the end of the interface ({lo_e:.6g} to {hi_e:.6g} nm)")
                continue
            kept.append(p)
            for s in shifts:   # periodic images carry the part of a sheet across a tied face
                lines.append(VolterraLine(template.shifted((p + s) * e), half_plane=(0.0, 0.0, 1.0),
                                     width=w, label=f"{ds.name} at {p:.6g} nm"))
        if not kept:
            which = "relaxed" if ds.relaxation is not None else "spacing"
            raise CaseError(f"{key}.{which}", f"a spacing of {spacing:.6g} nm places no line "
                                              f"inside the "
                                              f"interface (from {lo_e:.6g} to {hi_e:.6g} nm "
                                              f"along the normal to the lines)")
        out.append(LineFamily(name=ds.name, key=key, region=region, z=z, template=template,
                              across=e, burgers_indices=(tuple(ds.burgers), ds.burgers_fraction),
                              lattice_a=float(mat.a), misfit=misfit, spacing=spacing,
                              positions=tuple(float(p) for p in kept),
                              period=None if per is None else per[0], lines=tuple(lines)))
    return out


# --------------------------------------------------------------------------
# the eigenstrain of a model
# --------------------------------------------------------------------------
def model_bounds(sm) -> tuple[np.ndarray, np.ndarray]:
    """Element bounds of a pipeline mesh made of axis-aligned bricks.

    Structured stack meshes (``kind == "structured"`` with vertical
    sidewalls) give their hexahedra; a cross-section mesh (``kind ==
    "section"``, the x-z plane of a stripe along y) gives its rectangles with
    y unbounded.

    Raises
    ------
    CaseError
        Any other mesh (tetrahedra, tapered sidewalls).
    """
    kind = sm.kind
    if kind == "structured" and sm.axis_aligned:
        return brick_bounds(sm.mesh)
    if kind == "section" and not sm.layout.taper:
        p = np.asarray(sm.solve_mesh.p, dtype=float)
        t = np.asarray(sm.solve_mesh.t)
        xe = p[:, t]                                  # (2, 4, nel): (x, z)
        lo2, hi2 = xe.min(axis=1), xe.max(axis=1)
        n = t.shape[1]
        lo = np.stack([lo2[0], np.full(n, -np.inf), lo2[1]], axis=1)
        hi = np.stack([hi2[0], np.full(n, np.inf), hi2[1]], axis=1)
        return lo, hi
    raise CaseError("dislocations", "dislocations need a model of axis-aligned bricks (pattern "
                                    "\"none\", \"rectangle\" with vertical sidewalls, or "
                                    "\"stripe\"); this model has " + str(kind) + " elements")


def families_of(case, layers, sm):
    """The case's dislocation families placed in a pipeline mesh.

    Returns
    -------
    families : list of LineFamily
    lo, hi : ndarray (nelems, 3)
        Element bounds (:func:`model_bounds`), nm.
    """
    lo, hi = model_bounds(sm)
    return resolve_families(case, layers, sm.region, lo, hi, sm.boundary()), lo, hi


def dislocation_eigenstrain(case, layers, sm):
    """The eigenstrain sheets of every ``[[dislocation]]`` line of a case in a model.

    :func:`mesastrain.run.pipeline.run_case` adds it to the regions' own
    eigenstrain. Returns None for a case without dislocations. A mirrored
    (half or quarter) model gets zeros: a non-None answer makes the pipeline
    solve the whole feature, and the sheets are placed on that.

    Parameters
    ----------
    case : Case
    layers : list of LayerModel
    sm : model mesh
        Used through ``mirrors``, ``nelems``, ``region``, ``boundary()`` and
        the attributes :func:`model_bounds` reads.

    Returns
    -------
    ndarray (nelems, 3, 3) or None
        Sample-frame plastic eigenstrain per element.
    """
    if not case_families(case):
        return None
    if sm.mirrors:
        return np.zeros((sm.nelems, 3, 3))
    fams, lo, hi = families_of(case, layers, sm)
    return lines_eigenstrain([ln for f in fams for ln in f.lines], lo, hi)


# --------------------------------------------------------------------------
# blanket films: the periodic cell
# --------------------------------------------------------------------------
#: Largest number of lines of one family in a blanket cell when spacings must be matched.
MAX_LINES_PER_CELL = 64


def _planned_spacings(case) -> list:
    """(axis, spacing, key) per family of a blanket case, without a mesh."""
    layers = build_layers(case)
    out = []
    for i, ds in enumerate(case_families(case)):
        key = f"dislocation[{i}]"
        lm = layers[ds.interface + 1]
        d = dislocation_from_crystal(ds.line, ds.burgers, lm.material.a, lm.frame,
                                     burgers_fraction=ds.burgers_fraction,
                                     c_over_a=lm.material.c_over_a)
        e = np.cross([0.0, 0.0, 1.0], d.xi)
        axis = int(np.argmax(np.abs(e[:2])))
        if abs(abs(e[axis]) - 1.0) > 1e-9:
            raise CaseError(f"{key}.line", "in a blanket film the lines must run along sample x "
                                           "or y (the axes of the periodic cell)")
        if ds.spacing is not None:
            S = ds.spacing
        else:
            misfit = -float(e @ lm.eigenstrain_sample @ e)
            b_e = abs(float(d.b @ e))
            if misfit == 0.0 or b_e < 1e-9 * np.linalg.norm(d.b):
                S = None            # resolve_families raises the proper error later
            else:
                S = b_e / (ds.relaxation * abs(misfit))
        out.append((axis, S, key))
    return out


def blanket_cell(case, lateral_size: float) -> tuple:
    """Periodic cell of a blanket film with misfit dislocations.

    Along an axis normal to some family of lines the cell holds a whole
    number of spacings of every such family (the smallest that matches all
    to 0.1%, at most :data:`MAX_LINES_PER_CELL` lines of the densest
    family); along an axis no line crosses, two elements. The lateral
    element size is at most an eighth of the smallest spacing.

    Parameters
    ----------
    case : Case
        A blanket case (pattern "none") with ``[[dislocation]]``.
    lateral_size : float
        Lateral element size the mesher would use otherwise, nm.

    Returns
    -------
    (width_x, width_y), lateral_size : tuple of float, float
        nm.

    Raises
    ------
    CaseError
        Lines not along a cell axis, or spacings that share no period.
    """
    plan = [p for p in _planned_spacings(case) if p[1] is not None]
    h = float(lateral_size)
    if plan:
        h = min(h, min(S for _, S, _ in plan) / 8.0)
    if case.mesh.size is not None:
        h = float(case.mesh.size)
    widths = []
    for axis in (0, 1):
        sp = [(S, key) for a, S, key in plan if a == axis]
        if not sp:
            widths.append(2.0 * h)
            continue
        S0 = min(S for S, _ in sp)
        for n in range(1, MAX_LINES_PER_CELL + 1):
            L = n * S0
            if all(abs(L / S - round(L / S)) <= 1e-3 * (L / S) for S, _ in sp):
                break
        else:
            raise CaseError(sp[-1][1] + ".spacing",
                            "the spacings of the families along this axis share no period of "
                            f"up to {MAX_LINES_PER_CELL} lines; use spacings in a simple ratio")
        widths.append(float(L))
    return tuple(widths), h
