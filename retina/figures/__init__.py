"""Publication figures: public builders for notebooks and the pipeline.

Every builder takes plain arrays or small objects, returns a ``matplotlib.figure.Figure`` and, when
``path`` is given, also writes it with :func:`save_figure` (``path`` is a stem: ``out/yield`` gives
``out/yield.png`` and ``out/yield.svg``).  :func:`scan_animation` is the exception: it writes a GIF
and returns its path.  Figures are plain ``matplotlib.figure.Figure`` objects drawn by the Agg
renderer; pyplot is never imported, so no window opens and no GUI toolkit (Qt) loads.

Conventions (owned here)
------------------------
- Sizes: single column 3.5 in, double column 7.2 in wide (:data:`SINGLE_IN`, :data:`DOUBLE_IN`);
  PNG at 300 dpi unless asked otherwise; text 7-8 pt.
- Colour maps: "viridis" for sequential quantities (yields), "RdBu_r" for signed quantities and
  only with limits symmetric about zero (relative modulation), "cividis" for a second sequential
  quantity.  All three are perceptually ordered and readable with the common colour-vision
  deficiencies.
- Every figure carries a title and a caption with its units and parameters, kept as
  ``fig.retina_title`` / ``fig.retina_caption`` and written into the file metadata
  (PNG/SVG "Title" and "Description"; PDF "Title" and "Subject").
- Visual-field maps use the head frame of :mod:`retina.eye.pose` (x beak, y right, z down) and
  show azimuth (positive to the right of the beak) and elevation (positive up) on a Mollweide
  (equal-area) projection, the beak direction at the centre.
"""

from __future__ import annotations

from retina.figures._base import DOUBLE_IN, SINGLE_IN, save_figure
from retina.figures.curves import disorder_tolerance, precision_curves
from retina.figures.order import order_study
from retina.figures.rf import rf_conditions, rf_sweep
from retina.figures.sphere_maps import yield_sphere
from retina.figures.trials import trial_histograms
from retina.figures.visual_fields import modulation_fields, scan_animation, scan_filmstrip

__all__ = [
    "SINGLE_IN",
    "DOUBLE_IN",
    "save_figure",
    "yield_sphere",
    "modulation_fields",
    "scan_filmstrip",
    "scan_animation",
    "precision_curves",
    "disorder_tolerance",
    "order_study",
    "trial_histograms",
    "rf_conditions",
    "rf_sweep",
]
