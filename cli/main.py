"""Entry point of the ``shapedesc`` command.

Each command is a module of this package with two functions::

    def add_parser(subparsers) -> argparse.ArgumentParser: ...
    def run(args: argparse.Namespace) -> int: ...

and is listed in ``COMMANDS`` only once it really works, so ``--help`` never shows a
command that does not.  ``main(argv=None) -> int`` is what tests call in-process.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from shapedesc import CAUTION, __version__

#: Command modules, in the order ``--help`` lists them.
COMMANDS: tuple[str, ...] = ("describe", "check", "reconstruct", "compare", "report", "demo")


def _get_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="shapedesc",
        description=(
            "Spherical-harmonic shape descriptors of closed anatomical surfaces: map each "
            "surface to the sphere, expand it, describe it, compare groups, make figures. "
            + CAUTION
        ),
    )
    parser.add_argument("--version", action="version", version=f"shapedesc {__version__}")
    parser.add_argument("-v", "--verbose", action="count", default=0,
                        help="more log output (-vv for debug)")
    parser.add_argument("-q", "--quiet", action="store_true",
                        help="no banner and only warnings/errors in the log")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        module = importlib.import_module(f"shapedesc.cli.{name}")
        p = module.add_parser(sub)
        p.set_defaults(_run=module.run)
    return parser


def _setup_logging(verbose: int, quiet: bool) -> None:
    level = logging.WARNING if quiet else (logging.DEBUG if verbose > 1 else logging.INFO)
    root = logging.getLogger("shapedesc")
    root.setLevel(level)
    if not any(getattr(h, "_shapedesc", False) for h in root.handlers):
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
        handler._shapedesc = True  # type: ignore[attr-defined]
        root.addHandler(handler)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = _get_parser()
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return 2
    _setup_logging(args.verbose, args.quiet)
    if not args.quiet:
        print(f"shapedesc {__version__}. {CAUTION}", file=sys.stderr)
    try:
        return int(args._run(args))
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except (ValueError, OSError, RuntimeError) as exc:
        # Domain errors subclass these built-ins and carry a message saying what to do.
        print(f"error: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
