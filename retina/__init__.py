"""retina-compass: from a radical-pair yield function to what a bird's retinas could receive.

The numerical core. It never imports Qt or vispy (see DEVELOPERS.md, "Layers").
"""

import logging as _logging

__version__ = "0.1.0"

# Diagnostics go through the "retina" logger (module loggers below it); the library installs no
# handler: the command line configures one (--verbose / --quiet), a notebook may do the same.
_logging.getLogger(__name__).addHandler(_logging.NullHandler())
