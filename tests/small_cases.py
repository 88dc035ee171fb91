"""Small case files and fixtures shared by the tests (our own scenarios; solve in seconds)."""

import signal

import numpy as np

from mesastrain.physics.crystal import voigt_to_full


def sige_on_si(title: str, pattern: str, mesh: str, substrate: str = "50 um",
               extra: str = "") -> str:
    """Case text of a 20 nm Si0.8Ge0.2 layer on Si(001) with <110> edges (our own scenario).

    ``pattern`` and ``mesh`` are the bodies of the ``[pattern]`` (without ``etch_depth``,
    which is 30 nm) and ``[mesh]`` tables; ``extra`` is appended verbatim.
    """
    return f"""
title = "{title}"
[substrate]
material = "Si"
thickness = "{substrate}"
normal = [0, 0, 1]
x_axis = [1, 1, 0]
[[layer]]
material = "SiGe"
composition = 0.2
thickness = "20 nm"
[pattern]
{pattern}
etch_depth = "30 nm"
[mesh]
{mesh}
{extra}"""


CENTRE_PROBE = """[[probe]]
name = "centre"
at = [0, 0, 10]
"""

#: One coarse case per discretisation family (our own scenarios): a 200 x 300 nm mesa on
#: trilinear hexahedra, a 200 nm stripe section on quadratic quadrilaterals and a 200 nm disk
#: on quadratic tetrahedra, each with the centre probe.
SHAPE_CASES = {
    "mesa hex1": sige_on_si("mesa", 'shape = "rectangle"\nwidth = "200 nm"\nlength = "300 nm"',
                            "order = 1\nsize = 40\nedge_size = 12", extra=CENTRE_PROBE),
    "stripe quad2": sige_on_si("stripe", 'shape = "stripe"\nwidth = "200 nm"',
                               "order = 2\nsize = 40\nedge_size = 12", extra=CENTRE_PROBE),
    "disk tet2": sige_on_si("disk", 'shape = "disk"\ndiameter = "200 nm"',
                            "order = 2\nsize = 40\nedge_size = 15", extra=CENTRE_PROBE),
}

#: A 200 nm square Si0.8Ge0.2 mesa on Si(001), <110> edges, coarse mesh, one probe.
SMALL_MESA = sige_on_si("small mesa", 'shape = "rectangle"\nwidth = "200 nm"',
                        "order = 1\nsize = 25\nedge_size = 10", extra=CENTRE_PROBE)


def rotated_cubic(c11, c12, c44, angle_deg, axis=(1.0, 1.0, 1.0)):
    """Cubic stiffness (GPa) rotated by an angle about an axis, as a Voigt matrix."""
    from mesastrain.physics.crystal import full_to_voigt

    a = np.asarray(axis, float) / np.linalg.norm(axis)
    t = np.radians(angle_deg)
    K = np.array([[0, -a[2], a[1]], [a[2], 0, -a[0]], [-a[1], a[0], 0]])
    R = np.eye(3) + np.sin(t) * K + (1 - np.cos(t)) * K @ K
    c6 = np.zeros((6, 6))
    c6[:3, :3] = c12
    c6[np.arange(3), np.arange(3)] = c11
    c6[3, 3] = c6[4, 4] = c6[5, 5] = c44
    C = voigt_to_full(c6)
    Cr = np.einsum("ia,jb,kc,ld,abcd->ijkl", R, R, R, R, C)
    return full_to_voigt(Cr)


#: Si (C11, C12, C44 = 165.8, 63.9, 79.6 GPa; Hopcroft et al., J. MEMS 19, 2010) and a
#: stiffer second material, both rotated off the cube axes so every coupling is present.
STIFF = np.stack([rotated_cubic(165.8, 63.9, 79.6, 37.0),
                  rotated_cubic(190.0, 70.0, 60.0, -23.0, axis=(1.0, -2.0, 0.5))])
EIG = np.stack([np.zeros((3, 3)),
                np.array([[-0.012, 0.001, 0.0], [0.001, -0.010, 0.002], [0.0, 0.002, 0.004]])])


def as_from_a_terminal() -> None:
    """``preexec_fn`` for a child that should see Ctrl-C as a user's terminal sends it.

    A shell that starts a job in the background sets SIGINT to "ignore", and a
    child inherits that; Python then never installs its KeyboardInterrupt handler.
    Tests that send SIGINT restore the default first, as an interactive terminal has.
    """
    signal.signal(signal.SIGINT, signal.SIG_DFL)


#: Kuhn split of the unit cube into 6 tetrahedra (vertex k at bits (x, y, z) of k).
KUHN = np.array([[0, 1, 3, 7], [0, 1, 5, 7], [0, 2, 3, 7], [0, 2, 6, 7], [0, 4, 5, 7],
                 [0, 4, 6, 7]])
CORNERS = np.array([[(k >> 0) & 1, (k >> 1) & 1, (k >> 2) & 1] for k in range(8)], float)


def cubes(offsets, size=20.0):
    """Points and tetrahedra of cubes at the given (x, y, z) offsets (nm), nodes not shared
    between cubes unless their corners coincide."""
    pts = np.concatenate([CORNERS * size + np.asarray(o, float) for o in offsets])
    pts, inv = np.unique(pts, axis=0, return_inverse=True)
    inv = inv.ravel()
    cells = np.concatenate([inv[KUHN + 8 * i] for i in range(len(offsets))])
    return pts, cells
