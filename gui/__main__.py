"""``python -m retina_viewer [SCENARIO.toml]``: the same as ``retina view``."""

import sys

from retina.commands.view import main

if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
