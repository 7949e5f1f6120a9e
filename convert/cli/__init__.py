"""The ``loopshift`` command line: parses arguments, calls the computations, renders with rich.

Each sub-command is one module here exposing ``add_parser(subparsers)`` and
``run(args, console) -> int``; :mod:`convert.cli.main` lists them in ``COMMANDS``.
"""
