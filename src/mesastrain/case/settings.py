"""The run settings of a case: the mesh, solver, output, readout, device and uncertainty
tables and the piezoresistance channels, as small frozen dataclasses.

Split from :mod:`mesastrain.case.types` (which re-exports them): these tables say how a
case is solved and reported, the others what is modelled. Defaults come from the
declarations in :mod:`mesastrain.case.schema`.
"""

from __future__ import annotations

from dataclasses import dataclass

from mesastrain.case.schema import DEVICE, MESH, OUTPUT, READOUTS, SOLVER, UNCERTAINTY

__all__ = ["Channel", "DeviceSettings", "MeshSettings", "OutputSettings", "ReadoutSettings",
           "SolverSettings", "UncertaintySettings"]


@dataclass(frozen=True)
class MeshSettings:
    """Mesh requests.

    Attributes
    ----------
    size : float or None
        Target element size, nm; None lets the mesher choose.
    edge_size : float or None
        Element size at edges and interfaces, nm.
    order : int
        Polynomial order of the elements, 1 or 2 (default:
        :func:`mesastrain.case.schema.default_order`).
    growth : float
        Geometric grading ratio between neighbouring elements, in (1, 3].
    substrate_depth : float or None
        Modelled depth of substrate below z = 0, nm; None lets the mesher choose.
    refine : float or None
        Divides every element size (default sizes or the ones given); None = 1.
    convergence : bool or None
        Repeat the solve on two refinements and report how the headline
        figures move (as ``mesastrain run --convergence``).
    error_estimate : bool
        Estimate the discretisation error of every non-singular headline figure
        (:mod:`mesastrain.derived.discretisation`); default true.
    """

    size: float | None
    edge_size: float | None
    order: int
    growth: float
    substrate_depth: float | None
    refine: float | None = MESH.default("refine")
    convergence: bool | None = MESH.default("convergence")
    error_estimate: bool = MESH.default("error_estimate")


@dataclass(frozen=True)
class SolverSettings:
    """Linear solver choice: method, relative tolerance, iteration cap.

    ``stress_tolerance`` is the relative energy-norm (stress) error at which
    the iteration may stop (besides the residual); ``precision`` that of the
    multigrid preconditioner; ``direct_limit`` the number of free unknowns up
    to which ``method = "auto"`` factorises directly (None: the solver's
    default). See :mod:`mesastrain.fem.solve`.
    """

    method: str
    tolerance: float
    max_iterations: int
    stress_tolerance: float = SOLVER.default("stress_tolerance")
    precision: str = SOLVER.default("precision")
    direct_limit: int | None = SOLVER.default("direct_limit")


@dataclass(frozen=True)
class OutputSettings:
    """Output switches.

    Attributes
    ----------
    vtu : bool
        Write ``fields.vtu``.
    crystal_frame : bool
        Also report tensors in each layer's crystal axes.
    report : bool
        Write ``report.html`` with its pictures (needs ``vtu`` for the maps).
    maps : tuple of str
        Components (:data:`mesastrain.case.schema.FIELD_COMPONENTS`) drawn as plan-view and
        cross-section maps in the report.
    fields : tuple of str
        Arrays in ``fields.vtu`` besides ``layer``
        (:data:`mesastrain.case.schema.VTU_FIELDS`).
    precision : {"single", "double"}
        Floating-point precision of those arrays.
    pictures : bool
        Draw the PNG pictures (maps and plots).
    """

    vtu: bool
    crystal_frame: bool
    report: bool = OUTPUT.default("report")
    maps: tuple = OUTPUT.default("maps")
    fields: tuple = OUTPUT.default("fields")
    precision: str = OUTPUT.default("precision")
    pictures: bool = OUTPUT.default("pictures")


@dataclass(frozen=True)
class ReadoutSettings:
    """Settings of the engineering readouts (``[readouts]``).

    Attributes
    ----------
    standoff : float or None
        Distance from singular corners and edges at which stresses are
        reported, nm; None: half the thinnest layer.
    wafer_diameter : float
        Wafer diameter for the bow height, nm (default 200 mm).
    bow : bool
        Solve the free-standing blanket wafer for its curvature (a small
        extra finite-element solve).
    """

    standoff: float | None = READOUTS.default("standoff")
    wafer_diameter: float = READOUTS.default("wafer_diameter")
    bow: bool = READOUTS.default("bow")


@dataclass(frozen=True)
class UncertaintySettings:
    """Material-data scatter of the headline figures (``[uncertainty]``).

    Attributes
    ----------
    enabled : bool
        Propagate the published spreads of the material data to the headline
        figures (first-order sensitivities, one extra solve per constant group).
    groups : tuple of str
        Kinds of constants that vary: ``stiffness``, ``lattice``, ``alpha``
        (only with ``[thermal]``), ``raman`` (the phonon deformation potential set),
        ``bands`` (band deformation potentials with a second published value).
    """

    enabled: bool = UNCERTAINTY.default("enabled")
    groups: tuple = UNCERTAINTY.default("groups")


@dataclass(frozen=True)
class Channel:
    """A conduction channel for the piezoresistance readout.

    Attributes
    ----------
    name : str
    direction : tuple of float
        (x, y, 0) in the SAMPLE frame as written (not normalised): the current
        direction on the mask, in the wafer plane (sample x = the substrate's
        ``x_axis``).
    carrier : str
        ``"n"`` (electrons) or ``"p"`` (holes).
    """

    name: str
    direction: tuple
    carrier: str


@dataclass(frozen=True)
class DeviceSettings:
    """Switches of the device-physics readouts (``[device]``).

    Attributes
    ----------
    bands, raman, piezo : bool
        Compute band-edge shifts, the Raman shift, the piezoresistance change.
    raman_pdp : tuple of (str, str)
        (material, PDP set) pairs overriding each material's default set of
        phonon deformation potentials; empty = defaults.
    maps : bool
        Draw PNG sections of the device fields into the result folder.
    raman_polarisation : tuple
        ((incident), (scattered)) in-plane sample-frame directions, or () for
        unpolarised backscattering.
    """

    bands: bool = DEVICE.default("bands")
    raman: bool = DEVICE.default("raman")
    piezo: bool = DEVICE.default("piezo")
    raman_pdp: tuple = DEVICE.default("raman_pdp")
    maps: bool = DEVICE.default("maps")
    raman_polarisation: tuple = DEVICE.default("raman_polarisation")
