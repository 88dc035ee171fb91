"""Write embedded_stressor.msh, the imported mesh of cases/embedded_stressor.toml.

Geometry (our own scenario, nm, z = 0 at the wafer surface): a Si block 640 x 320 nm and
300 nm deep, with two recessed pockets 200 nm long (x), 200 nm wide (y) and 60 nm deep,
filled flush with SiGe, on either side of a 100 nm Si channel at x = 0. Physical groups:
"wafer" (the Si) and "pocket" (both SiGe fills). Run:

    python cases/make_embedded_stressor_mesh.py
"""

from pathlib import Path

import gmsh

OUT = Path(__file__).with_name("embedded_stressor.msh")


def main() -> None:
    gmsh.initialize(readConfigFiles=False)
    gmsh.option.setNumber("General.Terminal", 0)
    try:
        occ = gmsh.model.occ
        wafer = occ.addBox(-320, -160, -300, 640, 320, 300)
        pockets = [occ.addBox(x0, -100, -60, 200, 200, 60) for x0 in (-250, 50)]
        occ.fragment([(3, wafer)], [(3, p) for p in pockets])
        occ.synchronize()
        tags = {"wafer": [], "pocket": []}
        for _, t in gmsh.model.getEntities(3):
            x, y, z = occ.getCenterOfMass(3, t)
            tags["pocket" if z > -60 and abs(y) < 100 else "wafer"].append(t)
        for name, vols in tags.items():
            gmsh.model.addPhysicalGroup(3, vols, name=name)

        def size(dim, tag, x, y, z, lc):
            # fine near the surface between and around the pockets, coarse deep down
            d = max(-z - 60.0, 0.0) + max(abs(y) - 110.0, 0.0)
            return min(60.0, 16.0 + 0.5 * d)

        for name in ("Mesh.MeshSizeFromPoints", "Mesh.MeshSizeExtendFromBoundary",
                     "Mesh.MeshSizeFromCurvature"):
            gmsh.option.setNumber(name, 0)
        gmsh.model.mesh.setSizeCallback(size)
        gmsh.model.mesh.generate(3)
        gmsh.option.setNumber("Mesh.Binary", 1)
        gmsh.write(str(OUT))
        n = sum(len(gmsh.model.mesh.getElements(3, t)[1][0]) for _, t in gmsh.model.getEntities(3))
        print(f"wrote {OUT} ({n} tetrahedra)")
    finally:
        gmsh.finalize()


if __name__ == "__main__":
    main()
