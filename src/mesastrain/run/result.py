"""What a run produced: the solved :class:`Result` and the :class:`Derived` parts added to it.

:func:`mesastrain.run.pipeline.run_case` builds a :class:`Result`; each
derived-quantity provider (:mod:`mesastrain.derived`) returns a
:class:`Derived` that the output folder (:mod:`mesastrain.io.folder`) merges
into ``summary.json``, ``fields.vtu`` and extra files.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from mesastrain.case.types import Case
from mesastrain.errors import CaseError
from mesastrain.fem.discretisation import Discretisation
from mesastrain.fem.fields import Fields
from mesastrain.fem.solve import SolverReport
from mesastrain.mesh.base import ModelMesh
from mesastrain.model.symmetry import reflect_points, reflect_tensors

__all__ = ["Derived", "Result"]


@dataclass
class Derived:
    """What one derived-quantity provider adds to a result.

    Attributes
    ----------
    summary : dict
        Top-level entries merged into ``summary.json``.
    probe_entries : dict of str -> list
        Per-probe entries (one list item per probe, in probe order) merged into
        each ``summary.json`` probe.
    cell_data, point_data : dict of str -> ndarray
        Arrays added to ``fields.vtu`` (tensors already as 6 components).
    warnings : list of str
    files : dict of str -> callable(Path)
        Extra files: name in the output folder -> function that writes it.
    section_maps : dict of str -> dict
        Cross-section pictures drawn from the in-memory fields: PNG name in the
        output folder -> keyword arguments of :func:`mesastrain.io.maps.draw_map`
        (``quantity``, ``component``, ``note``, ``depth``, ...). Drawn only when
        ``fields.vtu`` is written.
    handoff : dict of str -> object
        What a provider passes to providers of a later stage (a result they would
        otherwise recompute); written nowhere. A reader that has used an entry
        pops it, so that it is not held until the output is written.
    """

    summary: dict = field(default_factory=dict)
    probe_entries: dict = field(default_factory=dict)
    cell_data: dict = field(default_factory=dict)
    point_data: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    files: dict = field(default_factory=dict)
    section_maps: dict = field(default_factory=dict)
    handoff: dict = field(default_factory=dict, repr=False)


@dataclass(frozen=True)
class Result:
    """Everything a run produced, in memory.

    Attributes
    ----------
    case : Case
    layers : list of LayerModel
        Substrate first.
    mesh : ModelMesh
        The whole modelled body (a half or quarter model is unfolded after
        the solve). ``mesh.mesh`` is a 3-D scikit-fem mesh (a cross-section
        is exported as a thin slab), ``mesh.region`` the region per element.
    disc : Discretisation
        Of the whole body (for a mirrored model a
        :class:`mesastrain.mesh.unfold.MirroredDiscretisation`).
    u : ndarray (ndofs,)
        Displacement, nm, node-major (a cross-section: per node of the section).
    fields : Fields
    solver : SolverReport
    probes : list of dict
    timings : dict of str -> float, s
    warnings : list of str
    derived : list of Derived
    sensitivities : dict of str -> ndarray (ndofs,)
        Per constant group of the material-data scatter, the derivative of ``u``
        along the group's published spread (nm per spread; whole body); empty
        when ``[uncertainty]`` is off (:mod:`mesastrain.run.sensitivity`).
    scatter_groups : tuple of Group
        The constant groups of ``sensitivities``.
    solved : dict
        The system that was solved, before unfolding
        (:func:`mesastrain.run.pipeline.solved_system`): unknowns, nodes, elements,
        element_type, order, symmetry.
    """

    case: Case
    layers: list
    mesh: ModelMesh
    disc: Discretisation
    u: np.ndarray = field(repr=False)
    fields: Fields = field(repr=False)
    cell_eigenstrain: np.ndarray | None = field(default=None, repr=False)
    solver: SolverReport = None
    probes: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    derived: list = field(default_factory=list)
    sensitivities: dict = field(default_factory=dict, repr=False)
    scatter_groups: tuple = ()
    solved: dict = field(default_factory=dict)

    @property
    def order(self) -> int:
        return self.disc.order

    @property
    def stiffness(self) -> np.ndarray:
        """(nregions, 6, 6) sample-frame stiffness per region, GPa."""
        return np.array([lm.stiffness_sample for lm in self.layers])

    @property
    def eigenstrain(self) -> np.ndarray:
        """(nregions, 3, 3) sample-frame eigenstrain per region."""
        return np.array([lm.eigenstrain_sample for lm in self.layers])

    def sample(self, points: np.ndarray, key: str = "point"):
        """Exact fields at points (on a face between elements: their average).

        Parameters
        ----------
        points : array (npts, 3), nm
        key : str
            Name used in the error message for a point outside the body.

        Returns
        -------
        strain : ndarray (npts, 3, 3)
            Elastic strain, sample frame.
        stress : ndarray (npts, 3, 3)
            MPa, sample frame.
        displacement : ndarray (npts, 3)
            nm.
        region : ndarray of int (npts,)
            Region index (0 substrate, i layer i).
        """
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        mirrors = tuple(self.mesh.mirrors)
        q, signs = reflect_points(pts, mirrors)
        strain, stress, disp, elems, region = self.mesh.sample_points(
            self.disc, self.u, q, self.stiffness, self.eigenstrain, self.cell_eigenstrain)
        bad = np.flatnonzero(elems < 0)
        if bad.size:
            raise CaseError(key, f"{pts[bad[0]].tolist()} nm lies outside the modelled body "
                                 f"({_extent_text(self.mesh)})")
        if mirrors:
            strain = reflect_tensors(strain, signs)
            stress = reflect_tensors(stress, signs)
            disp = disp * signs
        return strain, stress, disp, region


def _extent_text(mesh) -> str:
    """The modelled extent in words, for error messages (mirrored axes shown whole)."""
    b = np.array(mesh.bounds, dtype=float)
    for a in mesh.mirrors:
        b[a, 0] = -b[a, 1]
    parts = []
    for a, name in enumerate("xyz"):
        if np.all(np.isfinite(b[a])):
            parts.append(f"{name} in [{b[a, 0]:g}, {b[a, 1]:g}]")
    return ", ".join(parts) + " nm"
