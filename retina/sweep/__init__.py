"""Parameter sweeps: many scenarios from one base, run on all cores or a Dask cluster, collected
into one labelled dataset.

- :mod:`retina.sweep.schema` - the sweep file (``SWEEP.toml``): its schema and validation;
- :mod:`retina.sweep.points` - its points (keys applied to the base scenario) and their seeds;
- :mod:`retina.sweep.outputs` - what can be collected from each point;
- :mod:`retina.sweep.run` - planning (one yield function per group of points) and execution;
- :mod:`retina.sweep.store` - the dataset and its netCDF file (:func:`load`);
- :mod:`retina.sweep.figures` - each output against one or two axes.

Python use::

    from retina.sweep import load_sweep, run_sweep, load
    out = run_sweep(load_sweep("assets/example_sweep.toml"), "sweep-out", jobs=2)
    ds = load("sweep-out/sweep.nc")
"""

from retina.sweep.run import run_sweep
from retina.sweep.schema import load_sweep
from retina.sweep.store import load

__all__ = ["load_sweep", "run_sweep", "load"]
