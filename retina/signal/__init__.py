"""Light and photon noise: what each receptor counts.

- :mod:`retina.signal.light`: sky radiance, light levels, scene texture, photon catch.
- :mod:`retina.signal.noise`: expected counts (pairs formed x reported yield), Poisson sampling,
  and :class:`~retina.signal.noise.SignalModel`, the readout's forward model.
"""

from retina.signal.light import (LIGHT_LEVELS, HorizonSky, SceneTexture, UniformSky, light_level,
                                 photon_catch)
from retina.signal.noise import SignalModel, expected_counts, make_rng, sample_counts

__all__ = ["LIGHT_LEVELS", "HorizonSky", "SceneTexture", "UniformSky", "light_level", "photon_catch",
           "SignalModel", "expected_counts", "make_rng", "sample_counts"]
