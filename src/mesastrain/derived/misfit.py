"""Misfit dislocations in the finite-element model: eigenstrain sheets and overlays.

A straight dislocation is put into the finite-element model as a plastic
eigenstrain on a thin sheet over its slipped area (the Volterra cut), so that
free surfaces, sidewalls and the other layers give its image field without
further work. The closed-form infinite-medium field of the same lines
(:mod:`mesastrain.physics.dislocations`) is offered beside it as an overlay and as the
check of the representation.

Representation (eigenstrain sheet)
----------------------------------
Cut a body along a half-plane S bounded by the dislocation line, displace the
side the unit normal nu points to by J relative to the other side and weld
the faces: the result is a dislocation. In the finite-element model the jump
is smeared over a sheet of thickness w centred on S, which carries the
plastic eigenstrain

    eps* = sym(J (x) nu) / w,

a stress-free shear (and stretch) of the sheet that offsets its two faces by
J. Outside the sheet the field is the field of the dislocation, to
O((w / r)^2) at distance r from the line; inside the sheet the stress differs
from the Volterra stress. With the line sense xi and the cut running from the
line in the unit direction d (normal to xi), nu = xi x d and J = -b, where b
is the Burgers vector in the convention of :mod:`mesastrain.physics.dislocations`
(displacement jump +b across {n.x = 0, m.x < 0}, right-handed about xi).

Here the cut direction d must be a grid axis (+-x, +-y or +-z) of a mesh of
axis-aligned bricks; the line may have any direction normal to d. Each
element gets the volume fraction of the sheet it contains (computed exactly
for the brick), so the sheet need not coincide with element faces, the total
Burgers vector is exact and the line keeps its position (the first moment of
the sheet's cross-section). The default sheet thickness is the width of the
element column at the line, measured along nu: the finest sheet the mesh can
carry.

Misfit dislocations in a stack
------------------------------
A misfit dislocation lies in an interface. Its cut runs straight up (d = +z)
through the layers above to the free surface (the top of the stack, or of a
feature). This is where the physical slipped area ends too (a misfit segment
is left behind by a threading dislocation gliding from the surface), and a cut
that ended on a lateral face of the model, where the model is held by
rollers, would meet a constraint it cannot satisfy. With d = +z the sheet is
vertical, nu lies in the interface normal to the line, and the edge part of b
along nu is an extra (or missing) half-plane of atoms in the layers above: the
in-plane plastic strain it carries along e = z x xi, averaged over a period S,
is b_edge / S with b_edge = b . e, the relaxation of the array.

Units: lengths nm, stiffness GPa, stress MPa where it leaves through the
pipeline (GPa inside the closed-form helpers).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from mesastrain.physics.dislocations import Dislocation
from mesastrain.errors import MesastrainError

log = logging.getLogger(__name__)

__all__ = [
    "CutLine",
    "brick_bounds",
    "sheet_width",
    "sheet_eigenstrain",
    "lines_eigenstrain",
    "PrismModel",
    "LineFamily",
    "resolve_families",
    "overlay_stress",
    "model_bounds",
    "eigenstrain_source",
    "derive",
    "blanket_cell",
]

#: Tolerance (relative to the element size) for "a point lies on a grid plane".
_ON_PLANE = 1e-9


# --------------------------------------------------------------------------
# one line and its cut
# --------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class CutLine:
    """A straight dislocation with the cut that represents it in the model.

    Attributes
    ----------
    dislocation : Dislocation
        Line sense xi, Burgers vector b (nm) and a point on the line (nm),
        all in the model (sample) frame.
    cut : ndarray (3,)
        Unit direction d from the line across the slipped half-plane; one of
        the grid axes +-x, +-y, +-z, normal to xi.
    width : float or None
        Sheet thickness w, nm; None uses the width of the element column at
        the line (:func:`sheet_width`).
    label : str
        A name for reports.
    """

    dislocation: Dislocation
    cut: np.ndarray
    width: float | None = None
    label: str = ""

    def __post_init__(self):
        d = np.asarray(self.cut, dtype=float)
        if d.shape != (3,) or not np.all(np.isfinite(d)):
            raise MesastrainError(f"cut direction must be 3 finite numbers, got {self.cut!r}")
        axis = int(np.argmax(np.abs(d)))
        if np.linalg.norm(d) == 0 or np.count_nonzero(np.abs(d) > 1e-12 * np.abs(d).max()) != 1:
            raise MesastrainError(f"cut direction must be a grid axis (+-x, +-y or +-z), got "
                                  f"{list(np.round(d, 6))}")
        d = np.sign(d[axis]) * np.eye(3)[axis]
        if abs(d @ self.dislocation.xi) > 1e-9:
            raise MesastrainError("the cut direction must be normal to the line direction "
                                  f"(d.xi = {d @ self.dislocation.xi:.3g})")
        if self.width is not None and not (np.isfinite(self.width) and self.width > 0):
            raise MesastrainError(f"sheet width must be > 0 nm, got {self.width!r}")
        d.setflags(write=False)
        object.__setattr__(self, "cut", d)

    @property
    def axis(self) -> int:
        """Index (0, 1, 2) of the grid axis the cut runs along."""
        return int(np.argmax(np.abs(self.cut)))

    @property
    def normal(self) -> np.ndarray:
        """Unit normal nu = xi x d of the cut."""
        return np.cross(self.dislocation.xi, self.cut)

    @property
    def jump(self) -> np.ndarray:
        """Offset J (nm) of the nu side of the cut relative to the other: -b."""
        return -self.dislocation.b

    def plastic_strain(self, width: float) -> np.ndarray:
        """Eigenstrain sym(J (x) nu) / w inside a sheet of thickness w (nm), (3, 3)."""
        g = np.outer(self.jump, self.normal) / width
        return 0.5 * (g + g.T)


# --------------------------------------------------------------------------
# sheets on brick meshes
# --------------------------------------------------------------------------
def brick_bounds(mesh) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper corners of the elements of a mesh of axis-aligned bricks.

    Parameters
    ----------
    mesh : skfem.MeshHex
        Hexahedra whose faces are normal to the axes (structured grids).

    Returns
    -------
    lo, hi : ndarray (nelems, 3)
        nm.
    """
    xe = mesh.p[:, mesh.t]                      # (3, 8, nel)
    return xe.min(axis=1).T, xe.max(axis=1).T


