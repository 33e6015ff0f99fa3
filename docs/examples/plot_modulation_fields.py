"""
The modulation pattern over both retinas
========================================

The invented yield function of the previous example placed in the receptors of the default model
eyes, with molecules in a von Mises-Fisher cone (concentration 20) about each receptor axis, at four
headings in an invented field (43 uT, inclination 67 deg, declination 12 deg).
"""

import numpy as np

from retina import figures, sphere
from retina.eye.field import Field
from retina.eye.geometry import build_receptors, default_eyes
from retina.eye.ordering import Cone
from retina.eye.pattern import RetinaModel
from retina.eye.pose import Pose
from retina.yieldfn import YieldFunction

grid = sphere.grid_for_degree(8)
x, y, z = grid.points.T
yf = YieldFunction.from_values(0.30 + 0.02 * (1.5 * z**2 - 0.5) + 0.004 * (x**2 - y**2), grid, 8)

receptors = build_receptors(default_eyes(n_receptors=600))
model = RetinaModel(yf, receptors, Cone(kappa=20.0))
field = Field(43.0, 67.0, 12.0)
headings = [0.0, 45.0, 90.0, 135.0]
patterns = [model.pattern(Pose(yaw_deg=h), field) for h in headings]
modulation = np.array([p.modulation for p in patterns])      # (H, N), relative to each eye's mean
print(f"largest |relative modulation| {100 * np.abs(modulation).max():.2f} %")

fig = figures.modulation_fields(receptors.visual_dirs, receptors.eye_index, modulation, headings,
                                np.array([p.b_head for p in patterns]), params="invented example")
