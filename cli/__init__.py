"""The ``shapedesc`` command line: argument parsing only; every command calls the library.

Installed as ``shapedesc.cli``.  Each command lives in its own module here and exposes
``add_parser(subparsers)`` and ``run(args) -> int``; ``main.COMMANDS`` lists them.
"""
