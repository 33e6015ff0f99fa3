"""
A yield function over field directions
======================================

An invented, axially symmetric yield function with a small rhombic part, fitted on a Lebedev grid
and drawn with :func:`retina.figures.yield_sphere`.  The triangles mark the axes of the largest and
smallest yield.
"""

from retina import figures, sphere
from retina.yieldfn import YieldFunction

grid = sphere.grid_for_degree(8)
x, y, z = grid.points.T
values = 0.30 + 0.02 * (1.5 * z**2 - 0.5) + 0.004 * (x**2 - y**2)   # dimensionless singlet yield
yf = YieldFunction.from_values(values, grid, 8, {"kind": "invented example"})
an = yf.anisotropy()
print(f"relative anisotropy {100 * an.relative:.2f} %")

fig = figures.yield_sphere(yf, argmax=an.argmax, argmin=an.argmin, params="invented yield function, L = 8")
