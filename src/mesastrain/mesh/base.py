"""The one interface every mesh kind provides: :class:`ModelMesh`.

The pipeline, the derived readouts and the output read a model's mesh only
through these names, whatever its kind (structured hexahedra, a stripe's
cross-section, gmsh tetrahedra, an imported file, the Python API, or any of
them unfolded from a mirrored part).

Each kind is a frozen dataclass that inherits the defaults below and stores,
as its own fields or properties:

mesh : scikit-fem mesh
    The 3-D mesh of the body (nm) that is exported and viewed.
region : ndarray of int (nelems,)
    Region of each element: 0 the substrate, i the i-th ``[[layer]]`` (for
    the Python API the index into its list of materials).
xs, ys, zs : ndarray
    Grid lines along x, y and z (nm); a mesh without a grid gives the two
    extents of the body per axis.
bounds : ndarray (3, 2)
    Extent of the modelled body per axis, nm (a cross-section's y extent is
    unbounded).
boundary() : mesastrain.fem.constraints.Boundary
    Supports and periodic ties.
locate(points) : ndarray of int
    Element containing each point (npts, 3) in nm, -1 outside the body.
discretise(order) : mesastrain.fem.discretisation.Discretisation
    The finite-element space of the given order on :attr:`solve_mesh`.
unfolded(uf) : ModelMesh
    The whole body from an unfolded mirrored part
    (:func:`mesastrain.mesh.unfold.unfold_model`).
"""

from __future__ import annotations

import numpy as np

from mesastrain.fem.fields import Fields, evaluate_at_points


class ModelMesh:
    """Defaults shared by every mesh kind (see the module docstring for the rest).

    Attributes
    ----------
    kind : str
        Name of the kind in the registry (:mod:`mesastrain.mesh.kinds`) and in
        ``summary.json`` (``model.mesh_kind``); every kind sets it (a class
        attribute, or a field where one class serves several kinds).
    element_name : str
        The elements in words, plural (for progress messages).
    mirrors : tuple of int
        Mirror axes of the model: only the non-negative side is meshed
        (:mod:`mesastrain.model.symmetry`). Empty for a whole body.
    axis_aligned : bool
        True when every element is an axis-aligned brick.
    description : str
        One line about the mesh for the summary ('' for none).
    spacing : mesastrain.mesh.grid.GridSpacing or None
        Requested element sizes (for the summary).
    """

    kind: str
    element_name = "elements"
    mirrors: tuple = ()
    axis_aligned = False
    description = ""
    spacing = None

    @property
    def solve_mesh(self):
        """The scikit-fem mesh the problem is solved on (by default :attr:`mesh`)."""
        return self.mesh

    @property
    def nnodes(self) -> int:
        """Vertices of the exported mesh."""
        return int(self.mesh.p.shape[1])

    @property
    def solve_nnodes(self) -> int:
        """Vertices of the solved mesh (the first scalar dofs of its discretisation)."""
        return int(self.solve_mesh.p.shape[1])

    @property
    def nelems(self) -> int:
        return int(self.solve_mesh.t.shape[1])

    @property
    def layer(self) -> np.ndarray:
        """Read-only alias of :attr:`region` (the name derived readouts and output use)."""
        return self.region

    def locate_all(self, points: np.ndarray) -> np.ndarray:
        """Every element holding each point: (npts, k), -1 padded, :meth:`locate` first.

        A point on a face, edge or vertex lies in several elements; a kind that
        cannot tell returns only :meth:`locate` (k = 1).
        """
        return np.asarray(self.locate(points))[:, None]

    def sample_points(self, disc, u, points, stiffness, eigenstrain, cell_eigenstrain=None):
        """Strain, stress (MPa), displacement (nm), element and region at points.

        A point inside one element takes that element's exact value. A point
        on a face, edge or vertex takes the average over the adjacent elements
        of the region of :meth:`locate`'s element (a probe on a material
        interface belongs to the region below it on the structured kinds);
        this makes the shear on a mirror plane of a symmetric solution zero to
        round-off instead of one side's value. Points outside get element -1
        and NaN values.

        Returns
        -------
        strain, stress : ndarray (npts, 3, 3)
        displacement : ndarray (npts, 3)
        elements, region : ndarray of int (npts,)
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        n = len(pts)
        cand = self.locate_all(pts)
        first = cand[:, 0]
        reg = np.where(first >= 0, self.region[np.maximum(first, 0)], -1)
        use = (cand >= 0) & (self.region[np.maximum(cand, 0)] == reg[:, None])
        pi, k = np.nonzero(use)
        strain = np.full((n, 3, 3), np.nan)
        stress = np.full((n, 3, 3), np.nan)
        disp = np.full((n, 3), np.nan)
        if pi.size:
            e, s, d = self.evaluate(disc, u, cand[pi, k], pts[pi], self.region, stiffness,
                                    eigenstrain, cell_eigenstrain)
            cnt = np.bincount(pi, minlength=n).astype(float)
            inside = cnt > 0
            for out, val in ((strain, e), (stress, s), (disp, d)):
                acc = np.zeros((n,) + val.shape[1:])
                np.add.at(acc, pi, val)
                out[inside] = acc[inside] / cnt[inside].reshape((-1,) + (1,) * (val.ndim - 1))
        return strain, stress, disp, first, reg

    def expand_fields(self, fl: Fields) -> Fields:
        """Fields of the solved mesh -> fields of the exported mesh (by default the same)."""
        return fl

    def evaluate(self, disc, u, elements, points, region, stiffness, eigenstrain,
                 cell_eigenstrain=None):
        """Exact elastic strain, stress (MPa) and displacement (nm) at points.

        Parameters and returns as :func:`mesastrain.fem.fields.evaluate_at_points`,
        which is the default.
        """
        return evaluate_at_points(disc, u, elements, points, region, stiffness, eigenstrain,
                                  cell_eigenstrain)
