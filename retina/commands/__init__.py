"""The subcommands of ``retina``: one module each, listed in :data:`COMMANDS`.

Each module defines ``register(subparsers)`` (adds its parser to the ``argparse`` sub-parser
collection) and ``run(args) -> int`` (the exit status).  :mod:`retina.cli` imports the modules named
here, in this order, which is also the order of ``retina --help``.
"""

COMMANDS: tuple[str, ...] = ("yields", "patterns", "scan", "precision", "trials", "report", "demo", "sweep", "export", "rf",
                             "view")
