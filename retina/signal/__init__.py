"""Light and photon noise: what each receptor counts.

- :mod:`retina.signal.light`: sky radiance, light levels, scene texture, photon catch.
- :mod:`retina.signal.noise`: expected counts (pairs formed x reported yield)
  and :class:`~retina.signal.noise.SignalModel`, the readout's forward model;
- :mod:`retina.signal.poisson`: Poisson counts with given means (one draw per count, or walked).
"""

from retina.signal.light import (LIGHT_LEVELS, HorizonSky, SceneTexture, UniformSky, light_level,
                                 photon_catch)
from retina.signal.noise import SignalModel
from retina.signal.poisson import expected_counts, make_rng, sample_counts

__all__ = ["LIGHT_LEVELS", "HorizonSky", "SceneTexture", "UniformSky", "light_level", "photon_catch",
           "SignalModel", "expected_counts", "make_rng", "sample_counts"]