def _ramp2(t):
    t = np.maximum(t, 0.0)
    return 0.5 * t * t


def _below_fraction(s, smin, p, q):
    """Fraction of a rectangle where nu.x < s.

    The rectangle has sides dx, dy; p = |nu_1| dx, q = |nu_2| dy and smin is
    the smallest nu.x over its corners. Exact piecewise-quadratic area
    (difference of ramps); linear when one side projects to nearly nothing.
    """
    t = s - smin
    pq = p * q
    tot = p + q
    lin = np.clip(t / np.where(tot > 0, tot, 1.0), 0.0, 1.0)
    thin = pq <= 1e-12 * tot * tot
    with np.errstate(divide="ignore", invalid="ignore"):
        quad = (_ramp2(t) - _ramp2(t - p) - _ramp2(t - q) + _ramp2(t - p - q)) / pq
    return np.where(thin, lin, np.clip(quad, 0.0, 1.0))


def _sheet_fractions(line: CutLine, lo: np.ndarray, hi: np.ndarray, width: float) -> np.ndarray:
    """Volume fraction of each brick inside the sheet (thickness ``width``)."""
    k = line.axis
    P = line.dislocation.point
    ext = hi - lo
    # along the cut: the part of [lo_k, hi_k] on the slipped side of the line
    if line.cut[k] > 0:
        along = (hi[:, k] - np.maximum(lo[:, k], P[k])) / ext[:, k]
    else:
        along = (np.minimum(hi[:, k], P[k]) - lo[:, k]) / ext[:, k]
    along = np.clip(along, 0.0, 1.0)
    # across: the slab |nu.(x - P)| <= w/2 in the cross-section normal to the cut
    i, j = [a for a in range(3) if a != k]
    nu = line.normal
    s0 = nu @ P
    # an axis with nu_a = 0 does not enter (and may be unbounded: cross-section meshes)
    smin = np.zeros(len(lo))
    pq = []
    for a in (i, j):
        if abs(nu[a]) > 1e-12:
            smin = smin + np.where(nu[a] >= 0, lo[:, a], hi[:, a]) * nu[a]
            pq.append(abs(nu[a]) * ext[:, a])
        else:
            pq.append(np.zeros(len(lo)))
    p, q = pq
    across = (_below_fraction(s0 + 0.5 * width, smin, p, q)
              - _below_fraction(s0 - 0.5 * width, smin, p, q))
    return along * np.clip(across, 0.0, 1.0)


def sheet_width(line: CutLine, lo: np.ndarray, hi: np.ndarray) -> float:
    """Default sheet thickness: width along nu of the element column at the line.

    The elements touching the line on its slipped side are found; their
    extent along nu (sum of |nu_a| times the brick side a) is averaged.

    Parameters
    ----------
    line : CutLine
    lo, hi : ndarray (nelems, 3)
        From :func:`brick_bounds`.

    Returns
    -------
    float
        nm.

    Raises
    ------
    MesastrainError
        The line does not touch the mesh.
    """
    P = line.dislocation.point
    k = line.axis
    ext = hi - lo
    fin = np.where(np.isfinite(ext), ext, 0.0)
    tol = _ON_PLANE * fin.max(axis=1)
    near = np.all((lo - tol[:, None] <= P) & (P <= hi + tol[:, None]), axis=1)
    # on the slipped side of the line
    mid = 0.5 * (lo[:, k] + hi[:, k])
    near &= (mid - P[k]) * line.cut[k] > 0
    if not np.any(near):
        raise MesastrainError(f"the dislocation line through {np.round(P, 6).tolist()} nm does "
                              "not pass through the meshed body")
    nu = np.abs(line.normal)
    return float(np.mean(np.where(nu > 1e-12, fin[near], 0.0) @ nu))


def sheet_eigenstrain(line: CutLine, lo: np.ndarray, hi: np.ndarray,
                      width: float | None = None) -> np.ndarray:
    """Per-element plastic eigenstrain of one dislocation's sheet.

    Parameters
    ----------
    line : CutLine
    lo, hi : ndarray (nelems, 3)
        Element bounds (:func:`brick_bounds`), nm.
    width : float, optional
        Sheet thickness, nm; default ``line.width`` or :func:`sheet_width`.

    Returns
    -------
    ndarray (nelems, 3, 3)
        Sample-frame eigenstrain (dimensionless), zero away from the sheet.
    """
    w = width or line.width or sheet_width(line, lo, hi)
    frac = _sheet_fractions(line, lo, hi, w)
    return frac[:, None, None] * line.plastic_strain(w)


