"""The ``sweep`` command line.

Each subcommand lives in its own module under :mod:`sweep.commands` and provides two functions:
``add_parser(subparsers)`` that declares its arguments, and ``run(args) -> int`` that does the work
and returns the exit status. This module only wires them together and turns a
:class:`~sweep.errors.UserInputError` into one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from sweep import __version__
from sweep.errors import UserInputError

#: Subcommand modules, in the order ``sweep --help`` lists them.
COMMAND_MODULES = (
    "sweep.commands.init",
    "sweep.commands.plan",
    "sweep.commands.run",
    "sweep.commands.status",
    "sweep.commands.verify",
    "sweep.commands.summary",
    "sweep.commands.sensitivity",
    "sweep.commands.report",
)


def _available_commands():
    for name in COMMAND_MODULES:
        try:
            yield importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name != name:  # a real import error inside an existing command
                raise


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser with every available subcommand."""
    parser = argparse.ArgumentParser(
        prog="sweep",
        description=(
            "Sweep instrument parameters and population uncertainties for exoplanet imaging "
            "concepts; store yields in a labelled cube; reduce them to medians, credible "
            "intervals and Sobol indices."
        ),
    )
    parser.add_argument("--version", action="version", version=f"sweep {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in _available_commands():
        module.add_parser(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the ``sweep`` command; return its exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    try:
        return int(args.handler(args) or 0)
    except UserInputError as exc:
        print(f"sweep {args.command}: error: {exc}", file=sys.stderr)
        return exc.exit_status
    except KeyboardInterrupt:
        print(f"sweep {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into a command that stopped reading (`| head`)
        sys.stderr.close()
        return 0
