"""The spin engine: radical-pair systems, exact and separable yield methods, method choice.

Import the submodules you need (``retina.spin.engine.compute_yields`` is the usual entry point);
this package imports nothing heavy on its own.
"""
