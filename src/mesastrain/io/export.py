"""Field export to VTU (through meshio) and JSON helpers.

This is the only module that imports meshio, and it does so lazily.

Tensor layout in the VTU: symmetric tensors as 6 components in the order
XX, YY, ZZ, XY, YZ, XZ -- the order VTK-based viewers expect for 6-component
symmetric tensors (this differs from the Voigt order used in
:mod:`mesastrain.physics.crystal`); :func:`to_vtk6` and :func:`from_vtk6` are
those of :mod:`mesastrain.fem.fields`.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

# the 6-component layout is defined with the fields (derived quantities use it too)
from mesastrain.fem.fields import VTK_TENSOR_ORDER, from_vtk6, to_vtk6  # noqa: F401


def write_vtu(path: Path, mesh, point_data: dict, cell_data: dict) -> None:
    """Write a hexahedral scikit-fem mesh and its data to a VTU file.

    Parameters
    ----------
    path : Path
    mesh : skfem.MeshHex
    point_data : dict of name -> ndarray (nnodes, ...)
    cell_data : dict of name -> ndarray (nelems, ...)
        Tensors must already be flattened to 6 components (:func:`to_vtk6`).
    """
    import meshio
    from skfem.io.meshio import to_meshio

    m = to_meshio(mesh, encode_cell_data=False)
    out = meshio.Mesh(
        m.points, m.cells,
        point_data={k: np.ascontiguousarray(v) for k, v in point_data.items()},
        cell_data={k: [np.ascontiguousarray(v)] for k, v in cell_data.items()},
    )
    out.write(str(path), file_format="vtu", binary=True, compression="zlib")


def jsonable(obj):
    """Recursively convert numpy arrays and scalars to JSON-ready values.

    Floats are rounded to 10 significant digits so that round-off noise does
    not make identical runs differ in the last digit; NaN becomes None.
    """
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        x = float(obj)
        if not math.isfinite(x):
            return None
        if x == 0.0:
            return 0.0
        return float(f"{x:.10g}")
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    return obj


def write_json(path: Path, data: dict) -> None:
    """Write ``data`` as indented JSON (numpy values converted)."""
    Path(path).write_text(json.dumps(jsonable(data), indent=2) + "\n", encoding="utf-8")
