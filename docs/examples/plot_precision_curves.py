"""
Heading precision against light
===============================

The bundled demo scenario, reduced (:func:`retina.build.quick_scenario`) and run through
:func:`retina.pipeline.run` on an invented yield function instead of its radical pair: Cramer-Rao
bounds and maximum-likelihood decoding errors of the heading against photons per receptor, for one
pose and for a head scan.
"""

from retina import figures, sphere
from retina.build import quick_scenario
from retina.data import demo_scenario_path
from retina.pipeline import run
from retina.scenario import load_scenario
from retina.yieldfn import YieldFunction

grid = sphere.grid_for_degree(8)
x, y, z = grid.points.T
yf = YieldFunction.from_values(0.30 + 0.02 * (1.5 * z**2 - 0.5) + 0.004 * (x**2 - y**2), grid, 8)

sc = quick_scenario(load_scenario(demo_scenario_path()))
res = run(sc, stages=("precision",), yield_function=yf)
q = res.groups["precision"]
for ph, b in zip(q["photons"], q["bound_single_deg"]):
    print(f"{ph:8g} photons: bound {b:.3g} deg")

fig = figures.precision_curves(
    q["photons"], {"single pose": q["bound_single_deg"], "head scan": q["bound_scan_deg"]},
    decoded_deg={"single pose": q["decoded_single_rms_deg"], "head scan": q["decoded_scan_rms_deg"]},
    params="demo scenario (quick), invented yield function")
