"""``python -m retina ...`` runs the command-line interface (:func:`retina.cli.main`)."""

import sys

from retina.cli import main

if __name__ == "__main__":
    sys.exit(main())
