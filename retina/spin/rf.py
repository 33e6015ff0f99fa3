"""Radio-frequency (RF) field effects on the radical-pair yield: the public front of the RF methods.

One import for everything RF; the work lives in four modules, bottom up:

- :mod:`retina.spin._rf_common`: the RF field's conventions (amplitude, phase, directions, the
  azimuth rule), their checks;
- :mod:`retina.spin.rf_floquet`: the exact whole-pair Floquet-Liouville backward equation (any
  rates, exchange, dipolar coupling, relaxation) and its four solvers;
  :mod:`retina.spin.rf_separable`: the exact separable RF method (no electron-electron coupling);
- :mod:`retina.spin.rf_method`: the choice between the two;
- :mod:`retina.spin.rf_yieldfn`: RF yield functions over the sphere and spectra against frequency.

The names below are those modules' own objects, re-exported unchanged.
"""

from __future__ import annotations

from retina.spin._rf_common import MAX_AZIMUTHS, check_harmonics, check_rf, check_tol
from retina.spin.rf_floquet import MAX_HARMONICS, check_memory, floquet_bytes, yields_rf
from retina.spin.rf_method import RF_METHODS, choose_rf_method, rf_yields
from retina.spin.rf_yieldfn import RFSpectrum, rf_spectrum, rf_yield_function

__all__ = ["RFSpectrum", "yields_rf", "rf_yields", "choose_rf_method", "rf_yield_function", "rf_spectrum",
           "floquet_bytes", "check_rf", "check_tol", "check_harmonics", "check_memory", "MAX_HARMONICS",
           "MAX_AZIMUTHS", "RF_METHODS"]
