"""Small case files shared by the end-to-end tests (our own scenarios; solve in seconds)."""

#: A 200 nm square Si0.8Ge0.2 mesa on Si(001), <110> edges, coarse mesh, one probe.
SMALL_MESA = """
title = "small mesa"
[substrate]
material = "Si"
thickness = "50 um"
normal = [0, 0, 1]
x_axis = [1, 1, 0]
[[layer]]
material = "SiGe"
x = 0.2
thickness = "20 nm"
[pattern]
shape = "rectangle"
width = "200 nm"
etch_depth = "30 nm"
[mesh]
order = 1
size = 25
edge_size = 10
[[probe]]
name = "centre"
at = [0, 0, 10]
"""