def lines_eigenstrain(lines, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Sum of :func:`sheet_eigenstrain` over several lines, (nelems, 3, 3)."""
    out = np.zeros((lo.shape[0], 3, 3))
    for line in lines:
        out += sheet_eigenstrain(line, lo, hi)
    return out


# --------------------------------------------------------------------------
# a one-element-thick periodic prism (straight lines, checks)
# --------------------------------------------------------------------------
def _direct_2d(K, f, fixed) -> np.ndarray:
    """Direct solve with u = 0 on ``fixed`` for a system with 2-D sparsity.

    SuperLU with the COLAMD ordering: on the prism systems (a 2-D grid of
    nodes) it fills about 5x less than the minimum-degree ordering of
    :func:`mesastrain.fem.solve.solve_condensed` and factors ~15x faster
    (13.7k unknowns: 0.5 s against 8.8 s, measured on the 2-core machine).
    """
    import scipy.sparse.linalg as spla

    from mesastrain.errors import SolverError

    n = K.shape[0]
    free = np.ones(n, dtype=bool)
    free[fixed] = False
    idx = np.flatnonzero(free)
    A = K[idx][:, idx].tocsc()
    b = f[idx]
    u = np.zeros(n)
    if not np.any(b):
        return u
    try:
        x = spla.splu(A, permc_spec="COLAMD").solve(b)
    except RuntimeError as exc:
        raise SolverError("the prism model is not held: singular stiffness matrix") from exc
    res = np.linalg.norm(b - A @ x) / np.linalg.norm(b)
    if not (np.all(np.isfinite(x)) and res < 1e-8):
        raise SolverError(f"direct solve of the prism model failed (relative residual "
                          f"{res:.1e})")
    u[idx] = x
    return u


# --------------------------------------------------------------------------
# --------------------------------------------------------------------------
class PrismModel:
    """A tensor grid one element thick along ``axis``, periodic along it.

    The nodes of the two end faces share their displacement (all three
    components), so nothing varies along ``axis``: the generalized plane
    strain of a straight dislocation along that axis (zero axial strain, all
    three displacement components and the anti-plane shears allowed), which
    is the setting of the closed-form straight-line solutions. Used for the
    checks of the eigenstrain-sheet representation and for cross-sections of
    infinite arrays.

    Parameters
    ----------
    xs, ys, zs : array
        Grid coordinates, nm; the one along ``axis`` has exactly 2 entries.
    axis : int
        The periodic (line) axis, 0, 1 or 2.
    group : ndarray of int (nelems,), optional
        Material group of each element (default all 0). Element order is
        x fastest, then y, then z (:attr:`cell_index` maps grid cells).
    """

    def __init__(self, xs, ys, zs, axis: int, group=None):
        from skfem import MeshHex

        from mesastrain.fem.discretisation import discretise

        grids = [np.asarray(g, dtype=float) for g in (xs, ys, zs)]
        if len(grids[axis]) != 2:
            raise MesastrainError(f"the periodic axis {axis} must be one element thick "
                                  f"(2 grid coordinates), got {len(grids[axis])}")
        self.grids = grids
        self.axis = axis
        mesh = MeshHex.init_tensor(*grids)
        self.mesh = mesh
        mid = mesh.p[:, mesh.t].mean(axis=1)
        idx = [np.searchsorted(g, m) - 1 for g, m in zip(grids, mid)]
        # reorder elements x fastest, then y, then z
        shape = tuple(len(g) - 1 for g in grids)
        order = np.ravel_multi_index(idx[::-1], shape[::-1])
        perm = np.argsort(order)
        self.mesh = mesh = MeshHex(mesh.p, np.ascontiguousarray(mesh.t[:, perm]))
        self.shape = shape
        self.group = (np.zeros(mesh.t.shape[1], dtype=np.int32) if group is None
                      else np.asarray(group, dtype=np.int32))
        self.disc = discretise(mesh, 1)
        self.lo, self.hi = brick_bounds(mesh)
        self.centroids = 0.5 * (self.lo + self.hi)
        # periodic tie: every node maps to its partner on the first end face
        p = mesh.p
        first = np.isclose(p[axis], grids[axis][0], rtol=0, atol=1e-12 * np.ptp(p))
        other = [a for a in range(3) if a != axis]
        key = np.round(p[other].T / (1e-9 * np.ptp(p)), 0)
        _, inv = np.unique(key, axis=0, return_inverse=True)
        inv = inv.ravel()
        rep_of_key = np.full(inv.max() + 1, -1)
        rep_of_key[inv[first]] = np.arange(int(first.sum()))
        self.node_map = rep_of_key[inv]           # node -> reduced node
        self.reduced_nodes = np.flatnonzero(first)
        if np.any(self.node_map < 0):
            raise MesastrainError("periodic faces of the prism do not match")  # pragma: no cover

    @property
    def nelems(self) -> int:
        return int(self.mesh.t.shape[1])

    def cell_index(self, i, j, k) -> np.ndarray:
        """Element index of grid cell (i, j, k) (x, y, z cell indices)."""
        nx, ny, _ = self.shape
        return np.asarray(i) + nx * (np.asarray(j) + ny * np.asarray(k))

    def boundary_nodes(self, face: str) -> np.ndarray:
        """Reduced node indices on a face: ``"x-"``, ``"x+"``, ``"y-"``, ... ."""
        a = "xyz".index(face[0])
        g = self.grids[a]
        val = g[0] if face[1] == "-" else g[-1]
        p = self.mesh.p[:, self.reduced_nodes]
        return np.flatnonzero(np.abs(p[a] - val) <= 1e-9 * np.ptp(g))

    @property
    def node_points(self) -> np.ndarray:
        """Coordinates of the reduced nodes, (n, 3) nm."""
        return self.mesh.p[:, self.reduced_nodes].T

    def solve(self, stiffness, eigenstrain=None, cell_eigenstrain=None, fixed=(),
              method: str = "direct", tol: float = 1e-10):
        """Solve for the displacement.

        Parameters
        ----------
        stiffness : array (ngroups, 6, 6)
            Voigt stiffness per group, sample frame, GPa.
        eigenstrain : array (ngroups, 3, 3), optional
            Eigenstrain per group (default zero).
        cell_eigenstrain : array (nelems, 3, 3), optional
            Extra eigenstrain per element (e.g. :func:`lines_eigenstrain`).
        fixed : sequence of (nodes, components, values)
            Prescribed displacements: reduced node indices, a tuple of
            components (0, 1, 2) and values of shape (len(nodes), ncomp) or a
            scalar, nm.
        method : {"direct", "auto", "iterative"}
            Default direct: the prism has 2-D sparsity (:func:`_direct_2d`).
        tol : float
            Relative residual for the iterative solver.

        Returns
        -------
        u : ndarray (nnodes, 3)
            Displacement at every mesh node, nm.
        """
        import scipy.sparse as sp

        from mesastrain.fem.assembly import assemble, rigid_body_modes
        from mesastrain.fem.solve import choose_method, solve_condensed

        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        K, f = assemble(self.disc, self.group, stiff, eig, cell_eigenstrain)
        nn = self.mesh.p.shape[1]
        nr = len(self.reduced_nodes)
        rows = np.arange(3 * nn)
        cols = (3 * self.node_map[:, None] + np.arange(3)).ravel()
        P = sp.csr_matrix((np.ones(3 * nn), (rows, cols)), shape=(3 * nn, 3 * nr))
        Kr = (P.T @ K @ P).tocsr()
        fr = P.T @ f
        g = np.zeros(3 * nr)
        fixed_dofs = []
        for nodes, comps, values in fixed:
            nodes = np.asarray(nodes, dtype=np.int64)
            vals = np.broadcast_to(np.asarray(values, dtype=float), (len(nodes), len(comps)))
            for c_i, c in enumerate(comps):
                g[3 * nodes + c] = vals[:, c_i]
                fixed_dofs.append(3 * nodes + c)
        fixed_dofs = (np.unique(np.concatenate(fixed_dofs)) if fixed_dofs
                      else np.zeros(0, dtype=np.int64))
        rhs = fr - Kr @ g
        if choose_method(method, 3 * nr - len(fixed_dofs)) == "direct":
            w = _direct_2d(Kr, rhs, fixed_dofs)
        else:
            modes = rigid_body_modes(self.mesh.p[:, self.reduced_nodes])
            w, _ = solve_condensed(Kr, rhs, fixed_dofs, modes, method=method, tol=tol)
        return (P @ (w + g)).reshape(-1, 3)

    def fields(self, u, stiffness, eigenstrain=None, cell_eigenstrain=None):
        """Recovered fields (:class:`mesastrain.fem.fields.Fields`) of a displacement.

        Arguments as for :meth:`solve`; ``u`` as it returns. Element averages
        of linear bricks are the values at the brick centres.
        """
        from mesastrain.fem.fields import recover

        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        return recover(self.disc, np.asarray(u).ravel(), self.group, stiff, eig,
                       self.mesh.p.shape[1], self.mesh.t, cell_eigenstrain)

    def cell_stress(self, u, stiffness, eigenstrain=None, cell_eigenstrain=None) -> np.ndarray:
        """Element-average stress (= stress at the brick centre), MPa, (nelems, 3, 3)."""
        return self.fields(u, stiffness, eigenstrain, cell_eigenstrain).cell_stress

    def locate(self, points) -> np.ndarray:
        """Element containing each point (lower cell on a grid plane), (npts,).

        Raises
        ------
        MesastrainError
            A point outside the grid.
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        for a, g in enumerate(self.grids):
            tol = 1e-9 * (g[-1] - g[0])
            if np.any((pts[:, a] < g[0] - tol) | (pts[:, a] > g[-1] + tol)):
                raise MesastrainError(f"a point lies outside the prism along {'xyz'[a]} "
                                      f"([{g[0]:g}, {g[-1]:g}] nm)")
        ijk = []
        for a, g in enumerate(self.grids):
            i = np.searchsorted(g, pts[:, a], side="left") - 1
            ijk.append(np.clip(i, 0, len(g) - 2))
        return self.cell_index(*ijk)

    def stress_at(self, u, points, stiffness, eigenstrain=None, cell_eigenstrain=None):
        """Exact stress of the FE solution at points, MPa, (npts, 3, 3)."""
        from mesastrain.fem.fields import evaluate_at_points

        stiff = np.asarray(stiffness, dtype=float).reshape(-1, 6, 6)
        eig = (np.zeros((len(stiff), 3, 3)) if eigenstrain is None
               else np.asarray(eigenstrain, dtype=float).reshape(-1, 3, 3))
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        _, sig, _ = evaluate_at_points(self.disc, np.asarray(u).ravel(), self.locate(pts), pts,
                                       self.group, stiff, eig, cell_eigenstrain)
        return sig


# --------------------------------------------------------------------------
# dislocation families of a case
# --------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LineFamily:
    """One ``[[dislocations]]`` entry of a case, resolved in the model.

    Attributes
    ----------
    name : str
    key : str
        Case-file key path, e.g. ``"dislocations[0]"``.
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
    lines : tuple of CutLine
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
        from mesastrain.physics.crystal import format_indices
        from mesastrain.physics.dislocations import character_angle

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


def _case_sets(case) -> tuple:
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
    """Turn the case's ``[[dislocations]]`` entries into lines in a model.

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
    boundary : mesastrain.fem.constraints.Boundary, optional
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
    from mesastrain.physics.dislocations import dislocation_from_crystal
    from mesastrain.errors import CaseError

    out = []
    for i, ds in enumerate(_case_sets(case)):
        key = f"dislocations[{i}]"
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
                raise CaseError(f"{key}.relaxation", f"layer[{ds.interface}] has no mismatch "
                                                     "to relax; give spacing or positions")
            if abs(b_e) < 1e-9 * np.linalg.norm(b):
                raise CaseError(f"{key}.relaxation", "the Burgers vector has no edge component "
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
            w = sheet_width(CutLine(template.shifted(p * e), cut=(0.0, 0.0, 1.0)), lo, hi)
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
                lines.append(CutLine(template.shifted((p + s) * e), cut=(0.0, 0.0, 1.0),
                                     width=w, label=f"{ds.name} at {p:.6g} nm"))
        if not kept:
            which = "relaxation" if ds.relaxation is not None else "spacing"
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
# closed-form overlay
# --------------------------------------------------------------------------
def overlay_stress(families, layers, points) -> np.ndarray:
    """Infinite-medium stress of the lines of ``families`` at points (closed form).

    Each family uses the anisotropic (Stroh) field with the sample-frame
    stiffness of the layer above its interface, the same for every point (an
    infinite homogeneous medium: no free surface, no other layers). In a model
    that repeats along the normal to the lines, each line stands for its
    infinite periodic row (closed-form sum, :func:`mesastrain.physics.dislocations.array_fields`).
    Points within one Burgers vector of a line get NaN.

    Parameters
    ----------
    families : list of LineFamily
    layers : list of LayerModel
    points : array (npts, 3), nm

    Returns
    -------
    ndarray (npts, 3, 3)
        MPa, sample frame.
    """
    from mesastrain.physics.dislocations import anisotropic_fields, array_fields

    pts = np.atleast_2d(np.asarray(points, dtype=float))
    out = np.zeros((len(pts), 3, 3))
    for fam in families:
        c6 = layers[fam.region].stiffness_sample
        core = float(np.linalg.norm(fam.template.b))
        for p in fam.positions:
            d = fam.template.shifted(p * fam.across)
            if fam.period is not None:
                s, _ = array_fields(d, fam.period, None, pts, c6=c6, direction=fam.across,
                                    core_radius=core)
            else:
                s, _ = anisotropic_fields(d, pts, c6, core_radius=core)
            out += s
    return out * 1000.0


# --------------------------------------------------------------------------
# pipeline hooks
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
    from mesastrain.errors import CaseError

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


def _families_of(case, layers, sm):
    lo, hi = model_bounds(sm)
    boundary = sm.boundary()
    return resolve_families(case, layers, sm.layer, lo, hi, boundary), lo, hi


def eigenstrain_source(case, layers, sm):
    """``pipeline.EIGENSTRAIN_SOURCES`` entry: the sheets of every ``[[dislocations]]`` line.

    Returns None for a case without dislocations. A mirrored (half or
    quarter) model gets zeros: a non-None answer makes the pipeline solve the
    whole feature, and the sheets are placed on that.

    Returns
    -------
    ndarray (nelems, 3, 3) or None
        Sample-frame plastic eigenstrain per element.
    """
    if not _case_sets(case):
        return None
    if sm.mirrors:
        return np.zeros((sm.nelems, 3, 3))
    fams, lo, hi = _families_of(case, layers, sm)
    return lines_eigenstrain([ln for f in fams for ln in f.lines], lo, hi)


def _dislocation_solution(res, eig_cells):
    """FE displacement of the dislocation sheets alone (no mismatch), same model and supports."""
    from mesastrain.fem.assembly import SymbolicCache, assemble
    from mesastrain.fem.solve import solve_model

    stiff = res.stiffness
    zero = np.zeros((len(stiff), 3, 3))
    cache = SymbolicCache(res.disc)
    K, f = assemble(res.disc, res.mesh.region, stiff, zero, eig_cells, cache=cache)
    u, _ = solve_model(K, f, res.disc, res.mesh.boundary(), res.case.solver,
                       spaces=cache.deferred_spaces(res.mesh.region))
    return u


def derive(res):
    """``pipeline.DERIVED`` entry: dislocation contribution, overlay and relaxation figures.

    Solves the model once more with only the dislocation sheets as load (the
    finite-element dislocation contribution, images included; the total
    field is the run's own), evaluates the closed-form infinite-medium field
    of the same lines, and reports per family the lines placed, the expected
    relaxation b_edge / S and the relaxation the finite-element field shows.
    """
    from mesastrain.io.export import to_vtk6
    from mesastrain.fem.fields import recover
    from mesastrain.run.pipeline import Derived

    case = res.case
    if not _case_sets(case):
        return Derived()
    sm = res.mesh
    layers = res.layers
    fams, lo, hi = _families_of(case, layers, sm)
    eig_cells = lines_eigenstrain([ln for f in fams for ln in f.lines], lo, hi)
    u_d = _dislocation_solution(res, eig_cells)
    stiff = res.stiffness
    zero = np.zeros((len(stiff), 3, 3))
    fl_d = recover(res.disc, u_d, sm.region, stiff, zero, sm.solve_nnodes, sm.solve_mesh.t,
                   eig_cells)
    fl_d = sm.expand_fields(fl_d)
    centres = 0.5 * (np.where(np.isfinite(lo), lo, 0.0) + np.where(np.isfinite(hi), hi, 0.0))
    over = overlay_stress(fams, layers, centres)
    warnings = []
    fam_out = []
    vol = fl_d.cell_volume
    for fam in fams:
        info = fam.to_dict()
        widths = sorted({round(ln.width, 9) for ln in fam.lines})
        info["sheet_width"] = widths[0] if len(widths) == 1 else widths
        e = fam.across
        above = sm.layer == fam.region
        v = vol[above] / vol[above].sum()
        mean_d = np.einsum("n,nij->ij", v, fl_d.cell_strain[above])
        mean_t = np.einsum("n,nij->ij", v, res.fields.cell_strain[above])
        change = float(e @ mean_d @ e)
        info["mean_strain_change_along_normal_fe"] = change
        info["mean_strain_along_normal_total_fe"] = float(e @ mean_t @ e)
        info["relaxation_fraction_fe"] = None if fam.misfit == 0 else change / -fam.misfit
        fam_out.append(info)
        lm = layers[fam.region]
        if lm.relaxed > 0:
            warnings.append(f"{fam.key}: layer[{fam.region - 1}] is already relaxed "
                            f"{lm.relaxed:g} uniformly (its 'relaxed' key); the dislocations "
                            f"relax it further")
        w = max(ln.width for ln in fam.lines)
        gap = fam.spacing if fam.spacing is not None else (
            np.min(np.diff(sorted(fam.positions))) if len(fam.positions) > 1 else None)
        if gap is not None and w > 0.25 * gap:
            warnings.append(f"{fam.key}: the dislocation sheets are {w:.3g} nm wide (the local "
                            f"element width), more than a quarter of the {gap:.3g} nm between "
                            f"lines; fields near the lines are smeared: lower mesh.size")
        held = _roller_ends(fam, sm, lo, hi)
        if held and abs(fam.b_screw) > 1e-9 * np.linalg.norm(fam.template.b):
            warnings.append(f"{fam.key}: the lines end on the model's side faces at {held}, "
                            f"which are held normal to themselves: the displacement along the "
                            f"lines is held there, so the screw part of b is constrained near "
                            f"those faces (etch through the interface, or model a blanket film "
                            f"or a stripe)")
        if fam.period is not None and fam.spacing is not None:
            n = fam.period / fam.spacing
            if abs(n - round(n)) > 1e-3 * max(n, 1.0):
                warnings.append(
                    f"{fam.key}: the periodic cell ({fam.period:.6g} nm) is not a whole number "
                    f"of spacings ({fam.spacing:.6g} nm): the model holds {len(fam.positions)} "
                    f"lines per cell and relaxes {len(fam.positions) * fam.b_edge / fam.period:.4g}"
                    f" instead of b_edge/S = {fam.b_edge / fam.spacing:.4g}")
    summary = {"dislocations": {
        "representation": ("each line is a plastic eigenstrain sheet sym(J x nu)/w (J = -b) "
                           "from the line up to the free surface; the finite-element "
                           "dislocation contribution includes free surfaces and layers, the "
                           "closed-form overlay is the infinite homogeneous medium (Stroh, "
                           "stiffness of the layer above the interface)"),
        "units": {"lengths": "nm", "stress": "MPa"},
        "families": fam_out,
        "lines": int(sum(len(f.positions) for f in fams)),
    }}
    # probes
    probe_entries = {}
    if case.probes:
        pts = np.array([p.at for p in case.probes], dtype=float)
        s_fe = _sample(res, u_d, eig_cells, pts)
        probe_entries["dislocation_stress"] = list(s_fe)
        probe_entries["dislocation_stress_infinite_medium"] = list(overlay_stress(fams, layers,
                                                                                  pts))
    cell_data = {"dislocation_stress": to_vtk6(fl_d.cell_stress),
                 "dislocation_stress_infinite_medium": to_vtk6(over),
                 "stress_without_dislocations": to_vtk6(res.fields.cell_stress
                                                        - fl_d.cell_stress)}
    files = {}
    if np.max(np.abs(fams[0].template.xi[:2])) > 1 - 1e-9:    # lines along a grid axis
        files["dislocations_section.png"] = (
            lambda path: _section_map(path, res, fams, lo, hi, fl_d.cell_stress, over))
    for cut in getattr(case, "cuts", ()):
        files.update(_cut_file(res, cut, fams, fl_d.cell_stress))
    return Derived(summary=summary, probe_entries=probe_entries, cell_data=cell_data,
                   warnings=warnings, files=files)


def _roller_ends(fam, sm, lo, hi) -> str:
    """Side faces with rollers that the family's lines reach ('' if none)."""
    at = (sm.layer == fam.region) & (np.abs(lo[:, 2] - fam.z) <= 1e-9 * (1.0 + abs(fam.z)))
    if not np.any(at):
        return ""
    tied = {a for a, _, _ in sm.boundary().periodic}
    faces = []
    for a in (0, 1):
        if abs(fam.template.xi[a]) < 1e-9 or a in tied or not np.all(np.isfinite(hi[:, a])):
            continue
        span = hi[:, a].max() - lo[:, a].min()
        if (abs(lo[at, a].min() - lo[:, a].min()) <= 1e-9 * span
                or abs(hi[at, a].max() - hi[:, a].max()) <= 1e-9 * span):
            faces.append(f"{'xy'[a]} = {lo[:, a].min():.6g} / {hi[:, a].max():.6g} nm")
    return ", ".join(faces)


def _sample(res, u_d, eig_cells, pts) -> np.ndarray:
    """FE dislocation-only stress (MPa) at points; NaN outside the body."""
    sm = res.mesh
    elems = sm.locate(pts)
    out = np.full((len(pts), 3, 3), np.nan)
    ok = elems >= 0
    if np.any(ok):
        stiff = res.stiffness
        _, sig, _ = sm.evaluate(res.disc, u_d, elems[ok], pts[ok], sm.region, stiff,
                                np.zeros((len(stiff), 3, 3)), eig_cells)
        out[ok] = sig
    return out


_PAIRS = (("xx", 0, 0), ("yy", 1, 1), ("zz", 2, 2), ("yz", 1, 2), ("xz", 0, 2), ("xy", 0, 1))


def _cut_file(res, cut, fams, fe_cells) -> dict:
    """Total, FE dislocation part and overlay along a cut: CSV and PNG.

    The finite-element values are those of the element each point lies in
    (element averages = values at the element centres, where linear
    elements are most accurate; point values of linear elements zigzag
    from element to element near a singular field).
    """
    import csv

    from mesastrain.derived.cuts import safe_name

    start = np.asarray(cut.start, dtype=float)
    end = np.asarray(cut.end, dtype=float)
    s = np.linspace(0.0, 1.0, int(cut.points))
    pts = start + s[:, None] * (end - start)
    dist = s * float(np.linalg.norm(end - start))
    elems = res.mesh.locate(pts)
    total = np.full((len(pts), 3, 3), np.nan)
    fe = np.full((len(pts), 3, 3), np.nan)
    ok = elems >= 0
    total[ok] = res.fields.cell_stress[elems[ok]]
    fe[ok] = fe_cells[elems[ok]]
    inf = overlay_stress(fams, res.layers, pts)

    def write(path):
        with open(path, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            head = ["distance_nm", "x_nm", "y_nm", "z_nm"]
            for what in ("total_element", "dislocation_fe_element", "dislocation_infinite_medium"):
                head += [f"{what}_stress_{c}_MPa" for c, _, _ in _PAIRS]
            w.writerow(head)
            for k in range(len(pts)):
                row = [f"{dist[k]:.6g}", *(f"{v:.6g}" for v in pts[k])]
                for arr in (total, fe, inf):
                    row += ["" if not np.isfinite(arr[k, i, j]) else f"{arr[k, i, j]:.6g}"
                            for _, i, j in _PAIRS]
                w.writerow(row)

    chosen = [c[7:] for c in getattr(cut, "components", ()) if c.startswith("stress_")
              and c[7:] in {n for n, _, _ in _PAIRS}] or ["xx", "zz", "xz"]
    # where the cut crosses the vertical plane through a line (above or below it)
    marks = []
    for fam in fams:
        for p in fam.positions:
            se = (pts - fam.template.shifted(p * fam.across).point) @ fam.across
            for k in np.flatnonzero(se[:-1] * se[1:] <= 0):
                if se[k] != se[k + 1]:
                    marks.append(dist[k] + (dist[k + 1] - dist[k]) * se[k] / (se[k] - se[k + 1]))
    title = (f"cut {cut.name}: ({', '.join(f'{v:g}' for v in cut.start)}) to "
             f"({', '.join(f'{v:g}' for v in cut.end)}) nm")

    def plot(path):
        _plot_cut(path, title, dist, total, fe, inf, chosen, marks)

    base = f"cut_{safe_name(cut.name)}_dislocations"
    return {f"{base}.csv": write, f"{base}.png": plot}


def _plot_cut(path, title, dist, total, fe, inf, chosen, marks) -> None:
    """Total stress, FE dislocation contribution and closed-form overlay along a cut."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    idx = {n: (i, j) for n, i, j in _PAIRS}
    fig, axes = plt.subplots(len(chosen), 1, figsize=(7.5, 2.5 * len(chosen) + 0.8), dpi=110,
                             sharex=True, squeeze=False)
    for ax, name in zip(axes[:, 0], chosen):
        i, j = idx[name]
        ax.plot(dist, total[:, i, j], color="0.1", lw=1.4, label="total (finite elements)")
        ax.plot(dist, fe[:, i, j], color="tab:blue", lw=1.2,
                label="dislocations alone, finite elements (free surfaces, layers)")
        ax.plot(dist, inf[:, i, j], color="tab:orange", lw=1.2, ls="--",
                label="dislocations, infinite medium (closed form)")
        for m in marks:
            ax.axvline(m, color="0.6", lw=0.8, ls=":")
        ax.axhline(0.0, color="0.3", lw=0.6)
        ax.set_ylabel(f"stress {name} (MPa)")
        ax.grid(alpha=0.3)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    axes[-1, 0].set_xlabel("distance along the cut (nm); dotted: above/below a dislocation line")
    fig.suptitle(title + "; sample frame, element averages", fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.6 / fig.get_figheight()))
    fig.legend(handles, labels, loc="upper center", ncol=2, fontsize=7, frameon=False,
               bbox_to_anchor=(0.5, 1 - 0.3 / fig.get_figheight()))
    fig.savefig(path)
    plt.close(fig)


# --------------------------------------------------------------------------
# blanket films: the periodic cell
# --------------------------------------------------------------------------
#: Largest number of lines of one family in a blanket cell when spacings must be matched.
MAX_LINES_PER_CELL = 64


def _planned_spacings(case) -> list:
    """(axis, spacing, key) per family of a blanket case, without a mesh."""
    from mesastrain.physics.dislocations import dislocation_from_crystal
    from mesastrain.errors import CaseError
    from mesastrain.model.regions import build_layers

    layers = build_layers(case)
    out = []
    for i, ds in enumerate(_case_sets(case)):
        key = f"dislocations[{i}]"
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
        A blanket case (pattern "none") with ``[[dislocations]]``.
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
    from mesastrain.errors import CaseError

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


def _section_map(path, res, fams, lo, hi, fe_cells, over_cells) -> None:
    """Vertical section normal to the first family's lines: FE dislocation stress and overlay.

    Two components (normal stress across the lines, sigma_zz), each as the
    finite-element dislocation contribution and as the infinite-medium
    overlay, on a shared colour scale centred on zero (clipped at the 98th
    percentile of the FE values so that the line cores do not set it).
    """
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.collections import PolyCollection

    fam = fams[0]
    e = fam.across
    xi = fam.template.xi
    # the plane through the model centre containing e and z; elements it cuts
    mid = 0.5 * (np.where(np.isfinite(lo), lo, 0.0) + np.where(np.isfinite(hi), hi, 0.0))
    c0 = np.array([np.median(mid[:, 0]), np.median(mid[:, 1]), 0.0])
    a_line = int(np.argmax(np.abs(xi[:2])))
    a_across = 1 - a_line
    x0 = c0[a_line]
    cut = (lo[:, a_line] <= x0) & (x0 < hi[:, a_line])
    z_top = float(np.max(hi[:, 2]))
    films = [lm for lm in res.layers if lm.index >= fam.region]
    depth = max(z_top - fam.z, 1.0)
    zmin = fam.z - 1.5 * depth
    cut &= hi[:, 2] > zmin
    s_axis = e[a_across]
    x_lo, x_hi = lo[cut, a_across] * s_axis, hi[cut, a_across] * s_axis
    x_lo, x_hi = np.minimum(x_lo, x_hi), np.maximum(x_lo, x_hi)
    z_lo, z_hi = np.maximum(lo[cut, 2], zmin), hi[cut, 2]
    polys = np.stack([np.c_[x_lo, z_lo], np.c_[x_hi, z_lo], np.c_[x_hi, z_hi],
                      np.c_[x_lo, z_hi]], axis=1)
    # show the interface that holds the lines and a margin of 20% around it
    at = np.abs(lo[cut, 2] - fam.z) <= 1e-9 * max(depth, 1.0)
    at &= res.mesh.layer[cut] == fam.region
    span = (x_lo[at].min(), x_hi[at].max()) if np.any(at) else (x_lo.min(), x_hi.max())
    pad = 0.2 * (span[1] - span[0])
    xlim = (max(x_lo.min(), span[0] - pad), min(x_hi.max(), span[1] + pad))
    comps = [(f"{'xyz'[a_across] * 2} (across the lines)",
              lambda t: np.einsum("i,nij,j->n", e, t, e)),
             ("zz", lambda t: t[:, 2, 2])]
    fig, axes = plt.subplots(2, 2, figsize=(11, 6.2), dpi=110, sharex=True, sharey=True)
    for row, (name, pick) in enumerate(comps):
        v_fe = pick(fe_cells[cut])
        v_ov = pick(over_cells[cut])
        lim = float(np.nanpercentile(np.abs(v_fe), 98)) or 1.0
        panels = ((v_fe, "dislocations, finite elements (free surfaces, layers)"),
                  (v_ov, "dislocations, infinite medium (closed form)"))
        for col, (vals, what) in enumerate(panels):
            ax = axes[row, col]
            pc = PolyCollection(polys, array=np.ma.masked_invalid(vals), cmap="RdBu_r",
                                edgecolors="none")
            pc.set_clim(-lim, lim)
            ax.add_collection(pc)
            for lm in films:
                ax.axhline(lm.z_bottom, color="0.25", lw=0.6, ls="--")
            for f in fams:
                if abs(f.template.xi @ xi) > 1 - 1e-9:      # lines normal to this section
                    ax.plot(np.asarray(f.positions) * (f.across @ e), [f.z] * len(f.positions),
                            ls="none", marker="^", color="k", ms=4)
            ax.set_xlim(*xlim)
            ax.set_ylim(zmin, z_top)
            ax.set_title(f"stress {name}: {what}", fontsize=8)
            if col == 0:
                ax.set_ylabel("z (nm)")
            if row == 1:
                ax.set_xlabel("position across the lines (nm)")
            cb = fig.colorbar(pc, ax=ax, shrink=0.9)
            cb.set_label("MPa", fontsize=8)
    axis_name = "xyz"[a_line]
    fig.suptitle(f"All dislocations: section {axis_name} = {x0:.4g} nm, normal to the lines "
                 f"of {fam.name}; triangles: lines; dashed: interfaces; colour scale clipped at "
                 "the 98th percentile", fontsize=9)
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)


# --------------------------------------------------------------------------
# report section
# --------------------------------------------------------------------------
def report_section(summary: dict, folder) -> str | None:
    """HTML section of ``report.html`` (in :data:`mesastrain.io.report.SECTIONS`).

    The families with their Burgers vectors and relaxation (expected and
    finite-element), the probes' total stress beside the dislocation
    contribution (finite elements and infinite-medium overlay), and the
    section and cut pictures found in ``folder``. None without dislocations.
    """
    from pathlib import Path

    from mesastrain.io.report import esc, image, mpa, num, table

    dis = summary.get("dislocations")
    if not dis:
        return None
    folder = Path(folder)

    def vec(v):
        return esc("[" + ", ".join(f"{x:.3g}" for x in v) + "]")

    rows = []
    for f in dis["families"]:
        w = f.get("sheet_width")
        rows.append([esc(f["name"]), esc(f["layer_above"]), esc(f["burgers"]),
                     vec(f["burgers_sample"]), num(f["character_angle_deg"], 3),
                     num(f["b_edge_in_plane"], 3), num(f["b_screw"], 3), num(f["b_normal"], 3),
                     num(f["spacing"], 4), esc(f["count"]),
                     num(f["relaxation_fraction"], 3), num(f["relaxation_fraction_fe"], 3),
                     num(w if isinstance(w, (int, float)) else max(w), 3)])
    parts = ["<h2>Misfit dislocations</h2>",
             table(["family", "layer above", "b", "b, sample frame (nm)", "angle b-line (deg)",
                    "b<sub>edge</sub> (nm)", "b<sub>screw</sub> (nm)", "b<sub>normal</sub> (nm)",
                    "spacing (nm)", "lines", "relaxation b<sub>edge</sub>/S",
                    "relaxation, FE", "sheet width (nm)"], rows, 2),
             ('<p class="note">Relaxation: change of the mean in-plane strain of the layer above '
              'the interface, normal to the lines, as a fraction of its mismatch; expected '
              'b<sub>edge</sub>/S for an infinite array, finite elements with the free surfaces '
              'and edges of the model. Each line is an eigenstrain sheet one element wide from '
              'the line to the free surface; closer to a line than a few sheet widths its field '
              'is smeared. The infinite-medium overlay is the closed-form (Stroh) field of the '
              'same lines in a homogeneous crystal: no free surface, no other layers.</p>')]
    probes = [p for p in summary.get("probes", []) if "dislocation_stress" in p]
    if probes:
        comps = (("xx", 0, 0), ("zz", 2, 2), ("xz", 0, 2))
        prow = []
        for p in probes:
            row = [esc(p["name"])]
            for key in ("stress", "dislocation_stress", "dislocation_stress_infinite_medium"):
                s = p.get(key)
                row += [num(None) if s is None or s[i][j] is None else mpa(s[i][j], 4)
                        for _, i, j in comps]
            prow.append(row)
        head = ["probe"] + [f"{what} &sigma;<sub>{c}</sub>" for what in
                            ("total", "dislocations FE", "dislocations infinite")
                            for c, _, _ in comps]
        parts += ["<h3>Probes (MPa, sample frame)</h3>", table(head, prow, 1)]
    parts.append(image(folder / "dislocations_section.png",
                       "Dislocation stress in a section normal to the lines: finite elements "
                       "(left) and the infinite-medium overlay (right)."))
    for png in sorted(folder.glob("cut_*_dislocations.png")):
        parts.append(image(png, f"{esc(png.stem)}: total, dislocation part (finite elements) "
                                "and infinite-medium overlay along the cut."))
    return "\n".join(parts)
