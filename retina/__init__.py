"""retina-compass: from a radical-pair yield function to what a bird's retinas could receive.

The numerical core. It never imports Qt or vispy (see DEVELOPERS.md, "Layers").
"""

__version__ = "0.1.0"
