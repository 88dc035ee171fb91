"""The validated case: small frozen dataclasses, one per case-file table.

The run settings (mesh, solver, output, readouts, device, uncertainty, channels) live in
:mod:`mesastrain.case.settings` and are re-exported here.

:func:`mesastrain.case.parse.parse_case` builds them; everything downstream
reads them. Lengths in nm, temperatures in kelvin. The defaults of optional
keys and the echo :meth:`Case.to_dict` come from the declarations in
:mod:`mesastrain.case.schema`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from mesastrain.case.keys import echo
from mesastrain.case.schema import (
    ABOUT,
    CUT,
    DISLOCATIONS,
    LINER,
    MATERIAL,
    TABLES,
    TITLE,
)
from mesastrain.case.settings import (
    Channel,
    DeviceSettings,
    MeshSettings,
    OutputSettings,
    ReadoutSettings,
    SolverSettings,
    UncertaintySettings,
)
from mesastrain.physics.materials import get_material, material_from_table

__all__ = [
    "TABLE_TYPES", "Case", "Channel", "DeviceSettings", "DislocationSet", "Layer", "LineCut",
    "Liner",
    "MeshSettings", "OutputSettings", "Pattern", "Probe", "ReadoutSettings", "SolverSettings",
    "Substrate", "Thermal", "UncertaintySettings", "UserMaterial",
]


def _frozen(value):
    """A TOML value made hashable: lists -> tuples, tables -> sorted (key, value) tuples."""
    if isinstance(value, dict):
        return tuple((k, _frozen(v)) for k, v in value.items())
    if isinstance(value, (list, tuple)):
        return tuple(_frozen(v) for v in value)
    return value


def _thawed(value):
    """Inverse of :func:`_frozen` for arrays: tuples -> lists."""
    if isinstance(value, tuple):
        return [_thawed(v) for v in value]
    return value


@dataclass(frozen=True)
class UserMaterial:
    """A material of the case's own, ``[material.NAME]``.

    Attributes
    ----------
    name : str
    table : tuple of (key, value)
        The table as written (without ``replace_builtin``), made hashable;
        :meth:`as_table` gives it back as a dict.
    replace_builtin : bool
        The name deliberately replaces the built-in material of that name.
    """

    name: str
    table: tuple
    replace_builtin: bool = MATERIAL.default("replace_builtin")

    @classmethod
    def from_table(cls, name: str, table: dict) -> UserMaterial:
        rest = {k: v for k, v in table.items() if k != "replace_builtin"}
        return cls(name, _frozen(rest), bool(table.get("replace_builtin", False)))

    def as_table(self) -> dict:
        """The table in case-file form (``replace_builtin`` only when true)."""
        out = {}
        for k, v in self.table:
            if k == "source" and isinstance(v, tuple) and v and isinstance(v[0], tuple):
                out[k] = dict(v)
            elif k == "spread" and isinstance(v, tuple):
                out[k] = {q: ({kk: _thawed(vv) for kk, vv in entry}
                              if isinstance(entry, tuple) else entry) for q, entry in v}
            else:
                out[k] = _thawed(v)
        if self.replace_builtin:
            out["replace_builtin"] = True
        return out

    def material(self):
        """The :class:`mesastrain.physics.material_record.Material` it defines."""
        table = {k: v for k, v in self.as_table().items() if k != "replace_builtin"}
        return material_from_table(self.name, table, replace_builtin=True)


@dataclass(frozen=True)
class Substrate:
    """The wafer.

    Attributes
    ----------
    material : str
        Name as in :func:`mesastrain.physics.materials.builtin_materials`, or the
        NAME of one of the case's ``[material.NAME]`` tables.
    x : float or None
        Alloy fraction of the second member; None for non-alloys.
    thickness : float
        Wafer thickness, nm.
    normal : tuple of int
        Surface plane (hkl) or (hkil); sample +z.
    x_axis : tuple of int
        Crystal direction [uvw] or [UVTW] along sample +x.
    miscut : tuple or None
        (angle in degrees, toward indices) of a vicinal wafer; None for an exact
        orientation.
    """

    material: str
    x: float | None
    thickness: float
    normal: tuple
    x_axis: tuple
    miscut: tuple | None = None


@dataclass(frozen=True)
class Layer:
    """One grown layer.

    Attributes
    ----------
    name : str
        The layer's name in every output (:mod:`mesastrain.case.names`); always set after
        :func:`mesastrain.case.parse.parse_case`.
    material, x
        As for :class:`Substrate`.
    thickness : float
        nm.
    relaxed : float
        0 = pseudomorphic to the layer below, 1 = fully relaxed.
    normal, x_axis : tuple of int
        The layer's crystal orientation. After :func:`mesastrain.case.parse.parse_case` these are
        always filled: copied from the substrate when the file omits them
        (allowed only when the crystal systems agree).
    """

    material: str
    x: float | None
    thickness: float
    relaxed: float
    normal: tuple | None
    x_axis: tuple | None
    epitaxial: bool | None = None
    stress: float | None = None
    deposition_temperature: float | None = None
    name: str | None = None


@dataclass(frozen=True)
class Liner:
    """A conformal film deposited over the etched feature (``[[liner]]``).

    Attributes
    ----------
    material : str
    thickness : float
        On the feature top, nm.
    sidewall_thickness : float or None
        On the sidewalls, normal to them, nm; None = ``thickness``.
    floor_thickness : float or None
        On the etch floor, nm; None = ``thickness``.
    stress : float or None
        Built-in blanket-film stress, MPa, tensile positive.
    deposition_temperature : float or None
        K; None = ``[thermal] growth_temperature``.
    name : str or None
        Region name; None = ``"<material> liner"`` (:mod:`mesastrain.case.names`).
    """

    material: str
    thickness: float
    sidewall_thickness: float | None = LINER.default("sidewall_thickness")
    floor_thickness: float | None = LINER.default("floor_thickness")
    stress: float | None = LINER.default("stress")
    deposition_temperature: float | None = LINER.default("deposition_temperature")
    name: str | None = LINER.default("name")

    @property
    def side(self) -> float:
        """Sidewall thickness, nm (normal to the sidewall)."""
        return self.thickness if self.sidewall_thickness is None else self.sidewall_thickness

    @property
    def floor(self) -> float:
        """Floor thickness, nm."""
        return self.thickness if self.floor_thickness is None else self.floor_thickness

    # a liner is never an alloy, never epitaxial: the attributes regions.py reads of a layer
    x = None
    relaxed = 1.0
    epitaxial = False


@dataclass(frozen=True)
class Pattern:
    """The etched feature, centred on x = y = 0.

    Attributes
    ----------
    shape : str
        ``"none"`` (blanket film), ``"rectangle"``, ``"stripe"`` (infinitely
        long along y), ``"disk"``, ``"polygon"`` or ``"mesh"`` (imported).
    width, length : float or None
        Feature size at its top along sample x and y, nm (rectangle; a stripe
        has only a width). None for other shapes.
    etch_depth : float or None
        Depth of the etch measured down from the top surface, nm.
    margin : float or None
        Lateral width of etched-floor substrate modelled around the feature,
        nm; None lets the mesher choose.
    corner_radius : float or None
        Rounding radius of a rectangle's vertical edges, nm.
    diameter : float or None
        Disk diameter at its top, nm.
    vertices : tuple of (x, y) or None
        Polygon outline at its top, nm, in order (either sense).
    sidewall_angle : float or None
        Angle between sidewall and substrate plane, degrees (90 vertical,
        < 90 widening toward the foot, > 90 undercut); None = 90.
    pitch : tuple (px, py) or None
        Period of an infinite array of the feature, nm (a stripe grating has
        py = None).
    symmetry : str or None
        ``"auto"`` (default when None) or ``"full"``.
    file : str or None
        Imported mesh file (absolute, or as resolved from the case file).
    unit : str or None
        Length unit of the imported mesh coordinates (default nm).
    groups : tuple of (str, int) or None
        Imported mesh: physical group name -> region (0 substrate, i layer i).
    """

    shape: str
    width: float | None
    length: float | None
    etch_depth: float | None
    margin: float | None
    corner_radius: float | None = None
    diameter: float | None = None
    vertices: tuple | None = None
    sidewall_angle: float | None = None
    pitch: tuple | None = None
    symmetry: str | None = None
    file: str | None = None
    unit: str | None = None
    groups: tuple | None = None

    @property
    def patterned(self) -> bool:
        """True when the stack is etched into a feature."""
        return self.shape != "none"


@dataclass(frozen=True)
class Thermal:
    """Growth and final (use) temperatures, kelvin.

    ``growth_temperature`` is None when every layer gives its own
    ``deposition_temperature``.
    """

    growth_temperature: float | None
    final_temperature: float


@dataclass(frozen=True)
class Probe:
    """A point where tensors are reported; ``at`` = (x, y, z) in nm."""

    name: str
    at: tuple


@dataclass(frozen=True)
class LineCut:
    """A straight line cut (``[[cut]]``) from ``start`` to ``end`` (nm), ``points`` samples."""

    name: str
    start: tuple
    end: tuple
    points: int
    components: tuple = CUT.default("components")


@dataclass(frozen=True)
class DislocationSet:
    """A family of parallel straight misfit dislocations in one interface (``[[dislocations]]``).

    Attributes
    ----------
    name : str
    interface : int
        The lines lie at the bottom of ``layer[interface]`` (0: the substrate/
        first-layer interface at z = 0).
    line : tuple of int
        Line direction [uvw] (or [UVTW]) in the crystal axes of that layer;
        it must lie in the interface.
    burgers : tuple of int
        Direction of the Burgers vector, same crystal axes.
    burgers_fraction : float
        b = burgers_fraction * a * [uvw] with a the relaxed lattice constant
        of the layer above the interface (0.5 for a/2<110>). The sign of b is
        chosen so that the lines relieve that layer's mismatch.
    positions : tuple of float or None
        Positions of the lines, nm, measured from the pattern centre along
        the in-plane direction z x line (normal to the lines).
    spacing : float or None
        Line spacing S of a periodic array, nm.
    relaxation : float or None
        Target relaxation of the layer's mismatch, 0 < r <= 1; the spacing
        is S = b_edge / (r |misfit|) with b_edge the edge component of b in
        the interface normal to the lines.
    offset : float
        Position of one line of a spacing/relaxation array, nm (default 0).

    Exactly one of ``positions``, ``spacing`` and ``relaxation`` is set.
    """

    name: str
    interface: int
    line: tuple
    burgers: tuple
    burgers_fraction: float = DISLOCATIONS.default("burgers_fraction")
    positions: tuple | None = DISLOCATIONS.default("positions")
    spacing: float | None = DISLOCATIONS.default("spacing")
    relaxation: float | None = DISLOCATIONS.default("relaxed")
    offset: float = DISLOCATIONS.default("offset")


@dataclass(frozen=True)
class Case:
    """A validated case.

    Attributes
    ----------
    title : str
    about : str
        ``about``: shown before the warnings and atop the report ("" when not given).
    substrate : Substrate
    layers : tuple of Layer
        Bottom to top; at least one.
    pattern : Pattern
    thermal : Thermal or None
    mesh : MeshSettings
    solver : SolverSettings
    probes : tuple of Probe
    cuts : tuple of LineCut
    output : OutputSettings
    source : str or None
        The file the case was read from.
    channels : tuple of Channel
        Piezoresistance channels (``[[channel]]``), possibly empty.
    device : DeviceSettings
        Device-physics switches (``[device]``).
    dislocations : tuple of DislocationSet
        Misfit dislocations (``[[dislocations]]``), possibly empty.
    materials : tuple of UserMaterial
        The case's own materials (``[material.NAME]``), possibly empty.
    liners : tuple of Liner
        Conformal films over the etched feature (``[[liner]]``), bottom to top.
    readouts : ReadoutSettings
        Stand-off distance, wafer diameter and bow switch (``[readouts]``).
    uncertainty : UncertaintySettings
        Material-data scatter switch and groups (``[uncertainty]``).
    """

    title: str
    substrate: Substrate
    layers: tuple
    pattern: Pattern
    thermal: Thermal | None
    mesh: MeshSettings
    solver: SolverSettings
    probes: tuple
    cuts: tuple
    output: OutputSettings
    source: str | None = None
    channels: tuple = ()
    device: DeviceSettings = DeviceSettings()
    readouts: ReadoutSettings = ReadoutSettings()
    uncertainty: UncertaintySettings = UncertaintySettings()
    dislocations: tuple = ()
    materials: tuple = ()
    liners: tuple = ()
    about: str = ABOUT.default
    notes: tuple = field(default=(), compare=False)
    written: tuple = field(default=(), compare=False)

    def as_written(self, path: str) -> str | None:
        """A quantity as the case file wrote it (``"substrate.thickness"`` -> ``"725 µm"``).

        None when the key was not given in the file (a default, or a case built in code).
        """
        return dict(self.written).get(path)

    def material(self, name: str, x: float | None = None):
        """Resolve a material name: the case's own ``[material.NAME]`` first, then built-ins.

        Returns
        -------
        mesastrain.physics.material_record.Material
        """
        for m in self.materials:
            if m.name == name:
                return m.material()
        return get_material(name, x)

    @property
    def stack_thickness(self) -> float:
        """Total thickness of the layers, nm."""
        return math.fsum(layer.thickness for layer in self.layers)

    @property
    def top(self) -> float:
        """z of the top surface, nm (equal to :attr:`stack_thickness`)."""
        return self.stack_thickness

    @property
    def interfaces(self) -> tuple:
        """z of every layer boundary, nm: (0.0, top of layer 0, ..., top)."""
        z = [0.0]
        for layer in self.layers:
            z.append(z[-1] + layer.thickness)
        return tuple(z)

    def to_dict(self) -> dict:
        """JSON-ready echo of the resolved inputs.

        Uses the case-file keys, so ``parse_case(case.to_dict())`` rebuilds an
        equal case (apart from ``source``). Lengths are numbers in nm,
        temperatures strings in kelvin (``"973.15 K"``, since a bare number
        would be read as degrees Celsius); unset optional values are left out.
        Derived from the declarations in :mod:`mesastrain.case.schema`.

        Returns
        -------
        dict
        """
        out = {TITLE.name: self.title}
        if self.about:
            out[ABOUT.name] = self.about
        if self.materials:
            out[MATERIAL.name] = {m.name: m.as_table() for m in self.materials}
        for tab in TABLES:
            value = getattr(self, tab.attr)
            if tab.array:
                if value:
                    out[tab.name] = [echo(tab, item) for item in value]
            elif value is not None:
                out[tab.name] = echo(tab, value)
        return out


#: The dataclass that holds each table of the case file, by table name.
TABLE_TYPES = {"substrate": Substrate, "layer": Layer, "pattern": Pattern, "thermal": Thermal,
               "mesh": MeshSettings, "solver": SolverSettings, "probe": Probe, "cut": LineCut,
               "output": OutputSettings, "channel": Channel, "device": DeviceSettings,
               "readouts": ReadoutSettings, "dislocation": DislocationSet,
               "liner": Liner, "uncertainty": UncertaintySettings}
