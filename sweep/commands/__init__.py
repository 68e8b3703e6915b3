"""Subcommands of the ``sweep`` command line, one module each (see :mod:`sweep.cli`).

Each module defines ``add_parser(subparsers)``, which must call
``parser.set_defaults(handler=run)``, and ``run(args) -> int``.
"""
