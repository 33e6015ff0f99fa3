"""Reading a heading out of noisy receptor counts.

- :mod:`retina.readout.fisher`: Fisher information, Cramer-Rao bounds, precision curves.
- :mod:`retina.readout.decode`: maximum-likelihood decoding, ambiguity, Monte Carlo errors.
- :mod:`retina.readout.scans`: head scans, pattern change per degree, best scan amplitude.
- :mod:`retina.readout.circstats`: circular statistics (Rayleigh, V-test, axial data).
- :mod:`retina.readout.trials`: simulated orientation trials of virtual birds.

Submodules are imported on demand (``from retina.readout import fisher``).
"""
