"""The retina-compass desktop viewer (vispy + PyQt6): rotate the head and the field live.

A thin model-view shell over the core (:mod:`retina`):

- :mod:`gui.state` - the state model (plain Python, validating setters, one event per field);
- :mod:`gui.workers` - the single worker thread that computes patterns and readout numbers;
- :mod:`gui.views` - vispy views (3-D head, 2-D visual-field map) subscribed to the state;
- :mod:`gui.panels` - Qt controls bound both ways to the state, and the readout panel;
- :mod:`gui.window` - the main window; ``python -m gui`` or ``retina view`` opens it.

Importing this package imports nothing from Qt or vispy; the submodules that need them do.
"""
