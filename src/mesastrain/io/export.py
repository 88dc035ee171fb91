"""Field export to VTU (through meshio) and JSON helpers.

This is the only module that imports meshio, and it does so lazily.

Tensor layout in the VTU: symmetric tensors as 6 components in the order
XX, YY, ZZ, XY, YZ, XZ -- the order VTK-based viewers expect for 6-component
symmetric tensors (this differs from the Voigt order used in
:mod:`mesastrain.physics.crystal`); :func:`to_vtk6` and :func:`from_vtk6` are
those of :mod:`mesastrain.fem.fields`.
"""

from __future__ import annotations

import html
import json
import math
from pathlib import Path

import numpy as np

# the 6-component layout is defined with the fields (derived quantities use it too)
from mesastrain.fem.fields import VTK_TENSOR_ORDER, from_vtk6, to_vtk6  # noqa: F401

#: VTK cell type ids of the meshio cell names the meshes export.
_VTK_CELL = {"hexahedron": 12, "tetra": 10, "tetra10": 24, "hexahedron27": 29, "wedge": 13,
             "quad": 9, "triangle": 5}
_VTK_TYPE = {np.dtype(np.float32): "Float32", np.dtype(np.float64): "Float64",
             np.dtype(np.int8): "Int8", np.dtype(np.uint8): "UInt8",
             np.dtype(np.int32): "Int32", np.dtype(np.int64): "Int64"}
#: Uncompressed bytes per zlib block (VTK's vtkZLibDataCompressor layout).
BLOCK = 1 << 20


def _cells(mesh) -> tuple[str, np.ndarray]:
    """meshio cell name and (nelems, nv) connectivity in VTK's vertex order."""
    from skfem import MeshHex1, MeshHex2
    from skfem.io.meshio import HEX_MAPPING, TYPE_MESH_MAPPING

    t = mesh.dofs.element_dofs
    if isinstance(mesh, MeshHex2):
        t = t[HEX_MAPPING]
    elif isinstance(mesh, MeshHex1):
        t = t[HEX_MAPPING[:8]]
    return TYPE_MESH_MAPPING[type(mesh)], t.T


def _compressed(a: np.ndarray, pool, level: int) -> list[bytes]:
    """One appended array: the UInt64 block header and the zlib blocks."""
    import zlib

    raw = memoryview(np.ascontiguousarray(a)).cast("B")
    n = raw.nbytes
    starts = range(0, max(n, 1), BLOCK)
    blocks = list(pool.map(lambda i: zlib.compress(raw[i:i + BLOCK], level), starts))
    last = n - (len(blocks) - 1) * BLOCK
    head = np.array([len(blocks), BLOCK, last] + [len(b) for b in blocks], dtype="<u8")
    return [head.tobytes(), *blocks]


def write_vtu(path: Path, mesh, point_data: dict, cell_data: dict,
              points_dtype=np.float64, level: int = 1, field_data: dict | None = None) -> None:
    """Write a scikit-fem mesh and its data to a binary, zlib-compressed VTU file.

    The arrays are appended raw (no base64) in zlib blocks of 1 MiB, compressed
    on all cores (zlib releases the interpreter lock); any VTK reader, meshio
    and pyvista read the file.

    Parameters
    ----------
    path : Path
    mesh : skfem.Mesh
        Hexahedra or tetrahedra (linear or quadratic).
    point_data : dict of name -> ndarray (nnodes, ...)
    cell_data : dict of name -> ndarray (nelems, ...)
        Tensors must already be flattened to 6 components (:func:`to_vtk6`);
        arrays are written in their own dtype.
    points_dtype : numpy dtype, default: float64
    level : int, default: 1
        zlib level (1: fastest; the float fields gain little from higher levels).
    field_data : dict of name -> small integer or float array, optional
        Written inline (ASCII) as the grid's field data, e.g. the region names.
    """
    import os
    from concurrent.futures import ThreadPoolExecutor

    kind, conn = _cells(mesh)
    npts, nel = mesh.p.shape[1], conn.shape[0]
    idx = np.int32 if npts < 2**31 - 1 and conn.size < 2**31 - 1 else np.int64
    arrays = [("Points", None, np.asarray(mesh.p.T, dtype=points_dtype))]
    arrays += [("Cells", "connectivity", conn.astype(idx).ravel()),
               ("Cells", "offsets", np.arange(1, nel + 1, dtype=idx) * conn.shape[1]),
               ("Cells", "types", np.full(nel, _VTK_CELL[kind], dtype=np.uint8))]
    arrays += [("PointData", k, np.asarray(v)) for k, v in point_data.items()]
    arrays += [("CellData", k, np.asarray(v)) for k, v in cell_data.items()]
    sections: dict = {"Points": [], "Cells": [], "PointData": [], "CellData": []}
    chunks, offset = [], 0
    with ThreadPoolExecutor(max_workers=os.cpu_count() or 1) as pool:
        for sec, name, a in arrays:
            if a.dtype == np.bool_:
                a = a.astype(np.uint8)
            if a.dtype not in _VTK_TYPE:
                a = a.astype(np.float64)
            parts = _compressed(a, pool, level)
            attr = f' Name="{name}"' if name else ""
            if a.ndim > 1:      # scalars: no attribute, so readers give (n,) arrays
                attr += f' NumberOfComponents="{int(np.prod(a.shape[1:]))}"'
            sections[sec].append(f'<DataArray type="{_VTK_TYPE[a.dtype]}"{attr} '
                                 f'format="appended" offset="{offset}"/>')
            chunks += parts
            offset += sum(len(p) for p in parts)
    body = "".join(f"<{sec}>{''.join(items)}</{sec}>" for sec, items in sections.items())
    fields = ""
    if field_data:
        fields = "<FieldData>" + "".join(
            f'<DataArray type="{_VTK_TYPE[np.asarray(v).dtype]}" '
            f'Name="{html.escape(k, quote=True)}" NumberOfTuples="{np.asarray(v).size}" '
            f'format="ascii">{" ".join(str(x) for x in np.asarray(v).ravel())}</DataArray>'
            for k, v in field_data.items()) + "</FieldData>\n"
    head = ('<?xml version="1.0"?>\n<VTKFile type="UnstructuredGrid" version="1.0" '
            'byte_order="LittleEndian" header_type="UInt64" '
            'compressor="vtkZLibDataCompressor">\n<UnstructuredGrid>\n' + fields +
            f'<Piece NumberOfPoints="{npts}" NumberOfCells="{nel}">{body}</Piece>\n'
            '</UnstructuredGrid>\n<AppendedData encoding="raw">\n_')
    with open(path, "wb") as fh:
        fh.write(head.encode("ascii"))
        for c in chunks:
            fh.write(c)
        fh.write(b"\n</AppendedData>\n</VTKFile>\n")


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
