"""Mesh kinds behind one interface (:class:`mesastrain.mesh.base.ModelMesh`).

The kinds are registered here, in the order they are tried
(:mod:`mesastrain.mesh.kinds`): the first whose ``handles(pattern)`` is true
meshes the case; the structured stack takes everything else.
"""

from mesastrain.mesh import imported, section, shapes, structured
from mesastrain.mesh.kinds import register_kind

register_kind("section", section.build_section_mesh, section.estimate_section, section.handles)
register_kind("file", imported.build_file_mesh, imported.estimate_file, imported.handles)
register_kind("gmsh", shapes.build_shape_mesh, shapes.estimate_shape, shapes.handles)
register_kind("structured", structured.build_structured, structured.estimate_structured,
              structured.handles)
