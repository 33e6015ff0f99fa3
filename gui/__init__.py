"""The retina-compass desktop viewer (vispy + PyQt6): rotate the head and the field live.

A thin model-view shell over the core (:mod:`retina`):

- :mod:`retina_viewer.state` - the state model (plain Python, validating setters, one event per field);
- :mod:`retina_viewer.workers` - the single worker thread that computes patterns and readout numbers;
- :mod:`retina_viewer.views` - vispy views (3-D head, 2-D visual-field map) subscribed to the state;
- :mod:`retina_viewer.panels` - Qt controls bound both ways to the state, and the readout panel;
- :mod:`retina_viewer.window` - the main window; ``python -m retina_viewer`` or ``retina view`` opens it.

Importing this package imports nothing from Qt or vispy; the submodules that need them do.
"""
